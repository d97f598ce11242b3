"""Automatic temperature: holds the policy's entropy at a target (Haarnoja et al. 2018, Eq. 18).

J(α) = E[−α log π(a|s) − α H̄], optimised over log α so that α stays positive. With one target
number the whole action gets one α; with a per-dimension list each action dimension gets its own
α and its own target, using the per-dimension terms of the squashed-Gaussian log-density (they
separate because the Gaussian is diagonal and tanh acts per dimension).

Every quantity carries a leading agent axis (``[population, groups]``) so that a population's
temperatures move in one step; a single run is a population of one.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import torch
from torch import nn


class Temperature(nn.Module):
    """One or several temperatures α per agent, tuned toward entropy targets or held fixed.

    Args:
        target_entropy: Per agent, the entropy target(s) H̄ in nats: one number, or one per action
            dimension (every agent has the same number of them).
        start: Per agent, α at step 0 (the value it keeps when not tuned).
        tuned: Per agent, learn log α when true; keep α constant otherwise.
    """

    def __init__(self, target_entropy: Sequence[Sequence[float]], start: Sequence[float], tuned: Sequence[bool]) -> None:
        super().__init__()
        if any(s <= 0 for s in start):
            raise ValueError(f"the starting temperature must be > 0, got {list(start)}")
        if len({len(t) for t in target_entropy}) != 1 or not (len(target_entropy) == len(start) == len(tuned)):
            raise ValueError("every agent needs the same number of targets, one start and one mode")
        targets = torch.tensor([[float(t) for t in row] for row in target_entropy], dtype=torch.float32)
        self.register_buffer("target", targets)
        self.register_buffer("tuned_mask", torch.tensor([[float(t)] for t in tuned]))
        starts = torch.tensor([[math.log(s)] for s in start], dtype=torch.float32)
        # Always a leaf with a gradient slot: the gradient is written in closed form (see gradient()).
        self.log_alpha = nn.Parameter(starts.expand_as(targets).clone())
        self.any_tuned = any(tuned)

    @property
    def groups(self) -> int:
        """How many separate temperatures each agent has (1, or the action dimension)."""
        return self.target.shape[1]

    def alpha(self) -> torch.Tensor:
        """Current α as a ``[population, groups]`` tensor, detached from the graph."""
        return self.log_alpha.detach().exp()

    def group(self, log_prob_per_dim: torch.Tensor) -> torch.Tensor:
        """Sum per-dimension log-densities into the groups: ``[P, B, A] → [P, B, groups]``."""
        if self.groups == 1:
            return log_prob_per_dim.sum(dim=-1, keepdim=True)
        return log_prob_per_dim

    def bonus(self, log_prob_per_dim: torch.Tensor) -> torch.Tensor:
        """The entropy term α·log π summed over groups, ``[P, B]`` (α treated as a constant)."""
        return (self.group(log_prob_per_dim) * self.alpha().unsqueeze(1)).sum(dim=-1)

    def loss(self, log_prob_per_dim: torch.Tensor) -> torch.Tensor:
        """Each agent's J(α) = E[−α (log π + H̄)], summed over groups, ``[P]``; log π is a constant."""
        grouped = self.group(log_prob_per_dim).detach()
        return -(self.log_alpha.exp().unsqueeze(1) * (grouped + self.target.unsqueeze(1))).mean(dim=1).sum(dim=-1)

    def gradient(self, log_prob_per_dim: torch.Tensor) -> torch.Tensor:
        """∂J/∂log α = −α E[log π + H̄] per agent and group, zero for fixed agents.

        J is linear in α = exp(log α), so its gradient is written out instead of built by autograd:
        one small expression instead of a graph and a backward pass on every update.
        """
        grouped = self.group(log_prob_per_dim).detach()
        return -self.alpha() * (grouped.mean(dim=1) + self.target) * self.tuned_mask
