"""Task construction and the spaces Kiln accepts."""

import gymnasium as gym
import numpy as np
import pytest

from agents.errors import ConfigError
from envs.make import make_env


class _DictObs(gym.Env):
    observation_space = gym.spaces.Dict({"x": gym.spaces.Box(-1, 1, (2,), np.float32)})
    action_space = gym.spaces.Box(-1, 1, (1,), np.float32)


class _Unbounded(gym.Env):
    observation_space = gym.spaces.Box(-1, 1, (2,), np.float32)
    action_space = gym.spaces.Box(-np.inf, np.inf, (1,), np.float32)


gym.register("KilnTest/DictObs-v0", entry_point=_DictObs)
gym.register("KilnTest/Unbounded-v0", entry_point=_Unbounded)


def test_registered_time_limit_is_kept():
    # Gymnasium registers Pendulum-v1 with max_episode_steps = 200 (DESIGN.md, Gymnasium registry).
    env = make_env("Pendulum-v1")
    assert env.spec.max_episode_steps == 200


def test_time_limit_override():
    assert make_env("Pendulum-v1", max_episode_steps=50).spec.max_episode_steps == 50


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
    with pytest.raises(ConfigError, match=match) as info:
        make_env(env_id)
    assert "\n" not in str(info.value)
