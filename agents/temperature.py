"""Automatic temperature: holds the policy's entropy at a target (Haarnoja et al. 2018, Eq. 18).

J(α) = E[−α log π(a|s) − α H̄], optimised over log α so that α stays positive. With one target
number the whole action gets one α; with a per-dimension list each action dimension gets its own
α and its own target, using the per-dimension terms of the squashed-Gaussian log-density (they
separate because the Gaussian is diagonal and tanh acts per dimension).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import torch
from torch import nn


class Temperature(nn.Module):
    """One or several temperatures α, tuned toward entropy targets or held fixed.

    Args:
        target_entropy: The entropy target(s) H̄ in nats: one number, or one per action dimension.
        start: α at step 0 (the value it keeps when ``tuned`` is false).
        tuned: Learn log α when true; keep α constant otherwise.
    """

    def __init__(self, target_entropy: Sequence[float], start: float, tuned: bool) -> None:
        super().__init__()
        if start <= 0:
            raise ValueError(f"the starting temperature must be > 0, got {start}")
        targets = torch.tensor([float(t) for t in target_entropy], dtype=torch.float32)
        self.register_buffer("target", targets)
        self.log_alpha = nn.Parameter(torch.full_like(targets, math.log(start)), requires_grad=tuned)
        self.tuned = tuned

    @property
    def groups(self) -> int:
        """How many separate temperatures there are (1, or the action dimension)."""
        return self.target.numel()

    def alpha(self) -> torch.Tensor:
        """Current α as a ``[groups]`` tensor, detached from the graph."""
        return self.log_alpha.detach().exp()

    def group(self, log_prob_per_dim: torch.Tensor) -> torch.Tensor:
        """Sum per-dimension log-densities into this tuner's groups: ``[B, A] → [B, groups]``."""
        if self.groups == 1:
            return log_prob_per_dim.sum(dim=-1, keepdim=True)
        return log_prob_per_dim

    def bonus(self, log_prob_per_dim: torch.Tensor) -> torch.Tensor:
        """The entropy term α·log π summed over groups, ``[B]`` (α treated as a constant)."""
        return (self.group(log_prob_per_dim) * self.alpha()).sum(dim=-1)

    def loss(self, log_prob_per_dim: torch.Tensor) -> torch.Tensor:
        """J(α) = E[−α (log π + H̄)], summed over groups; log π is treated as a constant."""
        grouped = self.group(log_prob_per_dim).detach()
        return -(self.log_alpha.exp() * (grouped + self.target)).mean(dim=0).sum()
