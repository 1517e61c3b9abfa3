"""Tests of the mapping file in the exporter (sprig_torch.export.load_weights / weight_arrays).

Their names are written the way common PyTorch code names a transformer with experts: the
attention's fused ``in_proj_weight [3d, d]`` of ``torch.nn.MultiheadAttention`` (split), one
module per expert (stacked) and Linear weights stored as [in, out] (transposed). Expected
arrays are built here with NumPy (``np.concatenate``, indexing, ``.T``), not by the code under
test. When ``SPRIG_CLI`` names the sprig program (tests/pack_cli_test.cc sets it), the same
weights and mapping are also packed, and the file must equal the one packed from our names.
Run from the repository root:

    PYTHONPATH=converter/python /usr/bin/python3 -m unittest tests/python/test_mapping.py
"""

import json
import os
import shlex
import subprocess
import sys
import tempfile
import unittest

import numpy as np
import torch

_PACKAGE_DIR = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "converter",
                            "python")
sys.path.insert(0, os.path.normpath(_PACKAGE_DIR))

from sprig_torch.export import load_weights, random_model, weight_arrays  # noqa: E402
from sprig_torch.mapping import Mapping  # noqa: E402

CONFIG = {"family": "transformer", "vocab_size": 32, "d_model": 8, "n_heads": 2, "max_seq": 16,
          "layers": [{"kind": "experts", "experts": 3, "top_k": 2, "width": 6, "gated": True},
                     {"kind": "dense", "width": 12}]}

MAPPING = {
    "tok.weight": "embed.weight",
    "layers.{i}.ln1.weight": "blocks.{i}.norm1.weight",
    "layers.{i}.ln1.bias": "blocks.{i}.norm1.bias",
    "layers.{i}.ln2.weight": "blocks.{i}.norm2.weight",
    "layers.{i}.ln2.bias": "blocks.{i}.norm2.bias",
    "layers.{i}.attn.in_proj_weight": {"split": ["blocks.{i}.attn.q.weight",
                                                 "blocks.{i}.attn.k.weight",
                                                 "blocks.{i}.attn.v.weight"]},
    "layers.{i}.attn.in_proj_bias": {"split": {"blocks.{i}.attn.q.bias": [0, 8],
                                               "blocks.{i}.attn.k.bias": [8, 16],
                                               "blocks.{i}.attn.v.bias": [16, 24]}},
    "layers.{i}.attn.out_proj.weight": "blocks.{i}.attn.o.weight",
    "layers.{i}.attn.out_proj.bias": "blocks.{i}.attn.o.bias",
    "layers.{i}.moe.gate.weight": "blocks.{i}.ffn.router.weight",
    "layers.{i}.moe.gate.bias": "blocks.{i}.ffn.router.bias",
    "layers.{i}.moe.experts.{e}.w1.weight": {"stack": "blocks.{i}.ffn.experts.fc1.weight",
                                             "over": "e"},
    "layers.{i}.moe.experts.{e}.w1.bias": {"stack": "blocks.{i}.ffn.experts.fc1.bias",
                                           "over": "e"},
    "layers.{i}.moe.experts.{e}.w3.weight": {"stack": "blocks.{i}.ffn.experts.gate.weight",
                                             "over": "e"},
    "layers.{i}.moe.experts.{e}.w3.bias": {"stack": "blocks.{i}.ffn.experts.gate.bias",
                                           "over": "e"},
    "layers.{i}.moe.experts.{e}.w2.weight_t": {"stack": "blocks.{i}.ffn.experts.fc2.weight",
                                               "over": "e", "transpose": True},
    "layers.{i}.moe.experts.{e}.w2.bias": {"stack": "blocks.{i}.ffn.experts.fc2.bias",
                                           "over": "e"},
    "layers.{i}.mlp.up_t": {"to": "blocks.{i}.ffn.fc1.weight", "transpose": True},
    "layers.{i}.mlp.up_b": "blocks.{i}.ffn.fc1.bias",
    "layers.{i}.mlp.down.weight": "blocks.{i}.ffn.fc2.weight",
    "layers.{i}.mlp.down.bias": "blocks.{i}.ffn.fc2.bias",
    "final.weight": "norm.weight",
    "final.bias": "norm.bias",
    "lm_head.weight": "head.weight",
}


def _theirs_by_numpy(ours):
    """Their arrays built from ours with NumPy alone, from the mapping's definitions."""
    t = {"tok.weight": ours["embed.weight"], "pos.weight": ours["pos.weight"],
         "final.weight": ours["norm.weight"], "final.bias": ours["norm.bias"],
         "lm_head.weight": ours["head.weight"]}
    for i in range(2):
        b, la = f"blocks.{i}.", f"layers.{i}."
        for n in ("1", "2"):
            t[f"{la}ln{n}.weight"] = ours[f"{b}norm{n}.weight"]
            t[f"{la}ln{n}.bias"] = ours[f"{b}norm{n}.bias"]
        t[la + "attn.in_proj_weight"] = np.concatenate(
            [ours[f"{b}attn.{p}.weight"] for p in "qkv"], axis=0)
        t[la + "attn.in_proj_bias"] = np.concatenate([ours[f"{b}attn.{p}.bias"] for p in "qkv"])
        t[la + "attn.out_proj.weight"] = ours[b + "attn.o.weight"]
        t[la + "attn.out_proj.bias"] = ours[b + "attn.o.bias"]
    b, la = "blocks.0.ffn.", "layers.0.moe."
    t[la + "gate.weight"] = ours[b + "router.weight"]
    t[la + "gate.bias"] = ours[b + "router.bias"]
    for e in range(3):
        x = f"{la}experts.{e}."
        t[x + "w1.weight"] = ours[b + "experts.fc1.weight"][e]
        t[x + "w1.bias"] = ours[b + "experts.fc1.bias"][e]
        t[x + "w3.weight"] = ours[b + "experts.gate.weight"][e]
        t[x + "w3.bias"] = ours[b + "experts.gate.bias"][e]
        t[x + "w2.weight_t"] = ours[b + "experts.fc2.weight"][e].T
        t[x + "w2.bias"] = ours[b + "experts.fc2.bias"][e]
    b, la = "blocks.1.ffn.", "layers.1.mlp."
    t[la + "up_t"] = ours[b + "fc1.weight"].T
    t[la + "up_b"] = ours[b + "fc1.bias"]
    t[la + "down.weight"] = ours[b + "fc2.weight"]
    t[la + "down.bias"] = ours[b + "fc2.bias"]
    return t


class MappingTest(unittest.TestCase):
    def setUp(self):
        self.model = random_model(CONFIG, seed=3)
        self.ours = weight_arrays(self.model)
        self.theirs = _theirs_by_numpy(self.ours)

    def _load_error(self, state_dict, mapping=None):
        with self.assertRaises(ValueError) as caught:
            load_weights(CONFIG, state_dict, MAPPING if mapping is None else mapping)
        return str(caught.exception)

    def test_weight_arrays_writes_their_names(self):
        theirs = weight_arrays(self.model, MAPPING)
        self.assertEqual(set(theirs), set(self.theirs))
        for name, expected in self.theirs.items():
            np.testing.assert_array_equal(theirs[name], expected, err_msg=name)

    def test_load_weights_undoes_weight_arrays(self):
        state_dict = {k: torch.from_numpy(np.ascontiguousarray(v)) for k, v in self.theirs.items()}
        for mapping in (MAPPING, json.loads(json.dumps(MAPPING))):
            loaded = weight_arrays(load_weights(CONFIG, state_dict, mapping))
            self.assertEqual(set(loaded), set(self.ours))
            for name, expected in self.ours.items():
                np.testing.assert_array_equal(loaded[name], expected, err_msg=name)
        # Their float64 and bfloat16 tensors load as the float32 values they hold.
        wide = dict(state_dict, **{"layers.1.attn.in_proj_weight":
                                   state_dict["layers.1.attn.in_proj_weight"].double()})
        loaded = weight_arrays(load_weights(CONFIG, wide, MAPPING))
        np.testing.assert_array_equal(loaded["blocks.1.attn.k.weight"],
                                      self.ours["blocks.1.attn.k.weight"])
        narrow = dict(state_dict, **{"final.weight": state_dict["final.weight"].bfloat16()})
        loaded = weight_arrays(load_weights(CONFIG, narrow, MAPPING))
        np.testing.assert_array_equal(
            loaded["norm.weight"], state_dict["final.weight"].bfloat16().float().numpy())

    def test_mapping_file_path(self):
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "map.json")
            with open(path, "w", encoding="utf-8") as f:
                json.dump(MAPPING, f)
            model = load_weights(CONFIG, self.theirs, path)
            np.testing.assert_array_equal(weight_arrays(model)["blocks.0.ffn.experts.fc2.weight"],
                                          self.ours["blocks.0.ffn.experts.fc2.weight"])
            self.assertEqual(set(weight_arrays(self.model, path)), set(self.theirs))
            with open(path, "w", encoding="utf-8") as f:
                f.write('{"a": {"to": "b", "trasnpose": true}}')
            msg = self._load_error(self.theirs, path)
            self.assertEqual(msg, f'{path}: entry "a": unknown field "trasnpose" (expected to, '
                             'transpose)')
            with open(path, "w", encoding="utf-8") as f:
                f.write('{"a": "b", "a": "c"}')
            self.assertIn('field "a" appears twice', self._load_error(self.theirs, path))
            with open(path, "w", encoding="utf-8") as f:
                f.write('{"a": "b",}')
            self.assertIn(f"{path}: invalid JSON", self._load_error(self.theirs, path))

    def test_refusals_name_the_entry_and_tensors(self):
        missing = {k: v for k, v in self.theirs.items() if ".experts.1." not in k}
        self.assertEqual(
            self._load_error(missing),
            'the mapping: entry "layers.{i}.moe.experts.{e}.w1.weight": index 1 of {e} is missing '
            "for blocks.0.ffn.experts.fc1.weight (stacked from layers.0.moe.experts.{e}.w1.weight);"
            " the indices must run from 0 without gaps, found layers.0.moe.experts.0.w1.weight, "
            "layers.0.moe.experts.2.w1.weight")
        odd = dict(self.theirs, **{"layers.0.moe.experts.2.w3.bias": np.zeros(7, np.float32)})
        self.assertIn("cannot stack layers.0.moe.experts.0.w3.bias ([6] float32) with "
                      "layers.0.moe.experts.2.w3.bias ([7] float32)", self._load_error(odd))
        short = dict(self.theirs, **{"layers.1.attn.in_proj_weight": np.zeros((25, 8))})
        self.assertIn("into 3 equal parts along axis 0: 25 is not divisible by 3",
                      self._load_error(short))
        past = dict(self.theirs, **{"layers.1.attn.in_proj_bias": np.zeros(20, np.float32)})
        self.assertIn('part "blocks.{i}.attn.v.bias" [16, 24) runs past the end of '
                      "layers.1.attn.in_proj_bias", self._load_error(past))
        over = dict(self.theirs, **{"layers.1.attn.in_proj_bias": np.zeros(30, np.float32)})
        self.assertIn("leaving [24, 30) over", self._load_error(over))
        vector = dict(self.theirs, **{"layers.1.mlp.up_t": np.zeros(12, np.float32)})
        self.assertIn('entry "layers.{i}.mlp.up_t": cannot transpose layers.1.mlp.up_t, which '
                      "has shape [12]", self._load_error(vector))
        self.assertIn("layers.0.ln1.weight matches both entry",
                      self._load_error(self.theirs, dict(MAPPING, **{"layers.0.ln1.weight": "x"})))
        self.assertIn("uses {j}, which the key does not have",
                      self._load_error(self.theirs, dict(MAPPING, **{"a.{i}": "b.{j}"})))
        self.assertIn('entries "final.weight" and "x" both produce "norm.weight"',
                      self._load_error(self.theirs, dict(MAPPING, x="norm.weight")))
        # After the mapping, the config's checks name where a tensor came from.
        wide = dict(self.theirs)
        for e in range(3):
            wide[f"layers.0.moe.experts.{e}.w1.weight"] = np.zeros((7, 8), np.float32)
        self.assertEqual(self._load_error(wide),
                         "tensor 'blocks.0.ffn.experts.fc1.weight' (stacked from "
                         "layers.0.moe.experts.{e}.w1.weight) has shape [3, 7, 8], expected "
                         "[3, 6, 8]")

    def test_placeholders_match_whole_numbers(self):
        mapping = Mapping({"l{a}.e{b}": "x.{b}.{a}", "h.{i}.w": "b.{i}"})
        self.assertEqual(list(mapping.apply({"l10.e3": 1, "h.07.w": 2, "h.12.w": 3, "h.x.w": 4})),
                         ["x.3.10", "h.07.w", "b.12", "h.x.w"])
        # A key that could divide a run of digits in very many ways fails in polynomial time.
        key = "w" + "".join(f"{{p{i}}}1" for i in range(16))
        value = "x" + "".join(f".{{p{i}}}" for i in range(16))
        self.assertEqual(list(Mapping({key: value}).apply({"w" + "1" * 400 + "2": 1})),
                         ["w" + "1" * 400 + "2"])
        with self.assertRaises(ValueError) as caught:
            Mapping({key + "{p16}": value + ".{p16}"})
        self.assertIn("has more than 16 placeholders", str(caught.exception))

    @unittest.skipUnless(os.environ.get("SPRIG_CLI"), "SPRIG_CLI does not name the sprig program")
    def test_pack_gets_what_load_weights_gets(self):
        # The program, after the emulator that runs it in a cross build (tests/support).
        sprig = shlex.split(os.environ["SPRIG_CLI"])
        with tempfile.TemporaryDirectory() as tmp:
            def path(name):
                return os.path.join(tmp, name)

            def pack(weights, out, *extra):
                return subprocess.run([*sprig, "pack", path("config.json"), weights, "-o",
                                       path(out), *extra], capture_output=True, text=True,
                                      check=False)

            with open(path("config.json"), "w", encoding="utf-8") as f:
                json.dump(CONFIG, f)
            with open(path("map.json"), "w", encoding="utf-8") as f:
                json.dump(MAPPING, f)
            np.savez(path("theirs.npz"), **self.theirs)
            # What load_weights makes of their weights, saved under our names and packed...
            loaded = load_weights(CONFIG, self.theirs, path("map.json"))
            np.savez(path("loaded.npz"), **weight_arrays(loaded))
            run = pack(path("loaded.npz"), "loaded.sprig")
            self.assertEqual(run.returncode, 0, run.stderr)
            # ... is byte for byte what pack makes of them with the mapping file.
            run = pack(path("theirs.npz"), "theirs.sprig", "--map", path("map.json"))
            self.assertEqual(run.returncode, 0, run.stderr)
            with open(path("loaded.sprig"), "rb") as a, open(path("theirs.sprig"), "rb") as b:
                self.assertEqual(a.read(), b.read())
            # Both refuse a missing expert with the same sentence.
            missing = {k: v for k, v in self.theirs.items() if ".experts.1." not in k}
            np.savez(path("missing.npz"), **missing)
            run = pack(path("missing.npz"), "missing.sprig", "--map", path("map.json"))
            self.assertEqual(run.returncode, 2, run.stderr)
            self.assertFalse(os.path.exists(path("missing.sprig")))
            with self.assertRaises(ValueError) as caught:
                load_weights(CONFIG, missing, path("map.json"))
            self.assertEqual(run.stderr.strip(), f"sprig pack: {caught.exception}")


if __name__ == "__main__":
    unittest.main()
