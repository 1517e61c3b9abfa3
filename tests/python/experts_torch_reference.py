"""Mixture-of-experts layers written as common MoE training code writes them, for `sprig verify`.

    experts_torch_reference.py CASE DIR     # CASE: one of CASES below, or "list"
    experts_torch_reference.py exporter DIR # sprig's Python exporter on what CASE DIR holds

The second form is the one use of sprig here (PYTHONPATH=converter/python): the exporter's
`load_weights` with the same mapping file must rebuild a reference module whose outputs and
routes match the torch.nn module's (`check_outputs`), and `weight_arrays` with that file must
give back the module's own arrays, each under its own name, unchanged.

Nothing of sprig builds or runs these models. Each is a torch.nn.Module in the form MoE training
code uses: a router `nn.Linear(d, E, bias=False)`, experts as an `nn.ModuleList` of small MLP
modules under their own names (`moe.experts.3.w1.weight`), the choice made with `torch.topk`, and
shared experts added to every row, optionally scaled by `sigmoid(nn.Linear(d, 1))`. The forms
follow published code:

* softmax_renormalized: Mixtral's sparse MoE block (Hugging Face transformers,
  `MixtralSparseMoeBlock`): softmax over all experts, `torch.topk`, weights divided by their sum;
  SwiGLU experts `w2(silu(w1 x) * w3 x)`.
* softmax_plain: the same without the division (Switch Transformer's top-1 gate generalised to
  top-k; Qwen2-MoE with `norm_topk_prob=False`); GELU experts `down(gelu(up x))`.
* sigmoid_normalized: DeepSeek-V3's `scoring_func="sigmoid"` with `norm_topk_prob=True` (without
  its expert-bias load balancing, which only training uses): sigmoid scores, `torch.topk`,
  normalised over the chosen; SwiGLU experts.
* softmax_over_chosen: Mistral's reference `MoeLayer` (mistral-src moe.py): `torch.topk` on the
  router logits, then softmax over the chosen logits; SwiGLU experts.
* shared_gated: Qwen2-MoE's sparse MoE block: softmax top-k without renormalising, plus a shared
  SwiGLU expert scaled by `sigmoid(shared_expert_gate(x))`, `shared_expert_gate = nn.Linear(d, 1,
  bias=False)`.
* shared_plain: DeepSeek-MoE's shared experts: two always-on experts added without a gate.
* shared_gated_biased: every nn.Linear with its default bias (router, experts, and the shared
  gate `nn.Linear(d, 1)`), GELU experts, softmax with renormalising.

Each writes into DIR:

* config.json   the sprig config of the layer (a stack of one experts layer);
* weights.npz   the module's state_dict under its own names, saved with NumPy (float32);
* mapping.json  their names -> sprig's, stacking each expert's tensors (`sprig pack --map`);
* reference.npz inputs, outputs and routes from the module's own forward pass (float64, from the
  float32 weights and inputs), and the routing margins verify judges flips by: the margin
  between the k-th and the (k+1)-th expert on the quantity the choice is made on (softmax
  probabilities, or the logits for the sigmoid and over-chosen forms, which choose alike since
  both maps are monotonic) and its sensitivities to weight and input error, computed with NumPy
  from the router's weights as docs/verifying.md defines them.
"""

import json
import os
import sys

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

D, EXPERTS, TOP_K, WIDTH, SHARED_WIDTH, ROWS = 16, 8, 2, 12, 10, 256

# case -> (scoring, renormalize, expert kind, shared experts, shared gate, biases)
CASES = {
    "softmax_renormalized": ("softmax", True, "swiglu", 0, False, False),
    "softmax_plain": ("softmax", False, "gelu", 0, False, False),
    "sigmoid_normalized": ("sigmoid", True, "swiglu", 0, False, False),
    "softmax_over_chosen": ("softmax_chosen", True, "swiglu", 0, False, False),
    "shared_gated": ("softmax", False, "swiglu", 1, True, False),
    "shared_plain": ("softmax", False, "swiglu", 2, False, False),
    "shared_gated_biased": ("softmax", True, "gelu", 1, True, True),
}


class SwiGLUExpert(nn.Module):
    """Mixtral's expert: w2(silu(w1 x) * w3 x)."""

    def __init__(self, width, bias):
        super().__init__()
        self.w1 = nn.Linear(D, width, bias=bias)
        self.w3 = nn.Linear(D, width, bias=bias)
        self.w2 = nn.Linear(width, D, bias=bias)

    def forward(self, x):
        return self.w2(F.silu(self.w1(x)) * self.w3(x))


class GeluExpert(nn.Module):
    """A plain two-layer MLP expert: down(gelu(up x))."""

    def __init__(self, width, bias):
        super().__init__()
        self.up = nn.Linear(D, width, bias=bias)
        self.down = nn.Linear(width, D, bias=bias)

    def forward(self, x):
        return self.down(F.gelu(self.up(x)))


class SparseMoe(nn.Module):
    def __init__(self, scoring, renormalize, kind, shared, gate, bias):
        super().__init__()
        self.scoring, self.renormalize = scoring, renormalize
        expert = SwiGLUExpert if kind == "swiglu" else GeluExpert
        self.gate = nn.Linear(D, EXPERTS, bias=bias)  # the router
        self.experts = nn.ModuleList([expert(WIDTH, bias) for _ in range(EXPERTS)])
        self.shared_experts = nn.ModuleList([expert(SHARED_WIDTH, bias) for _ in range(shared)])
        self.shared_expert_gate = nn.Linear(D, 1, bias=bias) if gate else None

    def forward(self, x):
        logits = self.gate(x)
        if self.scoring == "softmax":
            probs = F.softmax(logits, dim=1)
            weights, selected = torch.topk(probs, TOP_K, dim=-1)
            if self.renormalize:
                weights = weights / weights.sum(dim=-1, keepdim=True)
        elif self.scoring == "sigmoid":
            scores = torch.sigmoid(logits)
            weights, selected = torch.topk(scores, TOP_K, dim=-1)
            if self.renormalize:
                weights = weights / weights.sum(dim=-1, keepdim=True)
        else:
            weights, selected = torch.topk(logits, TOP_K, dim=-1)
            weights = F.softmax(weights, dim=1)
        y = torch.zeros_like(x)
        for e, expert in enumerate(self.experts):
            rows, slot = torch.where(selected == e)
            if rows.numel():
                y.index_add_(0, rows, weights[rows, slot, None] * expert(x[rows]))
        if len(self.shared_experts):
            shared = sum(expert(x) for expert in self.shared_experts)
            if self.shared_expert_gate is not None:
                shared = torch.sigmoid(self.shared_expert_gate(x)) * shared
            y = y + shared
        return y, selected, logits


class Model(nn.Module):
    def __init__(self, *case):
        super().__init__()
        self.moe = SparseMoe(*case)

    def forward(self, x):
        return self.moe(x)


def config_of(scoring, renormalize, kind, shared, gate, bias):
    layer = {"kind": "experts", "experts": EXPERTS, "top_k": TOP_K, "width": WIDTH,
             "activation": "silu" if kind == "swiglu" else "gelu", "gated": kind == "swiglu",
             "bias": bias, "router_scoring": scoring, "renormalize": renormalize, "out": D}
    if shared:
        layer.update(shared_experts=shared, shared_width=SHARED_WIDTH, shared_gate=gate)
    return {"family": "stack", "input_dim": D, "name": "torch.nn mixture of experts",
            "layers": [layer]}


def mapping_of(kind, shared, gate, bias):
    """Their names -> ours. sprig's gated MLP is fc2(act(gate x) * fc1 x): Mixtral's w1 is the
    gate (under the activation), w3 is fc1, w2 is fc2."""
    parts = {"w1": "gate", "w3": "fc1", "w2": "fc2"} if kind == "swiglu" else {
        "up": "fc1", "down": "fc2"}
    m = {"moe.gate.weight": "layers.0.router.weight"}
    if bias:
        m["moe.gate.bias"] = "layers.0.router.bias"
    groups = [("experts", "experts", "e")] + ([("shared_experts", "shared", "s")] if shared else [])
    for theirs, ours, index in groups:
        for their_part, our_part in parts.items():
            for tensor in ("weight", "bias") if bias else ("weight",):
                m[f"moe.{theirs}.{{{index}}}.{their_part}.{tensor}"] = {
                    "stack": f"layers.0.{ours}.{our_part}.{tensor}", "over": index}
    if gate:
        m["moe.shared_expert_gate.weight"] = "layers.0.shared_gate.weight"
        if bias:
            m["moe.shared_expert_gate.bias"] = "layers.0.shared_gate.bias"
    return m


def margins_of(scoring, router_w, router_b, x, logits):
    """The k-th choice's lead over the best unchosen expert and its sensitivities (`scales` to a
    relative weight error, `norms` to an input error), as docs/verifying.md defines them."""
    rows = np.arange(x.shape[0])
    s = np.abs(x) @ np.abs(router_w).T + (0 if router_b is None else np.abs(router_b))
    n = np.broadcast_to(np.linalg.norm(router_w, axis=1), s.shape)
    if scoring == "softmax":
        e = np.exp(logits - logits.max(axis=1, keepdims=True))
        score = e / e.sum(axis=1, keepdims=True)
    else:
        score = logits
    order = np.argsort(-score, axis=1, kind="stable")
    a, b = order[:, TOP_K - 1], order[:, TOP_K]
    margin = score[rows, a] - score[rows, b]
    if scoring != "softmax":
        return margin, s[rows, a] + s[rows, b], n[rows, a] + n[rows, b]
    pa, pb = score[rows, a], score[rows, b]

    def bound(t):
        return pa * t[rows, a] + pb * t[rows, b] + (pa - pb) * t.max(axis=1)

    return margin, bound(s), bound(n)


def write_case(name, out):
    case = CASES[name]
    scoring, renormalize, kind, shared, gate, bias = case
    torch.manual_seed(sorted(CASES).index(name) + 1)
    model = Model(*case)
    with torch.no_grad():
        for p in model.parameters():
            p.copy_(torch.randn(p.shape) / (p.shape[-1] ** 0.5 if p.dim() > 1 else 10.0))
    weights = {k: v.detach().numpy().astype(np.float32) for k, v in model.state_dict().items()}
    x = torch.randn(ROWS, D)
    with torch.no_grad():
        y, selected, logits = model.double()(x.double())
    router_w = weights["moe.gate.weight"].astype(np.float64)
    router_b = weights["moe.gate.bias"].astype(np.float64) if bias else None
    x64 = x.numpy().astype(np.float64)
    margin, scales, norms = margins_of(scoring, router_w, router_b, x64, logits.numpy())
    os.makedirs(out, exist_ok=True)
    with open(os.path.join(out, "config.json"), "w", encoding="utf-8") as f:
        json.dump(config_of(*case), f, indent=1)
    with open(os.path.join(out, "mapping.json"), "w", encoding="utf-8") as f:
        json.dump(mapping_of(kind, shared, gate, bias), f, indent=1)
    np.savez(os.path.join(out, "weights.npz"), **weights)
    f32 = np.float32
    np.savez(os.path.join(out, "reference.npz"), inputs=x.numpy(), outputs=y.numpy().astype(f32),
             **{"routes.layer0": selected.numpy().astype(np.int32),
                "margins.layer0": margin.astype(f32), "margin_scales.layer0": scales.astype(f32),
                "margin_norms.layer0": norms.astype(f32), "layer_inputs.layer0": x.numpy()})


def check_exporter(out):
    from sprig_torch.export import check_outputs, load_weights, weight_arrays

    with open(os.path.join(out, "config.json"), encoding="utf-8") as f:
        config = json.load(f)
    mapping = os.path.join(out, "mapping.json")
    weights = dict(np.load(os.path.join(out, "weights.npz")))
    ref = np.load(os.path.join(out, "reference.npz"))
    model = load_weights(config, weights, mapping).double()
    with torch.no_grad():
        y, routes, _ = model(torch.from_numpy(ref["inputs"]).double(), hard=True,
                             return_routes=True)
    check_outputs(y.numpy(), ref["outputs"])
    if not np.array_equal(routes[0].numpy(), ref["routes.layer0"]):
        raise SystemExit("the exporter's reference module routes differently from the module")
    back = weight_arrays(model.float(), mapping)
    if sorted(back) != sorted(weights):
        raise SystemExit(f"weight_arrays names {sorted(set(back) ^ set(weights))} differ")
    for name, a in weights.items():
        if not np.array_equal(back[name], a):
            raise SystemExit(f"weight_arrays changed {name}")
    print(json.dumps({"tensors": len(weights), "max_abs_error":
                      float(np.abs(y.numpy() - ref["outputs"]).max())}))


if __name__ == "__main__":
    if sys.argv[1] == "list":
        print("\n".join(CASES))
    elif sys.argv[1] == "exporter":
        check_exporter(sys.argv[2])
    else:
        write_case(sys.argv[1], sys.argv[2])
