"""Trains the sample language models on the orchard logbook corpus and exports them for sprig.

Two byte-level transformers of the same shape (4 pre-norm blocks, d_model 64, 4 heads, learned
positions, 128-token context, tied embeddings), trained the same way on the same text:

* ``tree``:  each block's feed-forward is a fast feedforward leaf tree (depth 3, 8 leaves of
  32 units), trained in its soft form with a growing hardening term (the mean binary entropy
  of the node decisions) so that the hard descent sprig runs matches what was trained;
* ``dense``: its dense twin, each feed-forward a dense layer of 256 units (all leaves' units
  together).

The corpus comes from samples/lm/corpus.py (seeded, invented text). The first 90% of its lines
train, the last 10% are held out. Writes, under --out (default: samples/lm):
``tree/`` and ``dense/`` (config.json, weights.npz, reference.npz from sprig_torch.export, with
two held-out sequences as reference inputs) and ``results.json`` (held-out loss in nats per
byte: tree soft, tree hard, dense; steps and seconds).

    PYTHONPATH=converter/python /usr/bin/python3 samples/lm/train_lm.py

PyTorch on the CPU (Debian python3-torch); seeded, so a run on the same machine repeats.
"""

import argparse
import copy
import json
import math
import os
import sys
import time

import numpy as np
import torch
import torch.nn.functional as F

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import corpus  # noqa: E402  (the generator beside this script)
from sprig_torch.export import export  # noqa: E402
from sprig_torch.layers import TreeFF  # noqa: E402
from sprig_torch.models import build_model  # noqa: E402

CONTEXT = 128
BASE = {
    "family": "transformer", "tokenizer": "byte", "vocab_size": 256, "d_model": 64,
    "n_heads": 4, "max_seq": CONTEXT, "norm": "layernorm", "positions": "learned",
    "tie_embeddings": True, "head": {"kind": "lm"},
}
TREE = dict(BASE, name="vell-notes-tree",
            description="byte-level model of orchard logbook notes; leaf-tree feed-forward "
            "blocks. Sample model: its text is often wrong.",
            layers=[{"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 32,
                     "activation": "gelu"}] * 4)
DENSE = dict(BASE, name="vell-notes-dense",
             description="dense twin of vell-notes-tree (256-unit feed-forward blocks). "
             "Sample model: its text is often wrong.",
             layers=[{"kind": "dense", "width": 256, "activation": "gelu"}] * 4)
HARDEN = 1.0  # weight of the hardening term at full strength


def split_corpus(seed, lines):
    text = corpus.generate(seed, lines).splitlines(keepends=True)
    cut = len(text) * 9 // 10
    as_bytes = lambda t: np.frombuffer("".join(t).encode("utf-8"), dtype=np.uint8)
    return as_bytes(text[:cut]), as_bytes(text[cut:])


def windows(data, count, gen):
    """`count` random windows of CONTEXT + 1 bytes: inputs and next-byte targets."""
    starts = torch.randint(0, len(data) - CONTEXT - 1, (count,), generator=gen)
    batch = torch.stack([torch.from_numpy(data[s:s + CONTEXT + 1].astype(np.int64))
                         for s in starts.tolist()])
    return batch[:, :-1], batch[:, 1:]


def init_model(config, seed):
    torch.manual_seed(seed)
    model = build_model(config)
    for name, p in model.named_parameters():
        with torch.no_grad():
            if name.endswith("bias"):
                p.zero_()
            elif "norm" in name:
                p.fill_(1.0)
            else:
                p.normal_(0.0, 0.02 if "embed" in name or "pos" in name
                          else (1.0 / p.shape[-1]) ** 0.5)
    return model


class NodeInputs:
    """Keeps each tree layer's latest input, for the hardening term."""

    def __init__(self, model):
        self.trees = [m for m in model.modules() if isinstance(m, TreeFF)]
        self.inputs = {}
        for tree in self.trees:
            tree.register_forward_pre_hook(self._keep)

    def _keep(self, module, args):
        self.inputs[id(module)] = args[0]

    def terms(self):
        """(hardening, balance), averaged over the tree layers: the mean binary entropy of the
        node decisions, and KL(leaf usage || uniform) of the batch, so that hardening does not
        settle every token on one leaf."""
        entropy, balance = 0.0, 0.0
        for tree in self.trees:
            logits = tree.node_logits(self.inputs[id(tree)])
            p = torch.sigmoid(logits).clamp(1e-6, 1 - 1e-6)
            entropy = entropy + (-(p * p.log() + (1 - p) * (1 - p).log())).mean()
            usage = tree.leaf_probabilities(logits).mean(0).clamp_min(1e-9)
            balance = balance + (usage * (usage * usage.numel()).log()).sum()
        n = max(1, len(self.trees))
        return entropy / n, balance / n


def loss_of(model, x, y, hard):
    logits = model(x, hard=hard)
    return F.cross_entropy(logits.reshape(-1, logits.shape[-1]), y.reshape(-1))


def train(model, data, steps, batch, seed, harden):
    gen = torch.Generator().manual_seed(seed)
    opt = torch.optim.AdamW(model.parameters(), lr=3e-3, weight_decay=0.01)
    nodes = NodeInputs(model) if harden else None
    model.train()
    for step in range(steps):
        # Linear warm-up over 100 steps, then cosine decay to 10%.
        lr = 3e-3 * min(1.0, (step + 1) / 100) * (0.55 + 0.45 * math.cos(math.pi * step / steps))
        for g in opt.param_groups:
            g["lr"] = lr
        x, y = windows(data, batch, gen)
        loss = loss_of(model, x, y, hard=False)
        if nodes:
            entropy, balance = nodes.terms()
            loss = loss + harden * min(1.0, 2.0 * step / steps) * entropy + balance
        opt.zero_grad()
        loss.backward()
        torch.nn.utils.clip_grad_norm_(model.parameters(), 1.0)
        opt.step()
        if step % 100 == 0 or step == steps - 1:
            print(f"  step {step}: loss {loss.item():.3f}", file=sys.stderr, flush=True)
    return model.eval()


def held_out_loss(model, data, hard, seed):
    gen = torch.Generator().manual_seed(seed)
    x, y = windows(data, 256, gen)
    with torch.no_grad():
        return float(loss_of(model, x, y, hard))


def leaf_usage(model, data, seed):
    """Held-out tokens per leaf in each block (hard descent), to show that routing spreads."""
    gen = torch.Generator().manual_seed(seed)
    x, _ = windows(data, 64, gen)
    with torch.no_grad():
        _, routes, _ = model(x, hard=True, return_routes=True)
    return [np.bincount(routes[i].numpy(), minlength=8).tolist() for i in sorted(routes)]


def main(argv=None):
    here = os.path.dirname(os.path.abspath(__file__))
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", default=here, help="directory to write (default: %(default)s)")
    parser.add_argument("--steps", type=int, default=1500)
    parser.add_argument("--batch", type=int, default=16)
    parser.add_argument("--lines", type=int, default=20000, help="corpus lines")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--threads", type=int, default=1)
    args = parser.parse_args(argv)
    torch.set_num_threads(args.threads)
    train_data, held_out = split_corpus(args.seed, args.lines)
    results = {"corpus_bytes": {"train": int(len(train_data)), "held_out": int(len(held_out))},
               "steps": args.steps, "batch": args.batch, "context": CONTEXT}
    gen = torch.Generator().manual_seed(args.seed + 100)
    reference_inputs = windows(held_out, 2, gen)[0].numpy()
    for name, config, harden in (("tree", TREE, HARDEN), ("dense", DENSE, 0.0)):
        start = time.time()
        print(f"training {name}", file=sys.stderr)
        model = train(init_model(config, args.seed), train_data, args.steps, args.batch,
                      args.seed, harden)
        results[name] = {"held_out_loss_hard": held_out_loss(model, held_out, True, args.seed),
                         "train_seconds": round(time.time() - start, 1)}
        if name == "tree":
            results[name]["held_out_loss_soft"] = held_out_loss(model, held_out, False,
                                                                args.seed)
            results[name]["leaf_tokens_per_block"] = leaf_usage(model, held_out, args.seed)
        export(model, os.path.join(args.out, name), reference_inputs,
               config=copy.deepcopy(config))
    with open(os.path.join(args.out, "results.json"), "w", encoding="utf-8") as f:
        json.dump(results, f, indent=2)
        f.write("\n")
    print(json.dumps(results, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
