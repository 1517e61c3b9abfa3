"""sprig_torch: the PyTorch reference for sprig's model semantics, and its exporter.

* `sprig_torch.layers`  dense, tree (leaf/path) and experts feed-forward layers;
* `sprig_torch.models`  the stack and transformer families;
* `sprig_torch.export`  writes config.json, weights.npz and reference.npz (also a command).

The modules follow docs/model-semantics.md (semantics) and docs/input-contract.md (config fields and
tensor names); the C++ runtime is tested against them.
"""

from sprig_torch.layers import DenseFF, ExpertsFF, TreeFF, build_layer
from sprig_torch.models import StackModel, TransformerModel, build_model

__all__ = ["DenseFF", "ExpertsFF", "TreeFF", "build_layer", "StackModel", "TransformerModel",
           "build_model"]
