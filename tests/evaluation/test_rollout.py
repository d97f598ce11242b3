"""The one rollout path (kiln.evaluation.rollout): per-step records, soft returns, evaluation
summaries and the Q-bias diagnostic, against hand arithmetic, Gymnasium's step API (terminated vs
truncated; a vector env resets a copy on the step after its episode ends), Gymnasium's registered
Pendulum-v1 (200 steps, never terminates) and the maximum-entropy LQ closed form."""

import math
from types import SimpleNamespace

import gymnasium as gym
import numpy as np
import pytest
import scipy.stats
import torch

from kiln.envs.lqr import LinearQuadraticModel
from kiln.envs.lqr_solution import soft_lq_solution
from kiln.envs.task_spec import TaskSpec
from kiln.evaluation.rollout import (
    EpisodeSummary,
    q_minus_return,
    rollout,
    rollout_episode,
    run_episodes,
    soft_returns,
    summarise,
)
from kiln.learner.action_scale import ActionScale


class _UnitReward(gym.Env):
    """Reward 1 per step; terminates after ``end`` steps when given (else only a time limit stops it)."""

    observation_space = gym.spaces.Box(-np.inf, np.inf, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def __init__(self, end: int | None = None):
        self.end, self.t = end, 0

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.t = 0
        return np.zeros(1, np.float32), {}

    def step(self, action):
        self.t += 1
        return np.full(1, self.t, np.float32), 1.0, self.end is not None and self.t >= self.end, False, {}


class _TwoCopies:
    """A batch of two whose episodes end after 1 and 3 steps, then keep paying 100 (which must not count)."""

    def reset(self, *, seed):
        self.t = 0
        return np.zeros((2, 1)), {}

    def step(self, actions):
        self.t += 1
        ended = self.t >= np.array([1, 3])
        rewards = np.where(self.t > np.array([1, 3]), 100.0, 1.0)
        return np.full((2, 1), self.t), rewards, np.array([True, False]) & ended, np.array([False, True]) & ended, {}


def test_episode_records_rewards_entropy_terms_and_truncation():
    env = gym.wrappers.TimeLimit(_UnitReward(), max_episode_steps=3)
    episode = rollout_episode(env, lambda obs: (np.zeros(1, np.float32), 0.2), seed=0)
    assert episode.lengths.tolist() == [3] and episode.returns.tolist() == [3.0]
    assert episode.terminated.tolist() == [False]  # cut by the time limit: truncated, not terminated
    # Hand arithmetic, γ = 0.9, reward 1 and entropy term 0.2 at each of 3 steps:
    # Σ γᵗ (1 − 0.2) = 0.8 (1 + 0.9 + 0.81) = 2.168; without the first entropy term 2.168 + 0.2 = 2.368.
    assert episode.soft_returns(0.9)[0] == pytest.approx(2.168)
    assert episode.soft_returns(0.9, first_entropy=False)[0] == pytest.approx(2.368)
    ended = rollout_episode(_UnitReward(end=2), lambda obs: (np.zeros(1, np.float32), 0.0), seed=0)
    assert ended.lengths.tolist() == [2] and ended.terminated.tolist() == [True]


def test_batch_masks_steps_after_each_copy_ends():
    recorded = rollout(_TwoCopies(), lambda obs: (np.zeros((2, 1)), np.full(2, 0.5)), seed=0)
    assert recorded.lengths.tolist() == [1, 3] and recorded.returns.tolist() == [1.0, 3.0]
    assert recorded.terminated.tolist() == [True, False]
    # Hand arithmetic, γ = 0.5, reward 1 and entropy term 0.5 per step: copy 0 earns 0.5 once; copy 1
    # earns 0.5 (1 + 0.5 + 0.25) = 0.875. The 100s paid after copy 0's end are not counted.
    np.testing.assert_allclose(recorded.soft_returns(0.5), [0.5, 0.875])


def test_evaluation_summary_by_hand():
    env = gym.wrappers.TimeLimit(_UnitReward(end=4), max_episode_steps=6)
    (first,) = run_episodes([env], lambda obs: np.zeros((len(obs), 1), np.float32), [7])
    assert first == EpisodeSummary(seed=7, return_=4.0, length=4, terminated=True)
    assert first.record() == {"seed": 7, "return": 4.0, "length": 4, "terminated": True}
    others = [EpisodeSummary(1, 2.0, 2, False), EpisodeSummary(2, 6.0, 6, False)]
    # Hand arithmetic: returns 4, 2, 6 have mean 4, population std sqrt(8/3) = 1.633.
    summary = summarise([first, *others])
    assert summary["episodes"] == 3 and summary["return_mean"] == 4.0
    assert summary["return_std"] == pytest.approx(math.sqrt(8 / 3))
    assert (summary["return_min"], summary["return_max"], summary["length_max"]) == (2.0, 6.0, 6)


def test_q_minus_return_by_hand():
    # Stand-in agent: Q(s₀, a₀) = 5, α·log π(a|s) = 0.2 at every state, γ = 0.9; reward 1 per step,
    # episode cut at 3 steps. Realised soft return from the first state-action:
    #   Ĝ₀ = r₀ + γ(r₁ − 0.2) + γ²(r₂ − 0.2) = 1 + 0.9·0.8 + 0.81·0.8 = 2.368
    # so the bias is 5 − 2.368 = 2.632 (the entropy term of a₀ is not part of Q(s₀, a₀)).
    agent = SimpleNamespace(
        settings=SimpleNamespace(discount=0.9),
        sample_with_log_prob=lambda obs, generator: (np.zeros((len(obs), 1), np.float32), np.full((len(obs), 1), 0.4)),
        entropy_terms=lambda log_prob: 0.5 * log_prob.sum(axis=-1),  # α = 0.5
        soft_q=lambda obs, action: np.full(len(obs), 5.0),
    )
    envs = [gym.wrappers.TimeLimit(_UnitReward(), max_episode_steps=3) for _ in range(2)]
    scale = ActionScale(np.array([-1.0]), np.array([1.0]))
    assert q_minus_return(agent, envs, scale, [0, 1], torch.Generator()) == pytest.approx(2.632)


def test_soft_returns_of_the_exact_optimum_match_the_closed_form():
    model, alpha, discount = LinearQuadraticModel(), 1.0, 0.9
    exact = soft_lq_solution(model, alpha, discount)
    rng = np.random.default_rng(5)
    factor = math.sqrt(float(exact.covariance[0, 0]))

    def optimal(observations):
        mean = exact.mean_action(observations)
        actions = mean + factor * rng.standard_normal(mean.shape)
        # scipy.stats.norm gives the Gaussian log-density in env units, independently of Kiln.
        return actions, scipy.stats.norm.logpdf(actions[:, 0], mean[:, 0], factor)

    returns, starts = soft_returns(optimal, TaskSpec("kiln/FiringHold-v0"), alpha, discount, 2000, seed=3)
    excess = returns - exact.value(starts)
    stderr = excess.std(ddof=1) / math.sqrt(len(excess))
    # Source: envs/lqr_solution.py (closed form via scipy.linalg.solve_discrete_are): for the optimal
    # policy E[G | x₀] = V*(x₀). The 200-step limit leaves γ^200 = 7e-10 of the tail; 4 standard errors.
    assert abs(excess.mean()) < 4 * stderr
    assert stderr < 0.02  # the control variate V*(x₀) keeps the check sharp
    np.testing.assert_allclose(starts.std(axis=0), 1.0, atol=0.05)  # x₀ ~ N(0, I): start_std = 1


def test_a_gymnasium_vector_env_counts_each_copy_until_its_own_end():
    # Gymnasium's SyncVectorEnv keeps stepping a finished copy (it resets it on the next step); the
    # rollout must count each copy's own episode only: ends after 2 and 4 steps, reward 1 per step.
    vector = gym.vector.SyncVectorEnv([lambda: _UnitReward(end=2), lambda: _UnitReward(end=4)])
    try:
        recorded = rollout(vector, lambda obs: (np.zeros((2, 1), np.float32), np.zeros(2)), seed=0)
    finally:
        vector.close()
    assert recorded.lengths.tolist() == [2, 4] and recorded.returns.tolist() == [2.0, 4.0]
    assert recorded.terminated.tolist() == [True, True]
    assert recorded.alive.tolist() == [[True, True], [True, True], [False, True], [False, True]]


def test_one_env_per_seed_is_required():
    with pytest.raises(ValueError, match="one env per episode: got 1 envs for 2 seeds"):
        run_episodes([_UnitReward(end=1)], lambda obs: np.zeros((len(obs), 1)), [0, 1])


def test_episodes_side_by_side_are_the_episodes_of_lone_envs():
    # Each evaluation episode runs in its own env from its own seed; stepping them in lockstep must give
    # exactly what one env per seed, run alone, gives (Pendulum-v1's dynamics, seeded by Gymnasium).
    seeds = [11, 12, 13]
    policy = lambda obs: np.clip(-obs[:, 2:3] * 0.5, -2.0, 2.0).astype(np.float32)  # row by row
    together = run_episodes([gym.make("Pendulum-v1") for _ in seeds], policy, seeds)
    for seed, episode in zip(seeds, together):
        alone = rollout_episode(gym.make("Pendulum-v1"), lambda o: (policy(o[None])[0], 0.0), seed)
        assert episode == EpisodeSummary(seed, float(alone.returns[0]), int(alone.lengths[0]), False)
        # Gymnasium's registry: Pendulum-v1 is cut at 200 steps and never terminates.
        assert episode.length == gym.spec("Pendulum-v1").max_episode_steps == 200
