"""The collector (kiln.training.collector): one env step filed as one replay row, the time-limit
rule (truncation keeps bootstrapping, termination stops it), non-finite values stopped at the step
that produced them, and the episode in progress rebuilt exactly from a checkpoint's record.

Sources: Gymnasium's step API (``terminated`` vs ``truncated``; ``reset()`` without a seed continues
the env's own ``np_random``, with a seed it restarts it), Gymnasium's Pendulum-v1 (never terminates,
truncated at its registered ``max_episode_steps`` of 200), IEEE 754 binary32 (largest finite value
about 3.4e38), and hand arithmetic written beside each check.
"""

import gymnasium as gym
import numpy as np
import pytest
import torch

from kiln.errors import CheckpointError, DivergenceError
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
    env = _Emits(obs, reward)
    replay = ReplayBuffer(10, 1, 1, torch.Generator().manual_seed(0))
    collector = Collector(env, replay, ActionScale(env.action_space.low, env.action_space.high), seed=0)
    with pytest.raises(DivergenceError) as caught, np.errstate(over="ignore"):
        collector.step(np.array([0.0], np.float32), step=7)
    assert caught.value.quantity == quantity and caught.value.where == "at env step 7"


def _collector_for(env, capacity=10):
    replay = ReplayBuffer(capacity, env.observation_space.shape[0], env.action_space.shape[0], torch.Generator().manual_seed(0))
    return Collector(env, replay, ActionScale(env.action_space.low, env.action_space.high), seed=0)


class _BadReset(_Emits):
    def __init__(self):
        super().__init__(0.0, 0.0)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return np.array([np.inf], np.float32), {}


def test_a_non_finite_reset_observation_stops_before_any_step():
    with pytest.raises(DivergenceError) as caught:
        _collector_for(_BadReset())
    assert caught.value.quantity == "observation" and caught.value.where == "at reset"


def test_pendulum_episodes_end_by_truncation_at_its_registered_limit():
    assert gym.spec("Pendulum-v1").max_episode_steps == 200  # Gymnasium's registry
    collector = _collector_for(gym.make("Pendulum-v1"), capacity=300)
    ends = [collector.step(np.array([0.0], np.float32), step) for step in range(1, 251)]
    ended = [(step, end.length) for step, end in zip(range(1, 251), ends) if end is not None]
    assert ended == [(200, 200)]
    replay = collector.replay
    assert replay.terminated[:250].sum().item() == 0.0  # Pendulum never terminates: every row bootstraps
    # The last row of episode 1 keeps its real next observation, not the next episode's first one.
    assert not torch.equal(replay.next_obs[199], replay.obs[200])
    assert torch.equal(replay.next_obs[198], replay.obs[199])
    # The episode's return is the sum of its stored rewards (hand arithmetic over the rows).
    assert ends[199].return_ == pytest.approx(float(replay.reward[:200].double().sum()), rel=1e-5)


def _run(collector, actions, first_step=1):
    for step, action in enumerate(actions, start=first_step):
        collector.step(action, step)


@pytest.mark.parametrize("steps", [37, 230])  # inside the first episode; 30 steps into the second
def test_the_episode_in_progress_is_rebuilt_from_its_record(steps):
    rng = np.random.default_rng(1)
    actions = rng.uniform(-1, 1, (steps, 1)).astype(np.float32)
    original = _collector_for(gym.make("Pendulum-v1"), capacity=300)
    original.env.action_space.seed(5)
    _run(original, actions)
    record, replayed_actions = original.state()
    assert replayed_actions.shape == (steps % 200, 1) and record["length"] == steps % 200
    # The first episode is reset with the run's seed; a later one from the env generator's saved state.
    assert ("seed" in record["start"]) == (steps < 200)

    fresh = _collector_for(gym.make("Pendulum-v1"), capacity=300)
    fresh.restore(record, replayed_actions, original.obs)
    assert np.array_equal(fresh.obs, original.obs)
    assert (fresh.episode.return_, fresh.episode.length) == (original.episode.return_, original.episode.length)
    # From here both continue identically: the same actions give the same rows and the same episode end.
    more = rng.uniform(-1, 1, (200, 1)).astype(np.float32)
    ends_a = [original.step(a) for a in more]
    ends_b = [fresh.step(a) for a in more]
    assert [e and (e.return_, e.length) for e in ends_a] == [e and (e.return_, e.length) for e in ends_b]
    assert np.array_equal(original.obs, fresh.obs)
    # The action space's generator (Gymnasium's Space.sample) continues where it was too.
    assert np.array_equal(original.env.action_space.sample(), fresh.env.action_space.sample())


def test_a_replay_that_misses_the_checkpoints_state_is_refused():
    original = _collector_for(gym.make("Pendulum-v1"))
    _run(original, np.full((5, 1), 0.3, np.float32))
    record, actions = original.state()
    fresh = _collector_for(gym.make("Pendulum-v1"))
    with pytest.raises(CheckpointError) as caught:
        fresh.restore(record, actions, original.obs + 1.0)  # not where the checkpoint's episode was
    message = str(caught.value)
    assert "did not reproduce the checkpoint's state of Pendulum-v1" in message and "\n" not in message
    assert message.endswith("pass resume=false to start over")
