"""Squashed-Gaussian actor: an MLP with mean and log-std heads, actions in (−1, 1).

Actions leave the network in (−1, 1); mapping them to the task's bounds happens outside the
network (:mod:`kiln.learner.action_scale`), so a saved policy stays independent of the task's units.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

from kiln.learner import numpy_actor, squashed_gaussian
from kiln.learner.nets import EnsembleMLP


def soft_clamp(x: torch.Tensor, low: float, high: float) -> torch.Tensor:
    """Clamp ``x`` into ``(low, high)`` smoothly: near-identity inside, a gradient everywhere.

    A hard clamp zeroes the gradient outside the bounds, so a log-std pushed past a bound could
    never come back; a tanh rescaling instead would start every log-std at the bounds' midpoint
    (−9 for the usual (−20, 2)), an almost deterministic initial policy.
    """
    x = high - F.softplus(high - x)
    return low + F.softplus(x - low)


class SquashedGaussianActor(nn.Module):
    """Gaussian policy over pre-squash ``u``; the action is ``tanh(u)``.

    Args:
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions.
        layer_widths: Widths of the hidden layers.
        nonlinearity: Name of the hidden nonlinearity (see :data:`kiln.learner.nets.NONLINEARITIES`).
        log_std_soft_limits: ``(low, high)`` for the log standard deviation of ``u``.
        generator: Source of the initial weights (owned by the run).
        population: Number of agents (one actor each, stacked on the leading axis).
    """

    def __init__(
        self,
        obs_dim: int,
        act_dim: int,
        layer_widths: Sequence[int],
        nonlinearity: str,
        log_std_soft_limits: tuple[float, float],
        generator: torch.Generator | None = None,
        population: int = 1,
    ) -> None:
        super().__init__()
        low, high = float(log_std_soft_limits[0]), float(log_std_soft_limits[1])
        if not low < high:
            raise ValueError(f"log_std_soft_limits must be increasing, got {log_std_soft_limits}")
        self.obs_dim, self.act_dim = obs_dim, act_dim
        self.layer_widths, self.nonlinearity = tuple(int(h) for h in layer_widths), nonlinearity
        self.log_std_low, self.log_std_high = low, high
        # One network with 2·act_dim outputs: the first half is the mean, the second the raw log-std.
        self.population = population
        self.body = EnsembleMLP(population, obs_dim, layer_widths, 2 * act_dim, nonlinearity, generator)

    def forward(self, obs: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """Return ``(mean, log_std)`` of ``u``: each ``[B, act_dim]`` for ``obs`` ``[B, obs_dim]`` (one
        agent), or ``[population, B, act_dim]`` for ``obs`` ``[population, B, obs_dim]``."""
        out = self.body(obs)
        if obs.dim() == 2:
            out = out[0]
        mean, raw = out.chunk(2, dim=-1)
        return mean, soft_clamp(raw, self.log_std_low, self.log_std_high)

    def sample(
        self, obs: torch.Tensor, generator: torch.Generator | Sequence[torch.Generator] | None = None
    ) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
        """Reparameterised action in (−1, 1), its per-dimension log-density, and the log-std.

        For ``obs`` ``[population, B, obs_dim]`` pass one generator per agent: each agent's noise
        comes from its own run's generator, as it would in a run of its own.
        """
        mean, log_std = self(obs)
        if isinstance(generator, Sequence):
            noise = torch.stack([torch.randn(mean.shape[1:], generator=g) for g in generator])
            action, log_prob = squashed_gaussian.transform(mean, log_std, noise)
        else:
            action, log_prob = squashed_gaussian.sample(mean, log_std, generator)
        return action, log_prob, log_std

    @torch.inference_mode()
    def deterministic(self, obs: torch.Tensor) -> torch.Tensor:
        """The policy's mode in u-space, squashed: ``tanh(mean)`` (the log-std head is not needed)."""
        out = self.body(obs)
        if obs.dim() == 2:
            out = out[0]
        return torch.tanh(out[..., : self.act_dim])

    def act_batch(self, obs: np.ndarray, deterministic: bool, generator: torch.Generator | None = None) -> np.ndarray:
        """Actions in (−1, 1) for observations ``[n, obs_dim]`` of a one-agent actor: ``tanh(mean)``, or
        samples drawn from ``generator`` as :meth:`sample` draws them. The one way evaluation acts, in
        training and in the evaluate command alike; in NumPy on views of the weights (kiln.learner.numpy_actor),
        which measured 3x cheaper per call than torch for the small batches evaluation acts on."""
        if deterministic:
            return numpy_actor.deterministic_actions(self, obs)
        return numpy_actor.sample_with_log_prob(self, obs, generator)[0]
