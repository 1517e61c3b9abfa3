"""Tests of the PyTorch reference modules (converter/python/sprig_torch) and the exporter.

The reference is checked against independent implementations: plain NumPy/Python loops
written here from the formulas of docs/model-semantics.md, torch.nn.MultiheadAttention and the closed
form of a 2-D rotation. Run from the repository root:

    PYTHONPATH=converter/python /usr/bin/python3 -m unittest discover -s tests/python -p 'test_*.py'
"""

import json
import math
import os
import subprocess
import sys
import tempfile
import unittest

import numpy as np
import torch
import torch.nn.functional as F

_PACKAGE_DIR = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "converter",
                            "python")
sys.path.insert(0, os.path.normpath(_PACKAGE_DIR))

from sprig_torch.export import export, random_inputs, random_model, weight_arrays  # noqa: E402
from sprig_torch.layers import build_layer, stable_top_k  # noqa: E402
from sprig_torch.models import apply_rope, build_model  # noqa: E402

# Activations in plain Python. Source: the definitions of GELU (erf form and its tanh
# approximation, Hendrycks & Gimpel 2016) and SiLU (x * sigmoid(x)), from memory.
_NP_ACT = {
    "relu": lambda v: max(v, 0.0),
    "gelu": lambda v: 0.5 * v * (1.0 + math.erf(v / math.sqrt(2.0))),
    "gelu_tanh": lambda v: 0.5 * v * (1.0 + math.tanh(math.sqrt(2.0 / math.pi) *
                                                      (v + 0.044715 * v**3))),
    "silu": lambda v: v / (1.0 + math.exp(-v)),
}


def _np(model):
    """The model's tensors as float64 NumPy arrays."""
    return {k: v.detach().double().numpy() for k, v in model.state_dict().items()}


def _np_mlp(x, w, prefix, i, act, gated):
    """One MLP of a bank (leaf/expert i) for one row, loop by loop."""
    act = np.vectorize(_NP_ACT[act])

    def lin(name, v):
        y = w[f"{prefix}{name}.weight"][i] @ v
        b = w.get(f"{prefix}{name}.bias")
        return y if b is None else y + b[i]

    h = act(lin("gate", x)) * lin("fc1", x) if gated else act(lin("fc1", x))
    return lin("fc2", h)


def _np_descend(w, x, depth):
    """Hard descent (docs/model-semantics.md) for one row; returns the visited nodes and logits."""
    n, visited, logits = 0, [0], []
    for _ in range(depth):
        a = float(np.dot(w["nodes.weight"][n], x))
        if "nodes.bias" in w:
            a += float(w["nodes.bias"][n])
        logits.append(a)
        n = 2 * n + 1 + (1 if a > 0 else 0)
        visited.append(n)
    return visited, logits


def _random_layer(cfg, seed=0):
    """A float64 layer with random weights of the exporter's spread."""
    model = random_model({"family": "stack", "input_dim": cfg.get("in", 8),
                          "layers": [cfg]}, seed)
    return model.layers[0].double()


def _rows(n, dim, seed=0):
    return torch.from_numpy(np.random.default_rng(seed).standard_normal((n, dim)))


class TreeTest(unittest.TestCase):

    def test_depth_zero_leaf_tree_equals_dense_mlp(self):
        for gated in (False, True):
            tree = _random_layer({"kind": "tree", "mode": "leaf", "depth": 0, "leaf_width": 5,
                                  "activation": "gelu", "gated": gated, "in": 6, "out": 4})
            dense = build_layer({"kind": "dense", "width": 5, "activation": "gelu",
                                 "gated": gated, "in": 6, "out": 4}).double()
            with torch.no_grad():
                for name in ("fc1", "fc2") + (("gate",) if gated else ()):
                    getattr(dense, name).weight.copy_(getattr(tree.leaves, name).weight[0])
                    getattr(dense, name).bias.copy_(getattr(tree.leaves, name).bias[0])
            x = _rows(20, 6)
            for hard in (True, False):
                torch.testing.assert_close(tree(x, hard=hard), dense(x))
            _, routes, margins = tree(x, hard=True, return_routes=True)
            self.assertTrue(torch.equal(routes, torch.zeros(20, dtype=torch.int64)))
            self.assertTrue(torch.isinf(margins).all())

    def test_zero_nodes_send_every_row_to_leaf_zero(self):
        # A logit of exactly 0 goes left (docs/model-semantics.md), so every row ends in leaf 0.
        for mode in ("leaf", "path"):
            cfg = {"kind": "tree", "mode": mode, "depth": 4, "in": 6, "out": 3}
            if mode == "leaf":
                cfg["leaf_width"] = 4
            tree = _random_layer(cfg)
            with torch.no_grad():
                tree.nodes.weight.zero_()
                tree.nodes.bias.zero_()
            _, routes, margins = tree(_rows(30, 6), hard=True, return_routes=True)
            self.assertTrue(torch.equal(routes, torch.zeros(30, dtype=torch.int64)), mode)
            self.assertTrue(torch.equal(margins, torch.zeros(30, dtype=torch.float64)), mode)

    def test_soft_leaf_mode_with_sharp_nodes_approaches_hard_mode(self):
        tree = _random_layer({"kind": "tree", "mode": "leaf", "depth": 4, "leaf_width": 8,
                              "activation": "silu", "in": 10, "out": 5}, seed=1)
        x = _rows(200, 10, seed=1)
        _, _, margins = tree(x, hard=True, return_routes=True)
        with torch.no_grad():
            tree.nodes.weight.mul_(1e4)
            tree.nodes.bias.mul_(1e4)
        # Rows whose smallest unscaled |logit| is >= 1e-3 meet sigmoid(>= 10) at every node,
        # so each wrong branch keeps at most ~5e-5 of the probability.
        clear = margins >= 1e-3
        self.assertGreater(int(clear.sum()), 180)
        torch.testing.assert_close(tree(x, hard=False)[clear], tree(x, hard=True)[clear],
                                   atol=1e-3, rtol=1e-3)

    def test_soft_leaf_probabilities_sum_to_one_and_follow_sigmoids(self):
        tree = _random_layer({"kind": "tree", "mode": "leaf", "depth": 2, "leaf_width": 2,
                              "in": 3, "out": 2})
        x = _rows(5, 3)
        logits = tree.node_logits(x)
        p = tree.leaf_probabilities(logits)
        s = torch.sigmoid(logits)
        # Leaf 0 = left, left: (1 - s0)(1 - s1); leaf 3 = right, right: s0 s2.
        torch.testing.assert_close(p[:, 0], (1 - s[:, 0]) * (1 - s[:, 1]))
        torch.testing.assert_close(p[:, 1], (1 - s[:, 0]) * s[:, 1])
        torch.testing.assert_close(p[:, 2], s[:, 0] * (1 - s[:, 2]))
        torch.testing.assert_close(p[:, 3], s[:, 0] * s[:, 2])
        torch.testing.assert_close(p.sum(dim=1), torch.ones(5, dtype=torch.float64))

    def test_hard_leaf_tree_matches_a_per_row_loop(self):
        for act, gated, bias in (("relu", False, True), ("gelu_tanh", True, True),
                                 ("gelu", False, False)):
            cfg = {"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 6,
                   "activation": act, "gated": gated, "bias": bias, "in": 7, "out": 4}
            tree = _random_layer(cfg, seed=2)
            x = _rows(40, 7, seed=2)
            y, routes, margins = tree(x, hard=True, return_routes=True)
            w, xs = _np(tree), x.numpy()
            for r in range(40):
                visited, logits = _np_descend(w, xs[r], 3)
                leaf = visited[-1] - 7
                self.assertEqual(int(routes[r]), leaf)
                self.assertAlmostEqual(float(margins[r]), min(abs(a) for a in logits))
                np.testing.assert_allclose(y[r].detach().numpy(),
                                           _np_mlp(xs[r], w, "leaves.", leaf, act, gated),
                                           rtol=1e-10, atol=1e-12)
            self.assertGreater(len(set(routes.tolist())), 4, "routing should be spread out")

    def test_path_tree_matches_a_per_row_loop(self):
        for bias in (True, False):
            tree = _random_layer({"kind": "tree", "mode": "path", "depth": 3, "bias": bias,
                                  "activation": "gelu", "in": 5, "out": 3}, seed=3)
            x = _rows(30, 5, seed=3)
            y, routes, margins = tree(x, hard=True, return_routes=True)
            w, xs = _np(tree), x.numpy()
            act = _NP_ACT["gelu"]
            for r in range(30):
                n = 0
                out = w["out_bias"].copy() if bias else np.zeros(3)
                decisions = []
                for level in range(4):
                    a = float(np.dot(w["nodes.weight"][n], xs[r]))
                    a += float(w["nodes.bias"][n]) if bias else 0.0
                    out += act(a) * w["nodes.out"][n]
                    if level < 3:
                        decisions.append(abs(a))
                        n = 2 * n + 1 + (1 if a > 0 else 0)
                self.assertEqual(int(routes[r]), n - 7)
                self.assertAlmostEqual(float(margins[r]), min(decisions))
                np.testing.assert_allclose(y[r].detach().numpy(), out, rtol=1e-10, atol=1e-12)
            # The training form of a path tree is its hard form.
            torch.testing.assert_close(tree(x, hard=False), y)


class ExpertsTest(unittest.TestCase):

    def _experts(self, **overrides):
        cfg = {"kind": "experts", "experts": 4, "top_k": 2, "width": 6, "activation": "silu",
               "gated": True, "in": 5, "out": 3}
        cfg.update(overrides)
        return _random_layer(cfg, seed=4)

    def test_all_experts_with_renormalize_equal_the_softmax_mixture(self):
        layer = self._experts(top_k=4, renormalize=True)
        x = _rows(25, 5, seed=4)
        y, routes, margins = layer(x, hard=True, return_routes=True)
        p = torch.softmax(x @ layer.router.weight.t() + layer.router.bias, dim=1)
        expected = torch.zeros(25, 3, dtype=torch.float64)
        e = layer.experts
        for j in range(4):
            h = F.silu(x @ e.gate.weight[j].t() + e.gate.bias[j]) * (x @ e.fc1.weight[j].t() +
                                                                     e.fc1.bias[j])
            expected += p[:, j:j + 1] * (h @ e.fc2.weight[j].t() + e.fc2.bias[j])
        torch.testing.assert_close(y, expected)
        self.assertTrue(torch.isinf(margins).all())
        # Every expert is chosen, in descending probability.
        self.assertTrue(torch.equal(routes.sort(dim=1).values, torch.arange(4).expand(25, 4)))
        self.assertTrue((p.gather(1, routes).diff(dim=1) <= 0).all())

    def test_top_k_matches_a_per_row_loop(self):
        for renormalize in (True, False):
            layer = self._experts(top_k=2, renormalize=renormalize, gated=False,
                                  activation="relu")
            x = _rows(30, 5, seed=5)
            y, routes, margins = layer(x, hard=True, return_routes=True)
            w, xs = _np(layer), x.numpy()
            for r in range(30):
                logits = w["router.weight"] @ xs[r] + w["router.bias"]
                p = np.exp(logits - logits.max())
                p /= p.sum()
                # Python's sort is stable: equal probabilities keep the lower index first.
                order = sorted(range(4), key=lambda j: -p[j])
                chosen = order[:2]
                self.assertEqual(routes[r].tolist(), chosen)
                self.assertAlmostEqual(float(margins[r]), p[order[1]] - p[order[2]])
                weights = p[chosen] / (p[chosen].sum() if renormalize else 1.0)
                expected = sum(wj * _np_mlp(xs[r], w, "experts.", j, "relu", False)
                               for wj, j in zip(weights, chosen))
                np.testing.assert_allclose(y[r].detach().numpy(), expected, rtol=1e-10,
                                           atol=1e-12)

    def test_ties_choose_the_lower_index_first(self):
        layer = self._experts(top_k=3)
        with torch.no_grad():
            layer.router.weight.zero_()
            layer.router.bias.copy_(torch.tensor([0.0, 1.0, 1.0, 0.0]))
        _, routes, margins = layer(_rows(8, 5), hard=True, return_routes=True)
        self.assertTrue(torch.equal(routes, torch.tensor([[1, 2, 0]]).expand(8, 3)))
        self.assertTrue(torch.equal(margins, torch.zeros(8, dtype=torch.float64)))
        # Many equal values (where an unstable selection may reorder them).
        p = torch.zeros(3, 40, dtype=torch.float64)
        self.assertTrue(torch.equal(stable_top_k(p, 5), torch.arange(5).expand(3, 5)))

    def test_sigmoid_and_softmax_chosen_match_a_per_row_loop(self):
        cases = [("sigmoid", True), ("sigmoid", False), ("softmax_chosen", True)]
        for scoring, renormalize in cases:
            layer = self._experts(experts=6, top_k=3, router_scoring=scoring,
                                  renormalize=renormalize, gated=False, activation="gelu")
            x = _rows(30, 5, seed=6)
            y, routes, margins = layer(x, hard=True, return_routes=True)
            w, xs = _np(layer), x.numpy()
            for r in range(30):
                logits = w["router.weight"] @ xs[r] + w["router.bias"]
                order = sorted(range(6), key=lambda j: -logits[j])
                chosen = order[:3]
                self.assertEqual(routes[r].tolist(), chosen, scoring)
                # The margin is on the logits for both forms.
                self.assertAlmostEqual(float(margins[r]), logits[order[2]] - logits[order[3]])
                if scoring == "sigmoid":
                    s = 1.0 / (1.0 + np.exp(-logits[chosen]))
                    weights = s / s.sum() if renormalize else s
                else:
                    e = np.exp(logits[chosen] - logits[chosen].max())
                    weights = e / e.sum()
                expected = sum(wj * _np_mlp(xs[r], w, "experts.", j, "gelu", False)
                               for wj, j in zip(weights, chosen))
                np.testing.assert_allclose(y[r].detach().numpy(), expected, rtol=1e-10,
                                           atol=1e-12)

    def test_softmax_renormalized_equals_softmax_over_chosen(self):
        # docs/model-semantics.md: the same function, to rounding.
        a = self._experts(experts=7, top_k=3)
        b = self._experts(experts=7, top_k=3, router_scoring="softmax_chosen")
        b.load_state_dict(a.state_dict())
        x = _rows(40, 5, seed=7)
        ya, ra, _ = a(x, hard=True, return_routes=True)
        yb, rb, _ = b(x, hard=True, return_routes=True)
        self.assertTrue(torch.equal(ra, rb))
        torch.testing.assert_close(ya, yb, rtol=1e-12, atol=1e-12)

    def test_shared_experts_with_and_without_gate(self):
        for gate in (False, True):
            layer = self._experts(shared_experts=2, shared_width=4, shared_gate=gate)
            routed = self._experts()
            routed.load_state_dict({k: v for k, v in layer.state_dict().items()
                                    if not k.startswith("shared")})
            x = _rows(20, 5, seed=8)
            w, xs = _np(layer), x.numpy()
            y = layer(x, hard=True).detach().numpy()
            base = routed(x, hard=True).detach().numpy()
            for r in range(20):
                shared = sum(_np_mlp(xs[r], w, "shared.", s, "silu", True) for s in range(2))
                g = 1.0
                if gate:
                    g = 1.0 / (1.0 + np.exp(-(w["shared_gate.weight"][0] @ xs[r] +
                                              w["shared_gate.bias"][0])))
                np.testing.assert_allclose(y[r], base[r] + g * shared, rtol=1e-10, atol=1e-12)

    def test_margin_bounds_bound_a_router_perturbation(self):
        # A relative change eta on every router weight moves the margin by at most
        # eta * scale (to first order; eta is small enough for the second order to vanish).
        for scoring in ("softmax", "sigmoid", "softmax_chosen"):
            layer = self._experts(experts=6, top_k=2, router_scoring=scoring)
            x = _rows(50, 5, seed=9)
            _, routes, margins = layer(x, hard=True, return_routes=True)
            scales, _ = layer.margin_bounds(x)
            eta = 1e-7
            gen = torch.Generator().manual_seed(1)
            with torch.no_grad():
                for t in (layer.router.weight, layer.router.bias):
                    sign = torch.randint(0, 2, t.shape, generator=gen, dtype=torch.float64)
                    t.mul_(1 + eta * (2 * sign - 1))
            _, routes2, margins2 = layer(x, hard=True, return_routes=True)
            self.assertTrue(torch.equal(routes, routes2))
            moved = (margins2 - margins).abs()
            self.assertTrue((moved <= eta * scales * 1.001 + 1e-15).all(), scoring)
            self.assertTrue((moved > 0).any(), scoring)

    def test_variant_fields_are_checked(self):
        for bad, message in (({"router_scoring": "tanh"}, "router_scoring"),
                             ({"router_scoring": "softmax_chosen", "renormalize": False},
                              "softmax_chosen"),
                             ({"shared_gate": True}, "shared_experts"),
                             ({"shared_experts": -1}, "shared_experts")):
            with self.assertRaisesRegex(ValueError, message):
                self._experts(**bad)


def _transformer(**overrides):
    cfg = {"family": "transformer", "vocab_size": 40, "d_model": 16, "n_heads": 4,
           "max_seq": 12, "layers": [{"kind": "dense", "width": 24, "activation": "gelu"}]}
    cfg.update(overrides)
    return cfg


def _tokens(b, t, vocab=40, seed=0):
    return torch.from_numpy(np.random.default_rng(seed).integers(0, vocab, size=(b, t)))


class TransformerTest(unittest.TestCase):

    def test_model_matches_torch_multihead_attention(self):
        # Source: torch.nn.MultiheadAttention, torch.nn.LayerNorm, torch.nn.Embedding (Debian
        # python3-torch): an independent pre-norm transformer built from torch's own layers.
        for causal in (True, False):
            model = random_model(_transformer(causal=causal), seed=6).double()
            w = model.state_dict()
            mha = torch.nn.MultiheadAttention(16, 4, bias=True, batch_first=True).double()
            norm = torch.nn.LayerNorm(16, eps=1e-5).double()
            with torch.no_grad():
                mha.in_proj_weight.copy_(torch.cat([w[f"blocks.0.attn.{n}.weight"]
                                                    for n in "qkv"]))
                mha.in_proj_bias.copy_(torch.cat([w[f"blocks.0.attn.{n}.bias"] for n in "qkv"]))
                mha.out_proj.weight.copy_(w["blocks.0.attn.o.weight"])
                mha.out_proj.bias.copy_(w["blocks.0.attn.o.bias"])
            tokens = _tokens(2, 9)
            x = torch.nn.functional.embedding(tokens, w["embed.weight"]) + w["pos.weight"][:9]
            mask = torch.ones(9, 9, dtype=torch.bool).triu(1) if causal else None

            def layer_norm(v, prefix):
                with torch.no_grad():
                    norm.weight.copy_(w[prefix + ".weight"])
                    norm.bias.copy_(w[prefix + ".bias"])
                return norm(v)

            with torch.no_grad():
                h = x + mha(*(layer_norm(x, "blocks.0.norm1"),) * 3, attn_mask=mask,
                            need_weights=False)[0]
                f = F.gelu(F.linear(layer_norm(h, "blocks.0.norm2"), w["blocks.0.ffn.fc1.weight"],
                                    w["blocks.0.ffn.fc1.bias"]))
                h = h + F.linear(f, w["blocks.0.ffn.fc2.weight"], w["blocks.0.ffn.fc2.bias"])
                expected = layer_norm(h, "norm") @ w["head.weight"].t()
                torch.testing.assert_close(model(tokens, hard=True), expected)

    def test_causal_outputs_do_not_depend_on_later_tokens(self):
        model = random_model(_transformer(positions="rope", norm="rmsnorm"), seed=7).double()
        tokens = _tokens(1, 8)
        changed = tokens.clone()
        changed[0, 5:] = (changed[0, 5:] + 1) % 40
        with torch.no_grad():
            a, b = model(tokens), model(changed)
        torch.testing.assert_close(a[:, :5], b[:, :5])
        self.assertFalse(torch.allclose(a[:, 5:], b[:, 5:]))

    def test_rope_is_the_closed_form_rotation(self):
        # Source: a 2-D rotation by angle theta, (a, b) -> (a cos - b sin, b cos + a sin),
        # applied to pairs (i, i + head_dim/2) with theta = t * base^(-2i/head_dim) (docs/model-semantics.md).
        head_dim, base = 6, 10000.0
        vec = [0.3, -1.2, 0.7, 2.0, -0.4, 1.1]
        x = torch.tensor(vec, dtype=torch.float64).expand(1, 1, 18, head_dim)
        rotated = apply_rope(x, base)
        for t in (0, 1, 5, 17):
            for i in range(head_dim // 2):
                theta = t * base ** (-2.0 * i / head_dim)
                a, b = vec[i], vec[i + head_dim // 2]
                self.assertAlmostEqual(float(rotated[0, 0, t, i]),
                                       a * math.cos(theta) - b * math.sin(theta), places=12)
                self.assertAlmostEqual(float(rotated[0, 0, t, i + head_dim // 2]),
                                       b * math.cos(theta) + a * math.sin(theta), places=12)

    def test_rope_scores_depend_only_on_relative_position(self):
        gen = torch.Generator().manual_seed(0)
        q = torch.randn(1, 1, 1, 8, generator=gen, dtype=torch.float64).expand(1, 1, 10, 8)
        k = torch.randn(1, 1, 1, 8, generator=gen, dtype=torch.float64).expand(1, 1, 10, 8)
        s = apply_rope(q, 500.0)[0, 0] @ apply_rope(k, 500.0)[0, 0].t()
        torch.testing.assert_close(s[3, 1], s[9, 7])
        torch.testing.assert_close(s[2, 6], s[4, 8])

    def test_explicit_n_kv_heads_equal_to_n_heads_is_plain_attention(self):
        tokens = _tokens(2, 7)
        plain = random_model(_transformer(positions="rope"), seed=8)
        explicit = random_model(_transformer(positions="rope", n_kv_heads=4), seed=8)
        with torch.no_grad():
            torch.testing.assert_close(explicit(tokens), plain(tokens))

    def test_grouped_query_attention_equals_attention_with_repeated_kv_heads(self):
        # Query heads 0, 1 share key/value head 0 and heads 2, 3 share head 1.
        tokens = _tokens(2, 7)
        gqa = random_model(_transformer(positions="rope", n_kv_heads=2), seed=9).double()
        mha = build_model(_transformer(positions="rope")).double()
        weights = gqa.state_dict()
        for name in ("blocks.0.attn.k.weight", "blocks.0.attn.v.weight", "blocks.0.attn.k.bias",
                     "blocks.0.attn.v.bias"):
            t = weights[name]
            weights[name] = t.reshape(2, 4, *t.shape[1:]).repeat_interleave(2, dim=0).reshape(
                16, *t.shape[1:])
        mha.load_state_dict(weights)
        with torch.no_grad():
            torch.testing.assert_close(gqa(tokens), mha(tokens))

    def test_classifier_pools_and_routes_cover_every_token(self):
        cfg = _transformer(head={"kind": "classifier", "classes": 3, "pool": "last"},
                           layers=[{"kind": "tree", "mode": "leaf", "depth": 2,
                                    "leaf_width": 4}])
        model = random_model(cfg, seed=10).double()
        tokens = _tokens(3, 5)
        y, routes, margins = model(tokens, hard=True, return_routes=True)
        self.assertEqual(list(y.shape), [3, 3])
        self.assertEqual(list(routes[0].shape), [15])
        self.assertEqual(list(margins[0].shape), [15])
        # Each sequence of a batch is computed on its own.
        alone = model(tokens[1:2], hard=True)
        torch.testing.assert_close(y[1:2], alone)


# Expected tensor names and shapes, written from the table of docs/input-contract.md.
def _expected_layer_tensors(cfg, i, o):
    bias, gated = cfg.get("bias", True), cfg.get("gated", False)

    def mlp(prefix, lead, width):
        names = {f"{prefix}fc1.weight": (*lead, width, i), f"{prefix}fc2.weight": (*lead, o, width)}
        if gated:
            names[f"{prefix}gate.weight"] = (*lead, width, i)
        if bias:
            names[f"{prefix}fc1.bias"] = (*lead, width)
            names[f"{prefix}fc2.bias"] = (*lead, o)
            if gated:
                names[f"{prefix}gate.bias"] = (*lead, width)
        return names

    if cfg["kind"] == "dense":
        return mlp("", (), cfg["width"])
    if cfg["kind"] == "experts":
        e = cfg["experts"]
        names = {"router.weight": (e, i), **mlp("experts.", (e,), cfg["width"])}
        if bias:
            names["router.bias"] = (e,)
        return names
    d = cfg["depth"]
    if cfg.get("mode", "leaf") == "leaf":
        names = {"nodes.weight": (2**d - 1, i), **mlp("leaves.", (2**d,), cfg["leaf_width"])}
        if bias:
            names["nodes.bias"] = (2**d - 1,)
        return names
    n = 2**(d + 1) - 1
    names = {"nodes.weight": (n, i), "nodes.out": (n, o)}
    if bias:
        names.update({"nodes.bias": (n,), "out_bias": (o,)})
    return names


def _expected_transformer_tensors(cfg):
    d, v = cfg["d_model"], cfg["vocab_size"]
    kv = cfg.get("n_kv_heads", cfg["n_heads"]) * d // cfg["n_heads"]
    layernorm = cfg.get("norm", "layernorm") == "layernorm"
    head = cfg.get("head", {"kind": "lm"})
    names = {"embed.weight": (v, d)}

    def add_norm(n):
        names[f"{n}.weight"] = (d,)
        if layernorm:
            names[f"{n}.bias"] = (d,)

    if cfg.get("final_norm", True):
        add_norm("norm")
    if cfg.get("embed_norm", False):
        add_norm("embed_norm")
    if cfg.get("positions", "learned") == "learned":
        names["pos.weight"] = (cfg["max_seq"], d)
    if head["kind"] == "lm" and not cfg.get("tie_embeddings", False):
        names["head.weight"] = (v, d)
    if head["kind"] == "lm" and head.get("bias", False):
        names["head.bias"] = (v,)
    if head["kind"] == "lm" and "transform" in head:
        names.update({"head.transform.weight": (d, d), "head.transform.bias": (d,)})
        if head["transform"].get("norm", True):
            add_norm("head.transform_norm")
    bias = cfg.get("attn_bias", True)
    biased = {"q", "k", "v", "o"} if bias is True else set(bias or ())
    if head["kind"] == "classifier":
        names.update({"head.weight": (head["classes"], d), "head.bias": (head["classes"],)})
    for b, layer in enumerate(cfg["layers"]):
        p = f"blocks.{b}."
        for norm in ("norm1", "norm2"):
            names[f"{p}{norm}.weight"] = (d,)
            if layernorm:
                names[f"{p}{norm}.bias"] = (d,)
        for proj, rows in (("q", d), ("k", kv), ("v", kv), ("o", d)):
            names[f"{p}attn.{proj}.weight"] = (rows, d)
            if proj in biased:
                names[f"{p}attn.{proj}.bias"] = (rows,)
        for name, shape in _expected_layer_tensors(layer, d, d).items():
            names[f"{p}ffn.{name}"] = shape
    return names


_STACK_LAYERS = [
    {"kind": "dense", "width": 9, "activation": "gelu", "out": 7},
    {"kind": "dense", "width": 5, "activation": "silu", "gated": True, "bias": False, "out": 6},
    {"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 4, "out": 6},
    {"kind": "tree", "mode": "leaf", "depth": 2, "leaf_width": 3, "gated": True, "bias": False,
     "out": 5},
    {"kind": "tree", "mode": "path", "depth": 3, "activation": "gelu", "out": 5},
    {"kind": "tree", "mode": "path", "depth": 2, "bias": False, "out": 4},
    {"kind": "experts", "experts": 4, "top_k": 2, "width": 3, "out": 6},
    {"kind": "experts", "experts": 3, "top_k": 3, "width": 3, "gated": True, "bias": False,
     "renormalize": False, "activation": "gelu_tanh", "out": 2},
]

_TRANSFORMERS = [
    _transformer(layers=[{"kind": "tree", "mode": "leaf", "depth": 2, "leaf_width": 8},
                         {"kind": "experts", "experts": 3, "top_k": 1, "width": 8}]),
    _transformer(positions="rope", norm="rmsnorm", n_kv_heads=2, tie_embeddings=True,
                 attn_bias=False, causal=False,
                 layers=[{"kind": "tree", "mode": "path", "depth": 3}]),
    _transformer(positions="none", head={"kind": "classifier", "classes": 3, "pool": "mean"}),
    _transformer(head={"kind": "none"}, tokenizer="byte", vocab_size=256),
    _transformer(norm_position="post", final_norm=False, embed_norm=True, attn_bias=["q", "v"],
                 head={"kind": "lm", "transform": {"activation": "gelu"}, "bias": True}),
    _transformer(norm_position="post", norm="rmsnorm", tie_embeddings=True, attn_bias=["o"],
                 head={"kind": "lm", "transform": {"norm": False}, "bias": True}),
]


class ExportTest(unittest.TestCase):

    def _check_stack_export(self, out_dir, layers, rows):
        with open(os.path.join(out_dir, "config.json"), encoding="utf-8") as f:
            config = json.load(f)
        expected, width, routed = {}, config["input_dim"], []
        for i, layer in enumerate(config["layers"]):
            self.assertEqual((layer["in"], layer["out"]), (width, layers[i]["out"]))
            for name, shape in _expected_layer_tensors(layer, layer["in"], layer["out"]).items():
                expected[f"layers.{i}.{name}"] = shape
            width = layer["out"]
            if layer["kind"] != "dense":
                routed.append((i, layer.get("top_k")))
        weights = np.load(os.path.join(out_dir, "weights.npz"))
        self.assertEqual({k: weights[k].shape for k in weights.files}, expected)
        self.assertTrue(all(weights[k].dtype == np.float32 for k in weights.files))
        ref = np.load(os.path.join(out_dir, "reference.npz"))
        keys = {"inputs", "outputs"} | {f"layer_outputs.layer{i}" for i in range(len(layers))}
        for i, k in routed:
            keys |= {f"routes.layer{i}", f"margins.layer{i}", f"layer_inputs.layer{i}",
                     f"margin_scales.layer{i}", f"margin_norms.layer{i}"}
            margins, scales = ref[f"margins.layer{i}"], ref[f"margin_scales.layer{i}"]
            finite = np.isfinite(margins)
            # A tree's margin is some |w.x + b|, at most sum |w_i x_i| + |b| (triangle
            # inequality); an experts' probability gap p_a - p_b is at most p_a + p_b <= 1.
            if k is None:
                self.assertTrue((margins[finite] <= scales[finite] * (1 + 1e-5)).all())
            self.assertTrue((ref[f"margin_norms.layer{i}"][finite] > 0).all())
            self.assertEqual(ref[f"routes.layer{i}"].dtype, np.int32)
            self.assertEqual(ref[f"routes.layer{i}"].shape, (rows, k) if k else (rows,))
            self.assertEqual(ref[f"margins.layer{i}"].dtype, np.float32)
            self.assertEqual(ref[f"margins.layer{i}"].shape, (rows,))
        self.assertEqual(set(ref.files), keys)
        np.testing.assert_array_equal(ref[f"layer_outputs.layer{len(layers) - 1}"],
                                      ref["outputs"])
        self.assertEqual(ref["inputs"].shape, (rows, config["input_dim"]))
        self.assertEqual(ref["outputs"].shape, (rows, width))
        self.assertEqual(ref["outputs"].dtype, np.float32)
        return config, weights, ref

    def test_stack_export_names_shapes_and_reproducible_outputs(self):
        config = {"family": "stack", "input_dim": 8, "layers": _STACK_LAYERS}
        model = random_model(config, seed=11)
        with tempfile.TemporaryDirectory() as tmp:
            export(model, tmp, random_inputs(model, 12, seed=11))
            written, weights, ref = self._check_stack_export(tmp, _STACK_LAYERS, 12)
            # Loading the written files into a fresh model reproduces the written outputs.
            fresh = build_model(written)
            fresh.load_state_dict({k: torch.from_numpy(weights[k]) for k in weights.files})
            with torch.no_grad():
                y, routes, _ = fresh(torch.from_numpy(ref["inputs"]), hard=True,
                                     return_routes=True)
            np.testing.assert_allclose(y.numpy(), ref["outputs"], rtol=1e-4, atol=1e-5)
            for i, r in routes.items():
                # float32 and float64 may part ways only on a row that is nearly a tie.
                near = ref[f"margins.layer{i}"] < 1e-5
                agree = (r.numpy() == ref[f"routes.layer{i}"]).reshape(len(near), -1).all(1)
                self.assertTrue((agree | near).all(), f"layer {i}")

    def test_transformer_exports_have_the_documented_names(self):
        for cfg in _TRANSFORMERS:
            model = random_model(cfg, seed=12)
            with tempfile.TemporaryDirectory() as tmp:
                export(model, tmp, random_inputs(model, 6, seed=12))
                weights = np.load(os.path.join(tmp, "weights.npz"))
                self.assertEqual({k: weights[k].shape for k in weights.files},
                                 _expected_transformer_tensors(cfg), cfg)
                ref = np.load(os.path.join(tmp, "reference.npz"))
                self.assertEqual(ref["inputs"].shape, (1, 6))
                self.assertEqual(ref["inputs"].dtype, np.int64)
                head = cfg.get("head", {"kind": "lm"})["kind"]
                out_shape = {"lm": (1, 6, cfg["vocab_size"]), "classifier": (1, 3),
                             "none": (1, 6, 16)}[head]
                self.assertEqual(ref["outputs"].shape, out_shape)
                for i, layer in enumerate(cfg["layers"]):
                    if layer["kind"] != "dense":
                        shape = (6, layer["top_k"]) if layer["kind"] == "experts" else (6,)
                        self.assertEqual(ref[f"routes.layer{i}"].shape, shape)
                        self.assertEqual(ref[f"margins.layer{i}"].shape, (6,))

    def test_rename_writes_their_names(self):
        model = random_model({"family": "stack", "input_dim": 4, "layers": [_STACK_LAYERS[0]]},
                             seed=13)
        arrays = weight_arrays(model, rename={"mlp.up.w": "layers.0.fc1.weight"})
        self.assertEqual(set(arrays), {"mlp.up.w", "layers.0.fc1.bias", "layers.0.fc2.weight",
                                       "layers.0.fc2.bias"})
        with self.assertRaises(ValueError):
            weight_arrays(model, rename={"x": "layers.0.no_such"})

    def test_command_line_exports_all_files(self):
        env = dict(os.environ, PYTHONPATH=os.path.normpath(_PACKAGE_DIR))
        with tempfile.TemporaryDirectory() as tmp:
            config_path = os.path.join(tmp, "c.json")
            with open(config_path, "w", encoding="utf-8") as f:
                json.dump({"family": "stack", "input_dim": 8, "layers": _STACK_LAYERS}, f)
            out_dir = os.path.join(tmp, "out")
            run = subprocess.run([sys.executable, "-m", "sprig_torch.export", "--config",
                                  config_path, "--seed", "5", "--rows", "9", "--out", out_dir],
                                 env=env, capture_output=True, text=True, check=False)
            self.assertEqual(run.returncode, 0, run.stderr)
            self._check_stack_export(out_dir, _STACK_LAYERS, 9)

            with open(config_path, "w", encoding="utf-8") as f:
                json.dump({"family": "stack", "input_dim": 8,
                           "layers": [{"kind": "tree", "depth": 2, "out": 3}]}, f)
            run = subprocess.run([sys.executable, "-m", "sprig_torch.export", "--config",
                                  config_path, "--out", out_dir], env=env, capture_output=True,
                                 text=True, check=False)
            self.assertEqual(run.returncode, 2)
            self.assertIn("leaf_width", run.stderr)


if __name__ == "__main__":
    unittest.main()
