"""Update diagnostics and speed accumulated between two log points of the training loop."""

from __future__ import annotations

import time

import torch

# Update diagnostics in the order SoftActorCritic.update returns them.
UPDATE_TAGS = (
    "critic/td_mse", "critic/q_mean", "critic/q_spread", "critic/target_mean", "actor/objective",
    "actor/entropy_nats", "actor/log_std_mean", "temperature/value", "temperature/objective",
)  # fmt: skip


class LogWindow:
    """Sums update diagnostics (as one tensor, to keep the hot loop cheap) and counts steps,
    updates and update time since the last :meth:`close`; keeps run totals."""

    def __init__(self) -> None:
        self.total_updates, self.total_update_time = 0, 0.0
        self._sum = torch.zeros(len(UPDATE_TAGS))
        self._open(time.perf_counter())

    def _open(self, now: float) -> None:
        self._start, self._steps, self._updates, self._update_time = now, 0, 0, 0.0
        self._sum.zero_()

    def add_update(self, values: dict[str, torch.Tensor]) -> None:
        """Record one update's diagnostics."""
        self._sum += torch.stack([values[t] for t in UPDATE_TAGS])
        self._updates += 1

    def add_update_time(self, seconds: float) -> None:
        self._update_time += seconds

    def add_step(self) -> None:
        self._steps += 1

    def close(self) -> tuple[dict[str, float], dict[str, float] | None]:
        """End the window: returns speed figures and mean diagnostics (updates/s and diagnostics
        only when the window had updates, else left out / ``None``)."""
        now = time.perf_counter()
        speed = {"speed/env_steps_per_s": self._steps / max(now - self._start, 1e-9)}
        if self._updates:
            # Updates per second of time spent updating: comparable with scripts/bench.py.
            speed["speed/updates_per_s"] = self._updates / self._update_time
        means = dict(zip(UPDATE_TAGS, (self._sum / self._updates).tolist())) if self._updates else None
        self.total_updates += self._updates
        self.total_update_time += self._update_time
        self._open(now)
        return speed, means
