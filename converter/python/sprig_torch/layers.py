"""Reference feed-forward layers of sprig: dense, tree (leaf and path modes) and top-k experts.

These PyTorch modules are the reference for sprig's model semantics (docs/model-semantics.md): the C++
runtime is checked against them. They are written straight from the formulas with plain torch
primitives, favouring clarity over speed. Each module's ``state_dict()`` keys are exactly the
tensor names of the input contract (docs/input-contract.md), so a state dict can be exported as is.

Every layer takes ``forward(x, hard=None, return_routes=False)`` with ``x`` of shape
``[rows, in]``:

* ``hard=None`` uses the module's ``hard`` attribute (False by default, the training form);
  ``hard=True`` is the inference form that sprig implements.
* ``return_routes=True`` returns ``(y, routes, margins)``: ``routes`` is an int64 tensor of
  the taken leaf per row (trees) or ``[rows, k]`` of chosen experts (experts, descending
  weight, ties by lower index); ``margins`` is a float tensor ``[rows]`` saying how close each
  row was to a different route (see each class). A dense layer returns ``(y, None, None)``.
  Routes are always those of the hard descent, whichever mode computed ``y``.

Training forms (``hard=False``):

* leaf tree: the soft mixture of the fast feedforward method, each node sends probability
  sigmoid(logit) to its right child and 1 - sigmoid(logit) to its left child, and the output
  is the probability-weighted sum of all leaf MLPs;
* path tree: equal to the hard form (it is already differentiable through ``act(a)``);
* experts: equal to the hard form (differentiable through the router weights).
"""

import math

import torch
import torch.nn.functional as F
from torch import nn

ACTIVATIONS = {
    "relu": F.relu,
    # Exact erf form: torch.nn.functional.gelu with approximate='none' (the default).
    "gelu": F.gelu,
    "gelu_tanh": lambda t: F.gelu(t, approximate="tanh"),
    "silu": F.silu,
}

# Config keys each layer kind accepts (docs/input-contract.md). `in`/`out` are filled by the model.
_COMMON_KEYS = {"kind", "activation", "bias", "in", "out"}
_KIND_KEYS = {
    "dense": _COMMON_KEYS | {"width", "gated"},
    ("tree", "leaf"): _COMMON_KEYS | {"mode", "depth", "leaf_width", "gated"},
    ("tree", "path"): _COMMON_KEYS | {"mode", "depth"},
    "experts": _COMMON_KEYS | {"experts", "top_k", "width", "renormalize", "gated",
                               "router_scoring", "shared_experts", "shared_width", "shared_gate"},
}
ROUTER_SCORINGS = ("softmax", "sigmoid", "softmax_chosen")


def activation(name):
    """Returns the activation function called `name` (relu, gelu, gelu_tanh or silu)."""
    if name not in ACTIVATIONS:
        raise ValueError(f"activation must be one of {sorted(ACTIVATIONS)}, got {name!r}")
    return ACTIVATIONS[name]


def _positive_int(cfg, key, minimum=1):
    value = cfg.get(key)
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise ValueError(f"layer field {key!r} must be an integer >= {minimum}, got {value!r}")
    return value


def _flag(cfg, key, default):
    value = cfg.get(key, default)
    if not isinstance(value, bool):
        raise ValueError(f"layer field {key!r} must be true or false, got {value!r}")
    return value


def normalize_layer_config(cfg, in_features=None, out_features=None):
    """Validates one `layers` entry and returns a copy with every default filled in.

    `in_features`/`out_features` supply `in`/`out` when the entry has none (a transformer
    passes d_model, a stack the previous layer's width). Unknown keys are refused, as the
    converter refuses them.
    """
    if not isinstance(cfg, dict):
        raise ValueError(f"a layer entry must be an object, got {cfg!r}")
    kind = cfg.get("kind")
    mode = cfg.get("mode", "leaf") if kind == "tree" else None
    key = (kind, mode) if kind == "tree" else kind
    if key not in _KIND_KEYS:
        raise ValueError(
            f"layer kind/mode must be dense, tree (leaf|path) or experts, got {kind!r}/{mode!r}")
    unknown = set(cfg) - _KIND_KEYS[key]
    if unknown:
        raise ValueError(f"layer of kind {kind!r} has unknown fields {sorted(unknown)}")

    out = {"kind": kind}
    if kind == "tree":
        out["mode"] = mode
        out["depth"] = _positive_int(cfg, "depth", minimum=0)
        if mode == "leaf":
            out["leaf_width"] = _positive_int(cfg, "leaf_width")
    else:
        out["width"] = _positive_int(cfg, "width")
    if kind == "experts":
        out["experts"] = _positive_int(cfg, "experts")
        out["top_k"] = _positive_int(cfg, "top_k")
        if out["top_k"] > out["experts"]:
            raise ValueError(f"top_k ({out['top_k']}) must not exceed experts ({out['experts']})")
        out["renormalize"] = _flag(cfg, "renormalize", True)
        out["router_scoring"] = cfg.get("router_scoring", "softmax")
        if out["router_scoring"] not in ROUTER_SCORINGS:
            raise ValueError(f"router_scoring must be one of {list(ROUTER_SCORINGS)}, "
                             f"got {out['router_scoring']!r}")
        if out["router_scoring"] == "softmax_chosen" and not out["renormalize"]:
            raise ValueError("renormalize is false but router_scoring softmax_chosen always "
                             "normalises over the chosen experts")
        out["shared_experts"] = _positive_int(
            {"shared_experts": cfg.get("shared_experts", 0)}, "shared_experts", minimum=0)
        if out["shared_experts"]:
            out["shared_width"] = _positive_int(
                {"shared_width": cfg.get("shared_width", out["width"])}, "shared_width")
            out["shared_gate"] = _flag(cfg, "shared_gate", False)
        else:
            given = sorted({"shared_width", "shared_gate"} & set(cfg))
            if given:
                raise ValueError(f"layer fields {given} apply only to a layer with shared_experts")
    out["activation"] = cfg.get("activation", "relu")
    activation(out["activation"])  # validates the name
    if key != ("tree", "path"):
        out["gated"] = _flag(cfg, "gated", False)
    out["bias"] = _flag(cfg, "bias", True)
    for name, given in (("in", in_features), ("out", out_features)):
        value = cfg.get(name, given)
        if value is None:
            raise ValueError(f"layer field {name!r} is required here")
        out[name] = _positive_int({name: value}, name)
        if given is not None and out[name] != given:
            raise ValueError(f"layer field {name!r} is {out[name]}, expected {given}")
    return out


class Params(nn.Module):
    """A holder of named parameters, so that its state_dict keys are `<holder>.<name>`.

    ``Params(weight=(3, 4), bias=None)`` has a zero `weight` of shape [3, 4] and no `bias`
    (``self.bias`` is None). Zeros are placeholders: callers initialise or load the values.
    """

    def __init__(self, **shapes):
        super().__init__()
        for name, shape in shapes.items():
            if shape is None:
                setattr(self, name, None)
            else:
                self.register_parameter(name, nn.Parameter(torch.zeros(shape)))


def _linear_params(out_features, in_features, bias, lead=()):
    """A weight [*lead, out, in] and, when `bias`, a bias [*lead, out]."""
    return Params(weight=(*lead, out_features, in_features),
                  bias=(*lead, out_features) if bias else None)


def _add_bias(t, b):
    return t if b is None else t + b


class _MlpBank(nn.Module):
    """`count` MLPs stored as stacked tensors fc1/gate/fc2 of shapes [count, W, in] etc.

    Tree leaves and experts both use this: `leaves.fc1.weight`, `experts.fc2.bias`, ...
    """

    def __init__(self, count, in_features, width, out_features, gated, bias):
        super().__init__()
        self.fc1 = _linear_params(width, in_features, bias, (count,))
        self.gate = _linear_params(width, in_features, bias, (count,)) if gated else None
        self.fc2 = _linear_params(out_features, width, bias, (count,))

    def forward_all(self, x, act):
        """Every MLP on every row: x [rows, in] -> [rows, count, out]."""
        h = _add_bias(torch.einsum("cwi,ri->rcw", self.fc1.weight, x), self.fc1.bias)
        if self.gate is not None:
            g = _add_bias(torch.einsum("cwi,ri->rcw", self.gate.weight, x), self.gate.bias)
            h = act(g) * h
        else:
            h = act(h)
        return _add_bias(torch.einsum("cow,rcw->rco", self.fc2.weight, h), self.fc2.bias)

    def forward_selected(self, x, index, act):
        """Only the MLPs named by `index` [rows, k] for each row: -> [rows, k, out].

        Gathers each row's weights, as the runtime touches only the chosen leaves/experts.
        """

        def take(params):
            b = None if params.bias is None else params.bias[index]
            return params.weight[index], b

        w1, b1 = take(self.fc1)
        h = _add_bias(torch.einsum("rkwi,ri->rkw", w1, x), b1)
        if self.gate is not None:
            wg, bg = take(self.gate)
            h = act(_add_bias(torch.einsum("rkwi,ri->rkw", wg, x), bg)) * h
        else:
            h = act(h)
        w2, b2 = take(self.fc2)
        return _add_bias(torch.einsum("rkow,rkw->rko", w2, h), b2)


class _FeedForward(nn.Module):
    """Shared plumbing: the normalised config, `hard` and the forward signature."""

    def __init__(self, cfg):
        super().__init__()
        self.config = cfg
        self.in_features = cfg["in"]
        self.out_features = cfg["out"]
        self.act = activation(cfg["activation"])
        self.hard = False

    def forward(self, x, hard=None, return_routes=False):
        if x.dim() != 2 or x.shape[1] != self.in_features:
            raise ValueError(f"input must be [rows, {self.in_features}], got {list(x.shape)}")
        hard = self.hard if hard is None else hard
        y, routes, margins = self._forward(x, hard)
        return (y, routes, margins) if return_routes else y


class DenseFF(_FeedForward):
    """`kind: dense`: y = fc2(act(fc1 x)) or, gated, fc2(act(gate x) * fc1 x)."""

    def __init__(self, cfg):
        super().__init__(cfg)
        w, bias = cfg["width"], cfg["bias"]
        self.fc1 = nn.Linear(self.in_features, w, bias=bias)
        self.gate = nn.Linear(self.in_features, w, bias=bias) if cfg["gated"] else None
        self.fc2 = nn.Linear(w, self.out_features, bias=bias)

    def _forward(self, x, hard):
        h = self.fc1(x)
        h = self.act(self.gate(x)) * h if self.gate is not None else self.act(h)
        return self.fc2(h), None, None


class TreeFF(_FeedForward):
    """`kind: tree`, modes `leaf` (fast feedforward) and `path` (conditional matmul).

    Nodes are numbered breadth-first: root 0, children 2n+1 (left) and 2n+2 (right). A node
    sends a row right when its logit nodes.weight[n]·x + nodes.bias[n] is > 0; a logit of
    exactly 0 goes left.

    Leaf mode, depth d: 2^d - 1 routing nodes and 2^d leaf MLPs; hard output is the reached
    leaf's MLP. Path mode, depth d: 2^(d+1) - 1 neurons; along the descent of d + 1 levels,
    y = out_bias + sum act(a_n) * nodes.out[n].

    Routes: the leaf index (leaf mode) or the last-level neuron index minus (2^d - 1) (path
    mode), both in [0, 2^d). Margins: the smallest |logit| among the nodes whose sign chose the
    route (the d routing decisions; the last path-mode neuron decides nothing); inf if d == 0.
    """

    def __init__(self, cfg):
        super().__init__(cfg)
        self.mode = cfg["mode"]
        self.depth = d = cfg["depth"]
        bias = cfg["bias"]
        if self.mode == "leaf":
            self.nodes = _linear_params(2**d - 1, self.in_features, bias)
            self.leaves = _MlpBank(2**d, self.in_features, cfg["leaf_width"], self.out_features,
                                   cfg["gated"], bias)
        else:
            n = 2 ** (d + 1) - 1
            self.nodes = Params(weight=(n, self.in_features), bias=(n,) if bias else None,
                                out=(n, self.out_features))
            self.out_bias = nn.Parameter(torch.zeros(self.out_features)) if bias else None

    def node_logits(self, x):
        """All node logits: [rows, node count]."""
        return _add_bias(x @ self.nodes.weight.t(), self.nodes.bias)

    def descend(self, logits):
        """Hard descent over precomputed logits for `self.depth` levels.

        Returns (node index per row and level [rows, depth + 1], margins [rows]); column l is
        the node visited at level l.
        """
        rows = logits.shape[0]
        node = torch.zeros(rows, dtype=torch.int64, device=logits.device)
        visited = [node]
        margin = torch.full((rows,), math.inf, dtype=logits.dtype, device=logits.device)
        for _ in range(self.depth):
            a = logits.gather(1, node[:, None])[:, 0]
            margin = torch.minimum(margin, a.abs())
            node = 2 * node + 1 + (a > 0).to(torch.int64)
            visited.append(node)
        return torch.stack(visited, dim=1), margin

    def _forward(self, x, hard):
        logits = self.node_logits(x)
        path, margins = self.descend(logits)
        first_of_last_level = 2**self.depth - 1
        routes = path[:, -1] - first_of_last_level
        if self.mode == "path":
            # Training form equals the hard form (see the module docstring).
            return self._path_output(logits, path), routes, margins
        if hard:
            y = self.leaves.forward_selected(x, routes[:, None], self.act)[:, 0]
        else:
            y = torch.einsum("rl,rlo->ro", self.leaf_probabilities(logits),
                             self.leaves.forward_all(x, self.act))
        return y, routes, margins

    def margin_bounds(self, x):
        """How sensitive each row's margin is to error, for explaining flipped decisions.

        Returns (scales, norms), float [rows]: for the deciding node n with the smallest |logit|
        (the one `margins` reports), scale = sum_i |w_ni x_i| + |b_n| and norm = ||w_n||_2. A
        relative error eta on every stored weight moves the logit by at most eta * scale; an
        error dx on the input moves it by at most norm * ||dx||_2 (Cauchy-Schwarz). Zero when
        depth == 0 (nothing is decided).
        """
        rows = x.shape[0]
        if self.depth == 0:
            zero = torch.zeros(rows, dtype=x.dtype, device=x.device)
            return zero, zero.clone()
        logits = self.node_logits(x)
        path, _ = self.descend(logits)
        deciding = path[:, :-1]  # the d nodes whose sign chose the route
        closest = deciding.gather(1, logits.gather(1, deciding).abs().argmin(1, keepdim=True))[:, 0]
        w = self.nodes.weight[closest]
        scale = (w.abs() * x.abs()).sum(1)
        if self.nodes.bias is not None:
            scale = scale + self.nodes.bias[closest].abs()
        return scale, w.norm(dim=1)

    def _path_output(self, logits, path):
        # Every one of the d + 1 visited nodes is a neuron that adds to the output.
        a = logits.gather(1, path)  # [rows, d + 1]
        y = torch.einsum("rl,rlo->ro", self.act(a), self.nodes.out[path])
        return _add_bias(y, self.out_bias)

    def leaf_probabilities(self, logits):
        """Soft routing of leaf mode: [rows, 2^d], right child gets sigmoid(logit)."""
        p = torch.ones(logits.shape[0], 1, dtype=logits.dtype, device=logits.device)
        for level in range(self.depth):
            first = 2**level - 1
            s = torch.sigmoid(logits[:, first:first + 2**level])
            # Node j of this level has children 2j (left) and 2j + 1 (right) of the next level.
            p = torch.stack([p * (1 - s), p * s], dim=-1).reshape(p.shape[0], -1)
        return p


def stable_top_k(p, k):
    """Indices [rows, k] of the k largest entries of each row of p, ties by lower index.

    torch.topk does not promise an order among equal values, so this uses a stable sort.
    Source: torch.sort(stable=True) keeps the original order of equal elements (PyTorch docs).
    """
    order = torch.sort(p, dim=1, descending=True, stable=True).indices
    return order[:, :k]


class ExpertsFF(_FeedForward):
    """`kind: experts`: router logits l = router x, scored by `router_scoring`:

    * softmax (the default): p = softmax(l); the top_k experts S by p (ties: lower index
      first); weights p_j / sum_S p (renormalize, the default) or p_j;
    * sigmoid: s = sigmoid(l); S the top_k by l (the same as by s); weights s_j / sum_S s
      (renormalize) or s_j;
    * softmax_chosen: S the top_k by l; weights softmax over the chosen logits l_S.

    y = sum_S w_j * expert_j(x), plus, with `shared_experts` S' > 0, g(x) * sum_s shared_s(x),
    g(x) = sigmoid(shared_gate x + b) with `shared_gate`, else 1.

    Routes: [rows, top_k] expert indices in descending weight order. Margins: how far the k-th
    choice was ahead of the best unchosen expert (inf when top_k == experts), on the quantity
    the choice is made on: p_a - p_b under softmax, l_a - l_b under sigmoid and softmax_chosen.
    """

    def __init__(self, cfg):
        super().__init__(cfg)
        self.top_k = cfg["top_k"]
        self.renormalize = cfg["renormalize"]
        self.scoring = cfg["router_scoring"]
        self.router = nn.Linear(self.in_features, cfg["experts"], bias=cfg["bias"])
        self.experts = _MlpBank(cfg["experts"], self.in_features, cfg["width"],
                                self.out_features, cfg["gated"], cfg["bias"])
        self.shared = None
        self.shared_gate = None
        if cfg["shared_experts"]:
            self.shared = _MlpBank(cfg["shared_experts"], self.in_features, cfg["shared_width"],
                                   self.out_features, cfg["gated"], cfg["bias"])
            if cfg["shared_gate"]:
                self.shared_gate = _linear_params(1, self.in_features, cfg["bias"])

    def _scores(self, x):
        """The values the choice ranks: softmax probabilities, or the logits themselves (the
        sigmoid is monotonic, so ranking sigmoid scores and ranking logits choose alike)."""
        logits = self.router(x)
        return (torch.softmax(logits, dim=1) if self.scoring == "softmax" else logits), logits

    def _forward(self, x, hard):
        # Training form equals the hard form (see the module docstring).
        scores, logits = self._scores(x)
        chosen = stable_top_k(scores, self.top_k)
        if self.scoring == "softmax_chosen":
            w = torch.softmax(logits.gather(1, chosen), dim=1)
        else:
            w = (scores if self.scoring == "softmax" else torch.sigmoid(logits)).gather(1, chosen)
            if self.renormalize:
                w = w / w.sum(dim=1, keepdim=True)
        y = torch.einsum("rk,rko->ro", w, self.experts.forward_selected(x, chosen, self.act))
        if self.shared is not None:
            shared = self.shared.forward_all(x, self.act).sum(dim=1)
            if self.shared_gate is not None:
                g = torch.sigmoid(_add_bias(x @ self.shared_gate.weight.t(), self.shared_gate.bias))
                shared = g * shared
            y = y + shared
        return y, chosen, self._margins(scores)

    def margin_bounds(self, x):
        """Sensitivity of the margin (a: the k-th choice, b: the best unchosen) to error.

        A relative error eta on the router weights moves logit j by at most eta * S_j with
        S_j = sum_i |w_ji x_i| + |b_j|. Under softmax the margin p_a - p_b then moves, to first
        order, by at most eta * (p_a S_a + p_b S_b + (p_a - p_b) max_j S_j); on logits
        (sigmoid, softmax_chosen) l_a - l_b moves by at most eta * (S_a + S_b). That is
        `scales`; `norms` is the same expression with ||w_j||_2 in place of S_j, for an input
        error ||dx||_2. Zero when top_k == experts.
        """
        rows = x.shape[0]
        if self.top_k == self.router.weight.shape[0]:
            zero = torch.zeros(rows, dtype=x.dtype, device=x.device)
            return zero, zero.clone()
        scores, _ = self._scores(x)
        order = torch.sort(scores, dim=1, descending=True, stable=True).indices
        a, b = order[:, self.top_k - 1], order[:, self.top_k]
        s = x.abs() @ self.router.weight.abs().t()
        if self.router.bias is not None:
            s = s + self.router.bias.abs()
        n = self.router.weight.norm(dim=1).expand(rows, -1)

        def pick(t, i):
            return t.gather(1, i[:, None])[:, 0]

        if self.scoring != "softmax":
            return pick(s, a) + pick(s, b), pick(n, a) + pick(n, b)
        pa, pb = pick(scores, a), pick(scores, b)

        def bound(t):
            return pa * pick(t, a) + pb * pick(t, b) + (pa - pb) * t.max(1).values

        return bound(s), bound(n)

    def _margins(self, scores):
        if self.top_k == scores.shape[1]:
            return torch.full((scores.shape[0],), math.inf, dtype=scores.dtype,
                              device=scores.device)
        top = torch.sort(scores, dim=1, descending=True).values
        return top[:, self.top_k - 1] - top[:, self.top_k]


def build_layer(cfg, in_features=None, out_features=None):
    """Builds the module for one `layers` entry (see normalize_layer_config)."""
    cfg = normalize_layer_config(cfg, in_features, out_features)
    return {"dense": DenseFF, "tree": TreeFF, "experts": ExpertsFF}[cfg["kind"]](cfg)
