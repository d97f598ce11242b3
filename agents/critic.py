"""Soft Q-functions: ``critic.count`` networks as one module with a leading ensemble axis."""

from __future__ import annotations

from collections.abc import Sequence

import torch
from torch import nn

from agents.nets import EnsembleMLP


class SoftQEnsemble(nn.Module):
    """``members`` independent soft Q-networks Q_k(s, a), evaluated in one batched pass.

    Args:
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions (actions in the agent's (−1, 1) units).
        layer_widths: Widths of the hidden layers.
        nonlinearity: Name of the hidden nonlinearity.
        members: Ensemble size (2 gives the twin critics of the published method).
        generator: Source of the initial weights (owned by the run).
    """

    def __init__(
        self,
        obs_dim: int,
        act_dim: int,
        layer_widths: Sequence[int],
        nonlinearity: str,
        members: int = 2,
        generator: torch.Generator | None = None,
    ) -> None:
        super().__init__()
        self.members = members
        self.body = EnsembleMLP(members, obs_dim + act_dim, layer_widths, 1, nonlinearity, generator)

    def forward(self, obs: torch.Tensor, action: torch.Tensor) -> torch.Tensor:
        """Return every member's estimate, ``[members, B]``."""
        return self.body(torch.cat([obs, action], dim=-1)).squeeze(-1)
