"""Saved-policy folder: round trip, no pickle, the weight layout spec.json documents, file
permissions and interrupted saves, and clear errors for broken folders.

References: a NumPy controller written only from spec.json (tests/support/spec_reference.py, no Kiln
imports); the safetensors file's own header; file modes as umask(2) and open(2) define them.
"""

import json
import os
import socket
import stat
import subprocess
import sys
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch
from safetensors import safe_open

from kiln.errors import PolicyFolderError
from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import SPEC, WEIGHTS, actor_block, build_spec, load_policy, save_policy
from tests.support.export_fixtures import OBS_HIGH, OBS_LOW, save_test_policy
from tests.support.spec_reference import reference_actions, reference_heads

REPO = Path(__file__).resolve().parents[2]


def _saved(tmp_path):
    actor = SquashedGaussianActor(3, 2, (16, 16), "tanh", (-5.0, 1.0), torch.Generator().manual_seed(0))
    obs_space = gym.spaces.Box(-np.inf, np.inf, (3,), np.float32)
    act_space = gym.spaces.Box(np.array([-2.0, 0.0], np.float32), np.array([2.0, 1.0], np.float32))
    spec = build_spec(actor, obs_space, act_space, {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": 200},
                      {"agent": {"nonlinearity": "tanh"}})  # fmt: skip
    return actor, save_policy(tmp_path / "policy", actor, spec)


def test_round_trip_gives_identical_actions_in_task_units(tmp_path):
    actor, folder = _saved(tmp_path)
    policy = load_policy(folder)
    obs = np.array([0.3, -1.0, 2.0], np.float32)
    expected = torch.tanh(actor(torch.tensor(obs).unsqueeze(0))[0])[0].detach().numpy()
    # Affine map of (−1, 1) onto the bounds [−2, 2] × [0, 1] (the saved action space).
    expected = np.array([2.0 * expected[0], 0.5 + 0.5 * expected[1]])
    np.testing.assert_allclose(policy.act(obs), expected, rtol=1e-6, atol=1e-6)


def test_files_are_safetensors_and_json_with_spaces(tmp_path):
    _, folder = _saved(tmp_path)
    with safe_open(str(folder / WEIGHTS), framework="pt") as f:  # a pickle would fail to open here
        assert len(list(f.keys())) > 0
    spec = json.loads((folder / SPEC).read_text())
    assert spec["observation_space"]["low"] == ["-inf"] * 3
    assert spec["action_space"]["high"] == [2.0, 1.0]
    assert spec["actor"]["layer_widths"] == [16, 16]
    assert spec["env"]["id"] == "Pendulum-v1"
    assert "kiln_version" in spec


def test_run_folder_is_accepted(tmp_path):
    _saved(tmp_path)
    assert load_policy(tmp_path).spec["env"]["id"] == "Pendulum-v1"


@pytest.mark.parametrize("missing", [SPEC, WEIGHTS])
def test_incomplete_folder_names_the_missing_file(tmp_path, missing):
    _, folder = _saved(tmp_path)
    (folder / missing).unlink()
    with pytest.raises(PolicyFolderError, match=missing.replace(".", r"\.")):
        load_policy(folder)


def test_missing_folder(tmp_path):
    with pytest.raises(PolicyFolderError, match="no such folder"):
        load_policy(tmp_path / "nope")


def test_weights_from_another_network_are_refused(tmp_path):
    _, folder = _saved(tmp_path)
    spec = json.loads((folder / SPEC).read_text())
    spec["actor"]["layer_widths"] = [32, 32]
    (folder / SPEC).write_text(json.dumps(spec))
    with pytest.raises(PolicyFolderError, match="does not match"):
        load_policy(folder)


def test_saving_over_an_existing_policy_replaces_it_whole(tmp_path):
    _, folder = _saved(tmp_path)
    _saved(tmp_path)
    assert sorted(p.name for p in folder.iterdir()) == sorted([SPEC, WEIGHTS])
    assert [p.name for p in tmp_path.iterdir()] == ["policy"]


# ----- permissions and interrupted saves (the policy is meant to be handed on) ----------------------


def _save(folder: Path) -> Path:
    actor = SquashedGaussianActor(3, 1, (8,), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    box = gym.spaces.Box(-1.0, 1.0, (3,), np.float32)
    spec = build_spec(actor, box, gym.spaces.Box(-2.0, 2.0, (1,), np.float32),
                      {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": None}, {})  # fmt: skip
    return save_policy(folder, actor, spec)


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


@pytest.mark.parametrize("umask,folder_mode,file_mode", [(0o022, 0o755, 0o644), (0o077, 0o700, 0o600)])
def test_policy_follows_the_umask(tmp_path: Path, umask: int, folder_mode: int, file_mode: int) -> None:
    previous = os.umask(umask)
    try:
        folder = _save(tmp_path / "policy")
    finally:
        os.umask(previous)
    # Folders are created 0o777 and files 0o666, less the umask (umask(2)).
    assert _mode(folder) == folder_mode
    assert {p.name: _mode(p) for p in folder.iterdir()} == {"spec.json": file_mode, "weights.safetensors": file_mode}


_KILLED_SAVE = """
import os, sys
from kiln.storage import policy_io
from tests.storage.test_policy_io import _save
# Die the way a killed process does (no cleanup) after the weights are written, before the spec.
policy_io.write_text_atomic = lambda *args: os._exit(9)
_save(__import__("pathlib").Path(sys.argv[1]))
"""


def test_a_killed_save_leaves_a_temporary_that_the_next_save_removes(tmp_path: Path) -> None:
    proc = subprocess.run([sys.executable, "-c", _KILLED_SAVE, str(tmp_path / "policy")], cwd=REPO,
                          env=dict(os.environ, PYTHONPATH=str(REPO)), capture_output=True, text=True, timeout=120, check=False)  # fmt: skip
    assert proc.returncode == 9, proc.stderr
    left = [p.name for p in tmp_path.iterdir()]
    assert len(left) == 1 and left[0].startswith(".policy-saving-"), left  # the killed save's temporary
    _save(tmp_path / "policy")
    assert [p.name for p in tmp_path.iterdir()] == ["policy"]
    assert load_policy(tmp_path / "policy").spec["env"]["id"] == "Pendulum-v1"


def test_a_live_writers_temporary_and_another_hosts_are_left_alone(tmp_path: Path) -> None:
    host = socket.gethostname()
    live = tmp_path / f".policy-saving-{host}-{os.getppid()}-0123abcd"  # our parent is alive
    elsewhere = tmp_path / ".policy-saving-some-other-host-1-0123abcd"  # another machine's pid 1
    mine = tmp_path / "my-notes"
    for folder in (live, elsewhere, mine):
        folder.mkdir()
    _save(tmp_path / "policy")
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([live.name, elsewhere.name, mine.name, "policy"])


# ----- the weight layout spec.json documents -------------------------------------------------------


def test_layout_lists_the_files_tensors_in_order_with_their_shapes(tmp_path):
    _, folder = _saved(tmp_path)
    layout = json.loads((folder / SPEC).read_text())["actor"]["weight_layout"]
    # Hand arithmetic for obs 3, widths (16, 16), 2 actions: [3, 16], [16, 16], [16, 2·2].
    assert [(t["weight"], t["weight_shape"], t["bias"], t["bias_shape"], t["role"]) for t in layout["tensors"]] == [
        ("layers.0.weight", [3, 16], "layers.0.bias", [16], "hidden"),
        ("layers.1.weight", [16, 16], "layers.1.bias", [16], "hidden"),
        ("layers.2.weight", [16, 4], "layers.2.bias", [4], "output"),
    ]
    # The safetensors header names exactly those tensors, with those shapes.
    with safe_open(str(folder / WEIGHTS), framework="pt") as f:
        header = {name: f.get_slice(name).get_shape() for name in f.keys()}  # noqa: SIM118 (not a dict)
    assert header == {t[k]: t[f"{k}_shape"] for t in layout["tensors"] for k in ("weight", "bias")}
    assert "tanh" in layout["layer_order"] and "first 2 are the mean" in layout["output_split"]
    assert "(-5.0, 1.0)" in layout["log_std"]


def test_actor_block_reads_the_sizes_from_the_actors_layers():
    # A one-hidden-layer actor: widths read back from the weights ([4, 7] and [7, 2·3] by hand).
    actor = SquashedGaussianActor(4, 3, (7,), "elu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    block = actor_block(actor)
    assert (block["observation_size"], block["action_size"], block["layer_widths"]) == (4, 3, [7])
    assert (block["nonlinearity"], block["log_std_soft_limits"]) == ("elu", [-20.0, 2.0])
    assert [t["weight_shape"] for t in block["weight_layout"]["tensors"]] == [[4, 7], [7, 6]]


@pytest.mark.parametrize("nonlinearity", ["relu", "tanh", "elu", "silu"])
def test_numpy_reference_from_spec_alone_matches_kiln(tmp_path, nonlinearity):
    """spec.json describes the controller completely: a NumPy forward written from its text alone
    (tests/support/spec_reference.py) gives Kiln's actions. Tolerances are the project's requirement
    for float32 inference (no outside source): 1e-6 in (−1, 1) and task units, max over every element."""
    from kiln.onnx_export.parity import kiln_actions, sample_observations

    observations = sample_observations(OBS_LOW, OBS_HIGH, 10_000, np.random.default_rng(123))
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


def test_act_is_act_batch_of_one_row(tmp_path):
    _, folder = _saved(tmp_path)
    policy = load_policy(folder)
    obs = np.random.default_rng(0).normal(size=(4, 3)).astype(np.float32)
    batch = policy.act_batch(obs, True)
    # A batch of 4 and of 1 may sum in another order (float32 round-off), so 1e-6, not bit for bit.
    np.testing.assert_allclose(np.stack([policy.act(o) for o in obs]), batch, rtol=1e-6, atol=1e-6)
    one, copy = torch.Generator().manual_seed(1), torch.Generator().manual_seed(1)
    np.testing.assert_array_equal(policy.act(obs[0], False, one), policy.act_batch(obs[:1], False, copy)[0])


def test_loading_leaves_torch_s_global_generator_alone(tmp_path):
    # Project rule (README, "Use from Python"): nothing Kiln does changes the caller's random state.
    # torch.get_rng_state() is the global generator's whole state (torch.random docs).
    folder = save_test_policy(tmp_path / "policy")
    before = torch.get_rng_state()
    load_policy(folder)
    assert torch.equal(torch.get_rng_state(), before)
