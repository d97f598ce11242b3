"""Measure a saved squashed-Gaussian policy in the task's own units: mean actions and log-densities.

The mean action is computed by quadrature (no sampling noise); the sampler feeds the policy's
stochastic actions with their task-unit log-densities to :func:`kiln.evaluation.rollout.soft_returns`.

The agent works in (−1, 1); a task's Box may be wider. Its log-density in task units is
log π_env(a) = log π_agent(a′) − Σᵢ log(half-rangeᵢ) for a = centre + half-range · a′ (change of
variables for an affine map), which is what the exact answers of ``kiln.envs.lqr_solution`` measure.
"""

from __future__ import annotations

import numpy as np
import torch

from kiln.evaluation.rollout import Sampler
from kiln.storage.policy_io import Policy

# Probabilists' Gauss–Hermite nodes for E over a Gaussian: exact for polynomials of degree < 64, so
# for the smooth tanh of a narrow Gaussian the rule's error is far below float32 rounding.
_HERMITE_NODES, _HERMITE_WEIGHTS = np.polynomial.hermite_e.hermegauss(32)
_HERMITE_WEIGHTS = _HERMITE_WEIGHTS / _HERMITE_WEIGHTS.sum()


def _half_range(policy: Policy) -> np.ndarray:
    return (policy.scale.high - policy.scale.low) / 2.0


@torch.no_grad()
def actor_mean_action(policy: Policy, states: np.ndarray) -> np.ndarray:
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


def actor_sampler(policy: Policy, generator: torch.Generator) -> Sampler:
    """Draw from a saved policy, returning actions and log-densities in task units.

    Args:
        policy: A loaded policy.
        generator: Source of the policy's noise.

    Returns:
        A sampler for :func:`kiln.evaluation.rollout.soft_returns`.
    """
    log_half = float(np.sum(np.log(_half_range(policy))))

    @torch.no_grad()
    def sample(observations: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        obs = torch.as_tensor(observations, dtype=torch.float32)
        action, log_prob, _ = policy.actor.sample(obs, generator)
        env_action = policy.scale.to_env(action.numpy())
        return env_action, log_prob.double().sum(dim=-1).numpy() - log_half

    return sample
