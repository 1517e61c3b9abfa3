"""Export of reference models to sprig's input contract, and reference outputs to verify.

`export` writes, into one directory:

* ``config.json``  the model's config (a stack's layers with their ``in``/``out`` spelled out);
* ``weights.npz``  the state dict as float32 arrays under the tensor names of docs/input-contract.md;
* ``reference.npz`` ``inputs`` (as given), ``outputs`` (hard mode, float32); for every
  layer i (stack layer or transformer block) ``layer_outputs.layer{i}`` (float32 [rows, out]:
  the layer's output, or the residual stream after the block); and for each routed layer i
  ``routes.layer{i}`` (int32: [rows] leaves or [rows, k] experts), ``margins.layer{i}``
  (float32 [rows]: how far each row was from another route; see sprig_torch.layers),
  ``layer_inputs.layer{i}`` (float32 [rows, in]: what the routed layer read) and
  ``margin_scales.layer{i}`` / ``margin_norms.layer{i}`` (float32 [rows]: how far weight
  rounding and input error can move that margin; see the layers' ``margin_bounds``). Rows of a
  transformer are its tokens in batch-major order. `sprig verify` reads all of these.

The reference outputs are computed in float64 from the float32 weights, so they are the exact
model of the stored numbers, not one float32 evaluation order.

Command line (with ``PYTHONPATH=converter/python``)::

    python3 -m sprig_torch.export --config C.json --seed S --rows N --out DIR

builds `random_model(config, S)`, draws inputs (stack: float32 [N, input_dim] from N(0, 1);
transformer: int64 tokens [1, N] uniform over the vocabulary) and exports all three files.
"""

import argparse
import copy
import json
import math
import os
import sys

import numpy as np
import torch

from sprig_torch.layers import DenseFF, ExpertsFF, TreeFF
from sprig_torch.mapping import read_mapping
from sprig_torch.models import (Attention, LayerNorm, LmHead, RMSNorm, StackModel,
                                TransformerModel, build_model)

# Spread of "small" random biases: enough to matter, small beside the weight terms.
_BIAS_STD = 0.05


def _mapping_arg(mapping, rename):
    """`rename` is the older name of the `mapping` argument, kept so existing callers work."""
    if mapping is not None and rename is not None:
        raise ValueError("give the mapping once: rename is another name for mapping")
    return read_mapping(mapping if mapping is not None else rename)


def weight_arrays(model, mapping=None, *, rename=None):
    """The state dict as float32 NumPy arrays, keyed by our tensor names.

    `mapping` is a mapping file's content (a dict) or its path, in the direction of `sprig pack
    --map` (their names -> ours); our tensors are then written under their names, each entry
    undone: stacked tensors unstacked, split ones concatenated, transposed ones transposed back
    (docs/mapping.md). `rename=` is a synonym of `mapping=`.
    """
    arrays = {name: t.detach().to(torch.float32).cpu().numpy()
              for name, t in model.state_dict().items()}
    return _mapping_arg(mapping, rename).invert(arrays)


def _routed_layers(model):
    """The feed-forward module of every layer: stack layers, or each block's ffn."""
    if isinstance(model, StackModel):
        return list(model.layers)
    return [block.ffn for block in model.blocks]


def _f32(t):
    return t.to(torch.float32).cpu().numpy()


def reference_arrays(model, inputs):
    """The arrays of reference.npz (see the module docstring) for `inputs`."""
    inputs = np.asarray(inputs)
    reference = copy.deepcopy(model).to(torch.float64).eval()
    x = torch.from_numpy(inputs)
    x = x.to(torch.float64) if x.is_floating_point() else x.to(torch.int64)
    trace = {}
    with torch.no_grad():
        y, routes, margins = reference(x, hard=True, return_routes=True, trace=trace)
        ffns = _routed_layers(reference)
        arrays = {"inputs": inputs, "outputs": _f32(y)}
        for i in sorted(trace):
            arrays[f"layer_outputs.layer{i}"] = _f32(trace[i][1])
        for i in sorted(routes):
            layer_input = trace[i][0]
            scales, norms = ffns[i].margin_bounds(layer_input)
            arrays[f"routes.layer{i}"] = routes[i].to(torch.int32).numpy()
            arrays[f"margins.layer{i}"] = _f32(margins[i])
            arrays[f"layer_inputs.layer{i}"] = _f32(layer_input)
            arrays[f"margin_scales.layer{i}"] = _f32(scales)
            arrays[f"margin_norms.layer{i}"] = _f32(norms)
    return arrays


def _as_array(value):
    """A tensor or array as a NumPy array (bfloat16, which NumPy lacks, widened exactly to
    float32: the reference model is float32 anyway)."""
    if torch.is_tensor(value):
        value = value.detach().cpu()
        if value.dtype == torch.bfloat16:
            value = value.to(torch.float32)
        return value.numpy()
    return np.asarray(value)


def load_weights(config, state_dict, mapping=None, *, rename=None):
    """Builds the reference model for `config` and loads a trained model's weights into it.

    `state_dict` maps names to tensors or arrays, as the trained module's ``state_dict()``;
    `mapping` maps those names to ours: the mapping file ``sprig pack --map`` takes, as a dict
    or a path (rename, transpose, stack, split; docs/mapping.md), applied as pack applies it.
    Every tensor of the config must be given exactly once with its shape: a missing, extra or
    misshaped tensor is a ValueError that names it and where it came from, as is every refusal
    of the mapping. `rename=` is a synonym of `mapping=`.
    """
    model = build_model(config)
    ours = model.state_dict()
    mapped = _mapping_arg(mapping, rename).apply(
        {name: _as_array(value) for name, value in state_dict.items()})
    loaded = {}
    for target, (value, origin) in mapped.items():
        shown = repr(target) + (f" ({origin})" if origin else "")
        if target not in ours:
            raise ValueError(f"tensor {shown} is not a tensor of this config; expected one of "
                             f"{sorted(ours)}")
        t = torch.as_tensor(np.ascontiguousarray(value))
        if tuple(t.shape) != tuple(ours[target].shape):
            raise ValueError(f"tensor {shown} has shape {list(t.shape)}, expected "
                             f"{list(ours[target].shape)}")
        loaded[target] = t.to(ours[target].dtype)
    missing = sorted(set(ours) - set(loaded))
    if missing:
        raise ValueError(f"missing tensors {missing}")
    model.load_state_dict(loaded)
    return model.eval()


def check_outputs(reference, expected, rtol=1e-4, atol_rms=1e-4):
    """Raises ValueError unless `expected` (the trained module's own hard-mode outputs) is within
    rtol / atol_rms x RMS of the reference model's outputs: the reference model is then a
    faithful description of the trained module, and verifying sprig against it proves the
    conversion end to end."""
    expected = np.asarray(expected, dtype=np.float64).reshape(reference.shape)
    reference = reference.astype(np.float64)
    atol = atol_rms * float(np.sqrt(np.mean(reference**2))) if reference.size else 0.0
    err = np.abs(expected - reference)
    bad = err > atol + rtol * np.abs(reference)
    if bad.any():
        row = int(np.unravel_index(np.argmax(err), err.shape)[0])
        raise ValueError(f"the trained module's outputs differ from the reference model's in "
                         f"{int(bad.sum())} values (max abs error {float(err.max()):.3g} at row "
                         f"{row}): the config or the mapping does not describe the module")


def export(model, out_dir, inputs, *, config=None, mapping=None, rename=None,
           expected_outputs=None):
    """Writes config.json, weights.npz and reference.npz for `model` into `out_dir`.

    `config` overrides the written config (default: the model's own); `mapping` (or its synonym
    `rename`) is as in `weight_arrays`. `expected_outputs`, when given, are the trained module's
    own hard-mode outputs on `inputs`; they must agree with the reference model's (check_outputs)
    or nothing is written. Returns the paths written.
    """
    mapping = _mapping_arg(mapping, rename)
    references = reference_arrays(model, inputs)
    if expected_outputs is not None:
        check_outputs(references["outputs"], expected_outputs)
    os.makedirs(out_dir, exist_ok=True)
    paths = {name: os.path.join(out_dir, name)
             for name in ("config.json", "weights.npz", "reference.npz")}
    with open(paths["config.json"], "w", encoding="utf-8") as f:
        json.dump(model.config if config is None else config, f, indent=2)
        f.write("\n")
    np.savez(paths["weights.npz"], **weight_arrays(model, mapping))
    np.savez(paths["reference.npz"], **references)
    return paths


def _normal_(t, std, gen, mean=0.0):
    with torch.no_grad():
        t.copy_(mean + std * torch.randn(t.shape, generator=gen, dtype=t.dtype))


def _init_linear(params, fan_in, gen):
    """Weight N(0, 1/fan_in) keeps unit-scale inputs at unit scale; small biases."""
    _normal_(params.weight, 1.0 / math.sqrt(max(fan_in, 1)), gen)
    if getattr(params, "bias", None) is not None:
        _normal_(params.bias, _BIAS_STD, gen)


def _init_mlps(bank, gen):
    for params in (bank.fc1, bank.gate, bank.fc2):
        if params is not None:
            _init_linear(params, params.weight.shape[-1], gen)


def _init_module(m, gen):
    if isinstance(m, DenseFF):
        for lin in (m.fc1, m.gate, m.fc2):
            if lin is not None:
                _init_linear(lin, lin.in_features, gen)
    elif isinstance(m, TreeFF):
        # Node logits of unit-scale inputs are then ~N(0, 1): rows spread over all leaves.
        _init_linear(m.nodes, m.in_features, gen)
        if m.mode == "leaf":
            _init_mlps(m.leaves, gen)
        else:
            _normal_(m.nodes.out, 1.0 / math.sqrt(m.depth + 1), gen)
            if m.out_bias is not None:
                _normal_(m.out_bias, _BIAS_STD, gen)
    elif isinstance(m, ExpertsFF):
        _init_linear(m.router, m.in_features, gen)
        _init_mlps(m.experts, gen)
        # Initialised after the routed experts, so a config without shared experts draws the
        # same weights as before they existed.
        if m.shared is not None:
            _init_mlps(m.shared, gen)
        if m.shared_gate is not None:
            _init_linear(m.shared_gate, m.in_features, gen)
    elif isinstance(m, Attention):
        for lin in (m.q, m.k, m.v, m.o):
            _init_linear(lin, lin.in_features, gen)
    elif isinstance(m, (LayerNorm, RMSNorm)):
        _normal_(m.weight, 0.1, gen, mean=1.0)
        if isinstance(m, LayerNorm):
            _normal_(m.bias, _BIAS_STD, gen)


def random_model(config, seed):
    """A model for `config` with seeded random float32 weights whose routing is spread out.

    Node and router weights are N(0, 1/in) with small biases, so unit-scale inputs reach
    every leaf or expert rather than one; MLP weights are N(0, 1/fan_in).
    """
    gen = torch.Generator().manual_seed(seed)
    model = build_model(config)
    for m in model.modules():
        _init_module(m, gen)
    if isinstance(model, TransformerModel):
        _normal_(model.embed.weight, 1.0, gen)
        if model.pos is not None:
            _normal_(model.pos.weight, 0.3, gen)
        head = model.head
        if isinstance(head, LmHead):
            if head.weight is not None:
                _init_linear(head, head.weight.shape[1], gen)
            elif head.bias is not None:
                _normal_(head.bias, _BIAS_STD, gen)
            if head.transform is not None:
                _init_linear(head.transform, head.transform.in_features, gen)
        elif head is not None:
            _init_linear(head, head.weight.shape[1], gen)
    return model.eval()


def random_inputs(model, rows, seed):
    """Stack: float32 [rows, input_dim] ~ N(0, 1); transformer: int64 tokens [1, rows]."""
    rng = np.random.default_rng(seed)
    if isinstance(model, StackModel):
        return rng.standard_normal((rows, model.input_dim)).astype(np.float32)
    c = model.full_config
    if rows > c["max_seq"]:
        raise ValueError(f"--rows {rows} is longer than max_seq {c['max_seq']}")
    return rng.integers(0, c["vocab_size"], size=(1, rows), dtype=np.int64)


def main(argv=None):
    parser = argparse.ArgumentParser(
        prog="python3 -m sprig_torch.export",
        description="Build a random reference model for a config and export config.json, "
        "weights.npz and reference.npz.")
    parser.add_argument("--config", required=True, help="config.json to build")
    parser.add_argument("--seed", type=int, default=0, help="seed of weights and inputs")
    parser.add_argument("--rows", type=int, default=16,
                        help="input rows (stack) or tokens (transformer)")
    parser.add_argument("--out", required=True, help="directory to write")
    args = parser.parse_args(argv)
    try:
        with open(args.config, encoding="utf-8") as f:
            config = json.load(f)
        if args.rows < 1:
            raise ValueError(f"--rows must be >= 1, got {args.rows}")
        model = random_model(config, args.seed)
        export(model, args.out, random_inputs(model, args.rows, args.seed + 1))
    except (OSError, ValueError) as e:
        print(f"{args.config}: {e}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
