"""Replay storage and the time-limit rule: truncation keeps bootstrapping, termination stops it.

Source for the rule: Gymnasium's step API (terminated vs truncated), and Gymnasium's Pendulum-v1,
which never terminates and only truncates at 200 steps (its registered max_episode_steps).
"""

import gymnasium as gym
import numpy as np
import pytest
import torch
from scipy import stats

from kiln.learner.action_scale import ActionScale
from kiln.training.collector import Collector
from kiln.training.replay import ReplayBuffer


class _Counter(gym.Env):
    """Observation = step count; terminates when the count reaches ``end`` (if set)."""

    observation_space = gym.spaces.Box(-np.inf, np.inf, (1,), np.float32)
    action_space = gym.spaces.Box(-2.0, 2.0, (1,), np.float32)

    def __init__(self, end=None):
        self.end = end

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.t = 0
        return np.array([0.0], np.float32), {}

    def step(self, action):
        self.t += 1
        return np.array([float(self.t)], np.float32), float(action[0]), self.end is not None and self.t >= self.end, False, {}


def _collect(env, steps):
    replay = ReplayBuffer(100, 1, 1, torch.Generator().manual_seed(0))
    collector = Collector(env, replay, ActionScale(env.action_space.low, env.action_space.high), seed=0)
    ends = [collector.step(np.array([0.5], np.float32)) for _ in range(steps)]
    return replay, ends


def test_truncated_transition_keeps_real_next_obs_and_is_not_terminal():
    env = gym.wrappers.TimeLimit(_Counter(), max_episode_steps=3)
    replay, ends = _collect(env, 4)
    # Step 3 hits the time limit: next_obs must be the real final observation (3), not the reset one (0).
    assert replay.next_obs[2, 0].item() == 3.0
    assert replay.terminated[2].item() == 0.0
    assert ends[2] is not None and ends[2].length == 3
    # Step 4 starts from the reset observation.
    assert replay.obs[3, 0].item() == 0.0


def test_terminated_transition_is_terminal():
    replay, ends = _collect(gym.wrappers.TimeLimit(_Counter(end=2), max_episode_steps=50), 2)
    assert replay.terminated.tolist()[:2] == [0.0, 1.0]
    assert ends[1] is not None


def test_actions_stored_in_agent_units_and_rescaled_for_the_env():
    # Agent action 0.5 on bounds [−2, 2] is 1.0 in task units; the reward echoes the task action.
    replay, _ = _collect(gym.wrappers.TimeLimit(_Counter(), max_episode_steps=10), 1)
    assert replay.action[0, 0].item() == 0.5
    assert replay.reward[0].item() == 1.0


def test_ring_buffer_overwrites_oldest():
    replay = ReplayBuffer(3, 1, 1, torch.Generator().manual_seed(0))
    for i in range(5):
        replay.add(np.array([i]), np.array([0.0]), float(i), np.array([i + 1]), False)
    assert len(replay) == 3
    assert sorted(replay.reward.tolist()) == [2.0, 3.0, 4.0]


def test_sampling_is_uniform_chi_square():
    # Uniform sampling: a chi-square goodness-of-fit test (scipy.stats.chisquare) on 20 slots.
    replay = ReplayBuffer(20, 1, 1, torch.Generator().manual_seed(0))
    for i in range(20):
        replay.add(np.array([i]), np.array([0.0]), float(i), np.array([i]), False)
    counts = np.bincount(torch.cat([replay.sample(500).reward for _ in range(40)]).long().numpy(), minlength=20)
    assert stats.chisquare(counts).pvalue > 1e-3


class _Emits(gym.Env):
    """Returns a fixed observation and reward on its first step (a fault injected for the test)."""

    observation_space = gym.spaces.Box(-np.inf, np.inf, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def __init__(self, obs, reward):
        self.obs, self.reward = obs, reward

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return np.zeros(1, np.float32), {}

    def step(self, action):
        return np.array([self.obs]), self.reward, False, False, {}


@pytest.mark.parametrize(
    "obs,reward,quantity",
    [
        (float("nan"), 0.0, "observation"),
        (0.0, float("inf"), "reward"),
        # Finite in float64 but beyond float32's largest value (3.4e38, IEEE 754 binary32): stored as inf.
        (0.0, 1e39, "transition (beyond float32's range)"),
    ],
)
def test_a_non_finite_transition_stops_naming_the_field(obs, reward, quantity):
    from kiln.errors import DivergenceError

    env = _Emits(obs, reward)
    replay = ReplayBuffer(10, 1, 1, torch.Generator().manual_seed(0))
    collector = Collector(env, replay, ActionScale(env.action_space.low, env.action_space.high), seed=0)
    with pytest.raises(DivergenceError) as caught, np.errstate(over="ignore"):
        collector.step(np.array([0.0], np.float32), step=7)
    assert caught.value.quantity == quantity and caught.value.where == "at env step 7"


def test_action_scale_maps_affinely_and_clips_to_the_bounds():
    """to_env is low + (a + 1)/2 · (high − low) (the affine map of [−1, 1] onto the Box, as spec.json
    states it), clipped to the bounds as np.clip would; NaN stays NaN; to_agent inverts it."""
    low, high = np.array([-2.0, 0.0, -0.5], np.float32), np.array([2.0, 1.0, 3.0], np.float32)
    scale = ActionScale(low, high)
    a = np.random.default_rng(0).uniform(-1.2, 1.2, size=(200, 3)).astype(np.float32)
    a[0] = [np.nan, 1.0, -1.0]
    expected = np.clip(low.astype(np.float64) + (a + 1.0) / 2.0 * (high.astype(np.float64) - low), low, high)
    got = scale.to_env(a)
    assert got.dtype == np.float32 and np.isnan(got[0, 0])
    np.testing.assert_allclose(got, expected.astype(np.float32), rtol=1e-6, atol=1e-6)
    assert np.all((got[1:] >= low) & (got[1:] <= high))
    inside = np.abs(a[1:]) <= 1.0
    np.testing.assert_allclose(scale.to_agent(got[1:])[inside], a[1:][inside], atol=1e-6)


def test_action_scale_gives_the_same_bits_for_one_action_as_for_a_batch():
    """A single small action (mapped in Python floats) gets exactly the bits the batched NumPy path
    gives the same row, NaN and out-of-range values included."""
    scale = ActionScale(np.array([-2.0, 0.0], np.float32), np.array([2.0, 1.0], np.float32))
    rows = np.random.default_rng(1).uniform(-1.5, 1.5, size=(500, 2)).astype(np.float32)
    rows[0] = [np.nan, 0.3]
    batched = scale.to_env(rows)
    singles = np.stack([scale.to_env(row) for row in rows])
    pairs = np.concatenate([scale.to_env(rows[i:i + 2]) for i in range(0, 500, 2)])
    assert singles.dtype == np.float32 and singles.shape == batched.shape
    np.testing.assert_array_equal(singles, batched)  # NaN == NaN here
    np.testing.assert_array_equal(pairs, batched)
