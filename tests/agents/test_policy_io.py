"""Saved-policy folder: round trip, no pickle, and clear errors for broken folders."""

import json

import gymnasium as gym
import numpy as np
import pytest
import torch
from safetensors import safe_open

from kiln.errors import PolicyFolderError
from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import SPEC, WEIGHTS, build_spec, load_policy, save_policy


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
