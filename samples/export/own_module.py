"""Exporting a model from your own PyTorch module, end to end.

Here "your" module is SeedSorter, a small fast feedforward classifier written the way one
might write it for training, with its own parameter names. It sorts invented seed
measurements (six numbers per seed) into three grades; the data are made up for this example.

The steps, which are the same for any module:
1. describe the module in sprig's config (config.json);
2. map its parameter names to sprig's (the rename map, also given to `sprig pack --rename`);
3. load its weights into the reference model (sprig_torch.export.load_weights);
4. export with the module's own hard-mode outputs as `expected_outputs`: the export refuses to
   write anything unless the reference model reproduces them, so the config and the map are
   proven right before sprig is ever run.

    PYTHONPATH=converter/python /usr/bin/python3 samples/export/own_module.py --out seeds
    build/bin/sprig pack seeds/config.json seeds/weights.npz --rename seeds/rename.json -o seeds.sprig
    build/bin/sprig verify seeds.sprig seeds/reference.npz
"""

import argparse
import json
import os
import sys

import torch
import torch.nn.functional as F
from torch import nn

from sprig_torch.export import export, load_weights


class SeedSorter(nn.Module):
    """A depth-2 fast feedforward layer: 3 routing nodes, 4 leaves of 8 ReLU units."""

    def __init__(self, features=6, classes=3, depth=2, width=8):
        super().__init__()
        self.depth = depth
        leaves = 2**depth
        self.split_w = nn.Parameter(torch.randn(leaves - 1, features) * 0.5)
        self.split_b = nn.Parameter(torch.zeros(leaves - 1))
        self.hidden_w = nn.Parameter(torch.randn(leaves, width, features) * 0.4)
        self.hidden_b = nn.Parameter(torch.zeros(leaves, width))
        self.out_w = nn.Parameter(torch.randn(leaves, classes, width) * 0.3)
        self.out_b = nn.Parameter(torch.zeros(leaves, classes))

    def leaf_outputs(self, x):
        h = F.relu(torch.einsum("lwf,rf->rlw", self.hidden_w, x) + self.hidden_b)
        return torch.einsum("lcw,rlw->rlc", self.out_w, h) + self.out_b  # [rows, leaves, C]

    def forward(self, x, hard=False):
        logits = x @ self.split_w.t() + self.split_b
        if hard:  # inference: one leaf per row
            node = torch.zeros(len(x), dtype=torch.long)
            for _ in range(self.depth):
                node = 2 * node + 1 + (logits.gather(1, node[:, None])[:, 0] > 0).long()
            leaf = node - (2**self.depth - 1)
            return self.leaf_outputs(x)[torch.arange(len(x)), leaf]
        # training: the soft mixture over leaves
        p = torch.ones(len(x), 1)
        for level in range(self.depth):
            s = torch.sigmoid(logits[:, 2**level - 1:2**(level + 1) - 1])
            p = torch.stack([p * (1 - s), p * s], dim=-1).reshape(len(x), -1)
        return torch.einsum("rl,rlc->rc", p, self.leaf_outputs(x))


def invented_seeds(count, gen):
    """Made-up seed measurements and grades, for the example only."""
    x = torch.randn(count, 6, generator=gen)
    grade = (x[:, 0] + 0.5 * x[:, 1] > 0.3).long() + (x[:, 2] - x[:, 3] > 0.8).long()
    return x, grade


CONFIG = {"family": "stack", "name": "seed-sorter", "input_dim": 6,
          "description": "example: grades invented seed measurements",
          "layers": [{"kind": "tree", "mode": "leaf", "depth": 2, "leaf_width": 8,
                      "activation": "relu", "out": 3}]}
# Their names -> sprig's names (docs/input-contract.md).
RENAME = {"split_w": "layers.0.nodes.weight", "split_b": "layers.0.nodes.bias",
          "hidden_w": "layers.0.leaves.fc1.weight", "hidden_b": "layers.0.leaves.fc1.bias",
          "out_w": "layers.0.leaves.fc2.weight", "out_b": "layers.0.leaves.fc2.bias"}


def main(argv=None):
    parser = argparse.ArgumentParser(description="Train SeedSorter briefly and export it.")
    parser.add_argument("--out", required=True)
    args = parser.parse_args(argv)
    torch.manual_seed(0)
    gen = torch.Generator().manual_seed(0)
    net = SeedSorter()
    opt = torch.optim.Adam(net.parameters(), lr=1e-2)
    for _ in range(300):
        x, y = invented_seeds(128, gen)
        loss = F.cross_entropy(net(x), y)
        opt.zero_grad()
        loss.backward()
        opt.step()
    net.eval()
    x, _ = invented_seeds(200, gen)
    with torch.no_grad():
        theirs = net(x, hard=True).numpy()
    model = load_weights(CONFIG, net.state_dict(), RENAME)
    export(model, args.out, x.numpy(), rename=RENAME, expected_outputs=theirs)
    with open(os.path.join(args.out, "rename.json"), "w", encoding="utf-8") as f:
        json.dump(RENAME, f, indent=2)
    print(f"exported to {args.out}: config.json, weights.npz (their names), rename.json, "
          "reference.npz")
    return 0


if __name__ == "__main__":
    sys.exit(main())
