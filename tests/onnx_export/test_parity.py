"""The parity check: onnxruntime running an exported file against Kiln's actor.

References: onnxruntime (the file run as a deployment runs it); torch's randn stream for which noise
Kiln's sample drew; a NumPy controller written only from spec.json (tests/support/spec_reference.py).
Tolerance: 1e-5 between onnxruntime and Kiln, max over every element (the project's requirement for
float32 inference, no outside source).
"""

import numpy as np
import pytest
import torch

from kiln.learner.actor_steps import Affine
from kiln.onnx_export import export_policy
from kiln.onnx_export.graph import controller_model
from kiln.onnx_export.parity import kiln_actions, max_difference, sample_observations
from kiln.storage.policy_io import load_policy
from tests.support.export_fixtures import ACT_HIGH, ACT_LOW, OBS_HIGH, OBS_LOW, onnx_actions, save_test_policy
from tests.support.spec_reference import reference_actions

COUNT = 10_000


@pytest.fixture(scope="module")
def observations() -> np.ndarray:
    return sample_observations(OBS_LOW, OBS_HIGH, COUNT, np.random.default_rng(123))


def test_sampled_observations_lie_within_the_bounds_and_fill_them(observations):
    assert observations.shape == (COUNT, 17) and observations.dtype == np.float32
    assert np.all(observations >= OBS_LOW) and np.all(observations <= OBS_HIGH)
    # Uniform on [-8, 8]: the sample reaches near both ends (P(miss 7.9..8) = (1-0.1/16)^10000 ≈ 1e-27).
    assert observations[:, 2].min() < -7.9 and observations[:, 2].max() > 7.9
    # Standard normal where unbounded: sample std 1 within 5 % at n = 10 000 (std error ≈ 0.7 %).
    assert abs(observations[:, 10].std() - 1.0) < 0.05


@pytest.mark.parametrize("nonlinearity", ["relu", "tanh", "elu", "silu"])
@pytest.mark.parametrize("stochastic", [False, True], ids=["deterministic", "stochastic"])
def test_onnxruntime_reproduces_kiln_on_10000_observations(tmp_path, observations, nonlinearity, stochastic):
    folder = save_test_policy(tmp_path / "policy", nonlinearity)
    out = tmp_path / "controller.onnx"
    export_policy(folder, out, stochastic=stochastic)
    expected, noise = kiln_actions(load_policy(folder), observations, 7 if stochastic else None)
    got = onnx_actions(out, observations, noise)
    assert got.shape == (COUNT, 6) and got.dtype == np.float32
    error = np.max(np.abs(got - expected))
    print(f"{nonlinearity} {'stochastic' if stochastic else 'deterministic'}: max |onnxruntime - Kiln| = {error:.3e}")
    assert error <= 1e-5
    assert np.all(got >= ACT_LOW) and np.all(got <= ACT_HIGH)


def test_saturated_heads_stay_finite_and_within_the_bounds(tmp_path, observations):
    # Last-layer biases of ±60 and ±1e4 drive tanh and both softplus terms of the log-std deep into
    # saturation (a naive log(1 + eˣ) overflows float32 above x ≈ 88), with well-conditioned matmuls.
    actor_bias = np.where(np.arange(12) % 2 == 0, 1.0, -1.0) * np.r_[np.full(6, 60.0), np.full(6, 1e4)]
    folder = save_test_policy(tmp_path / "policy", last_bias=actor_bias)
    noise = np.random.default_rng(2).standard_normal((COUNT, 6)).astype(np.float32)
    out = tmp_path / "controller.onnx"
    export_policy(folder, out, stochastic=True)
    got = onnx_actions(out, observations, noise)
    assert np.all(np.isfinite(got)) and np.all(got >= ACT_LOW) and np.all(got <= ACT_HIGH)
    assert np.max(np.abs(got - reference_actions(folder, observations, noise))) <= 1e-5


def test_kiln_actions_return_the_noise_their_sample_drew(tmp_path, observations):
    # Kiln's stochastic action is tanh(m + exp(log_std)·e) mapped to task units, e the seed's first
    # torch.randn((batch, 6)); the NumPy reference fed that e must give the same actions.
    policy = load_policy(save_test_policy(tmp_path / "policy", widths=(32,)))
    actions, noise = kiln_actions(policy, observations[:500], 11)
    np.testing.assert_array_equal(noise, torch.randn((500, 6), generator=torch.Generator().manual_seed(11)).numpy())
    assert np.max(np.abs(actions - reference_actions(tmp_path / "policy", observations[:500], noise))) <= 1e-5
    assert not np.allclose(actions, reference_actions(tmp_path / "policy", observations[:500]), atol=1e-3)  # noise mattered


@pytest.mark.parametrize("stochastic", [False, True], ids=["deterministic", "stochastic"])
def test_max_difference_finds_a_graph_that_is_not_the_actors(tmp_path, stochastic):
    """The check must be able to fail: a graph of the same shape with one weight off by 0.5 differs."""
    policy = load_policy(save_test_policy(tmp_path / "policy", widths=(32,)))
    right = controller_model(policy.actor.steps(), policy.scale, stochastic, 17, {}, "")
    steps = policy.actor.steps()
    first = steps[0]
    assert isinstance(first, Affine)
    weight = first.weight.clone()
    weight[0, 0] += 0.5
    wrong = controller_model([Affine(0, weight, first.bias), *steps[1:]], policy.scale, stochastic, 17, {}, "")
    assert max_difference(right.SerializeToString(), policy, stochastic, 200, 0) <= 1e-5
    assert max_difference(wrong.SerializeToString(), policy, stochastic, 200, 0) > 1e-3
