"""Reference models of sprig: the `stack` and `transformer` families (docs/model-semantics.md).

Like `layers`, this module is the reference for sprig's model semantics, written from the
formulas with torch primitives; ``state_dict()`` keys are the tensor names of docs/input-contract.md
(`layers.{i}.…` in a stack; `embed.weight`, `pos.weight`, `blocks.{i}.…`, `norm.*`, `head.*`
in a transformer).

``forward(inputs, hard=None, return_routes=False, trace=None)`` returns the output or, with
``return_routes``, ``(output, routes, margins)`` where both are dicts from the index of each
routed layer (stack layer or transformer block) to the layer's routes/margins; a transformer
flattens its tokens in [B*T] order (batch-major). When ``trace`` is a dict, ``trace[i]``
receives ``(layer_input, layer_output)`` of every layer i: a stack layer's input and output,
or a block's feed-forward input (norm2 of the residual stream) and the residual stream after
the block, both [B*T, d_model].

Conventions that the model semantics leave implicit and that are fixed here:

* grouped-query attention: query head h uses key/value head h // (n_heads / n_kv_heads), so
  consecutive query heads share one key/value head;
* rotary positions: token t of a sequence has position t (0-based), also with a batch;
* a sequence may not be longer than max_seq, whatever `positions` is.
"""

import copy
import math

import torch
import torch.nn.functional as F
from torch import nn

from sprig_torch.layers import ACTIVATIONS, Params, activation, build_layer

_STACK_KEYS = {"family", "name", "description", "input_dim", "layers"}
_TRANSFORMER_KEYS = {
    "family", "name", "description", "vocab_size", "d_model", "n_heads", "n_kv_heads",
    "max_seq", "norm", "norm_eps", "positions", "rope_base", "causal", "tie_embeddings",
    "attn_bias", "norm_position", "final_norm", "embed_norm", "tokenizer", "head", "layers"
}
_TRANSFORMER_DEFAULTS = {
    "norm": "layernorm", "norm_eps": 1e-5, "positions": "learned", "rope_base": 10000.0,
    "causal": True, "tie_embeddings": False, "attn_bias": True, "norm_position": "pre",
    "final_norm": True, "embed_norm": False, "tokenizer": "none", "head": {"kind": "lm"}
}
_PROJECTIONS = ("q", "k", "v", "o")



def _check_keys(config, allowed, what):
    unknown = set(config) - allowed
    if unknown:
        raise ValueError(f"{what} config has unknown fields {sorted(unknown)}")


def _int_field(config, key, minimum=1):
    value = config.get(key)
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise ValueError(f"config field {key!r} must be an integer >= {minimum}, got {value!r}")
    return value


def _choice(config, key, choices):
    value = config[key]
    if value not in choices:
        raise ValueError(f"config field {key!r} must be one of {choices}, got {value!r}")
    return value


def _collect(result, index, routes, margins):
    y, r, m = result
    if r is not None:
        routes[index] = r
        margins[index] = m
    return y


class StackModel(nn.Module):
    """`family: stack`: float rows [N, input_dim] through `layers` in order -> [N, out]."""

    def __init__(self, config):
        super().__init__()
        _check_keys(config, _STACK_KEYS, "stack")
        if config.get("family") != "stack":
            raise ValueError(f"StackModel needs family 'stack', got {config.get('family')!r}")
        width = _int_field(config, "input_dim")
        if not config.get("layers"):
            raise ValueError("config field 'layers' must be a non-empty list")
        self.config = copy.deepcopy(config)
        modules = []
        for i, entry in enumerate(config["layers"]):
            try:
                layer = build_layer(entry, in_features=width)
            except ValueError as e:
                raise ValueError(f"layers[{i}]: {e}") from None
            # The exported config spells out each layer's in/out.
            self.config["layers"][i]["in"] = layer.in_features
            self.config["layers"][i]["out"] = layer.out_features
            modules.append(layer)
            width = layer.out_features
        self.layers = nn.ModuleList(modules)
        self.input_dim = config["input_dim"]
        self.output_dim = width

    def forward(self, x, hard=None, return_routes=False, trace=None):
        routes, margins = {}, {}
        for i, layer in enumerate(self.layers):
            x_in = x
            x = _collect(layer(x, hard=hard, return_routes=True), i, routes, margins)
            if trace is not None:
                trace[i] = (x_in, x)
        return (x, routes, margins) if return_routes else x


class LayerNorm(nn.Module):
    """(x - mean) / sqrt(var + eps) * weight + bias, biased variance, over the last axis."""

    def __init__(self, dim, eps):
        super().__init__()
        self.eps = eps
        self.weight = nn.Parameter(torch.ones(dim))
        self.bias = nn.Parameter(torch.zeros(dim))

    def forward(self, x):
        # Source: torch.nn.functional.layer_norm (biased variance, eps inside the sqrt).
        return F.layer_norm(x, (x.shape[-1],), self.weight, self.bias, self.eps)


class RMSNorm(nn.Module):
    """x / sqrt(mean(x^2) + eps) * weight over the last axis (no bias)."""

    def __init__(self, dim, eps):
        super().__init__()
        self.eps = eps
        self.weight = nn.Parameter(torch.ones(dim))

    def forward(self, x):
        return x * torch.rsqrt(x.pow(2).mean(dim=-1, keepdim=True) + self.eps) * self.weight


def rope_angles(positions, head_dim, base, dtype=torch.float64):
    """Angles [len(positions), head_dim / 2]: t * base^(-2i / head_dim) for pair i."""
    i = torch.arange(head_dim // 2, dtype=dtype)
    inv_freq = base ** (-2.0 * i / head_dim)
    return positions.to(dtype)[:, None] * inv_freq[None, :]


def apply_rope(x, base):
    """Rotary positions in rotate-half form on x [B, H, T, head_dim]; token t has position t.

    Pair (i, i + head_dim/2) is rotated by angle t * base^(-2i/head_dim):
    x'_i = x_i cos - x_{i+h} sin, x'_{i+h} = x_{i+h} cos + x_i sin.
    """
    t, head_dim = x.shape[-2], x.shape[-1]
    half = head_dim // 2
    angles = rope_angles(torch.arange(t), head_dim, base)
    cos, sin = angles.cos().to(x.dtype), angles.sin().to(x.dtype)
    lo, hi = x[..., :half], x[..., half:]
    return torch.cat([lo * cos - hi * sin, hi * cos + lo * sin], dim=-1)


class Attention(nn.Module):
    """Multi-head self-attention with grouped key/value heads and optional rotary positions.

    Input and output [B, T, d_model]; q/k/v/o are nn.Linear layers (`attn.q.weight`, …), k and
    v of n_kv_heads * head_dim outputs. Scores q·k / sqrt(head_dim), causal mask optional.
    `bias` is a bool for all four projections or the set of those with a bias ({"q", "v"}).
    """

    def __init__(self, d_model, n_heads, n_kv_heads, bias, causal, rope_base=None):
        super().__init__()
        self.n_heads, self.n_kv_heads = n_heads, n_kv_heads
        self.head_dim = d_model // n_heads
        self.causal, self.rope_base = causal, rope_base
        kv = n_kv_heads * self.head_dim
        biased = set(_PROJECTIONS) if bias is True else set(bias or ())
        self.q = nn.Linear(d_model, d_model, bias="q" in biased)
        self.k = nn.Linear(d_model, kv, bias="k" in biased)
        self.v = nn.Linear(d_model, kv, bias="v" in biased)
        self.o = nn.Linear(d_model, d_model, bias="o" in biased)

    def _heads(self, t, count):
        b, n, _ = t.shape
        return t.reshape(b, n, count, self.head_dim).transpose(1, 2)  # [B, heads, T, hd]

    def forward(self, x):
        b, t, d = x.shape
        q = self._heads(self.q(x), self.n_heads)
        k = self._heads(self.k(x), self.n_kv_heads)
        v = self._heads(self.v(x), self.n_kv_heads)
        if self.rope_base is not None:
            q, k = apply_rope(q, self.rope_base), apply_rope(k, self.rope_base)
        group = self.n_heads // self.n_kv_heads
        # Consecutive query heads share a key/value head.
        k = k.repeat_interleave(group, dim=1)
        v = v.repeat_interleave(group, dim=1)
        scores = q @ k.transpose(-1, -2) / math.sqrt(self.head_dim)
        if self.causal:
            future = torch.ones(t, t, dtype=torch.bool, device=x.device).triu(1)
            scores = scores.masked_fill(future, -math.inf)
        out = torch.softmax(scores, dim=-1) @ v  # [B, H, T, hd]
        return self.o(out.transpose(1, 2).reshape(b, t, d))


def _norm_class(config):
    return LayerNorm if config["norm"] == "layernorm" else RMSNorm


class Block(nn.Module):
    """Pre-norm block: h = x + attn(norm1(x)); x = h + ffn(norm2(h)).
    Post-norm block (norm_position "post"): h = norm1(x + attn(x)); x = norm2(h + ffn(h))."""

    def __init__(self, config, ffn_config):
        super().__init__()
        d = config["d_model"]
        norm = _norm_class(config)
        self.norm1 = norm(d, config["norm_eps"])
        rope = config["rope_base"] if config["positions"] == "rope" else None
        self.attn = Attention(d, config["n_heads"], config["n_kv_heads"], config["attn_bias"],
                              config["causal"], rope)
        self.norm2 = norm(d, config["norm_eps"])
        self.ffn = build_layer(ffn_config, in_features=d, out_features=d)
        self.post = config["norm_position"] == "post"

    def forward(self, x, hard=None, trace=None):
        """x [B, T, D] -> (x, routes, margins), the ffn's routes/margins over [B*T] rows (None
        for a dense ffn). `trace`, a list, receives (ffn input, block output) as [B*T, D]."""
        b, t, d = x.shape
        if self.post:
            h = self.norm1(x + self.attn(x))
            ffn_in = h.reshape(b * t, d)
        else:
            h = x + self.attn(self.norm1(x))
            ffn_in = self.norm2(h).reshape(b * t, d)
        y, routes, margins = self.ffn(ffn_in, hard=hard, return_routes=True)
        out = h + y.reshape(b, t, d)
        if self.post:
            out = self.norm2(out)
        if trace is not None:
            trace.extend([ffn_in, out.reshape(b * t, d)])
        return out, routes, margins


def normalize_transformer_config(config):
    """Validates a transformer config and returns a copy with every default filled in."""
    _check_keys(config, _TRANSFORMER_KEYS, "transformer")
    c = copy.deepcopy(_TRANSFORMER_DEFAULTS)
    c.update(copy.deepcopy(config))
    if c.get("family") != "transformer":
        raise ValueError(f"family must be 'transformer', got {c.get('family')!r}")
    _choice(c, "tokenizer", ["none", "byte", "sentencepiece"])
    if c["tokenizer"] == "byte":
        c.setdefault("vocab_size", 256)
        if c["vocab_size"] != 256:
            raise ValueError(f"tokenizer 'byte' needs vocab_size 256, got {c['vocab_size']!r}")
    # "sentencepiece": the vocabulary is the SentencePiece model's (packed beside the weights by
    # `sprig pack --tokenizer`); vocab_size must be given and is checked below like any other.
    for key in ("vocab_size", "d_model", "n_heads", "max_seq"):
        _int_field(c, key)
    c.setdefault("n_kv_heads", c["n_heads"])
    _int_field(c, "n_kv_heads")
    if c["d_model"] % c["n_heads"] or c["n_heads"] % c["n_kv_heads"]:
        raise ValueError(f"n_heads ({c['n_heads']}) must divide d_model ({c['d_model']}) and "
                         f"n_kv_heads ({c['n_kv_heads']}) must divide n_heads")
    _choice(c, "norm", ["layernorm", "rmsnorm"])
    _choice(c, "positions", ["learned", "rope", "none"])
    if c["positions"] == "rope" and (c["d_model"] // c["n_heads"]) % 2:
        raise ValueError("positions 'rope' needs an even head_dim (d_model / n_heads)")
    head = c["head"]
    if not isinstance(head, dict) or head.get("kind") not in ("lm", "classifier", "none"):
        raise ValueError(f"head must be {{'kind': lm|classifier|none, ...}}, got {head!r}")
    if head["kind"] == "classifier":
        _int_field(head, "classes")
        head.setdefault("pool", "mean")
        _choice(head, "pool", ["mean", "first", "last"])
    if head["kind"] == "lm":
        _check_keys(head, {"kind", "transform", "bias"}, "lm head")
        if not isinstance(head.setdefault("bias", False), bool):
            raise ValueError(f"head.bias must be true or false, got {head['bias']!r}")
        if "transform" in head:
            t = head["transform"]
            if not isinstance(t, dict):
                raise ValueError(f"head.transform must be a dict, got {t!r}")
            _check_keys(t, {"activation", "norm"}, "head.transform")
            t.setdefault("activation", "gelu")
            t.setdefault("norm", True)
            _choice(t, "activation", sorted(ACTIVATIONS))
    if c["tie_embeddings"] and head["kind"] != "lm":
        raise ValueError("tie_embeddings needs head kind 'lm'")
    _choice(c, "norm_position", ["pre", "post"])
    for key in ("final_norm", "embed_norm"):
        if not isinstance(c[key], bool):
            raise ValueError(f"config field {key!r} must be true or false, got {c[key]!r}")
    bias = c["attn_bias"]
    if not isinstance(bias, bool):
        if (not isinstance(bias, list) or len(set(bias)) != len(bias)
                or not set(bias) <= set(_PROJECTIONS)):
            raise ValueError(f"attn_bias must be true, false or a list of distinct "
                             f"'q', 'k', 'v', 'o', got {bias!r}")
    if not c.get("layers"):
        raise ValueError("config field 'layers' must be a non-empty list")
    for i, entry in enumerate(c["layers"]):
        if isinstance(entry, dict) and ("in" in entry or "out" in entry):
            raise ValueError(f"layers[{i}]: in/out are d_model in a transformer; omit them")
    return c


class LmHead(nn.Module):
    """The lm head: logits = W · norm(act(T x + t)) + b, the transform and the bias optional.

    Tensors `head.weight` [V, D] (absent when tied: W is the embedding), `head.bias` [V],
    `head.transform.weight` [D, D] and `.bias` [D], `head.transform_norm.*` (the model's norm).
    """

    def __init__(self, config):
        super().__init__()
        c, head = config, config["head"]
        d, v = c["d_model"], c["vocab_size"]
        self.weight = None if c["tie_embeddings"] else nn.Parameter(torch.zeros(v, d))
        self.bias = nn.Parameter(torch.zeros(v)) if head["bias"] else None
        t = head.get("transform")
        self.transform = nn.Linear(d, d) if t else None
        self.transform_norm = (_norm_class(c)(d, c["norm_eps"])
                               if t and t["norm"] else None)
        self.activation = activation(t["activation"]) if t else None

    def forward(self, x, embed_weight):
        if self.transform is not None:
            x = self.activation(self.transform(x))
            if self.transform_norm is not None:
                x = self.transform_norm(x)
        w = embed_weight if self.weight is None else self.weight
        y = x @ w.t()
        return y if self.bias is None else y + self.bias


class TransformerModel(nn.Module):
    """`family: transformer`: tokens [B, T] (or [T], read as B = 1) through embedding,
    positions, the optional embedding norm, one pre- or post-norm block per `layers` entry, the
    optional final norm and the head.

    Output: lm logits [B, T, V], classifier logits [B, C] or hidden states [B, T, D].
    """

    def __init__(self, config):
        super().__init__()
        self.config = copy.deepcopy(config)
        c = self.full_config = normalize_transformer_config(config)
        d, v = c["d_model"], c["vocab_size"]
        self.embed = Params(weight=(v, d))
        self.pos = Params(weight=(c["max_seq"], d)) if c["positions"] == "learned" else None
        norm = _norm_class(c)
        self.embed_norm = norm(d, c["norm_eps"]) if c["embed_norm"] else None
        blocks = []
        for i, entry in enumerate(c["layers"]):
            try:
                blocks.append(Block(c, entry))
            except ValueError as e:
                raise ValueError(f"layers[{i}]: {e}") from None
        self.blocks = nn.ModuleList(blocks)
        self.norm = norm(d, c["norm_eps"]) if c["final_norm"] else None
        head = c["head"]
        if head["kind"] == "lm":
            plain = not head["bias"] and "transform" not in head
            # A plain tied head holds no tensor of its own.
            self.head = None if c["tie_embeddings"] and plain else LmHead(c)
        elif head["kind"] == "classifier":
            self.head = nn.Linear(d, head["classes"])
        else:
            self.head = None

    def forward(self, tokens, hard=None, return_routes=False, trace=None):
        c = self.full_config
        if tokens.dim() == 1:
            tokens = tokens[None, :]
        if tokens.dim() != 2 or tokens.dtype not in (torch.int32, torch.int64):
            raise ValueError(f"tokens must be integers [B, T] or [T], got {tokens.dtype} "
                             f"{list(tokens.shape)}")
        b, t = tokens.shape
        if t > c["max_seq"]:
            raise ValueError(f"sequence of {t} tokens is longer than max_seq {c['max_seq']}")
        if tokens.numel() and (tokens.min() < 0 or tokens.max() >= c["vocab_size"]):
            raise ValueError(f"tokens must be in [0, {c['vocab_size']})")
        x = F.embedding(tokens.long(), self.embed.weight)
        if self.pos is not None:
            x = x + self.pos.weight[:t]
        if self.embed_norm is not None:
            x = self.embed_norm(x)
        routes, margins = {}, {}
        for i, block in enumerate(self.blocks):
            seen = [] if trace is not None else None
            x = _collect(block(x, hard=hard, trace=seen), i, routes, margins)
            if trace is not None:
                trace[i] = tuple(seen)
        y = self._head(x if self.norm is None else self.norm(x))
        return (y, routes, margins) if return_routes else y

    def _head(self, x):
        head = self.full_config["head"]
        if head["kind"] == "lm":
            if self.head is None:
                return x @ self.embed.weight.t()
            return self.head(x, self.embed.weight)
        if head["kind"] == "classifier":
            pooled = {"mean": lambda: x.mean(dim=1), "first": lambda: x[:, 0],
                      "last": lambda: x[:, -1]}[head["pool"]]()
            return self.head(pooled)
        return x


def byte_tokens(text):
    """Tokenizer `byte`: one token per UTF-8 byte of `text`, as an int64 tensor [T]."""
    return torch.tensor(list(text.encode("utf-8")), dtype=torch.int64)


def build_model(config):
    """StackModel or TransformerModel according to config['family']."""
    family = config.get("family") if isinstance(config, dict) else None
    if family == "stack":
        return StackModel(config)
    if family == "transformer":
        return TransformerModel(config)
    raise ValueError(f"config field 'family' must be 'stack' or 'transformer', got {family!r}")
