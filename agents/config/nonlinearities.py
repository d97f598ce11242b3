"""The hidden nonlinearities a config may name, and the torch module each name stands for.

This is the one table: the settings check a name against it, the networks build their hidden
layers from it, and a saved policy's ``spec.json`` is checked against it on loading. The ONNX export
keeps no table of its own: it translates the module instances an actor holds (reading attributes
such as ELU's ``alpha`` from them), so a name added here needs an ONNX translation in
:mod:`kiln.onnx_export.graph`, which tests/onnx_export/test_graph.py checks for every entry.
"""

from __future__ import annotations

from torch import nn

NONLINEARITIES: dict[str, type[nn.Module]] = {
    "relu": nn.ReLU,
    "tanh": nn.Tanh,
    "elu": nn.ELU,
    "silu": nn.SiLU,
}
