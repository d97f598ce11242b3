"""``export_policy``: the file it writes, what it refuses, and a seeded episode driven by that file.

References: onnx's own checker and onnxruntime for the file; the safetensors file for the tensors it
carries; a NumPy controller written only from spec.json (tests/support/spec_reference.py) for every
supported opset; a plain Gymnasium loop feeding onnxruntime for the episode, against Kiln's evaluation
(kiln.evaluation.policy_eval). Tolerances (project requirement, no outside source): 1e-5 on actions,
1e-4 relative on an episode's return, which float32 action round-off of ~1e-6 separates.
"""

import json
import sys
from pathlib import Path

import gymnasium as gym
import numpy as np
import onnx
import pytest
import torch
from safetensors.numpy import load_file

from kiln.config.presets import compose_config
from kiln.evaluation.policy_eval import evaluate_policy, plan_evaluation
from kiln.onnx_export import CAUTION, DEFAULT_OPSET, SUPPORTED_OPSETS, ExportError, ExportReport, export_policy
from kiln.onnx_export.parity import sample_observations
from kiln.storage.policy_io import load_policy
from kiln.training.trainer import train
from tests.support.cli import TINY_RUN
from tests.support.export_fixtures import OBS_HIGH, OBS_LOW, onnx_actions, onnx_session, save_test_policy
from tests.support.spec_reference import reference_actions

SEED = 11


@pytest.fixture(scope="module")
def trained_run(tmp_path_factory) -> Path:
    """A tiny Pendulum-v1 run trained through the library."""
    run = tmp_path_factory.mktemp("export") / "run"
    train(compose_config("train", ["env=pendulum", "log.progress=off", *TINY_RUN]), run)
    return run


def onnx_episode_return(model: Path, env_record: dict, seed: int, noise_seed: int | None) -> float:
    """One episode of the task, actions from onnxruntime; noise drawn as Kiln's act draws it."""
    session = onnx_session(model)
    env = gym.make(env_record["id"], max_episode_steps=env_record["max_episode_steps"], **env_record["kwargs"])
    size = env.action_space.shape[0]
    # Kiln's stochastic act draws randn(1, m) per step from a generator seeded with the sampling seed.
    generator = None if noise_seed is None else torch.Generator().manual_seed(noise_seed)
    obs, _ = env.reset(seed=seed)
    total, done = 0.0, False
    while not done:
        feeds = {"observation": np.asarray(obs, np.float32)[None]}
        if generator is not None:
            feeds["noise"] = torch.randn((1, size), generator=generator).numpy()
        action = session.run(["action"], feeds)[0][0]
        obs, reward, terminated, truncated, _ = env.step(action)
        total += float(reward)
        done = terminated or truncated
    env.close()
    return total


@pytest.mark.parametrize("stochastic", [False, True], ids=["deterministic", "stochastic"])
def test_seeded_episode_reproduces_kilns_evaluation_return(trained_run, tmp_path, stochastic):
    policy = load_policy(trained_run)
    plan = plan_evaluation(policy, 1, SEED)
    kiln = evaluate_policy(policy, plan, deterministic=not stochastic)["episode_list"][0]["return"]
    out = tmp_path / "controller.onnx"
    export_policy(trained_run, out, stochastic=stochastic)
    exported = onnx_episode_return(out, policy.spec["env"], SEED, plan.sampling_seed if stochastic else None)
    print(f"{'stochastic' if stochastic else 'deterministic'} episode, reset seed {SEED}: Kiln {kiln!r}, "
          f"exported {exported!r}, relative difference {abs(exported - kiln) / abs(kiln):.2e}")  # fmt: skip
    assert exported == pytest.approx(kiln, rel=1e-4)


# ----- the file ----------------------------------------------------------------------------------


@pytest.mark.parametrize("opset", list(SUPPORTED_OPSETS))
def test_every_supported_opset_runs_and_matches_the_numpy_reference(tmp_path, opset):
    observations = sample_observations(OBS_LOW, OBS_HIGH, 1000, np.random.default_rng(123))
    folder = save_test_policy(tmp_path / "policy", "silu", widths=(64, 64))
    noise = np.random.default_rng(5).standard_normal((1000, 6)).astype(np.float32)
    for stochastic, feed in ((False, None), (True, noise)):
        out = tmp_path / f"controller_{stochastic}.onnx"
        export_policy(folder, out, stochastic=stochastic, opset=opset)
        model = onnx.load(str(out))
        assert [(o.domain, o.version) for o in model.opset_import] == [("", opset)]
        got = onnx_actions(out, observations[:1000], feed)
        assert np.max(np.abs(got - reference_actions(folder, observations[:1000], feed))) <= 1e-5


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


def test_the_report_describes_what_was_written(tmp_path):
    folder = save_test_policy(tmp_path / "policy", widths=(8,))
    out = tmp_path / "controller.onnx"
    report = export_policy(tmp_path, out, opset=15)  # a run folder holding policy/
    assert isinstance(report, ExportReport)
    assert (report.policy_folder, report.out, report.stochastic, report.opset) == (folder, out, False, 15)
    assert report.size_bytes == out.stat().st_size and report.checked_observations == 1000
    assert 0.0 <= report.max_difference <= 1e-5


def test_an_existing_file_is_kept_unless_overwrite(tmp_path):
    folder = save_test_policy(tmp_path / "policy", widths=(8,))
    out = tmp_path / "controller.onnx"
    out.write_bytes(b"mine")
    with pytest.raises(ExportError, match="already exists: choose another --out, or pass --overwrite"):
        export_policy(folder, out)
    assert out.read_bytes() == b"mine"
    export_policy(folder, out, overwrite=True)
    onnx.checker.check_model(onnx.load(str(out)))


@pytest.mark.parametrize("where,phrase", [("folder", "is a folder: give a file name"), ("missing", "does not exist: create it first")])
def test_an_output_that_cannot_be_a_file_is_refused(tmp_path, where, phrase):
    folder = save_test_policy(tmp_path / "policy", widths=(8,))
    out = tmp_path if where == "folder" else tmp_path / "no" / "controller.onnx"
    with pytest.raises(ExportError, match=phrase):
        export_policy(folder, out)
    assert not (tmp_path / "no").exists()


def test_a_controller_that_fails_the_parity_check_is_not_written(tmp_path, monkeypatch):
    from kiln.onnx_export import parity

    folder = save_test_policy(tmp_path / "policy", widths=(8,))
    monkeypatch.setattr(parity, "max_difference", lambda *args: 0.01)
    with pytest.raises(ExportError, match=r"differs from Kiln's by 0.01 \(> 1e-05\) on 1000 observations: nothing written"):
        export_policy(folder, tmp_path / "controller.onnx")
    monkeypatch.setattr(parity, "max_difference", lambda *args: float("nan"))
    with pytest.raises(ExportError, match="nothing written"):
        export_policy(folder, tmp_path / "controller.onnx")
    assert not (tmp_path / "controller.onnx").exists()
