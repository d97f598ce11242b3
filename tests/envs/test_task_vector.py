"""Many copies of a task as one Gymnasium VectorEnv: its checks of copy count, time limit, autoreset mode
and seed, time limits as Gymnasium's TimeLimit applies them, and both of Gymnasium's autoreset modes.

The dynamics are the test's own (x' = x + a, reward x', terminated once x' reaches a goal), so every
expected number is hand arithmetic. CarDock's autoreset is also checked in tests/envs/test_dock.py.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from gymnasium import spaces
from gymnasium.vector import AutoresetMode

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_error import TaskError
from kiln.envs.task_vector import TaskVectorEnv


@dataclass(frozen=True)
class StepOptions:
    goal: float = 3.0


class StepDynamics(BatchedDynamics):
    """x' = x + a; reward x'; terminated once x' >= goal; starts at a uniform draw in [0, 0.5)."""

    options_type = StepOptions
    state_size = 1

    def __init__(self, options: StepOptions) -> None:
        super().__init__(options)
        self.observation_space = spaces.Box(-np.inf, np.inf, shape=(1,), dtype=np.float32)
        self.action_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)

    def sample_start(self, rng: np.random.Generator, count: int) -> np.ndarray:
        return rng.uniform(0.0, 0.5, size=(count, 1))

    def advance(self, states, actions, rng):
        next_states = states + actions
        return next_states, next_states[:, 0].copy(), next_states[:, 0] >= self.options.goal

    def observe(self, states: np.ndarray) -> np.ndarray:
        return states.astype(np.float32)


def _env(copies: int = 2, limit: int | None = None, mode=AutoresetMode.NEXT_STEP) -> TaskVectorEnv:
    return TaskVectorEnv(StepDynamics(StepOptions()), copies, limit, mode)


@pytest.mark.parametrize("copies", [0, -1, 2.5, True, None, "x", [2], float("inf"), float("nan")])
def test_bad_copy_count_is_a_task_error(copies):
    # The class's contract: an invalid num_envs raises TaskError (one line naming it and the fix).
    with pytest.raises(TaskError) as info:
        _env(copies=copies)
    # (None, "x", [2], inf and nan used to escape as int()'s TypeError, ValueError or OverflowError.)
    assert str(info.value) == f"num_envs must be an integer >= 1, got {copies!r}; pass e.g. 8"


@pytest.mark.parametrize("limit", [0, 1.5, True, "x", [3]])
def test_bad_time_limit_is_a_task_error(limit):
    with pytest.raises(TaskError) as info:
        _env(limit=limit)
    assert str(info.value) == f"max_episode_steps must be an integer >= 1 or None, got {limit!r}; pass e.g. 200"


@pytest.mark.parametrize("mode", ["disabled", AutoresetMode.DISABLED, "sometimes"])
def test_only_next_step_and_same_step_autoreset(mode):
    with pytest.raises(TaskError, match="autoreset_mode must be NEXT_STEP or SAME_STEP"):
        _env(mode=mode)


def test_whole_float_counts_are_accepted():
    env = TaskVectorEnv(StepDynamics(StepOptions()), 2.0, 3.0)
    assert env.num_envs == 2 and env.max_episode_steps == 3


def test_mode_given_as_its_value_and_the_spaces_of_the_batch():
    env = _env(copies=3, mode="SameStep")  # gymnasium.vector.AutoresetMode.SAME_STEP.value
    assert env.metadata["autoreset_mode"] == AutoresetMode.SAME_STEP
    # Source: gymnasium.vector.utils.batch_space stacks a Box along a new leading axis.
    assert env.observation_space.shape == (3, 1) and env.action_space.shape == (3, 1)
    assert env.single_action_space == spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)


def test_seed_must_be_one_int_and_fixes_the_start_states():
    env = _env(copies=3)
    with pytest.raises(ValueError, match="seed must be an int or None"):
        env.reset(seed=[1, 2, 3])
    first, _ = env.reset(seed=np.int64(4))
    again, _ = env.reset(seed=4)
    # Gymnasium's seeding contract: the same seed gives the same start states; all copies share one
    # generator, so they draw three successive uniforms of numpy.random.default_rng-style seeding.
    np.testing.assert_array_equal(first, again)
    assert first.shape == (3, 1) and np.all((0.0 <= first) & (first < 0.5)) and len(set(first[:, 0])) == 3


def test_time_limit_truncates_and_terminated_and_truncated_can_both_be_set():
    env = _env(copies=2, limit=3)
    env.reset(options={"start_state": [[0.0], [1.0]]})
    push = np.full((2, 1), 1.0, dtype=np.float32)
    flags = [tuple(map(list, env.step(push)[2:4])) for _ in range(3)]
    # Hand arithmetic: copy 1 goes 1 → 2 → 3 and reaches the goal 3 on step 2, so step 3 restarts it (no
    # flags, NEXT_STEP autoreset); copy 0 goes 0 → 1 → 2 → 3 and reaches it on step 3, the last allowed
    # step, where (as Gymnasium's TimeLimit does) it is reported both terminated and truncated.
    assert flags == [([False, False], [False, False]), ([False, True], [False, False]), ([True, False], [True, False])]


def test_next_step_autoreset_discards_the_step_after_an_episode_ends():
    env = _env(copies=2)
    env.reset(seed=0, options={"start_state": [[2.5], [0.0]]})
    push = np.full((2, 1), 1.0, dtype=np.float32)
    observations, rewards, terminated, _, _ = env.step(push)
    # Hand arithmetic: copy 0 reaches 3.5 ≥ 3 (reward 3.5, terminated); copy 1 reaches 1.
    np.testing.assert_allclose(observations, [[3.5], [1.0]])
    assert rewards.tolist() == [3.5, 1.0] and terminated.tolist() == [True, False]
    observations, rewards, terminated, _, _ = env.step(push)
    # Gymnasium's NEXT_STEP mode: the finished copy restarts from a start state with reward 0 and no
    # flags, its action ignored; the other copy steps on (1 → 2).
    assert 0.0 <= observations[0, 0] < 0.5 and rewards[0] == 0.0 and not terminated[0]
    assert observations[1, 0] == 2.0 and rewards[1] == 2.0


def test_same_step_autoreset_reports_the_final_observation():
    env = _env(copies=2, mode=AutoresetMode.SAME_STEP)
    env.reset(seed=0, options={"start_state": [2.5]})  # one state for every copy
    observations, rewards, terminated, truncated, infos = env.step(np.array([[1.0], [-1.0]], dtype=np.float32))
    # Hand arithmetic: copy 0 reaches 3.5 (terminated), copy 1 falls to 1.5. Gymnasium's SAME_STEP mode
    # returns the next episode's start at once and the last observation in infos["final_obs"].
    assert terminated.tolist() == [True, False] and not truncated.any()
    assert infos["_final_obs"].tolist() == [True, False] and infos["final_obs"][0, 0] == 3.5
    assert 0.0 <= observations[0, 0] < 0.5 and observations[1, 0] == 1.5 and rewards.tolist() == [3.5, 1.5]
    _, _, _, _, infos = env.step(np.zeros((2, 1), dtype=np.float32))
    assert infos == {}  # nothing ended: no final observations


def test_states_are_a_copy():
    env = _env(copies=2)
    env.reset(options={"start_state": [[1.0], [2.0]]})
    states = env.states
    states[:] = 99.0
    assert env.states.tolist() == [[1.0], [2.0]]
