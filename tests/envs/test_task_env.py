"""One copy of a task as a gymnasium.Env: Gymnasium's own API checker, its seeding contract, a start
state chosen through reset options, and the refusal of a render mode. The dynamics are the test's own
(x' = x + a with noise from the env's generator), so expected numbers are hand arithmetic."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pytest
from gymnasium import spaces
from gymnasium.utils.env_checker import check_env

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_env import TaskEnv
from kiln.envs.task_error import TaskError


@dataclass(frozen=True)
class WalkOptions:
    noise: float = 0.1


class WalkDynamics(BatchedDynamics):
    """x' = x + a + noise·N(0, 1); reward −|x'|; never terminates; starts at N(0, 1)."""

    options_type = WalkOptions
    state_size = 1

    def __init__(self, options: WalkOptions) -> None:
        super().__init__(options)
        self.observation_space = spaces.Box(-10.0, 10.0, shape=(1,), dtype=np.float32)
        self.action_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)

    def sample_start(self, rng, count):
        return rng.standard_normal((count, 1))

    def advance(self, states, actions, rng):
        next_states = states + actions + self.options.noise * rng.standard_normal(states.shape)
        return next_states, -np.abs(next_states[:, 0]), np.zeros(len(states), dtype=bool)

    def observe(self, states):
        return np.clip(states, -10.0, 10.0).astype(np.float32)


def _env(noise: float = 0.1) -> TaskEnv:
    return TaskEnv(WalkDynamics(WalkOptions(noise)))


def test_passes_gymnasium_env_checker():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the checker's advice on space bounds is not under test
        # Source: Gymnasium's own API checker (reset/step signatures, dtypes, seeding determinism).
        check_env(_env())


def test_same_seed_same_episode():
    env = _env()
    first = [env.reset(seed=3)[0]] + [env.step(np.array([0.5], np.float32))[0] for _ in range(3)]
    again = [env.reset(seed=3)[0]] + [env.step(np.array([0.5], np.float32))[0] for _ in range(3)]
    # Gymnasium's seeding contract: reset(seed=s) fixes every later draw of the env's np_random.
    np.testing.assert_array_equal(first, again)


def test_chosen_start_state_and_one_step_by_hand():
    env = _env(noise=0.0)
    observation, info = env.reset(options={"start_state": [0.25]})
    assert observation.tolist() == [0.25] and info == {}
    observation, reward, terminated, truncated, info = env.step(np.array([2.0], np.float32))
    # Hand arithmetic: the action 2 is clipped to the bound 1, so x' = 0.25 + 1 = 1.25 and r = −1.25.
    # Truncation is left to Gymnasium's TimeLimit wrapper, so the env itself never truncates.
    assert observation.tolist() == [1.25] and reward == -1.25 and type(reward) is float
    assert (terminated, truncated, info) == (False, False, {})
    state = env.state
    state[0] = 7.0
    assert env.state.tolist() == [1.25]  # a copy: changing it changes nothing


def test_render_mode_is_refused():
    with pytest.raises(TaskError) as info:
        TaskEnv(WalkDynamics(WalkOptions()), render_mode="human")
    assert str(info.value) == "Kiln's own tasks cannot render (got render_mode='human'); pass render_mode=None"
    assert TaskEnv.metadata["render_modes"] == []
