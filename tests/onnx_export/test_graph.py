"""The ONNX nodes of each actor step, run by onnxruntime, against outside references.

References: torch's own modules and torch.nn.functional (the hidden nonlinearities, F.linear);
the formulas spec.json states, evaluated in float64 NumPy (soft limits, the affine map onto the
action bounds); and a whole controller written only from spec.json (tests/support/spec_reference.py,
no Kiln imports). Tolerances are the project's requirement for float32 inference (no outside
source): 1e-6 for one elementwise step, 1e-5 for a whole controller, max over every element.
"""

from collections.abc import Callable

import numpy as np
import onnx
import onnxruntime
import pytest
import torch
import torch.nn.functional as F
from onnx import TensorProto, helper
from torch import nn

from kiln.config.nonlinearities import NONLINEARITIES
from kiln.learner.action_scale import ActionScale
from kiln.learner.actor import SquashedGaussianActor
from kiln.learner.actor_steps import Affine, SoftLimits, SplitHeads, Squash
from kiln.onnx_export.graph import ACTION, GraphBuilder, action_nodes, controller_model, hidden_nodes, soft_limits_nodes
from kiln.storage.policy_io import load_policy
from tests.support.export_fixtures import ACT_HIGH, ACT_LOW, OBS_HIGH, OBS_LOW, save_test_policy
from tests.support.spec_reference import reference_actions


def _session(model: onnx.ModelProto) -> onnxruntime.InferenceSession:
    return onnxruntime.InferenceSession(model.SerializeToString(), providers=["CPUExecutionProvider"])


def _run_nodes(build: Callable[[GraphBuilder, str], str], x: np.ndarray, opset: int = 17) -> np.ndarray:
    """The nodes ``build`` adds for input ``x`` ``[batch, n]`` (an elementwise step: output of the same
    shape), as one checked model run by onnxruntime."""
    b = GraphBuilder()
    out = build(b, "x")
    inputs = [helper.make_tensor_value_info("x", TensorProto.FLOAT, ["batch", x.shape[1]])]
    outputs = [helper.make_tensor_value_info(out, TensorProto.FLOAT, ["batch", x.shape[1]])]
    opsets = [helper.make_opsetid("", opset)]
    model = helper.make_model(helper.make_graph(b.nodes, "step", inputs, outputs, initializer=b.constants), opset_imports=opsets)
    model.ir_version = helper.find_min_ir_version_for(opsets)
    onnx.checker.check_model(model, full_check=True)
    return _session(model).run([out], {"x": x.astype(np.float32)})[0]


def _wide_inputs() -> np.ndarray:
    return np.concatenate([np.linspace(-30.0, 30.0, 601), np.random.default_rng(0).normal(size=399) * 4]).reshape(-1, 4)


# ----- hidden nonlinearities ---------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(NONLINEARITIES))
def test_every_nonlinearity_in_the_table_has_nodes_equal_to_its_torch_module(name):
    module = NONLINEARITIES[name]()
    x = _wide_inputs()
    got = _run_nodes(lambda b, x: hidden_nodes(b, module, x), x)
    expected = module(torch.as_tensor(x, dtype=torch.float32)).numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("alpha", [0.3, 1.7])
def test_elu_takes_alpha_from_the_module_instance(alpha):
    # torch.nn.functional.elu: x for x > 0, alpha·(eˣ − 1) otherwise (torch docs).
    x = _wide_inputs()
    got = _run_nodes(lambda b, x: hidden_nodes(b, nn.ELU(alpha=alpha), x), x)
    np.testing.assert_allclose(got, F.elu(torch.as_tensor(x, dtype=torch.float32), alpha=alpha).numpy(), rtol=1e-6, atol=1e-6)
    assert got.min() < -alpha * 0.99  # the negative side saturates at −alpha, not at −1


def test_a_module_without_an_onnx_form_is_refused():
    with pytest.raises(ValueError, match="GELU has no ONNX form"):
        hidden_nodes(GraphBuilder(), nn.GELU(), "x")


# ----- soft limits and the action map ------------------------------------------------------------


@pytest.mark.parametrize("low,high", [(-20.0, 2.0), (-5.0, 1.0)])
def test_soft_limits_nodes_equal_the_formula_in_float64(low, high):
    # spec.json: log_std = low + softplus(high − softplus(high − r) − low); softplus(z) = log(1 + eᶻ) as
    # NumPy's logaddexp(0, z), exact in float64 at both ends. Raw values far past both limits included.
    raw = np.concatenate([_wide_inputs().ravel(), [-1e4, -60.0, 60.0, 1e4]]).reshape(-1, 4)
    got = _run_nodes(lambda b, x: soft_limits_nodes(b, x, SoftLimits(low, high)), raw)
    r = raw.astype(np.float32).astype(np.float64)
    expected = low + np.logaddexp(0.0, high - np.logaddexp(0.0, high - r) - low)
    assert np.all(np.isfinite(got))
    np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6)


def test_action_nodes_are_the_affine_map_onto_the_bounds_clipped():
    # spec.json: task units = low_a + (a + 1)/2 · (high_a − low_a), clipped to the bounds (np.clip).
    scale = ActionScale(ACT_LOW, ACT_HIGH)
    a = np.random.default_rng(1).uniform(-1.2, 1.2, size=(500, 6)).astype(np.float32)

    def build(b: GraphBuilder, x: str) -> str:
        action_nodes(b, x, scale)
        return ACTION

    got = _run_nodes(build, a)
    low, high = ACT_LOW.astype(np.float64), ACT_HIGH.astype(np.float64)
    expected = np.clip(low + (a + 1.0) / 2.0 * (high - low), low, high)
    np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6)
    assert np.all((got >= ACT_LOW) & (got <= ACT_HIGH))


# ----- whole controllers -------------------------------------------------------------------------


def _identity_scale(size: int) -> ActionScale:
    # Bounds ±1 make the map the identity, so a graph's action is its squashed value.
    return ActionScale(-np.ones(size), np.ones(size))


def test_affine_split_and_squash_equal_torch_linear_then_tanh_of_the_mean():
    g = torch.Generator().manual_seed(2)
    weight, bias = torch.randn(5, 6, generator=g), torch.randn(6, generator=g)
    steps = [Affine(0, weight, bias), SplitHeads(3), SoftLimits(-20.0, 2.0), Squash()]
    model = controller_model(steps, _identity_scale(3), False, 17, {}, "")
    x = torch.randn(40, 5, generator=g)
    got = _session(model).run([ACTION], {"observation": x.numpy()})[0]
    # F.linear takes its matrix as [out, in]: the step's weight is [in, out].
    expected = torch.tanh(F.linear(x, weight.T, bias)[:, :3]).numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6)
    assert got.shape == (40, 3)


@pytest.mark.parametrize("nonlinearity", sorted(NONLINEARITIES))
@pytest.mark.parametrize("stochastic", [False, True], ids=["deterministic", "stochastic"])
def test_controller_from_the_actors_steps_matches_the_spec_reference(tmp_path, nonlinearity, stochastic):
    folder = save_test_policy(tmp_path / "policy", nonlinearity, widths=(64, 64))
    policy = load_policy(folder)
    model = controller_model(policy.actor.steps(), policy.scale, stochastic, 17, {}, "")
    rng = np.random.default_rng(3)
    obs = np.clip(rng.normal(size=(2000, 17)) * 3, OBS_LOW, OBS_HIGH).astype(np.float32)
    noise = rng.standard_normal((2000, 6)).astype(np.float32) if stochastic else None
    feeds = {"observation": obs} | ({"noise": noise} if stochastic else {})
    got = _session(model).run([ACTION], feeds)[0]
    assert np.max(np.abs(got - reference_actions(folder, obs, noise))) <= 1e-5


def test_the_graph_holds_the_actors_tensors_under_the_saved_names_and_no_unused_nodes():
    actor = SquashedGaussianActor(4, 2, (8,), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    model = controller_model(actor.steps(), _identity_scale(2), False, 17, {}, "")
    inside = {t.name: onnx.numpy_helper.to_array(t) for t in model.graph.initializer}
    for i, layer in enumerate(actor.body.linears()):
        np.testing.assert_array_equal(inside[f"layers.{i}.weight"], layer.weight.detach()[0].numpy())
        np.testing.assert_array_equal(inside[f"layers.{i}.bias"], layer.bias.detach()[0, 0].numpy())
    # The mode needs no log-std: no softplus, no exp, no noise input.
    assert not {"Softplus", "Exp"} & {n.op_type for n in model.graph.node}
    assert [v.name for v in model.graph.input] == ["observation"]


def test_the_batch_dimension_is_dynamic():
    actor = SquashedGaussianActor(4, 2, (8, 8), "tanh", (-20.0, 2.0), torch.Generator().manual_seed(1))
    session = _session(controller_model(actor.steps(), _identity_scale(2), False, 17, {}, ""))
    obs = np.random.default_rng(4).normal(size=(20, 4)).astype(np.float32)
    whole = session.run([ACTION], {"observation": obs})[0]
    for rows in (slice(0, 1), slice(5, 12)):
        np.testing.assert_allclose(session.run([ACTION], {"observation": obs[rows]})[0], whole[rows], rtol=0, atol=1e-6)


def test_steps_that_are_not_an_actors_are_refused():
    # The order itself is tested with kiln.learner.actor_steps.check_steps (tests/learner/test_actor_steps.py).
    g = torch.Generator().manual_seed(5)
    affine = Affine(0, torch.randn(3, 4, generator=g), torch.randn(4, generator=g))
    with pytest.raises(ValueError, match="end SplitHeads, SoftLimits, Squash"):
        controller_model([affine, SplitHeads(2), Squash(), SoftLimits(-20.0, 2.0)], _identity_scale(2), True, 17, {}, "")
