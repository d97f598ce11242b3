"""Task construction from a TaskSpec, the spaces Kiln accepts, and a user's own task by module:id."""

import json
import sys
import textwrap

import gymnasium as gym
import numpy as np
import pytest

from kiln.envs.make import make_env, make_vector_env
from kiln.envs.task_error import TaskError
from kiln.envs.task_spec import TaskSpec
from tests.support.cli import TINY_RUN, run_script


class _DictObs(gym.Env):
    observation_space = gym.spaces.Dict({"x": gym.spaces.Box(-1, 1, (2,), np.float32)})
    action_space = gym.spaces.Box(-1, 1, (1,), np.float32)


class _Unbounded(gym.Env):
    observation_space = gym.spaces.Box(-1, 1, (2,), np.float32)
    action_space = gym.spaces.Box(-np.inf, np.inf, (1,), np.float32)


gym.register("KilnTest/DictObs-v0", entry_point=_DictObs)
gym.register("KilnTest/Unbounded-v0", entry_point=_Unbounded)


def test_registered_time_limit_is_kept():
    # Gymnasium registers Pendulum-v1 with max_episode_steps = 200 (gymnasium/envs/__init__.py).
    env = make_env(TaskSpec("Pendulum-v1"))
    assert env.spec.max_episode_steps == 200


def test_time_limit_override():
    assert make_env(TaskSpec("Pendulum-v1", {}, 50)).spec.max_episode_steps == 50


def test_options_reach_the_task():
    # Gymnasium's Pendulum-v1 takes g (gravity) as a keyword; the built env keeps it as an attribute.
    assert make_env(TaskSpec("Pendulum-v1", {"g": 3.5})).unwrapped.g == 3.5


@pytest.mark.parametrize(
    "env_id,match",
    [
        ("NoSuchTask-v0", "unknown env id"),
        ("CartPole-v1", "Discrete action space"),
        ("KilnTest/DictObs-v0", "Dict observation space"),
        ("KilnTest/Unbounded-v0", "unbounded action space"),
    ],
)
def test_unusable_tasks_are_refused_in_one_line(env_id, match):
    with pytest.raises(TaskError, match=match) as info:
        make_env(TaskSpec(env_id))
    assert "\n" not in str(info.value)


@pytest.mark.parametrize(
    "kwargs,match",
    [
        ({"stiffness": -1.0}, "stiffness must be"),  # a Kiln task's own check
        ({"handbrake": 1.0}, "unknown option"),  # the generic unknown-option check
    ],
)
def test_a_kiln_task_refusing_its_options_raises_its_own_error(kwargs, match):
    with pytest.raises(TaskError, match=match):
        make_env(TaskSpec("kiln/DamperTrim-v0", kwargs))


def test_a_foreign_task_refusing_its_options_raises_task_error():
    with pytest.raises(TaskError, match="rejected its arguments.*fix env.kwargs"):
        make_env(TaskSpec("Pendulum-v1", {"no_such_option": 1}))


def test_vector_env_has_the_copies_options_and_time_limit():
    vector_env = make_vector_env(TaskSpec("kiln/CarDock-v0", {"start_low": 1.0, "start_high": 1.0}, 3), 4)
    observations, _ = vector_env.reset(seed=0)
    # Start positions are U(start_low, start_high) = exactly 1.0 at rest, in every one of the 4 copies.
    np.testing.assert_array_equal(observations, np.tile([1.0, 0.0], (4, 1)))
    zero = np.zeros((4, 1), dtype=np.float32)
    truncated = [vector_env.step(zero)[3].tolist() for _ in range(3)]
    # A car at rest with no push never docks, so the spec's 3-step limit truncates every copy at step 3.
    assert truncated == [[False] * 4, [False] * 4, [True] * 4]


def test_vector_env_keeps_the_registered_time_limit():
    # kiln/FiringHold-v0 is registered with a 200-step limit (envs/registration.py, README task table).
    assert make_vector_env(TaskSpec("kiln/FiringHold-v0"), 2).max_episode_steps == 200


@pytest.mark.parametrize(
    "spec,copies,match",
    [
        (TaskSpec("Pendulum-v1"), 2, "no batched form"),
        (TaskSpec("kiln/FiringHold-v0"), 0, "copies must be"),
        (TaskSpec("NoSuchTask-v0"), 2, "unknown env id"),
        (TaskSpec("kiln/FiringHold-v0", {"burner": 1}), 2, "unknown option"),
    ],
)
def test_vector_env_refusals(spec, copies, match):
    with pytest.raises(TaskError, match=match):
        make_vector_env(spec, copies)


# A user's own module: a plain gymnasium.Env registered on import (Gymnasium's "module:id" convention).
USER_MODULE = '''
import gymnasium as gym
import numpy as np


class Hold(gym.Env):
    observation_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def __init__(self, level=0.25):
        self.level = level

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return np.full(1, self.level, dtype=np.float32), {}

    def step(self, action):
        return np.full(1, self.level, dtype=np.float32), -abs(float(action[0])), False, False, {}


gym.register("{task}", entry_point=Hold, max_episode_steps=7)
'''


def _write_module(folder, name, task):
    (folder / f"{name}.py").write_text(textwrap.dedent(USER_MODULE.replace("{task}", task)))


def test_user_task_by_module_qualified_id(tmp_path, monkeypatch):
    _write_module(tmp_path, "kiln_test_user_tasks", "KilnTestUserHold-v0")
    monkeypatch.syspath_prepend(str(tmp_path))
    env = make_env(TaskSpec("kiln_test_user_tasks:KilnTestUserHold-v0", {"level": 0.5}, None))
    observation, _ = env.reset(seed=0)
    assert observation.tolist() == [0.5]  # the option reached the user's constructor
    assert env.spec.max_episode_steps == 7  # the limit the module registered


def test_make_env_leaves_sys_path_as_the_caller_has_it(tmp_path, monkeypatch):
    # The library never changes the caller's sys.path (README, "Use from Python"): a module in the
    # current folder that is not on sys.path is not found there, and sys.path is as it was.
    _write_module(tmp_path, "kiln_test_cwd_tasks", "KilnTestCwdHold-v0")
    monkeypatch.setattr(sys, "path", [p for p in sys.path if p not in ("", ".", str(tmp_path))])
    monkeypatch.chdir(tmp_path)
    before = list(sys.path)
    with pytest.raises(TaskError, match="cannot import module 'kiln_test_cwd_tasks'.*on sys.path for a Python caller"):
        make_env(TaskSpec("kiln_test_cwd_tasks:KilnTestCwdHold-v0", {}, None))
    assert sys.path == before


def test_the_train_script_finds_a_module_in_the_folder_it_runs_from(tmp_path):
    # `python scripts/train.py` has scripts/ on sys.path, not the folder it is typed in; the command
    # makes that folder importable itself (README, "Your own task and presets").
    _write_module(tmp_path, "kiln_test_script_tasks", "KilnTestScriptHold-v0")
    run_dir = tmp_path / "run"
    proc = run_script(
        "train", "env.id=kiln_test_script_tasks:KilnTestScriptHold-v0", "env.name=hold", *TINY_RUN,
        f"hydra.run.dir={run_dir}", cwd=tmp_path, timeout=300,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    result = json.loads((run_dir / "result.json").read_text())
    assert result["env_id"] == "kiln_test_script_tasks:KilnTestScriptHold-v0"
    # The user's module registered a 7-step limit, and its task never terminates: 7-step episodes.
    assert result["evaluation"]["length_mean"] == 7


def test_missing_user_module_is_one_clear_line(tmp_path, monkeypatch):
    monkeypatch.setattr(sys, "path", list(sys.path))  # whatever the lookup does, sys.path stays the suite's
    monkeypatch.chdir(tmp_path)
    with pytest.raises(TaskError) as info:
        make_env(TaskSpec("kiln_test_absent_module:Anything-v0", {}, None))
    message = str(info.value)
    assert "'kiln_test_absent_module'" in message
    assert "importable from the current directory" in message and "installed" in message
    assert "\n" not in message


def test_user_module_that_registers_another_id_is_one_clear_line(tmp_path, monkeypatch):
    _write_module(tmp_path, "kiln_test_other_tasks", "KilnTestOtherHold-v0")
    monkeypatch.syspath_prepend(str(tmp_path))
    expected = "'kiln_test_other_tasks' was imported but registers no task 'Missing-v0'"
    with pytest.raises(TaskError, match=expected) as info:
        make_env(TaskSpec("kiln_test_other_tasks:Missing-v0", {}, None))
    assert "\n" not in str(info.value)


def test_user_module_failing_to_import_is_one_clear_line(tmp_path, monkeypatch):
    (tmp_path / "kiln_test_broken_tasks.py").write_text("import kiln_test_no_such_dependency\n")
    (tmp_path / "kiln_test_crashing_tasks.py").write_text("raise RuntimeError('bad\\nsetup')\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    with pytest.raises(TaskError, match="kiln_test_broken_tasks.*failed to import.*kiln_test_no_such_dependency"):
        make_env(TaskSpec("kiln_test_broken_tasks:Any-v0", {}, None))
    with pytest.raises(TaskError, match="kiln_test_crashing_tasks.*RuntimeError: bad") as info:
        make_env(TaskSpec("kiln_test_crashing_tasks:Any-v0", {}, None))
    assert "\n" not in str(info.value)


# A user's own task written as Kiln's are: options dataclass and batched dynamics, registered on import.
USER_BATCHED_MODULE = '''
from dataclasses import dataclass

import numpy as np
from gymnasium import spaces

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_entry import register_task


@dataclass(frozen=True)
class CountOptions:
    start: float = 2.0


class Count(BatchedDynamics):
    options_type = CountOptions
    state_size = 1

    def __init__(self, options):
        super().__init__(options)
        self.observation_space = spaces.Box(-np.inf, np.inf, (1,), np.float32)
        self.action_space = spaces.Box(-1.0, 1.0, (1,), np.float32)

    def sample_start(self, rng, count):
        return np.full((count, 1), self.options.start)

    def advance(self, states, actions, rng):
        return states + 1.0, np.ones(len(states)), np.zeros(len(states), dtype=bool)

    def observe(self, states):
        return states.astype(np.float32)


register_task("KilnTestCount-v0", Count, max_episode_steps=4)
'''


def test_user_batched_task_by_module_qualified_id_in_both_forms(tmp_path, monkeypatch):
    (tmp_path / "kiln_test_batched_tasks.py").write_text(USER_BATCHED_MODULE)
    monkeypatch.syspath_prepend(str(tmp_path))
    spec = TaskSpec("kiln_test_batched_tasks:KilnTestCount-v0", {"start": 5.0}, None)
    assert make_env(spec).reset(seed=0)[0].tolist() == [5.0]
    vector_env = make_vector_env(spec, 3)
    assert vector_env.reset(seed=0)[0].tolist() == [[5.0]] * 3
    # x' = x + 1 on every copy: 5 -> 6; the registered 4-step limit is the batch's.
    assert vector_env.step(np.zeros((3, 1), dtype=np.float32))[0].tolist() == [[6.0]] * 3
    assert vector_env.max_episode_steps == 4
