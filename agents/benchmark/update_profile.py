"""torch.profiler's per-operator view of the update: where one update's CPU time goes.

The profiler adds a few microseconds to every operator it records, so small operators look
costlier than they are in an unprofiled update; compare shares between sizes or versions, and take
speed itself from :mod:`kiln.benchmark.update_speed`.
"""

from __future__ import annotations

from dataclasses import dataclass

from torch.profiler import ProfilerActivity, profile

from kiln.benchmark.update_speed import build_agent, random_batch
from kiln.config.agent_settings import AgentSettings


@dataclass(frozen=True)
class OperatorRow:
    """One operator's share of an update."""

    name: str
    calls_per_update: float
    self_us_per_update: float
    share: float  # of all operators' self time


def profile_update(
    obs_dim: int, act_dim: int, settings: AgentSettings, population: int = 1, updates: int = 20
) -> tuple[list[OperatorRow], float]:
    """Operators of ``updates`` profiled updates of ``population`` agents, most self time first, and
    the profiled µs per update.

    Self time is time inside the operator itself, not in operators it calls, so the rows add up to
    the whole update's operator time.
    """
    agent = build_agent(obs_dim, act_dim, settings, population)
    batch = random_batch(obs_dim, act_dim, settings.batch_size, population)
    for _ in range(3):  # warm-up outside the record: optimiser moments, kernel choice
        agent.update(batch)
    with profile(activities=[ProfilerActivity.CPU]) as prof:
        for _ in range(updates):
            agent.update(batch)
    events = [e for e in prof.key_averages() if e.self_cpu_time_total > 0]
    total = sum(e.self_cpu_time_total for e in events)
    rows = [
        OperatorRow(e.key, e.count / updates, e.self_cpu_time_total / updates, e.self_cpu_time_total / total)
        for e in sorted(events, key=lambda e: -e.self_cpu_time_total)
    ]
    return rows, total / updates


def operator_table(rows: list[OperatorRow], top: int = 15) -> list[str]:
    """The ``top`` rows as aligned text lines, with a last line for the rest."""
    lines = [f"{'operator':<36}{'calls/upd':>10}{'self µs/upd':>13}{'share':>8}"]
    for r in rows[:top]:
        lines.append(f"{r.name[:35]:<36}{r.calls_per_update:>10.1f}{r.self_us_per_update:>13.1f}{r.share:>8.1%}")
    rest = rows[top:]
    if rest:
        lines.append(f"{f'({len(rest)} others)':<36}{sum(r.calls_per_update for r in rest):>10.1f}"
                     f"{sum(r.self_us_per_update for r in rest):>13.1f}{sum(r.share for r in rest):>8.1%}")  # fmt: skip
    return lines
