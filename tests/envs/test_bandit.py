"""DamperTrim (kiln/DamperTrim-v0): the one-step reward by hand, the batched form, Gymnasium's checker,
and the options' refusals. Its exact optima are tested in tests/envs/test_bandit_solution.py."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import pytest
from gymnasium.utils.env_checker import check_env

import kiln.envs  # noqa: F401  (registers the kiln/ ids)
from kiln.envs.bandit import DEFAULT_STIFFNESS, DEFAULT_TARGET, DamperTrimOptions
from kiln.envs.task_error import TaskError


def test_env_pays_quadratic_loss_and_terminates_after_one_step() -> None:
    env = gym.make("kiln/DamperTrim-v0", stiffness=3.0, target=0.25)
    observation, _ = env.reset(seed=0)
    assert observation.shape == (1,) and observation.dtype == np.float32
    _, reward, terminated, truncated, _ = env.step(np.array([-0.75], dtype=np.float32))
    # Hand arithmetic: -(3 / 2)(-0.75 - 0.25)^2 = -1.5.
    assert reward == pytest.approx(-1.5, rel=1e-7)
    assert terminated and not truncated
    # Source: Gymnasium's own API checker.
    check_env(gym.make("kiln/DamperTrim-v0").unwrapped)


def test_vector_env_pays_each_copy() -> None:
    vector_env = gym.make_vec("kiln/DamperTrim-v0", num_envs=3, vectorization_mode="vector_entry_point")
    vector_env.reset(seed=0)
    actions = np.array([[0.5], [0.0], [2.0]], dtype=np.float32)
    _, rewards, terminated, truncated, _ = vector_env.step(actions)
    # Hand arithmetic with k = 4, a0 = 0.5: -2 (0)^2 = 0; -2 (0.5)^2 = -0.5;
    # 2.0 is clipped to 1: -2 (0.5)^2 = -0.5.
    np.testing.assert_allclose(rewards, [0.0, -0.5, -0.5], atol=1e-12)
    assert terminated.all() and not truncated.any()


@pytest.mark.parametrize(
    ("config", "message"),
    [
        ({"stiffness": 0.0}, "stiffness must be finite and > 0"),
        ({"stiffness": True}, "stiffness must be a finite number"),
        ({"target": "middle"}, "target must be a finite number"),
        ({"target": float("nan")}, "target must be a finite number"),
        ({"width": 1.0}, "unknown option"),
    ],
)
def test_bad_config_raises_task_error(config: dict, message: str) -> None:
    # Definitions: the loss curvature k is positive (else there is no best position); a0 is a number.
    with pytest.raises(TaskError, match=message):
        gym.make("kiln/DamperTrim-v0", **config)


def test_default_task_is_the_documented_one() -> None:
    # Module docstring and configs/env/damper_trim.yaml: k = 4, a0 = 0.5.
    assert (DEFAULT_STIFFNESS, DEFAULT_TARGET) == (4.0, 0.5)
    env = gym.make("kiln/DamperTrim-v0")
    env.reset(seed=0)
    # Hand arithmetic: -(4 / 2)(0 - 0.5)^2 = -0.5.
    assert env.step(np.zeros(1, dtype=np.float32))[1] == pytest.approx(-0.5, rel=1e-12)


def test_options_are_stored_as_floats_and_the_observation_is_constant() -> None:
    options = DamperTrimOptions(stiffness=2, target=-3)
    assert (options.stiffness, options.target) == (2.0, -3.0) and type(options.stiffness) is float
    env = gym.make("kiln/DamperTrim-v0", stiffness=2, target=-3)
    first, _ = env.reset(seed=1)
    again, _ = env.reset(seed=2)
    # A bandit has no context: the observation is 0 whatever the seed.
    assert first.tolist() == again.tolist() == [0.0]
    # A target outside [-1, 1]: the best action is the bound; hand arithmetic -(2 / 2)(-1 + 3)^2 = -4.
    assert env.step(np.array([-1.0], dtype=np.float32))[1] == pytest.approx(-4.0, rel=1e-12)
