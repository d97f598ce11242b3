"""The ONNX graph of a saved policy, built node by node from the layout ``spec.json`` documents.

The graph is written with ``onnx.helper`` rather than traced from the torch module: torch 2.13's
exporter needs onnxscript (another download) and may rewrite the network in ways that change with
torch versions, whereas the policy folder already says exactly which operations to apply. Building
from ``spec.json`` and the named tensors also means the export cannot depend on anything the folder
does not record.

Graph (every tensor float32, ``batch`` a dynamic dimension)::

    observation [batch, n] ─ MatMul/Add, nonlinearity, … ─ MatMul/Add ─ Split ─ m, r
    deterministic: a = tanh(m)
    stochastic:    a = tanh(m + exp(log_std(r)) * noise),  noise [batch, action_size] ~ N(0, I), an input
    action = clip(centre + half * a, low, high)             (task units, as kiln.learner.action_scale)
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OBSERVATION = "observation"
NOISE = "noise"
ACTION = "action"
BATCH = "batch"


class _Builder:
    """Collects nodes and constants under unique names, so the graph reads top to bottom."""

    def __init__(self) -> None:
        self.nodes: list[onnx.NodeProto] = []
        self.constants: list[onnx.TensorProto] = []
        self._count = 0

    def constant(self, name: str, values: np.ndarray) -> str:
        self.constants.append(numpy_helper.from_array(np.ascontiguousarray(values, dtype=np.float32), name))
        return name

    def op(self, op_type: str, inputs: Sequence[str], outputs: int = 1, **attributes: Any) -> list[str]:
        self._count += 1
        names = [f"{op_type.lower()}_{self._count}" + (f"_{i}" if outputs > 1 else "") for i in range(outputs)]
        self.nodes.append(helper.make_node(op_type, list(inputs), names, **attributes))
        return names

    def one(self, op_type: str, *inputs: str, **attributes: Any) -> str:
        return self.op(op_type, inputs, **attributes)[0]


def _nonlinearity(b: _Builder, name: str, x: str) -> str:
    """The hidden nonlinearity named in ``spec.json``, with torch's definitions (ELU: alpha 1)."""
    if name == "relu":
        return b.one("Relu", x)
    if name == "tanh":
        return b.one("Tanh", x)
    if name == "elu":
        return b.one("Elu", x, alpha=1.0)
    if name == "silu":
        # SiLU(x) = x·sigmoid(x); no opset up to 21 has a SiLU operator.
        return b.one("Mul", x, b.one("Sigmoid", x))
    raise ValueError(f"nonlinearity {name!r} has no ONNX form here")


def _soft_clamped_log_std(b: _Builder, raw: str, low: float, high: float) -> str:
    """``low + softplus(high − softplus(high − r) − low)``: the formula of spec.json's ``log_std``."""
    high_c = b.constant("log_std_high", np.array(high))
    low_c = b.constant("log_std_low", np.array(low))
    upper = b.one("Sub", high_c, b.one("Softplus", b.one("Sub", high_c, raw)))
    return b.one("Add", low_c, b.one("Softplus", b.one("Sub", upper, low_c)))


def controller_model(
    actor: Mapping[str, Any],
    tensors: Mapping[str, np.ndarray],
    action_low: np.ndarray,
    action_high: np.ndarray,
    stochastic: bool,
    opset: int,
    metadata: Mapping[str, str],
    doc: str,
) -> onnx.ModelProto:
    """Build the controller observation → action (task units) as an ONNX model.

    Args:
        actor: The ``actor`` block of ``spec.json`` (sizes, nonlinearity, log-std limits, weight layout).
        tensors: The weights under the names the layout lists, ``[in, out]`` and ``[out]``.
        action_low: The task's lower action bounds (finite).
        action_high: The task's upper action bounds (finite).
        stochastic: Add the input ``noise`` and sample ``a = tanh(m + std·noise)``; else ``a = tanh(m)``.
        opset: The ONNX opset of the default domain.
        metadata: Key → text stored in the model's metadata.
        doc: The model's description.

    Returns:
        The model, passed by ``onnx.checker``.

    Raises:
        ValueError: If the layout names an unknown nonlinearity or a tensor is missing or misshapen.
    """
    obs_size, act_size = int(actor["observation_size"]), int(actor["action_size"])
    layers = actor["weight_layout"]["tensors"]
    b = _Builder()
    x = OBSERVATION
    for i, entry in enumerate(layers):
        weight, bias = (np.asarray(tensors[entry[k]], dtype=np.float32) for k in ("weight", "bias"))
        if list(weight.shape) != list(entry["weight_shape"]) or list(bias.shape) != list(entry["bias_shape"]):
            raise ValueError(f"tensor {entry['weight']} or {entry['bias']} does not have the shape spec.json gives")
        # y = x @ W + b with W [in, out]: the orientation spec.json states, so W goes in untransposed.
        x = b.one("Add", b.one("MatMul", x, b.constant(entry["weight"], weight)), b.constant(entry["bias"], bias))
        if i < len(layers) - 1:
            x = _nonlinearity(b, str(actor["nonlinearity"]), x)
    # The last layer's 2·m outputs: the first m are the mean, the last m the raw log-std.
    mean, raw = b.op("Split", [x, _split_sizes(b, act_size)], outputs=2, axis=1)
    if stochastic:
        low, high = (float(v) for v in actor["log_std_soft_limits"])
        std = b.one("Exp", _soft_clamped_log_std(b, raw, low, high))
        mean = b.one("Add", mean, b.one("Mul", std, NOISE))
    squashed = b.one("Tanh", mean)
    low_a, high_a = np.asarray(action_low, np.float64), np.asarray(action_high, np.float64)
    # Centre and half-width in float64 first, as kiln.learner.action_scale computes them.
    scaled = b.one("Add", b.constant("action_centre", (high_a + low_a) / 2.0),
                   b.one("Mul", b.constant("action_half_width", (high_a - low_a) / 2.0), squashed))  # fmt: skip
    # Clipped to the bounds against round-off, as kiln.learner.action_scale does.
    clipped = b.one("Max", scaled, b.constant("action_low", low_a))
    b.nodes.append(helper.make_node("Min", [clipped, b.constant("action_high", high_a)], [ACTION]))

    inputs = [_value(OBSERVATION, obs_size, "observation, float32 (cast it), one row per controller call")]
    if stochastic:
        inputs.append(_value(NOISE, act_size, "standard normal draws, one row per observation"))
    outputs = [_value(ACTION, act_size, "action in the task's units, within the action bounds")]
    graph = helper.make_graph(b.nodes, "kiln_controller", inputs, outputs, initializer=b.constants)
    opsets = [helper.make_opsetid("", opset)]
    model = helper.make_model(graph, opset_imports=opsets, producer_name="kiln", doc_string=doc)
    # The lowest IR version that carries this opset, so older runtimes can still open the file.
    model.ir_version = helper.find_min_ir_version_for(opsets)
    helper.set_model_props(model, dict(metadata))
    onnx.checker.check_model(model, full_check=True)
    return model


def _split_sizes(b: _Builder, act_size: int) -> str:
    # Split takes its sizes as an int64 input in every opset from 13 on (an attribute before 13).
    b.constants.append(numpy_helper.from_array(np.array([act_size, act_size], dtype=np.int64), "split_sizes"))
    return "split_sizes"


def _value(name: str, size: int, doc: str) -> onnx.ValueInfoProto:
    return helper.make_tensor_value_info(name, TensorProto.FLOAT, [BATCH, size], doc_string=doc)
