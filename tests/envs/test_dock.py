"""CarDock dynamics by hand, and how its episodes end (terminated vs truncated, autoreset)."""

from __future__ import annotations

import warnings

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env
from gymnasium.vector import AutoresetMode

import kiln.envs  # noqa: F401  (registers the kiln/ ids)
from kiln.envs.task_error import TaskError

# Defaults used in the hand arithmetic below: dt 0.1, push_gain 1, friction 0.2, rail [0, 2], dock at
# 1.5 +- 0.05 at speed <= 0.2, step_cost 0.1, effort_cost 0.01, dock_bonus 10.


def step_from(state: list[float], push: float) -> tuple[np.ndarray, float, bool, bool]:
    env = gym.make("kiln/CarDock-v0")
    env.reset(seed=0, options={"start_state": state})
    observation, reward, terminated, truncated, _ = env.step(np.array([push], dtype=np.float32))
    return observation, reward, terminated, truncated


def test_free_step_by_hand() -> None:
    observation, reward, terminated, _ = step_from([1.0, 0.5], 1.0)
    # v' = 0.5 + 0.1 (1 * 1 - 0.2 * 0.5) = 0.59; p' = 1.0 + 0.1 * 0.59 = 1.059;
    # r = -0.1 - 0.01 * 1^2 = -0.11; 1.059 is outside the dock.
    np.testing.assert_allclose(observation, [1.059, 0.59], rtol=1e-6)
    assert reward == pytest.approx(-0.11, rel=1e-12)
    assert not terminated


def test_slow_arrival_docks_and_terminates() -> None:
    observation, reward, terminated, truncated = step_from([1.48, 0.1], 0.0)
    # v' = 0.1 + 0.1 (0 - 0.02) = 0.098; p' = 1.48 + 0.0098 = 1.4898; |p' - 1.5| = 0.0102 <= 0.05 and
    # 0.098 <= 0.2, so it docks: r = -0.1 + 10 = 9.9, terminated.
    np.testing.assert_allclose(observation, [1.4898, 0.098], rtol=1e-6)
    assert reward == pytest.approx(9.9, rel=1e-12)
    assert terminated and not truncated


def test_fast_pass_through_the_dock_does_not_terminate() -> None:
    observation, reward, terminated, _ = step_from([1.45, 1.0], 0.0)
    # v' = 1.0 + 0.1 (0 - 0.2) = 0.98; p' = 1.45 + 0.098 = 1.548: inside the dock, but 0.98 > 0.2.
    np.testing.assert_allclose(observation, [1.548, 0.98], rtol=1e-6)
    assert reward == pytest.approx(-0.1, rel=1e-12)
    assert not terminated


def test_buffer_stop_at_the_rail_end() -> None:
    observation, _, terminated, _ = step_from([1.98, 0.5], 1.0)
    # v' = 0.59, p' = 1.98 + 0.059 = 2.039 > 2: clipped to 2 and stopped (v' = 0).
    np.testing.assert_allclose(observation, [2.0, 0.0], atol=1e-7)
    assert not terminated


def test_time_limit_truncates_without_terminating() -> None:
    env = gym.make("kiln/CarDock-v0", max_episode_steps=5)
    env.reset(seed=3)
    flags = [env.step(np.zeros(1, dtype=np.float32))[2:4] for _ in range(5)]
    # A car at rest with no push never moves, so it cannot dock; Gymnasium's TimeLimit truncates at
    # step max_episode_steps = 5 (Gymnasium's time-limit semantics).
    assert flags == [(False, False)] * 4 + [(False, True)]
    assert gym.spec("kiln/CarDock-v0").max_episode_steps == 200


def test_vector_next_step_autoreset_after_docking_and_time_limit() -> None:
    vector_env = gym.make_vec(
        "kiln/CarDock-v0", num_envs=3, vectorization_mode="vector_entry_point", max_episode_steps=2
    )
    assert vector_env.metadata["autoreset_mode"] == AutoresetMode.NEXT_STEP
    # Copy 0 docks on step 1 (as in the hand computation above); copies 1 and 2 sit at rest.
    vector_env.reset(seed=0, options={"start_state": [[1.48, 0.1], [0.2, 0.0], [0.3, 0.0]]})
    zero = np.zeros((3, 1), dtype=np.float32)
    observations, rewards, terminated, truncated, _ = vector_env.step(zero)
    np.testing.assert_allclose(rewards, [9.9, -0.1, -0.1], rtol=1e-12)
    assert terminated.tolist() == [True, False, False] and not truncated.any()
    observations, rewards, terminated, truncated, _ = vector_env.step(zero)
    # Gymnasium's next-step autoreset (gymnasium.vector.AutoresetMode.NEXT_STEP): the finished copy
    # starts afresh on this step with reward 0 and no flags; the others hit the 2-step limit.
    assert rewards[0] == 0.0 and not terminated[0] and not truncated[0]
    assert 0.0 <= observations[0, 0] <= 0.5 and observations[0, 1] == 0.0  # a start state
    assert truncated[1:].all() and not terminated[1:].any()
    np.testing.assert_allclose(observations[1:], [[0.2, 0.0], [0.3, 0.0]], rtol=1e-6)
    # The reset step is not a step of the new episode, so copy 0 truncates two steps after it.
    observations, rewards, _, truncated, _ = vector_env.step(zero)
    assert rewards[1:].tolist() == [0.0, 0.0] and not truncated.any()
    assert rewards[0] == pytest.approx(-0.1)
    _, _, terminated, truncated, _ = vector_env.step(zero)
    assert truncated.tolist() == [True, False, False] and not terminated.any()


def test_vector_same_step_autoreset_reports_final_observation() -> None:
    vector_env = gym.make_vec(
        "kiln/CarDock-v0",
        num_envs=2,
        vectorization_mode="vector_entry_point",
        autoreset_mode=AutoresetMode.SAME_STEP,
    )
    vector_env.reset(seed=0, options={"start_state": [[1.48, 0.1], [0.2, 0.0]]})
    observations, _, terminated, _, infos = vector_env.step(np.zeros((2, 1), dtype=np.float32))
    # Gymnasium's same-step convention: the last observation goes to infos["final_obs"], the returned
    # one is already the next episode's start.
    assert terminated.tolist() == [True, False]
    assert infos["_final_obs"].tolist() == [True, False]
    np.testing.assert_allclose(infos["final_obs"][0], [1.4898, 0.098], rtol=1e-6)
    assert 0.0 <= observations[0, 0] <= 0.5 and observations[0, 1] == 0.0


def test_env_passes_gymnasium_checker() -> None:
    with warnings.catch_warnings():
        # Velocity has no natural bound (friction may be 0), so the observation box is open there.
        warnings.filterwarnings("ignore", message=".*observation space (minimum|maximum) value.*")
        # Source: Gymnasium's own API checker.
        check_env(gym.make("kiln/CarDock-v0").unwrapped)


@pytest.mark.parametrize(
    ("config", "message"),
    [
        ({"dock_position": 3.0}, "dock_position"),
        ({"dt": 0.0}, "dt"),
        ({"handbrake": 1.0}, "unknown"),
        ({"render_mode": "rgb_array"}, "render"),
    ],
)
def test_bad_config_raises_task_error(config: dict, message: str) -> None:
    # Definitions: the dock lies on the rail; a time step is positive; options are CarDockOptions fields;
    # the task declares no render modes (metadata["render_modes"] == []), so none can be requested.
    with pytest.raises(TaskError, match=message):
        gym.make("kiln/CarDock-v0", **config)
