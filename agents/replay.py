"""Uniform replay buffer, preallocated in float32."""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np
import torch

from agents.errors import ConfigError


@dataclass(frozen=True)
class Batch:
    """A minibatch of transitions; ``terminated`` is 1.0 where the next state is terminal."""

    obs: torch.Tensor
    action: torch.Tensor
    reward: torch.Tensor
    next_obs: torch.Tensor
    terminated: torch.Tensor


def replay_bytes(capacity: int, obs_dim: int, act_dim: int) -> int:
    """Memory the buffer preallocates: observation, next observation, action, reward and flag rows in float32."""
    return capacity * (2 * obs_dim + act_dim + 2) * 4


def check_replay_fits(capacity: int, obs_dim: int, act_dim: int) -> None:
    """Refuse a capacity whose buffer would not fit in this machine's memory, before allocating it.

    Raises:
        ConfigError: Naming how much the buffer needs and how much the machine has.
    """
    need = replay_bytes(capacity, obs_dim, act_dim)
    have = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    # Half the machine: the run needs room for networks, the env and the OS besides the buffer.
    if need > have // 2:
        gib = 1024**3
        raise ConfigError(
            f"agent.replay_capacity={capacity} needs {need / gib:.3g} GiB for the replay buffer "
            f"(obs {obs_dim}, act {act_dim}); this machine has {have / gib:.3g} GiB: lower agent.replay_capacity "
            f"to at most {have // 2 // (need // capacity)}"
        )


class ReplayBuffer:
    """Fixed-capacity ring buffer of transitions with uniform sampling.

    Only *termination* is stored: a transition cut by a time limit is stored with its real final
    observation as ``next_obs`` and ``terminated = 0`` so that the critic keeps bootstrapping.

    Args:
        capacity: Most transitions kept; the oldest are overwritten first.
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions.
        generator: Source of the sampled indices (owned by the run).
    """

    def __init__(self, capacity: int, obs_dim: int, act_dim: int, generator: torch.Generator) -> None:
        if capacity <= 0:
            raise ValueError(f"replay capacity must be > 0, got {capacity}")
        self.capacity = capacity
        self.obs = torch.zeros(capacity, obs_dim)
        self.action = torch.zeros(capacity, act_dim)
        self.reward = torch.zeros(capacity)
        self.next_obs = torch.zeros(capacity, obs_dim)
        self.terminated = torch.zeros(capacity)
        self.generator = generator
        self.size = 0
        self._next = 0

    def __len__(self) -> int:
        return self.size

    def add(
        self, obs: np.ndarray, action: np.ndarray, reward: float, next_obs: np.ndarray, terminated: bool
    ) -> None:
        """Store one transition (``action`` in the agent's (−1, 1) units)."""
        i = self._next
        self.obs[i] = torch.as_tensor(obs, dtype=torch.float32)
        self.action[i] = torch.as_tensor(action, dtype=torch.float32)
        self.reward[i] = float(reward)
        self.next_obs[i] = torch.as_tensor(next_obs, dtype=torch.float32)
        self.terminated[i] = float(terminated)
        self._next = (i + 1) % self.capacity
        self.size = min(self.size + 1, self.capacity)

    def sample(self, batch_size: int) -> Batch:
        """Draw ``batch_size`` transitions uniformly, with replacement."""
        if self.size == 0:
            raise RuntimeError("cannot sample from an empty replay buffer")
        idx = torch.randint(self.size, (batch_size,), generator=self.generator)
        return Batch(
            obs=self.obs[idx],
            action=self.action[idx],
            reward=self.reward[idx],
            next_obs=self.next_obs[idx],
            terminated=self.terminated[idx],
        )
