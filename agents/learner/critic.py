"""Soft Q-functions: ``critic.count`` networks per agent as one module with a leading ensemble axis."""

from __future__ import annotations

from collections.abc import Sequence

import torch
from torch import nn

from kiln.learner.nets import EnsembleMLP


class SoftQEnsemble(nn.Module):
    """``members`` independent soft Q-networks Q_k(s, a) for each of ``population`` agents, evaluated
    in one batched pass (agent p's networks are rows ``p·members … (p+1)·members − 1``).

    Args:
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions (actions in the agent's (−1, 1) units).
        layer_widths: Widths of the hidden layers.
        nonlinearity: Name of the hidden nonlinearity.
        members: Networks per agent (2 gives the twin critics of the published method).
        generator: Source of the initial weights (owned by the run).
        population: Number of agents.
    """

    def __init__(
        self,
        obs_dim: int,
        act_dim: int,
        layer_widths: Sequence[int],
        nonlinearity: str,
        members: int = 2,
        generator: torch.Generator | None = None,
        population: int = 1,
    ) -> None:
        super().__init__()
        self.members, self.population = members, population
        self.body = EnsembleMLP(population * members, obs_dim + act_dim, layer_widths, 1, nonlinearity, generator)

    def forward(self, obs: torch.Tensor, action: torch.Tensor) -> torch.Tensor:
        """Every network's estimate: ``[members, B]`` for inputs ``[B, ·]`` (one agent), else
        ``[population, members, B]`` for inputs ``[population, B, ·]``."""
        x = torch.cat([obs, action], dim=-1)
        if x.dim() == 2:
            return self.body(x).squeeze(-1)
        p, b, n = x.shape
        # Each agent's rows go to each of its own networks: a copy of the (narrow) input, not of weights.
        shared = x.unsqueeze(1).expand(p, self.members, b, n).reshape(p * self.members, b, n)
        return self.body(shared).view(p, self.members, b)
