"""The ONNX graph of an actor, translated node by node from the actor's own steps.

The graph is written with ``onnx.helper`` rather than traced from the torch module: torch 2.13's
exporter needs onnxscript (another download) and may rewrite the network in ways that change with
torch versions. Instead each step of :meth:`kiln.learner.actor.SquashedGaussianActor.steps`
(affine layer, hidden nonlinearity module, head split, log-std soft limits, tanh squash; checked and
taken apart by :func:`kiln.learner.actor_steps.check_steps`) becomes the ONNX nodes of the same
arithmetic, and the map to the task's units takes :class:`kiln.learner.action_scale.ActionScale`'s
own centre, half-width and bounds. The weights go in as initializers under the names ``weights.safetensors`` gives them.

Graph (every tensor float32, ``batch`` a dynamic dimension)::

    observation [batch, n] ─ MatMul/Add, nonlinearity, … ─ MatMul/Add ─ Split ─ m, r
    deterministic: a = tanh(m)
    stochastic:    a = tanh(m + exp(log_std(r)) * noise),  noise [batch, action_size] ~ N(0, I), an input
    action = min(max(centre + half_width * a, low), high)   (ActionScale.to_env)
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper
from torch import nn

from kiln.learner.action_scale import ActionScale
from kiln.learner.actor_steps import Affine, SoftLimits, Step, check_steps
from kiln.storage.policy_spec import tensor_names

OBSERVATION = "observation"
NOISE = "noise"
ACTION = "action"
BATCH = "batch"


class GraphBuilder:
    """Collects nodes and constants (initializers) under unique names, so the graph reads top to bottom."""

    def __init__(self) -> None:
        self.nodes: list[onnx.NodeProto] = []
        self.constants: list[onnx.TensorProto] = []
        self._count = 0

    def constant(self, name: str, values: np.ndarray) -> str:
        """Add ``values`` as a float32 initializer called ``name``; returns the name."""
        self.constants.append(numpy_helper.from_array(np.ascontiguousarray(values, dtype=np.float32), name))
        return name

    def op(self, op_type: str, inputs: Sequence[str], outputs: int = 1, **attributes: Any) -> list[str]:
        """Add one node; returns the names of its ``outputs`` outputs."""
        self._count += 1
        names = [f"{op_type.lower()}_{self._count}" + (f"_{i}" if outputs > 1 else "") for i in range(outputs)]
        self.nodes.append(helper.make_node(op_type, list(inputs), names, **attributes))
        return names

    def one(self, op_type: str, *inputs: str, **attributes: Any) -> str:
        """Add a node with one output; returns its name."""
        return self.op(op_type, inputs, **attributes)[0]


def hidden_nodes(b: GraphBuilder, module: nn.Module, x: str) -> str:
    """The nodes of one hidden nonlinearity module, read from the instance the actor applies.

    Raises:
        ValueError: For a module with no ONNX form here.
    """
    if isinstance(module, nn.ReLU):
        return b.one("Relu", x)
    if isinstance(module, nn.Tanh):
        return b.one("Tanh", x)
    if isinstance(module, nn.ELU):
        # ONNX's Elu is torch's: x for x > 0, alpha·(eˣ − 1) otherwise, with the module's own alpha.
        return b.one("Elu", x, alpha=float(module.alpha))
    if isinstance(module, nn.SiLU):
        # SiLU(x) = x·sigmoid(x); no opset up to 21 has a SiLU operator.
        return b.one("Mul", x, b.one("Sigmoid", x))
    raise ValueError(f"the nonlinearity {type(module).__name__} has no ONNX form here")


def soft_limits_nodes(b: GraphBuilder, raw: str, limits: SoftLimits) -> str:
    """``low + softplus(high − softplus(high − r) − low)``, as kiln.learner.actor.soft_clamp computes it."""
    high_c = b.constant("log_std_high", np.array(limits.high))
    low_c = b.constant("log_std_low", np.array(limits.low))
    upper = b.one("Sub", high_c, b.one("Softplus", b.one("Sub", high_c, raw)))
    return b.one("Add", low_c, b.one("Softplus", b.one("Sub", upper, low_c)))


def action_nodes(b: GraphBuilder, squashed: str, scale: ActionScale) -> None:
    """The map to task units, ``ActionScale.to_env``: its centre, half-width and bounds (float64 there,
    float32 constants here), then the clip to the bounds against round-off, into the output ``action``."""
    scaled = b.one("Add", b.constant("action_centre", scale.centre),
                   b.one("Mul", b.constant("action_half_width", scale.half_width), squashed))  # fmt: skip
    clipped = b.one("Max", scaled, b.constant("action_low", scale.low))
    b.nodes.append(helper.make_node("Min", [clipped, b.constant("action_high", scale.high)], [ACTION]))


def controller_model(
    steps: Sequence[Step],
    scale: ActionScale,
    stochastic: bool,
    opset: int,
    metadata: Mapping[str, str],
    doc: str,
) -> onnx.ModelProto:
    """Build the controller observation → action (task units) as an ONNX model.

    Args:
        steps: A one-agent actor's steps (:meth:`kiln.learner.actor.SquashedGaussianActor.steps`).
        scale: The map to the task's units (finite bounds).
        stochastic: Add the input ``noise`` and sample ``a = tanh(m + std·noise)``; else ``a = tanh(m)``.
        opset: The ONNX opset of the default domain.
        metadata: Key → text stored in the model's metadata.
        doc: The model's description.

    Returns:
        The model, passed by ``onnx.checker``.

    Raises:
        ValueError: If a step has no ONNX form or the steps are not an actor's.
    """
    parts = check_steps(steps)
    act_size = parts.split.action_size
    b = GraphBuilder()
    x = OBSERVATION
    for step in parts.body:
        if isinstance(step, Affine):
            weight, bias = tensor_names(step.layer)
            # y = x @ W + b with W [in, out], as the actor stores it: W goes in untransposed.
            x = b.one("Add", b.one("MatMul", x, b.constant(weight, step.weight.numpy())), b.constant(bias, step.bias.numpy()))
        else:
            x = hidden_nodes(b, step.module, x)
    mean, raw = b.op("Split", [x, _split_sizes(b, act_size)], outputs=2, axis=1)
    if stochastic:
        # Squash of a sample, tanh(m + exp(log_std)·noise); the mode needs no log-std, so it gets no nodes.
        mean = b.one("Add", mean, b.one("Mul", b.one("Exp", soft_limits_nodes(b, raw, parts.limits)), NOISE))
    action_nodes(b, b.one("Tanh", mean), scale)

    inputs = [_value(OBSERVATION, parts.observation_size, "observation, float32 (cast it), one row per controller call")]
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


def _split_sizes(b: GraphBuilder, act_size: int) -> str:
    # Split takes its sizes as an int64 input in every opset from 13 on (an attribute before 13).
    b.constants.append(numpy_helper.from_array(np.array([act_size, act_size], dtype=np.int64), "split_sizes"))
    return "split_sizes"


def _value(name: str, size: int, doc: str) -> onnx.ValueInfoProto:
    return helper.make_tensor_value_info(name, TensorProto.FLOAT, [BATCH, size], doc_string=doc)
