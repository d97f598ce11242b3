"""Exported ONNX controllers against outside references: onnxruntime running the file vs Kiln's actor,
and a NumPy forward pass written only from spec.json's documented layout (tests/support/spec_reference.py).

Tolerances are the project's requirement for float32 inference (no outside source): 1e-5 between
onnxruntime and Kiln, 1e-6 between Kiln's network outputs and the float64 NumPy reference, max over
every element.
"""

import json
import sys

import numpy as np
import onnx
import pytest
import torch
from safetensors.numpy import load_file

from kiln.onnx_export import (
    CAUTION,
    DEFAULT_OPSET,
    SUPPORTED_OPSETS,
    ExportError,
    export_policy,
)
from kiln.onnx_export.parity import kiln_actions, sample_observations
from kiln.storage.policy_io import load_policy
from tests.support.export_fixtures import (
    ACT_HIGH,
    ACT_LOW,
    OBS_HIGH,
    OBS_LOW,
    onnx_actions,
    save_test_policy,
)
from tests.support.spec_reference import reference_actions, reference_heads

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


@pytest.mark.parametrize("nonlinearity", ["relu", "tanh", "elu", "silu"])
def test_numpy_reference_from_spec_alone_matches_kiln(tmp_path, observations, nonlinearity):
    folder = save_test_policy(tmp_path / "policy", nonlinearity)
    policy = load_policy(folder)
    mean, log_std = reference_heads(folder, observations)
    with torch.no_grad():
        kiln_mean, kiln_log_std = (t.numpy() for t in policy.actor(torch.as_tensor(observations)))
    # The network's own output in (−1, 1) to 1e-6. The log-std head to 5e-6: float32 sums over
    # 256-wide layers leave round-off of order 1e-6 on outputs of order 1, whatever the order of addition.
    agent_units = np.max(np.abs(np.tanh(mean) - np.tanh(kiln_mean)))
    log_std_error = np.max(np.abs(log_std - kiln_log_std))
    assert agent_units <= 1e-6 and log_std_error <= 5e-6
    # The deterministic controller in the task's units, to 1e-6.
    expected, _ = kiln_actions(policy, observations, None)
    task_units = np.max(np.abs(reference_actions(folder, observations) - expected))
    # Stochastic: u = m + std·noise carries round-off of |u| (std up to e² here), so 1e-5 as for onnxruntime.
    expected, noise = kiln_actions(policy, observations, 7)
    sampled = np.max(np.abs(reference_actions(folder, observations, noise) - expected))
    print(f"{nonlinearity}: max |NumPy reference - Kiln| deterministic {agent_units:.3e} in (-1, 1), "
          f"{task_units:.3e} in task units; log-std {log_std_error:.3e}; stochastic {sampled:.3e} in task units")  # fmt: skip
    assert task_units <= 1e-6 and sampled <= 1e-5


@pytest.mark.parametrize("opset", list(SUPPORTED_OPSETS))
def test_every_supported_opset_runs_and_matches_the_numpy_reference(tmp_path, observations, opset):
    folder = save_test_policy(tmp_path / "policy", "silu", widths=(64, 64))
    noise = np.random.default_rng(5).standard_normal((1000, 6)).astype(np.float32)
    for stochastic, feed in ((False, None), (True, noise)):
        out = tmp_path / f"controller_{stochastic}.onnx"
        export_policy(folder, out, stochastic=stochastic, opset=opset)
        model = onnx.load(str(out))
        assert [(o.domain, o.version) for o in model.opset_import] == [("", opset)]
        got = onnx_actions(out, observations[:1000], feed)
        assert np.max(np.abs(got - reference_actions(folder, observations[:1000], feed))) <= 1e-5


def test_batch_dimension_is_dynamic(tmp_path, observations):
    folder = save_test_policy(tmp_path / "policy")
    out = tmp_path / "controller.onnx"
    export_policy(folder, out)
    whole = onnx_actions(out, observations)
    # One row at a time and an odd-sized batch give the rows of the whole batch.
    for rows in (slice(0, 1), slice(5, 12)):
        np.testing.assert_allclose(onnx_actions(out, observations[rows]), whole[rows], rtol=0, atol=1e-6)


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


def test_file_declares_its_inputs_outputs_and_the_caution(tmp_path):
    folder = save_test_policy(tmp_path / "policy")
    out = tmp_path / "controller.onnx"
    report = export_policy(folder, out, stochastic=True)
    model = onnx.load(str(out))
    onnx.checker.check_model(model, full_check=True)  # onnx's own validator, shapes inferred
    declared = [*model.graph.input, *model.graph.output]
    dims = {v.name: [d.dim_param or d.dim_value for d in v.type.tensor_type.shape.dim] for v in declared}
    assert dims == {"observation": ["batch", 17], "noise": ["batch", 6], "action": ["batch", 6]}
    meta = {p.key: p.value for p in model.metadata_props}
    assert meta["kiln.controller"] == "stochastic" and meta["kiln.caution"] == CAUTION
    assert json.loads(meta["kiln.env"])["id"] == "HalfCheetah-v5"
    assert report.opset == DEFAULT_OPSET == 17 and report.size_bytes == out.stat().st_size
    # The file carries the saved tensors unchanged, under the names spec.json gives them.
    saved = load_file(str(folder / "weights.safetensors"))
    inside = {t.name: onnx.numpy_helper.to_array(t) for t in model.graph.initializer}
    for name, values in saved.items():
        np.testing.assert_array_equal(inside[name], values)


def test_deterministic_file_takes_no_noise(tmp_path):
    folder = save_test_policy(tmp_path / "policy", widths=(8,))
    out = tmp_path / "controller.onnx"
    export_policy(folder, out)
    assert [v.name for v in onnx.load(str(out)).graph.input] == ["observation"]


@pytest.mark.parametrize("opset", [12, 22, 0])
def test_unsupported_opset_is_refused_before_anything_is_written(tmp_path, opset):
    folder = save_test_policy(tmp_path / "policy", widths=(8,))
    with pytest.raises(ExportError, match=f"opset {opset} is not supported: choose one from 13 to 21"):
        export_policy(folder, tmp_path / "controller.onnx", opset=opset)
    assert not (tmp_path / "controller.onnx").exists()


def test_missing_onnx_is_named_with_the_extra_to_install(tmp_path, monkeypatch):
    folder = save_test_policy(tmp_path / "policy", widths=(8,))
    monkeypatch.setitem(sys.modules, "onnx", None)  # makes `import onnx` raise ImportError
    with pytest.raises(ExportError, match=r"pip install 'kiln-sac\[export\]'"):
        export_policy(folder, tmp_path / "controller.onnx")
    assert not (tmp_path / "controller.onnx").exists()
