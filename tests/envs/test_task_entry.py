"""The generic single-copy and batched entry points, on a tiny task whose dynamics the test writes."""

from __future__ import annotations

from dataclasses import dataclass

import gymnasium as gym
import numpy as np
import pytest
from gymnasium import spaces

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_entry import register_task
from kiln.envs.task_error import TaskError


@dataclass(frozen=True)
class DriftOptions:
    gain: float = 1.0
    goal: float = 3.0

    def __post_init__(self) -> None:
        if self.gain <= 0:
            raise TaskError(f"gain must be > 0, got {self.gain}")


class DriftDynamics(BatchedDynamics):
    """x' = x + gain * a, reward -|x'|, terminated once x' >= goal."""

    options_type = DriftOptions
    state_size = 1

    def __init__(self, options: DriftOptions) -> None:
        super().__init__(options)
        self.observation_space = spaces.Box(-np.inf, np.inf, shape=(1,), dtype=np.float32)
        self.action_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)

    def sample_start(self, rng: np.random.Generator, count: int) -> np.ndarray:
        return np.zeros((count, 1))

    def advance(self, states, actions, rng):
        next_states = states + self.options.gain * actions
        return next_states, -np.abs(next_states[:, 0]), next_states[:, 0] >= self.options.goal

    def observe(self, states: np.ndarray) -> np.ndarray:
        return states.astype(np.float32)


TASK = "KilnTest/Drift-v0"
register_task(TASK, DriftDynamics, max_episode_steps=5)


def test_dynamics_alone_give_a_single_copy_env() -> None:
    env = gym.make(TASK, gain=2.0)
    env.reset(seed=0)
    flags = []
    for push in (1.0, 0.5):
        observation, reward, terminated, truncated, _ = env.step(np.array([push], dtype=np.float32))
        flags.append((terminated, truncated))
    # Hand arithmetic with gain 2: x = 0 + 2 * 1 = 2 (below the goal 3), then 2 + 2 * 0.5 = 3 (reaches it).
    assert observation.tolist() == [3.0] and reward == -3.0
    assert flags == [(False, False), (True, False)]  # terminated by the dynamics, inside the 5-step limit


def test_dynamics_alone_give_a_batched_env_with_the_registered_limit() -> None:
    vector_env = gym.make_vec(TASK, num_envs=2, vectorization_mode="vector_entry_point", goal=100.0)
    vector_env.reset(seed=0)
    truncated = [vector_env.step(np.full((2, 1), 0.5, dtype=np.float32))[3].tolist() for _ in range(5)]
    # register_task(..., max_episode_steps=5): Gymnasium passes the registered limit to the batch.
    assert truncated == [[False, False]] * 4 + [[True, True]]


@pytest.mark.parametrize("form", ["single", "batched"])
def test_one_unknown_option_check_names_the_option_and_lists_the_known(form: str) -> None:
    with pytest.raises(TaskError) as info:
        if form == "single":
            gym.make(TASK, gain=1.0, drag=0.1, mass=2.0)
        else:
            gym.make_vec(TASK, num_envs=2, vectorization_mode="vector_entry_point", drag=0.1, mass=2.0)
    assert str(info.value) == "unknown option(s) drag, mass for KilnTest/Drift-v0; its options are gain, goal"


@pytest.mark.parametrize("form", ["single", "batched"])
def test_invalid_option_value_raises_the_options_own_error(form: str) -> None:
    with pytest.raises(TaskError, match="gain must be > 0"):
        if form == "single":
            gym.make(TASK, gain=0.0)
        else:
            gym.make_vec(TASK, num_envs=2, vectorization_mode="vector_entry_point", gain=0.0)


def test_render_mode_is_refused() -> None:
    with pytest.raises(TaskError, match="cannot render"):
        gym.make(TASK, render_mode="rgb_array")


def test_register_task_refuses_what_is_not_batched_dynamics_with_dataclass_options() -> None:
    class NoOptions(DriftDynamics):
        options_type = dict

    with pytest.raises(TypeError, match="options_type must be a dataclass"):
        register_task("KilnTest/NoOptions-v0", NoOptions)
    with pytest.raises(TypeError, match="BatchedDynamics subclass"):
        register_task("KilnTest/NotDynamics-v0", DriftOptions)
    assert "KilnTest/NoOptions-v0" not in gym.registry and "KilnTest/NotDynamics-v0" not in gym.registry
