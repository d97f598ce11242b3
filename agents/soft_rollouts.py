"""Measure a saved squashed-Gaussian policy in the task's own units: mean actions and soft returns.

The agent works in (−1, 1); a task's Box may be wider. Its log-density in task units is
log π_env(a) = log π_agent(a′) − Σᵢ log(half-rangeᵢ) for a = centre + half-range · a′ (change of
variables for an affine map), which is what the exact answers of ``envs.lqr_solution`` measure.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import torch

from agents.policy_io import SavedPolicy
from envs.make import make_vector_env
from envs.task_spec import TaskSpec

# (observations [B, n]) -> (actions in task units [B, m], log-density in task units [B])
Sampler = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]
# Probabilists' Gauss–Hermite nodes for E over a Gaussian: exact for polynomials of degree < 64, so
# for the smooth tanh of a narrow Gaussian the rule's error is far below float32 rounding.
_HERMITE_NODES, _HERMITE_WEIGHTS = np.polynomial.hermite_e.hermegauss(32)
_HERMITE_WEIGHTS = _HERMITE_WEIGHTS / _HERMITE_WEIGHTS.sum()


def _half_range(policy: SavedPolicy) -> np.ndarray:
    return (policy.scale.high - policy.scale.low) / 2.0


@torch.no_grad()
def actor_mean_action(policy: SavedPolicy, states: np.ndarray) -> np.ndarray:
    """E[action] in task units of the stochastic policy at each observation, by Gauss–Hermite quadrature.

    Args:
        policy: A loaded policy.
        states: Observations, ``(count, obs_dim)``.

    Returns:
        ``(count, act_dim)`` mean actions, E[centre + half-range · tanh(u)] with u ~ N(mean, std²).
    """
    mean, log_std = policy.actor(torch.as_tensor(states, dtype=torch.float32))
    mean, std = mean.double().numpy(), log_std.double().exp().numpy()
    u = mean[..., None] + std[..., None] * _HERMITE_NODES  # [count, act_dim, nodes]
    squashed = np.tanh(u) @ _HERMITE_WEIGHTS
    centre = (policy.scale.high + policy.scale.low) / 2.0
    return centre + _half_range(policy) * squashed


def actor_sampler(policy: SavedPolicy, generator: torch.Generator) -> Sampler:
    """Draw from a saved policy, returning actions and log-densities in task units.

    Args:
        policy: A loaded policy.
        generator: Source of the policy's noise.

    Returns:
        A sampler for :func:`soft_returns`.
    """
    log_half = float(np.sum(np.log(_half_range(policy))))

    @torch.no_grad()
    def sample(observations: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        obs = torch.as_tensor(observations, dtype=torch.float32)
        action, log_prob, _ = policy.actor.sample(obs, generator)
        env_action = policy.scale.to_env(action.numpy())
        return env_action, log_prob.double().sum(dim=-1).numpy() - log_half

    return sample


def soft_returns(
    sample: Sampler,
    env_id: str,
    kwargs: Mapping[str, Any],
    max_episode_steps: int | None,
    alpha: float,
    discount: float,
    copies: int,
    seed: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Run one episode in each of ``copies`` copies of a task and return their discounted soft returns.

    G = Σₜ γᵗ (rₜ − α log π(aₜ|xₜ)), the entropy term earned at every step including the first (the
    soft return of ``envs.lqr_solution`` and of Kiln's critics). A copy stops counting once its
    episode ends, by termination or by the time limit.

    Args:
        sample: Draws actions and their log-densities, both in task units.
        env_id: A Kiln task id with a batched ``vector_entry_point``.
        kwargs: The task's options.
        max_episode_steps: Time limit; ``None`` keeps the registered one.
        alpha: Temperature.
        discount: γ.
        copies: Number of episodes, run side by side.
        seed: Reset seed of the batch.

    Returns:
        (returns ``[copies]``, start observations ``[copies, obs_dim]``).
    """
    vector_env = make_vector_env(TaskSpec(env_id, kwargs, max_episode_steps), copies)
    try:
        observations, _ = vector_env.reset(seed=seed)
        starts = np.asarray(observations, dtype=np.float64).copy()
        returns = np.zeros(copies)
        alive = np.ones(copies, dtype=bool)
        weight = 1.0
        while alive.any():
            actions, log_prob = sample(observations)
            observations, rewards, terminated, truncated, _ = vector_env.step(actions)
            returns += np.where(alive, weight * (np.asarray(rewards, dtype=np.float64) - alpha * log_prob), 0.0)
            alive &= ~(np.asarray(terminated) | np.asarray(truncated))
            weight *= discount
    finally:
        vector_env.close()
    return returns, starts


def actor_soft_returns(
    policy: SavedPolicy,
    env_id: str,
    kwargs: Mapping[str, Any],
    max_episode_steps: int | None,
    alpha: float,
    discount: float,
    copies: int,
    seed: int,
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`soft_returns` of a saved policy's stochastic actions; its noise is seeded by ``seed``."""
    sampler = actor_sampler(policy, torch.Generator().manual_seed(seed))
    return soft_returns(sampler, env_id, kwargs, max_episode_steps, alpha, discount, copies, seed)
