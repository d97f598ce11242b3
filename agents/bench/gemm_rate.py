"""Float32 GEMM speed at given shapes on the current torch thread setting.

The rate of a list of products is FLOP-weighted: all their FLOPs (each shape as often as an update
runs it) over the sum of each shape's best time. It is what an update made only of these products,
run back to back with no other work, would reach: the denominator of the update's GEMM fraction.
A best time is used because on a shared machine other work only ever slows a measurement down.

A product of several members is timed as one ``torch.bmm`` (how the update runs it) and, for
comparison, as one ``torch.mm`` per member: for some shapes (an output or inner size of 1) the
batched kernel is many times slower than the per-member loop, which bounds the update.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import torch

from agents.bench.cases import cpu_clock
from agents.bench.gemm_shapes import Gemm

# Seconds per timed round: well above the clock's resolution even for the smallest products, and
# short enough for several rounds per shape (common practice, no source).
_ROUND_S = 0.01
_MIN_ROUNDS = 3


@dataclass(frozen=True)
class ShapeRate:
    """One product's best seconds per call: as the update runs it, and as one ``mm`` per member."""

    gemm: Gemm
    best_s: float
    per_member_mm_s: float

    @property
    def gflops(self) -> float:
        """GFLOP/s of one call as the update runs it."""
        return self.gemm.flops / self.gemm.count / self.best_s / 1e9

    @property
    def per_member_mm_gflops(self) -> float:
        """GFLOP/s of one call as a loop of ``mm`` over the members."""
        return self.gemm.flops / self.gemm.count / self.per_member_mm_s / 1e9


def _operand(lead: tuple[int, ...], rows: int, cols: int, transposed: bool, g: torch.Generator) -> torch.Tensor:
    # A transposed operand is the transposed view of a row-major tensor, as autograd passes xᵀ and Wᵀ.
    return torch.randn(*lead, cols, rows, generator=g).mT if transposed else torch.randn(*lead, rows, cols, generator=g)


def best_seconds(call: Callable[[], object], seconds: float) -> float:
    """Best CPU seconds per call of ``call`` over rounds lasting ``seconds`` in all (at least 3 rounds)."""
    call()  # the first call lets the BLAS library pick its kernel and touch the memory
    t0 = cpu_clock()
    call()
    calls = max(1, int(_ROUND_S / max(cpu_clock() - t0, 1e-7)))
    best, rounds, start = float("inf"), 0, cpu_clock()
    while rounds < _MIN_ROUNDS or cpu_clock() - start < seconds:
        t0 = cpu_clock()
        for _ in range(calls):
            call()
        best = min(best, (cpu_clock() - t0) / calls)
        rounds += 1
    return best


def time_gemm(g: Gemm, seconds: float) -> ShapeRate:
    """Time ``g`` as ``torch.mm`` (one member) or ``torch.bmm``, and as one ``mm`` per member."""
    gen = torch.Generator().manual_seed(0)
    lead = (g.members,) if g.members > 1 else ()
    a, b = _operand(lead, g.m, g.k, g.a_transposed, gen), _operand(lead, g.k, g.n, g.b_transposed, gen)
    out = torch.empty(*lead, g.m, g.n)
    if g.members == 1:
        t = best_seconds(lambda: torch.mm(a, b, out=out), seconds)
        return ShapeRate(g, t, t)

    def loop() -> None:
        for i in range(g.members):
            torch.mm(a[i], b[i], out=out[i])

    return ShapeRate(g, best_seconds(lambda: torch.bmm(a, b, out=out), seconds / 2), best_seconds(loop, seconds / 2))


def shape_rates(gemms: Sequence[Gemm], seconds: float) -> list[ShapeRate]:
    """Best times of each product, ``seconds`` shared among them in proportion to their FLOPs."""
    total = sum(g.flops for g in gemms)
    return [time_gemm(g, seconds * g.flops / total) for g in gemms]


def weighted_gflops(rates: Sequence[ShapeRate], per_member_mm: bool = False) -> float:
    """All FLOPs over the summed best times (``per_member_mm``: the faster of bmm and the mm loop per shape)."""
    flops = sum(r.gemm.flops for r in rates)
    seconds = sum((min(r.best_s, r.per_member_mm_s) if per_member_mm else r.best_s) * r.gemm.count for r in rates)
    return flops / seconds / 1e9


def square_gflops(size: int = 256, seconds: float = 0.5) -> float:
    """GFLOP/s of one ``[size, size] @ [size, size]`` product (the default network's hidden layer)."""
    return time_gemm(Gemm(1, size, size, size), seconds).gflops
