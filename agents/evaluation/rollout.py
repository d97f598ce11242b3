"""Rollouts: the one place Kiln steps a task with a policy until its episodes end.

:func:`rollout` runs one episode in each copy of a batch of tasks (a Gymnasium vector env, or a single
env as a batch of one) and records per step what the callers need: rewards, the policy's entropy term
α·log π(aₜ|sₜ), and whether each episode ended by termination or by its time limit. Everything that
rolls out derives from it:

* evaluation episodes and their summary (:func:`run_episodes`, :func:`summarise`);
* discounted soft returns Σₜ γᵗ (rₜ − α log π(aₜ|sₜ)) (:meth:`Rollout.soft_returns`, and
  :func:`soft_returns` for many copies of a Kiln task side by side);
* the Q-bias diagnostic (:func:`q_minus_return`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Protocol

import gymnasium as gym
import numpy as np

from kiln.envs.make import make_vector_env
from kiln.envs.task_spec import TaskSpec

if TYPE_CHECKING:  # annotations only: rollouts need neither torch nor the learner to run
    import torch

    from kiln.learner.action_scale import ActionScale
    from kiln.learner.sac import SoftActorCritic

# One observation → (action, its entropy term α·log π(a|s)); a policy without one returns 0.0.
StepPolicy = Callable[[np.ndarray], tuple[np.ndarray, float]]
# Observations [B, n] → (actions [B, m], entropy terms α·log π [B]).
BatchPolicy = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]
# Observations [B, n] → (actions [B, m], log-densities log π [B]), both in the task's units.
Sampler = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class Rollout:
    """One episode in each of B copies of a task, recorded step by step.

    Attributes:
        seed: The reset seed.
        starts: Observations at reset, ``[B, obs_dim]`` (float64).
        first_actions: Each copy's first action as the policy returned it (before ``to_env``), ``[B, m]``.
        rewards: rₜ, ``[T, B]``; 0 after a copy's episode has ended.
        entropy_terms: α·log π(aₜ|sₜ) as the policy returned it, ``[T, B]``; 0 after the episode ended.
        alive: Whether step t belongs to the copy's episode, ``[T, B]``.
        terminated: Whether each episode ended by termination rather than by its time limit, ``[B]``.
    """

    seed: int
    starts: np.ndarray
    first_actions: np.ndarray
    rewards: np.ndarray
    entropy_terms: np.ndarray
    alive: np.ndarray
    terminated: np.ndarray

    @property
    def lengths(self) -> np.ndarray:
        """Steps in each copy's episode, ``[B]``."""
        return self.alive.sum(axis=0)

    @property
    def returns(self) -> np.ndarray:
        """Undiscounted return Σₜ rₜ of each copy, ``[B]``."""
        return _sum_over_steps(self.rewards)

    def soft_returns(self, discount: float, first_entropy: bool = True) -> np.ndarray:
        """Discounted soft return Σₜ γᵗ (rₜ − α log π(aₜ|sₜ)) of each copy, ``[B]``.

        Args:
            discount: γ.
            first_entropy: Count the entropy term of the first action. A soft value V(s₀) includes it;
                a soft Q(s₀, a₀) does not, since a₀ is given.

        Returns:
            One soft return per copy.
        """
        terms = self.rewards - self.entropy_terms
        if not first_entropy:
            terms[0] = self.rewards[0]
        # γᵗ by repeated multiplication, as a running weight would give.
        weights = np.cumprod(np.r_[1.0, np.full(len(terms) - 1, discount)])
        return _sum_over_steps(weights[:, None] * terms)


def _sum_over_steps(values: np.ndarray) -> np.ndarray:
    """Σₜ over axis 0, added in step order (``sum`` may add pairwise), as a running total would."""
    return np.add.accumulate(values, axis=0)[-1]


class Batch(Protocol):
    """What :func:`rollout` steps: the reset and step of a Gymnasium vector env."""

    def reset(self, *, seed: int) -> tuple[np.ndarray, dict[str, Any]]: ...

    def step(self, actions: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]: ...


class _OneCopy:
    """A single Gymnasium env seen as a batch of one, so that one loop serves both."""

    def __init__(self, env: gym.Env) -> None:
        self.env = env

    def reset(self, *, seed: int) -> tuple[np.ndarray, dict[str, Any]]:
        obs, info = self.env.reset(seed=seed)
        return np.asarray(obs)[None], info

    def step(self, actions: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
        obs, reward, terminated, truncated, info = self.env.step(actions[0])
        return np.asarray(obs)[None], np.array([reward]), np.array([terminated]), np.array([truncated]), info


def rollout(
    batch: Batch,
    policy: BatchPolicy,
    seed: int,
    to_env: Callable[[np.ndarray], np.ndarray] | None = None,
) -> Rollout:
    """Run one episode in every copy of ``batch`` and record it step by step.

    A copy's steps after its episode ended (a vector env keeps stepping, or resets it) are masked out;
    the loop stops once every copy's episode has ended, so a single env is never stepped past its end.

    Args:
        batch: A Gymnasium vector env, or a single env wrapped by :func:`rollout_episode`.
        policy: Maps the batch's observations to actions and their entropy terms α·log π.
        seed: Reset seed of the batch.
        to_env: Maps the policy's actions to the task's units; ``None`` when they already are.

    Returns:
        The recorded rollout.
    """
    observations, _ = batch.reset(seed=seed)
    starts = np.asarray(observations, dtype=np.float64).copy()
    alive = np.ones(len(starts), dtype=bool)
    by_termination = np.zeros(len(starts), dtype=bool)
    # Per step only what decides the next step; the records are masked and converted once, at the end
    # (the same values: a step's reward and entropy term are kept where the copy was alive, 0 elsewhere).
    rewards, terms, masks, first_actions = [], [], [], None
    while alive.any():
        actions, entropy_terms = policy(observations)
        if first_actions is None:
            first_actions = np.array(actions, copy=True)
        observations, reward, terminated, truncated, _ = batch.step(actions if to_env is None else to_env(actions))
        masks.append(alive)
        rewards.append(reward)
        terms.append(entropy_terms)
        terminated = np.asarray(terminated, dtype=bool)
        by_termination |= alive & terminated
        alive = alive & ~(terminated | np.asarray(truncated, dtype=bool))  # a new array: masks keeps the old one
    mask = np.array(masks)
    return Rollout(
        seed, starts, first_actions, _masked(rewards, mask), _masked(terms, mask), mask, by_termination
    )


def _masked(per_step: list[np.ndarray], mask: np.ndarray) -> np.ndarray:
    """Per-step values ``[B]`` as float64 ``[T, B]``, 0 where ``mask`` is false."""
    return np.where(mask, np.array(per_step, dtype=np.float64).reshape(mask.shape), 0.0)


def rollout_episode(
    env: gym.Env, policy: StepPolicy, seed: int, to_env: Callable[[np.ndarray], np.ndarray] | None = None
) -> Rollout:
    """:func:`rollout` of one episode of a single env (a batch of one); ``policy`` acts on one observation."""

    def one_at_a_time(observations: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        action, entropy_term = policy(observations[0])
        return np.asarray(action)[None], np.array([entropy_term], dtype=np.float64)

    return rollout(_OneCopy(env), one_at_a_time, seed, to_env)


@dataclass(frozen=True)
class EpisodeSummary:
    """One evaluation episode: its reset seed, undiscounted return, length and how it ended.

    ``return`` is a Python keyword, so the field is ``return_`` (PEP 8's trailing underscore); the
    record written to JSON (:meth:`record`) calls it ``"return"``, as the printed summary does.
    """

    seed: int
    return_: float
    length: int
    terminated: bool

    def record(self) -> dict[str, Any]:
        """The episode as JSON-ready data: ``seed``, ``return``, ``length``, ``terminated``."""
        return {"seed": self.seed, "return": self.return_, "length": self.length, "terminated": self.terminated}


class _Lockstep:
    """Single envs, one per reset seed, seen as one batch: each is reset with its own seed and stepped
    until its own episode ends (then left alone), so every episode is exactly the one a lone env of
    that seed would run, while the policy acts on all observations at once."""

    def __init__(self, envs: Sequence[gym.Env], seeds: Sequence[int]) -> None:
        self.envs, self.seeds = list(envs), list(seeds)
        self.running: list[int] = []
        self.last = np.zeros(0)

    def reset(self, *, seed: int) -> tuple[np.ndarray, dict[str, Any]]:
        self.last = np.stack([np.asarray(env.reset(seed=s)[0]) for env, s in zip(self.envs, self.seeds)])
        self.running = list(range(len(self.envs)))
        return self.last.copy(), {}

    def step(self, actions: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
        n = len(self.envs)
        # An ended episode's row stays as it was (0 reward, ended); the rollout masks it out.
        reward, terminated, truncated = np.zeros(n), np.ones(n, dtype=bool), np.ones(n, dtype=bool)
        still = []
        for i in self.running:
            obs, reward[i], terminated[i], truncated[i], _ = self.envs[i].step(actions[i])
            self.last[i] = obs
            if not (terminated[i] or truncated[i]):
                still.append(i)
        self.running = still
        return self.last.copy(), reward, terminated, truncated, {}


def run_episodes(
    envs: Sequence[gym.Env], policy: Callable[[np.ndarray], np.ndarray], seeds: Sequence[int]
) -> list[EpisodeSummary]:
    """Run one evaluation episode per reset seed, side by side.

    Episode i runs in ``envs[i]`` from reset seed ``seeds[i]``; the policy is called once per step for
    the observations of all episodes (``[episodes, obs_dim]`` → actions ``[episodes, act_dim]``, rows of
    ended episodes included, so every call has the same shape and a given set of seeds always gives
    the same numbers). Training's evaluations and the evaluate command both evaluate this way.

    Args:
        envs: One copy of the task per seed.
        policy: Maps observations to actions in the task's units, row by row.
        seeds: Reset seeds, one per episode.

    Returns:
        One summary per episode, in seed order.
    """
    if len(envs) != len(seeds):
        raise ValueError(f"one env per episode: got {len(envs)} envs for {len(seeds)} seeds")
    recorded = rollout(_Lockstep(envs, seeds), lambda obs: (policy(obs), np.zeros(len(seeds))), seed=0)
    return [
        EpisodeSummary(seed, float(ret), int(length), bool(term))
        for seed, ret, length, term in zip(seeds, recorded.returns, recorded.lengths, recorded.terminated)
    ]


def summarise(episodes: Sequence[EpisodeSummary]) -> dict[str, float]:
    """The number of episodes, and mean, std (population), min and max of return and length."""
    returns = np.array([e.return_ for e in episodes])
    lengths = np.array([e.length for e in episodes])
    return {
        "episodes": len(episodes),
        "return_mean": float(returns.mean()),
        "return_std": float(returns.std()),
        "return_min": float(returns.min()),
        "return_max": float(returns.max()),
        "length_mean": float(lengths.mean()),
        "length_std": float(lengths.std()),
        "length_min": int(lengths.min()),
        "length_max": int(lengths.max()),
    }


def q_minus_return(
    agent: SoftActorCritic, envs: Sequence[gym.Env], scale: ActionScale, seeds: Sequence[int], generator: torch.Generator
) -> float:
    """Mean over episodes of Q(s₀, a₀) − Ĝ₀, with episodes run by the *stochastic* policy.

    Policy samples come from ``generator`` (not the training one), so the diagnostic never changes
    the course of training. Ĝ₀ = r₀ + Σ_{t≥1} γᵗ (r_t − α log π(a_t|s_t)) is the realised soft return
    from the first state-action; it matches what the soft Q estimates (the entropy of a₀ itself is not
    part of Q(s₀, a₀)). The critic estimates the stochastic policy, so deterministic episodes would not
    do. A positive value means over-estimation. On a task cut by a time limit Ĝ₀ misses the reward
    beyond the limit, which biases the figure upward by at most γ^T times the soft value there.

    Args:
        agent: Provides ``sample_with_log_prob`` (samples in (−1, 1) and their per-dimension log π for a
            batch of observations), ``entropy_terms`` (α·log π from those), ``soft_q`` (for a batch of
            state-actions) and the discount.
        envs: At least one copy of the task per episode (the episodes run side by side).
        scale: Maps the agent's actions to the task's units.
        seeds: Reset seeds, one per episode.
        generator: Source of the policy's samples.

    Returns:
        The mean gap.
    """
    batch = _Lockstep(list(envs)[: len(seeds)], seeds)
    log_probs: list[np.ndarray] = []

    def policy(obs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        action, log_prob = agent.sample_with_log_prob(obs, generator)
        log_probs.append(log_prob)
        return action, np.zeros(len(obs))  # the entropy terms come below, for all steps at once

    episodes = rollout(batch, policy, 0, scale.to_env)
    # α·log π of every step in one call (per step it cost more than the policy's sample), masked as rollout masks.
    terms = np.asarray(agent.entropy_terms(np.stack(log_probs)), dtype=np.float64)
    episodes = dataclasses.replace(episodes, entropy_terms=np.where(episodes.alive, terms, 0.0))
    q0 = np.asarray(agent.soft_q(episodes.starts, episodes.first_actions), dtype=np.float64)
    return float(np.mean(q0 - episodes.soft_returns(agent.settings.discount, first_entropy=False)))


def soft_returns(
    sample: Sampler,
    task: TaskSpec,
    alpha: float,
    discount: float,
    copies: int,
    seed: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Run one episode in each of ``copies`` copies of a Kiln task and return their discounted soft returns.

    G = Σₜ γᵗ (rₜ − α log π(aₜ|xₜ)), the entropy term earned at every step including the first (the
    soft return of ``kiln.envs.lqr_solution`` and of Kiln's critics). A copy stops counting once its
    episode ends, by termination or by the time limit.

    Args:
        sample: Draws actions and their log-densities, both in task units.
        task: A Kiln task with a batched ``vector_entry_point`` (time limit ``None`` keeps the registered one).
        alpha: Temperature.
        discount: γ.
        copies: Number of episodes, run side by side.
        seed: Reset seed of the batch.

    Returns:
        (returns ``[copies]``, start observations ``[copies, obs_dim]``).
    """
    def with_entropy_terms(observations: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        actions, log_prob = sample(observations)
        return actions, alpha * log_prob

    vector_env = make_vector_env(task, copies)
    try:
        recorded = rollout(vector_env, with_entropy_terms, seed)
    finally:
        vector_env.close()
    return recorded.soft_returns(discount), recorded.starts
