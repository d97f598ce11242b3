"""Uniform replay buffer, preallocated in float32, and a population's buffers side by side.

A transition is one packed float32 row ``[obs | action | reward | next_obs | terminated]``, so a
minibatch is one gather of whole rows; the named fields are column views of the same storage.
"""

from __future__ import annotations

import os

import numpy as np
import torch

from kiln.errors import ConfigError
from kiln.learner.sac import Batch


def row_width(obs_dim: int, act_dim: int) -> int:
    """Floats in one packed transition row."""
    return 2 * obs_dim + act_dim + 2


def split_row(rows: torch.Tensor, obs_dim: int, act_dim: int) -> tuple[torch.Tensor, ...]:
    """Column views ``(obs, action, reward, next_obs, terminated)`` of packed rows ``[..., row_width]``."""
    o, a = obs_dim, act_dim
    return rows[..., :o], rows[..., o:o + a], rows[..., o + a], rows[..., o + a + 1:2 * o + a + 1], rows[..., 2 * o + a + 1]


def replay_bytes(capacity: int, obs_dim: int, act_dim: int) -> int:
    """Memory the buffer preallocates: observation, next observation, action, reward and flag rows in float32."""
    return capacity * (2 * obs_dim + act_dim + 2) * 4


def check_replay_fits(capacity: int, obs_dim: int, act_dim: int, agents: int = 1) -> None:
    """Refuse a capacity whose buffers (one per agent) would not fit in this machine's memory, before allocating them.

    Raises:
        ConfigError: Naming how much the buffers need and how much the machine has.
    """
    need = agents * replay_bytes(capacity, obs_dim, act_dim)
    have = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    # Half the machine: the run needs room for networks, the env and the OS besides the buffer.
    if need > have // 2:
        gib = 1024**3
        raise ConfigError(
            f"agent.replay_capacity={capacity} needs {need / gib:.3g} GiB for the replay "
            f"{'buffer' if agents == 1 else f'buffers of {agents} runs'} (obs {obs_dim}, act {act_dim}); this machine has "
            f"{have / gib:.3g} GiB: lower agent.replay_capacity to at most {have // 2 // (need // capacity)}"
        )


# Rows per file of a checkpoint's replay: a checkpoint rewrites only the chunks that changed since
# the previous one. 65 536 rows of HalfCheetah transitions are ≈11 MB (common practice, no source:
# a size that keeps both the file count and the per-checkpoint write small).
CHUNK_ROWS = 65_536
_FIELDS = ("obs", "action", "reward", "next_obs", "terminated")


class ReplayBuffer:
    """Fixed-capacity ring buffer of transitions with uniform sampling.

    Only *termination* is stored: a transition cut by a time limit is stored with its real final
    observation as ``next_obs`` and ``terminated = 0`` so that the critic keeps bootstrapping.

    Args:
        capacity: Most transitions kept; the oldest are overwritten first.
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions.
        generator: Source of the sampled indices (owned by the run).
        storage: Rows ``[capacity, row_width(obs_dim, act_dim)]`` to use (a population's slice); new zeros if ``None``.
    """

    def __init__(
        self, capacity: int, obs_dim: int, act_dim: int, generator: torch.Generator, storage: torch.Tensor | None = None
    ) -> None:
        if capacity <= 0:
            raise ValueError(f"replay capacity must be > 0, got {capacity}")
        self.capacity = capacity
        self.rows = torch.zeros(capacity, row_width(obs_dim, act_dim)) if storage is None else storage
        self.obs_dim, self.act_dim = obs_dim, act_dim
        fields = split_row(self.rows, obs_dim, act_dim)
        self.obs, self.action, self.reward, self.next_obs, self.terminated = fields
        self.generator = generator
        self._row_view = self.rows.numpy()  # the same memory: transitions are written from NumPy in one call
        self.size = 0
        self._next = 0
        self._dirty: set[int] = set()  # chunks written since the last checkpoint took them

    def __len__(self) -> int:
        return self.size

    def add(
        self, obs: np.ndarray, action: np.ndarray, reward: float, next_obs: np.ndarray, terminated: bool
    ) -> np.ndarray:
        """Store one transition (``action`` in the agent's (−1, 1) units) and return its stored row
        (a float32 view, for the caller's finite check: one check of the row covers every field)."""
        i = self._next
        row = self._row_view[i]
        # The packed row in one NumPy call straight into the storage (one operation instead of five).
        np.concatenate((np.ravel(obs), np.ravel(action), (reward,), np.ravel(next_obs), (float(terminated),)), out=row)
        self._dirty.add(i // CHUNK_ROWS)
        self._next = (i + 1) % self.capacity
        self.size = min(self.size + 1, self.capacity)
        return row

    def sample(self, batch_size: int) -> Batch:
        """Draw ``batch_size`` transitions uniformly, with replacement."""
        if self.size == 0:
            raise RuntimeError("cannot sample from an empty replay buffer")
        idx = torch.randint(self.size, (batch_size,), generator=self.generator)
        return Batch(*split_row(self.rows[idx], self.obs_dim, self.act_dim))

    @property
    def position(self) -> dict[str, int]:
        """Fill level and the row the next transition goes to."""
        return {"capacity": self.capacity, "size": self.size, "next": self._next, "chunk_rows": CHUNK_ROWS}

    def dirty_chunks(self) -> list[int]:
        """Chunks holding rows written since :meth:`mark_saved` was last called for them."""
        return sorted(self._dirty)

    def mark_saved(self, chunks: list[int]) -> None:
        """Forget that ``chunks`` changed (a checkpoint now holds them)."""
        self._dirty.difference_update(chunks)

    def chunk(self, index: int) -> dict[str, torch.Tensor]:
        """The rows of chunk ``index`` as named tensors."""
        rows = slice(index * CHUNK_ROWS, min((index + 1) * CHUNK_ROWS, self.capacity))
        return {name: getattr(self, name)[rows].contiguous() for name in _FIELDS}

    def load_chunk(self, index: int, tensors: dict[str, torch.Tensor]) -> None:
        """Put chunk ``index`` back from :meth:`chunk`'s tensors.

        Raises:
            ValueError: If a tensor is missing or has the wrong shape.
        """
        rows = slice(index * CHUNK_ROWS, min((index + 1) * CHUNK_ROWS, self.capacity))
        for name in _FIELDS:
            target = getattr(self, name)[rows]
            if name not in tensors or tensors[name].shape != target.shape:
                raise ValueError(f"replay chunk {index}: {name} missing or of the wrong shape")
            target.copy_(tensors[name])

    def set_position(self, size: int, next_row: int) -> None:
        """Restore the fill level and the next row (after loading the chunks)."""
        if not (0 <= size <= self.capacity and 0 <= next_row < self.capacity):
            raise ValueError(f"replay position size={size}, next={next_row} does not fit capacity {self.capacity}")
        self.size, self._next = size, next_row
        self._dirty.clear()


class PopulationReplay:
    """One :class:`ReplayBuffer` per agent of a population, in one storage ``[agents, capacity, row]``.

    Each agent's buffer is filled by its own collector and sampled with its own generator, as a run
    of its own would; :meth:`sample` draws every agent's minibatch and gathers all rows at once.
    """

    def __init__(self, capacity: int, obs_dim: int, act_dim: int, generators: list[torch.Generator]) -> None:
        self.storage = torch.zeros(len(generators), capacity, row_width(obs_dim, act_dim))
        self.obs_dim, self.act_dim = obs_dim, act_dim
        self.buffers = [ReplayBuffer(capacity, obs_dim, act_dim, g, self.storage[i]) for i, g in enumerate(generators)]
        # Agent k's rows start at k·capacity of the flat storage: a minibatch is one index_select of flat rows.
        self._flat = self.storage.view(len(generators) * capacity, -1)
        self._offsets = (torch.arange(len(generators)) * capacity).unsqueeze(1)

    def __len__(self) -> int:
        """Transitions held by the emptiest buffer (they fill in step)."""
        return min(len(b) for b in self.buffers)

    def sample(self, batch_size: int) -> Batch:
        """Every agent's minibatch, ``[agents, batch_size, ...]``: each drawn uniformly with replacement
        from its own buffer with its own generator."""
        if len(self) == 0:
            raise RuntimeError("cannot sample from an empty replay buffer")
        draws = [torch.randint(b.size, (batch_size,), generator=b.generator) for b in self.buffers]
        idx = draws[0].unsqueeze(0) if len(draws) == 1 else torch.stack(draws)
        rows = self._flat.index_select(0, (idx + self._offsets).view(-1)).view(*idx.shape, -1)
        return Batch(*split_row(rows, self.obs_dim, self.act_dim))
