"""Updates/s of one agent and the GEMM rate at its update's shapes, measured in alternating rounds.

On a machine shared with other work, the GEMM rate and the update's speed move with the load;
measured far apart, their ratio would carry that drift. Here each round times every GEMM shape and
then the update, and each keeps its best round, so both figures come from the same stretch of time.
"""

from __future__ import annotations

from dataclasses import dataclass

from kiln.benchmark.cases import UpdateCase
from kiln.benchmark.gemm_rate import GemmTimer, ShapeRate, weighted_gflops
from kiln.benchmark.gemm_shapes import total_flops, update_gemms
from kiln.benchmark.update_speed import WARMUP_UPDATES, build_agent, random_batch, timed_round


@dataclass(frozen=True)
class UpdateVsGemm:
    """One size's update speed and the GEMM rates at its shapes."""

    case: UpdateCase
    updates_per_s: float
    rates: list[ShapeRate]

    @property
    def update_gflop(self) -> float:
        """GFLOP of one update's products."""
        return total_flops(r.gemm for r in self.rates) / 1e9

    @property
    def gemm_gflops(self) -> float:
        """FLOP-weighted rate of the products as the update runs them (mm or bmm)."""
        return weighted_gflops(self.rates)

    @property
    def gemm_gflops_per_member_mm(self) -> float:
        """The same with one mm per member wherever that is faster than bmm."""
        return weighted_gflops(self.rates, per_member_mm=True)

    @property
    def gemm_fraction(self) -> float:
        """The update's FLOP rate over :attr:`gemm_gflops`: 1 would be an update of nothing but its GEMMs."""
        return self.updates_per_s * self.update_gflop / self.gemm_gflops


def measure_update_vs_gemm(case: UpdateCase, seconds: float, rounds: int = 5) -> UpdateVsGemm:
    """``rounds`` rounds of (every GEMM shape, then the update), ``seconds`` for each of the two in all."""
    c = case
    timer = GemmTimer(update_gemms(c.obs_dim, c.act_dim, c.layer_widths, c.batch_size, c.critics))
    agent = build_agent(c.obs_dim, c.act_dim, c.settings())
    batch = random_batch(c.obs_dim, c.act_dim, c.batch_size)
    step = lambda: agent.update(batch)  # noqa: E731
    for _ in range(WARMUP_UPDATES):
        step()
    best = 0.0
    for _ in range(rounds):
        timer.round(seconds / rounds)
        best = max(best, timed_round(step, seconds / rounds))
    return UpdateVsGemm(case, best, timer.rates())
