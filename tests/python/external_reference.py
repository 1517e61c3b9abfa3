"""References for `sprig verify` written without sprig's exporter (converter/python/sprig_torch).

    external_reference.py numpy DIR   # a stack computed with plain NumPy: inputs and outputs only
    external_reference.py torch DIR   # a model of torch.nn modules under its own parameter names

Each writes DIR/config.json, DIR/weights.npz and DIR/reference.npz; `torch` also writes
DIR/rename.json (its names -> sprig's, for `sprig pack --rename`). The model is a dense layer
(ReLU) then a leaf tree of depth 2 (SiLU leaves), evaluated as docs/model-semantics.md defines
it: hard descent, node n sends a row right when nodes.weight[n]·x + nodes.bias[n] > 0. The
reference arrays are computed in float64 from the float32 weights and inputs, by NumPy in the
first case and by PyTorch in the second; nothing of sprig computes them.
"""

import json
import os
import sys

import numpy as np

IN, WIDTH, HIDDEN, DEPTH, LEAF, OUT, ROWS = 10, 16, 12, 2, 6, 5, 40
CONFIG = {"family": "stack", "input_dim": IN, "name": "outside-reference",
          "layers": [{"kind": "dense", "width": WIDTH, "activation": "relu", "out": HIDDEN},
                     {"kind": "tree", "mode": "leaf", "depth": DEPTH, "leaf_width": LEAF,
                      "activation": "silu", "out": OUT}]}


def write_model(out, weights, reference, rename=None):
    os.makedirs(out, exist_ok=True)
    with open(os.path.join(out, "config.json"), "w", encoding="utf-8") as f:
        json.dump(CONFIG, f)
    np.savez(os.path.join(out, "weights.npz"), **weights)
    np.savez(os.path.join(out, "reference.npz"), **reference)
    if rename is not None:
        with open(os.path.join(out, "rename.json"), "w", encoding="utf-8") as f:
            json.dump(rename, f)


def with_numpy(out):
    """Weights under sprig's names; the forward pass written out in NumPy."""
    rng = np.random.default_rng(11)
    leaves, nodes = 2 ** DEPTH, 2 ** DEPTH - 1

    def draw(*shape):
        return (rng.standard_normal(shape) / np.sqrt(shape[-1])).astype(np.float32)

    w = {"layers.0.fc1.weight": draw(WIDTH, IN), "layers.0.fc1.bias": draw(WIDTH),
         "layers.0.fc2.weight": draw(HIDDEN, WIDTH), "layers.0.fc2.bias": draw(HIDDEN),
         "layers.1.nodes.weight": draw(nodes, HIDDEN), "layers.1.nodes.bias": draw(nodes),
         "layers.1.leaves.fc1.weight": draw(leaves, LEAF, HIDDEN),
         "layers.1.leaves.fc1.bias": draw(leaves, LEAF),
         "layers.1.leaves.fc2.weight": draw(leaves, OUT, LEAF),
         "layers.1.leaves.fc2.bias": draw(leaves, OUT)}
    x = rng.standard_normal((ROWS, IN)).astype(np.float32)
    d = {k: v.astype(np.float64) for k, v in w.items()}
    h = np.maximum(x.astype(np.float64) @ d["layers.0.fc1.weight"].T + d["layers.0.fc1.bias"], 0)
    h = h @ d["layers.0.fc2.weight"].T + d["layers.0.fc2.bias"]
    logits = h @ d["layers.1.nodes.weight"].T + d["layers.1.nodes.bias"]
    node = np.zeros(ROWS, dtype=np.int64)
    for _ in range(DEPTH):
        node = 2 * node + 1 + (logits[np.arange(ROWS), node] > 0)
    leaf = node - nodes
    a = np.einsum("rwi,ri->rw", d["layers.1.leaves.fc1.weight"][leaf], h)
    a += d["layers.1.leaves.fc1.bias"][leaf]
    a = a / (1 + np.exp(-a))  # SiLU
    y = np.einsum("row,rw->ro", d["layers.1.leaves.fc2.weight"][leaf], a)
    y += d["layers.1.leaves.fc2.bias"][leaf]
    write_model(out, w, {"inputs": x, "outputs": y})


def with_torch(out):
    """A module of torch.nn parts with names of its own, run by PyTorch."""
    import torch
    from torch import nn

    class LeafBank(nn.Module):
        """Four small MLPs held as stacked parameters, one chosen per row."""

        def __init__(self):
            super().__init__()
            count = 2 ** DEPTH
            self.up = nn.Parameter(torch.randn(count, LEAF, HIDDEN) / HIDDEN ** 0.5)
            self.up_shift = nn.Parameter(torch.randn(count, LEAF) * 0.1)
            self.down = nn.Parameter(torch.randn(count, OUT, LEAF) / LEAF ** 0.5)
            self.down_shift = nn.Parameter(torch.randn(count, OUT) * 0.1)
            self.act = nn.SiLU()

        def forward(self, h, leaf):
            a = self.act(torch.einsum("rwi,ri->rw", self.up[leaf], h) + self.up_shift[leaf])
            return torch.einsum("row,rw->ro", self.down[leaf], a) + self.down_shift[leaf]

    class Sorter(nn.Module):
        def __init__(self):
            super().__init__()
            self.stem = nn.Sequential(nn.Linear(IN, WIDTH), nn.ReLU(), nn.Linear(WIDTH, HIDDEN))
            self.splits = nn.Linear(HIDDEN, 2 ** DEPTH - 1)
            self.bank = LeafBank()

        def forward(self, x):
            h = self.stem(x)
            logits = self.splits(h)
            node = torch.zeros(x.shape[0], dtype=torch.int64)
            for _ in range(DEPTH):
                decided = logits.gather(1, node[:, None])[:, 0]
                node = 2 * node + 1 + (decided > 0).to(torch.int64)
            leaf = node - (2 ** DEPTH - 1)
            return self.bank(h, leaf), leaf

    torch.manual_seed(5)
    net = Sorter()
    x = torch.randn(ROWS, IN)
    weights = {k: v.detach().numpy().copy() for k, v in net.state_dict().items()}
    with torch.no_grad():
        y, leaf = net.double()(x.double())
    rename = {"stem.0.weight": "layers.0.fc1.weight", "stem.0.bias": "layers.0.fc1.bias",
              "stem.2.weight": "layers.0.fc2.weight", "stem.2.bias": "layers.0.fc2.bias",
              "splits.weight": "layers.1.nodes.weight", "splits.bias": "layers.1.nodes.bias",
              "bank.up": "layers.1.leaves.fc1.weight", "bank.up_shift": "layers.1.leaves.fc1.bias",
              "bank.down": "layers.1.leaves.fc2.weight",
              "bank.down_shift": "layers.1.leaves.fc2.bias"}
    # Its own routing decisions go in too, under the name verify reads; no margins.
    write_model(out, weights, {"inputs": x.numpy(), "outputs": y.numpy(),
                               "routes.layer1": leaf.numpy()}, rename)


if __name__ == "__main__":
    {"numpy": with_numpy, "torch": with_torch}[sys.argv[1]](sys.argv[2])
