"""Transformer models built directly from torch.nn modules, the way common training code writes
them, for `sprig pack --map` and `sprig verify` (tests/verify_blocks_test.cc).

    torch_nn_blocks.py CASE DIR

CASE is one of:

  encoder_gelu   PyTorch's own nn.TransformerEncoder of nn.TransformerEncoderLayer
                 (norm_first=False, batch_first=True, activation "gelu", dropout 0): post-norm
                 blocks; nn.Embedding tokens and learned positions with a LayerNorm on their sum
                 (BERT-style), no final norm, and a masked-language-model head (nn.Linear d→d,
                 nn.GELU, nn.LayerNorm, then a vocabulary nn.Linear with bias). Bidirectional.
  encoder_relu   the same with activation "relu", two layers and the vocabulary projection tied
                 to the token embedding (decoder.weight is tok.weight, as BERT ties them).
  mha_causal     nn.MultiheadAttention (batch_first=True) inside a pre-norm block written as
                 GPT-style training code writes it (ln_1, attn with a causal attn_mask, ln_2, an
                 nn.Sequential MLP), a final LayerNorm and an lm head nn.Linear without bias; the
                 second block's MLP is a leaf tree (nn.Linear nodes, an nn.ModuleList of
                 leaves, stacked by the mapping file), whose routes and margins are written.
  qkv_bias       attention written with separate nn.Linear projections, q/k/v with a bias and
                 the output projection without (as Qwen-style attention has), pre-norm, a gated
                 SiLU MLP without biases, causal, the lm head tied to the embedding.

Each writes, with its own parameter names: DIR/weights.npz (the module's named_parameters as
float32 NumPy arrays; a tied weight appears once, under the embedding's name), DIR/map.json
(their names → sprig's: renames with `{i}` placeholders and, for nn.MultiheadAttention's fused
in_proj_weight [3d, d] and in_proj_bias [3d], a split along axis 0 into the q, k and v
projections), DIR/config.json and DIR/reference.npz (`inputs`: int64 token ids [B, T];
`outputs`: the module's own forward in float64 from the float32 weights, [B, T, vocab]; for a
routed block i, `routes.layer{i}` and `margins.layer{i}`).

Nothing of sprig computes the reference (Debian's python3-torch and python3-numpy). Then, as a
check of sprig's own PyTorch reference modules, the weights are loaded through the same mapping
file into sprig_torch (export.load_weights; PYTHONPATH must include converter/python), whose
outputs must agree with the module's (export.check_outputs) or the script fails.
"""

import argparse
import json
import math
import os
import sys

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

VOCAB, D, HEADS, FF, MAX_SEQ = 61, 32, 4, 48, 24


class BertLike(nn.Module):
    """Token + position embeddings, their LayerNorm, nn.TransformerEncoder, the MLM head."""

    def __init__(self, activation, layers, tied, eps):
        super().__init__()
        self.tok = nn.Embedding(VOCAB, D)
        self.pos_emb = nn.Embedding(MAX_SEQ, D)
        self.emb_ln = nn.LayerNorm(D, eps=eps)
        # Source: PyTorch's nn.TransformerEncoderLayer, norm_first=False (post-norm):
        # x = norm1(x + self_attn(x)); x = norm2(x + linear2(activation(linear1(x)))).
        layer = nn.TransformerEncoderLayer(D, HEADS, dim_feedforward=FF, dropout=0.0,
                                           activation=activation, layer_norm_eps=eps,
                                           batch_first=True, norm_first=False)
        self.encoder = nn.TransformerEncoder(layer, num_layers=layers,
                                             enable_nested_tensor=False)
        self.mlm_dense = nn.Linear(D, D)
        self.mlm_act = nn.GELU()
        self.mlm_ln = nn.LayerNorm(D, eps=eps)
        self.decoder = nn.Linear(D, VOCAB, bias=True)
        if tied:
            self.decoder.weight = self.tok.weight

    def forward(self, ids):
        positions = torch.arange(ids.shape[1])
        x = self.emb_ln(self.tok(ids) + self.pos_emb(positions)[None])
        x = self.encoder(x)
        return self.decoder(self.mlm_ln(self.mlm_act(self.mlm_dense(x))))


class PreNormBlock(nn.Module):
    """GPT-style: x = x + attn(ln_1(x)); x = x + mlp(ln_2(x)), attention by nn.MultiheadAttention."""

    def __init__(self):
        super().__init__()
        self.ln_1 = nn.LayerNorm(D)
        self.attn = nn.MultiheadAttention(D, HEADS, dropout=0.0, bias=True, batch_first=True)
        self.ln_2 = nn.LayerNorm(D)
        self.mlp = nn.Sequential(nn.Linear(D, FF), nn.GELU(), nn.Linear(FF, D))

    def forward(self, x, mask):
        h = self.ln_1(x)
        a, _ = self.attn(h, h, h, attn_mask=mask, need_weights=False)
        x = x + a
        return x + self.mlp(self.ln_2(x))


class LeafTreeMlp(nn.Module):
    """A binary tree of nn.Linear routing nodes over an nn.ModuleList of small MLPs, as
    fast-feedforward code writes it: each row descends from the root, going right when its node's
    logit is > 0, and is computed by the one leaf it reaches. `routes` and `margins` (the
    smallest |logit| on the row's path) are kept from the last call."""

    def __init__(self, depth, width):
        super().__init__()
        self.depth = depth
        self.nodes = nn.Linear(D, 2**depth - 1)
        self.leaves = nn.ModuleList(
            nn.Sequential(nn.Linear(D, width), nn.GELU(), nn.Linear(width, D))
            for _ in range(2**depth))

    def forward(self, x):
        rows = x.reshape(-1, D)
        logits = self.nodes(rows)
        node = torch.zeros(rows.shape[0], dtype=torch.long)
        margin = torch.full((rows.shape[0],), math.inf, dtype=rows.dtype)
        for _ in range(self.depth):
            logit = logits.gather(1, node[:, None])[:, 0]
            margin = torch.minimum(margin, logit.abs())
            node = 2 * node + 1 + (logit > 0).long()
        leaf = node - (2**self.depth - 1)
        out = torch.stack([self.leaves[int(j)](r) for j, r in zip(leaf, rows)])
        self.routes, self.margins = leaf, margin
        return out.reshape(x.shape)


class GptLike(nn.Module):

    def __init__(self, layers):
        super().__init__()
        self.wte = nn.Embedding(VOCAB, D)
        self.wpe = nn.Embedding(MAX_SEQ, D)
        self.h = nn.ModuleList(PreNormBlock() for _ in range(layers))
        # The last block's feed-forward is routed.
        self.h[-1].mlp = LeafTreeMlp(depth=2, width=16)
        self.ln_f = nn.LayerNorm(D)
        self.lm_head = nn.Linear(D, VOCAB, bias=False)

    def forward(self, ids):
        t = ids.shape[1]
        x = self.wte(ids) + self.wpe(torch.arange(t))[None]
        # True above the diagonal: a token does not attend to later tokens.
        mask = torch.ones(t, t, dtype=torch.bool).triu(1)
        for block in self.h:
            x = block(x, mask)
        return self.lm_head(self.ln_f(x))

    def routed(self):
        """{block index: its routed feed-forward module}."""
        return {i: b.mlp for i, b in enumerate(self.h) if isinstance(b.mlp, LeafTreeMlp)}


class RmsNorm(nn.Module):
    """x / sqrt(mean(x²) + eps) · weight, as Llama-style code writes it."""

    def __init__(self, dim, eps=1e-6):
        super().__init__()
        self.eps = eps
        self.weight = nn.Parameter(torch.ones(dim))

    def forward(self, x):
        return x * torch.rsqrt(x.pow(2).mean(-1, keepdim=True) + self.eps) * self.weight


class BiasedQkvAttention(nn.Module):
    """q/k/v nn.Linear with bias, o_proj without; softmax(q kᵀ / √hd + causal mask) v."""

    def __init__(self):
        super().__init__()
        self.q_proj = nn.Linear(D, D, bias=True)
        self.k_proj = nn.Linear(D, D, bias=True)
        self.v_proj = nn.Linear(D, D, bias=True)
        self.o_proj = nn.Linear(D, D, bias=False)

    def forward(self, x):
        b, t, _ = x.shape
        hd = D // HEADS

        def heads(y):
            return y.view(b, t, HEADS, hd).transpose(1, 2)

        q, k, v = heads(self.q_proj(x)), heads(self.k_proj(x)), heads(self.v_proj(x))
        scores = q @ k.transpose(-1, -2) / math.sqrt(hd)
        scores = scores.masked_fill(torch.ones(t, t, dtype=torch.bool).triu(1), float("-inf"))
        out = torch.softmax(scores, dim=-1) @ v
        return self.o_proj(out.transpose(1, 2).reshape(b, t, D))


class QwenLikeLayer(nn.Module):

    def __init__(self):
        super().__init__()
        self.input_layernorm = RmsNorm(D)
        self.self_attn = BiasedQkvAttention()
        self.post_attention_layernorm = RmsNorm(D)
        self.gate_proj = nn.Linear(D, FF, bias=False)
        self.up_proj = nn.Linear(D, FF, bias=False)
        self.down_proj = nn.Linear(FF, D, bias=False)

    def forward(self, x):
        x = x + self.self_attn(self.input_layernorm(x))
        h = self.post_attention_layernorm(x)
        return x + self.down_proj(F.silu(self.gate_proj(h)) * self.up_proj(h))


class QwenLike(nn.Module):

    def __init__(self, layers):
        super().__init__()
        self.embed_tokens = nn.Embedding(VOCAB, D)
        self.pos_embed = nn.Embedding(MAX_SEQ, D)
        self.layers = nn.ModuleList(QwenLikeLayer() for _ in range(layers))
        self.norm = RmsNorm(D)

    def forward(self, ids):
        x = self.embed_tokens(ids) + self.pos_embed(torch.arange(ids.shape[1]))[None]
        for layer in self.layers:
            x = layer(x)
        # The lm head tied to the token embedding.
        return self.norm(x) @ self.embed_tokens.weight.t()


def _qkv_split(what):
    return {"split": [f"blocks.{{i}}.attn.{p}.{what}" for p in "qkv"], "axis": 0}


def _encoder_case(activation, layers, tied, eps):
    model = BertLike(activation, layers, tied, eps)
    config = {
        "family": "transformer", "name": f"torch.nn encoder ({activation})",
        "vocab_size": VOCAB, "d_model": D, "n_heads": HEADS, "max_seq": MAX_SEQ,
        "norm": "layernorm", "norm_eps": eps, "positions": "learned", "causal": False,
        "norm_position": "post", "final_norm": False, "embed_norm": True, "attn_bias": True,
        "tie_embeddings": tied,
        "head": {"kind": "lm", "transform": {"activation": "gelu", "norm": True}, "bias": True},
        "layers": [{"kind": "dense", "width": FF, "activation": activation}] * layers,
    }
    p = "encoder.layers.{i}."
    mapping = {
        "tok.weight": "embed.weight", "pos_emb.weight": "pos.weight",
        "emb_ln.weight": "embed_norm.weight", "emb_ln.bias": "embed_norm.bias",
        p + "self_attn.in_proj_weight": _qkv_split("weight"),
        p + "self_attn.in_proj_bias": _qkv_split("bias"),
        p + "self_attn.out_proj.weight": "blocks.{i}.attn.o.weight",
        p + "self_attn.out_proj.bias": "blocks.{i}.attn.o.bias",
        p + "linear1.weight": "blocks.{i}.ffn.fc1.weight",
        p + "linear1.bias": "blocks.{i}.ffn.fc1.bias",
        p + "linear2.weight": "blocks.{i}.ffn.fc2.weight",
        p + "linear2.bias": "blocks.{i}.ffn.fc2.bias",
        p + "norm1.weight": "blocks.{i}.norm1.weight", p + "norm1.bias": "blocks.{i}.norm1.bias",
        p + "norm2.weight": "blocks.{i}.norm2.weight", p + "norm2.bias": "blocks.{i}.norm2.bias",
        "mlm_dense.weight": "head.transform.weight", "mlm_dense.bias": "head.transform.bias",
        "mlm_ln.weight": "head.transform_norm.weight", "mlm_ln.bias": "head.transform_norm.bias",
        "decoder.bias": "head.bias",
    }
    if not tied:
        mapping["decoder.weight"] = "head.weight"
    return model, config, mapping


def _mha_case():
    model = GptLike(layers=2)
    config = {
        "family": "transformer", "name": "torch.nn MultiheadAttention, pre-norm, causal",
        "vocab_size": VOCAB, "d_model": D, "n_heads": HEADS, "max_seq": MAX_SEQ,
        "norm": "layernorm", "positions": "learned", "causal": True, "attn_bias": True,
        "head": {"kind": "lm"},
        "layers": [{"kind": "dense", "width": FF, "activation": "gelu"},
                   {"kind": "tree", "mode": "leaf", "depth": 2, "leaf_width": 16,
                    "activation": "gelu"}],
    }
    p = "h.{i}."
    mapping = {
        "wte.weight": "embed.weight", "wpe.weight": "pos.weight",
        p + "ln_1.weight": "blocks.{i}.norm1.weight", p + "ln_1.bias": "blocks.{i}.norm1.bias",
        p + "attn.in_proj_weight": _qkv_split("weight"),
        p + "attn.in_proj_bias": _qkv_split("bias"),
        p + "attn.out_proj.weight": "blocks.{i}.attn.o.weight",
        p + "attn.out_proj.bias": "blocks.{i}.attn.o.bias",
        p + "ln_2.weight": "blocks.{i}.norm2.weight", p + "ln_2.bias": "blocks.{i}.norm2.bias",
        p + "mlp.0.weight": "blocks.{i}.ffn.fc1.weight", p + "mlp.0.bias": "blocks.{i}.ffn.fc1.bias",
        p + "mlp.2.weight": "blocks.{i}.ffn.fc2.weight", p + "mlp.2.bias": "blocks.{i}.ffn.fc2.bias",
        # The routed block's tree: its leaves' MLPs stacked into one tensor per parameter.
        p + "mlp.nodes.weight": "blocks.{i}.ffn.nodes.weight",
        p + "mlp.nodes.bias": "blocks.{i}.ffn.nodes.bias",
        p + "mlp.leaves.{j}.0.weight": {"stack": "blocks.{i}.ffn.leaves.fc1.weight", "over": "j"},
        p + "mlp.leaves.{j}.0.bias": {"stack": "blocks.{i}.ffn.leaves.fc1.bias", "over": "j"},
        p + "mlp.leaves.{j}.2.weight": {"stack": "blocks.{i}.ffn.leaves.fc2.weight", "over": "j"},
        p + "mlp.leaves.{j}.2.bias": {"stack": "blocks.{i}.ffn.leaves.fc2.bias", "over": "j"},
        "ln_f.weight": "norm.weight", "ln_f.bias": "norm.bias", "lm_head.weight": "head.weight",
    }
    return model, config, mapping


def _qkv_bias_case():
    model = QwenLike(layers=2)
    config = {
        "family": "transformer", "name": "torch.nn q/k/v with bias, o without",
        "vocab_size": VOCAB, "d_model": D, "n_heads": HEADS, "max_seq": MAX_SEQ,
        "norm": "rmsnorm", "norm_eps": 1e-6, "positions": "learned", "causal": True,
        "attn_bias": ["q", "k", "v"], "tie_embeddings": True, "head": {"kind": "lm"},
        "layers": [{"kind": "dense", "width": FF, "activation": "silu", "gated": True,
                    "bias": False}] * 2,
    }
    p = "layers.{i}."
    mapping = {
        "embed_tokens.weight": "embed.weight", "pos_embed.weight": "pos.weight",
        p + "input_layernorm.weight": "blocks.{i}.norm1.weight",
        p + "post_attention_layernorm.weight": "blocks.{i}.norm2.weight",
        p + "gate_proj.weight": "blocks.{i}.ffn.gate.weight",
        p + "up_proj.weight": "blocks.{i}.ffn.fc1.weight",
        p + "down_proj.weight": "blocks.{i}.ffn.fc2.weight",
        "norm.weight": "norm.weight",
    }
    for proj in "qkvo":
        mapping[p + f"self_attn.{proj}_proj.weight"] = f"blocks.{{i}}.attn.{proj}.weight"
    for proj in "qkv":
        mapping[p + f"self_attn.{proj}_proj.bias"] = f"blocks.{{i}}.attn.{proj}.bias"
    return model, config, mapping


CASES = {
    "encoder_gelu": lambda: _encoder_case("gelu", 1, False, 1e-12),
    "encoder_relu": lambda: _encoder_case("relu", 2, True, 1e-5),
    "mha_causal": _mha_case,
    "qkv_bias": _qkv_bias_case,
}


def _randomize(model, gen):
    """Weights away from their defaults: norms and biases that are not 1 and 0 (so a missing or
    misplaced one shows), embeddings of unit scale."""
    with torch.no_grad():
        for name, p in model.named_parameters():
            if p.dim() == 1 and ("norm" in name or "ln" in name) and name.endswith("weight"):
                p.copy_(1.0 + 0.1 * torch.randn(p.shape, generator=gen))
            elif p.dim() == 1:
                p.copy_(0.1 * torch.randn(p.shape, generator=gen))
            elif "emb" in name or "wte" in name or "wpe" in name or name == "tok.weight":
                p.copy_(torch.randn(p.shape, generator=gen))
            else:
                p.copy_(torch.randn(p.shape, generator=gen) / math.sqrt(p.shape[-1]))


def main(argv):
    parser = argparse.ArgumentParser()
    parser.add_argument("case", choices=sorted(CASES))
    parser.add_argument("out")
    args = parser.parse_args(argv)
    torch.manual_seed(0)
    model, config, mapping = CASES[args.case]()
    _randomize(model, torch.Generator().manual_seed(sorted(CASES).index(args.case) + 1))
    model.eval()
    # named_parameters lists a tied weight once, under the module that owns it first.
    weights = {name: p.detach().to(torch.float32).numpy().copy()
               for name, p in model.named_parameters()}
    rng = np.random.default_rng(5)
    ids = rng.integers(0, VOCAB, size=(2, 20), dtype=np.int64)
    with torch.no_grad():
        # float64 from the float32 weights: the exact model of the stored numbers.
        outputs = model.to(torch.float64)(torch.from_numpy(ids)).numpy().astype(np.float32)
    reference = {"inputs": ids, "outputs": outputs}
    # A routed block's choices and margins, its tokens in batch-major order as verify reads them.
    for i, mlp in (model.routed() if hasattr(model, "routed") else {}).items():
        reference[f"routes.layer{i}"] = mlp.routes.numpy().astype(np.int32)
        reference[f"margins.layer{i}"] = mlp.margins.numpy().astype(np.float32)
    # sprig's reference modules, given the same weights through the same mapping file, must
    # compute what the torch.nn module computes.
    from sprig_torch.export import check_outputs, load_weights, reference_arrays
    ours = load_weights(config, weights, mapping)
    check_outputs(reference_arrays(ours, ids)["outputs"], outputs)
    os.makedirs(args.out, exist_ok=True)
    with open(os.path.join(args.out, "config.json"), "w", encoding="utf-8") as f:
        json.dump(config, f, indent=1)
    with open(os.path.join(args.out, "map.json"), "w", encoding="utf-8") as f:
        json.dump(mapping, f, indent=1)
    np.savez(os.path.join(args.out, "weights.npz"), **weights)
    np.savez(os.path.join(args.out, "reference.npz"), **reference)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
