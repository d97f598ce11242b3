"""Update diagnostics and speed accumulated between two log points of the training loop."""

from __future__ import annotations

import time

import torch

from kiln.errors import DivergenceError

# Update diagnostics in the order SoftActorCritic.update returns them.
UPDATE_TAGS = (
    "critic/td_mse", "critic/q_mean", "critic/q_spread", "critic/target_mean", "actor/objective",
    "actor/entropy_nats", "actor/log_std_mean", "temperature/value", "temperature/objective",
)  # fmt: skip


# A diagnostic beyond this magnitude means training has blown up even if it is still finite (float32
# reaches 3e38): no sensible reward scale gives squared TD errors or Q-values near 1e15
# (common practice, no source).
BLOW_UP = 1e15


class LogWindow:
    """Sums update diagnostics of every agent of a population (as one ``[agents, tags]`` tensor, to
    keep the hot loop cheap) and counts steps, updates and update time since the last :meth:`close`;
    keeps run totals. The agents step and update together, so the counters are shared."""

    def __init__(self, agents: int = 1) -> None:
        self.total_updates, self.total_update_time = 0, 0.0
        self._sum = torch.zeros(agents, len(UPDATE_TAGS))
        self._open(time.perf_counter())

    def _open(self, now: float) -> None:
        self._start, self._steps, self._updates, self._update_time = now, 0, 0, 0.0
        self._sum.zero_()

    def add_update(self, values: dict[str, torch.Tensor], step: int) -> dict[int, DivergenceError]:
        """Record one update's diagnostics (each ``[agents]``).

        Returns:
            For each agent with a diagnostic (loss, Q, α, ...) that is non-finite or beyond
            :data:`BLOW_UP`, the error naming its first such tag; empty when all is well.
        """
        stacked = torch.stack([values[t] for t in UPDATE_TAGS], dim=1)
        self._sum += stacked
        self._updates += 1
        # One check per update on nine numbers per agent: cheap beside the update, and it names the exact step.
        fine = stacked.abs() <= BLOW_UP
        if bool(fine.all()):
            return {}
        errors = {}
        for agent, tag in (~fine).nonzero().tolist():
            if agent not in errors:
                errors[agent] = DivergenceError(UPDATE_TAGS[tag], float(stacked[agent, tag]), f"at env step {step}")
        return errors

    def add_update_time(self, seconds: float) -> None:
        self._update_time += seconds

    def add_step(self) -> None:
        self._steps += 1

    def close(self) -> tuple[dict[str, float], list[dict[str, float]] | None]:
        """End the window: returns speed figures and each agent's mean diagnostics (diagnostics only
        when the window had updates, else ``None``; updates/s only when they took measurable time)."""
        now = time.perf_counter()
        speed = {"speed/env_steps_per_s": self._steps / max(now - self._start, 1e-9)}
        if self._updates and self._update_time > 0:
            # Updates per second of time spent updating: comparable with scripts/bench.py. None
            # measured (a clock that did not advance) gives no rate rather than a division by zero.
            speed["speed/updates_per_s"] = self._updates / self._update_time
        means = [dict(zip(UPDATE_TAGS, row)) for row in (self._sum / self._updates).tolist()] if self._updates else None
        self.total_updates += self._updates
        self.total_update_time += self._update_time
        self._open(now)
        return speed, means

    def state(self) -> tuple[dict[str, int | float], torch.Tensor]:
        """Counters and the running sums ``[agents, tags]`` of the open window, for a checkpoint."""
        counters = {
            "steps": self._steps, "updates": self._updates, "update_time": self._update_time,
            "total_updates": self.total_updates, "total_update_time": self.total_update_time,
        }  # fmt: skip
        return counters, self._sum.clone()

    def restore(self, counters: dict[str, int | float], sums: torch.Tensor) -> None:
        """Continue the window a checkpoint saved (its clock restarts now); ``sums`` as :meth:`state` gives them."""
        self._open(time.perf_counter())
        self._steps, self._updates = int(counters["steps"]), int(counters["updates"])
        self._update_time = float(counters["update_time"])
        self.total_updates, self.total_update_time = int(counters["total_updates"]), float(counters["total_update_time"])
        self._sum.copy_(sums)
