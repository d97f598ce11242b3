"""Float32 GEMM speed at given shapes on the current torch thread setting.

The rate of a list of products is FLOP-weighted: all their FLOPs (each shape as often as an update
runs it) over the sum of each shape's best time. It is what an update made only of these products,
run back to back with no other work, would reach: the denominator of the update's GEMM fraction.
A best time is used because on a shared machine other work only ever slows a measurement down;
:class:`GemmTimer` keeps bests across rounds, so the rounds can be interleaved with another
measurement (the update's) and both see the same conditions.

A product of several members is timed as one ``torch.bmm`` (how the update runs it) and, for
comparison, as one ``torch.mm`` per member: for some shapes (an output or inner size of 1) the
batched kernel is many times slower than the per-member loop, which bounds the update.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import torch

from kiln.benchmark.cases import cpu_clock
from kiln.benchmark.gemm_shapes import Gemm

# Seconds per timed batch of calls: well above the clock's resolution even for the smallest
# products, and short enough for several batches per shape and round (common practice, no source).
_SLICE_S = 0.005


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


def _calls(g: Gemm) -> tuple[Callable[[], object], Callable[[], object]]:
    """``(as the update runs it, one mm per member)`` for product ``g``, on fresh operands."""
    gen = torch.Generator().manual_seed(0)
    lead = (g.members,) if g.members > 1 else ()
    a, b = _operand(lead, g.m, g.k, g.a_transposed, gen), _operand(lead, g.k, g.n, g.b_transposed, gen)
    out = torch.empty(*lead, g.m, g.n)
    if g.members == 1:
        return (lambda: torch.mm(a, b, out=out)), (lambda: torch.mm(a, b, out=out))

    def loop() -> None:
        for i in range(g.members):
            torch.mm(a[i], b[i], out=out[i])

    return (lambda: torch.bmm(a, b, out=out)), loop


class _Best:
    """Best CPU seconds per call of one callable, over any number of timed slices."""

    def __init__(self, call: Callable[[], object]) -> None:
        self.call, self.best = call, float("inf")
        call()  # the first call lets the BLAS library pick its kernel and touch the memory
        t0 = cpu_clock()
        call()
        self.per_slice = max(1, int(_SLICE_S / max(cpu_clock() - t0, 1e-7)))

    def time(self, seconds: float) -> None:
        """Time batches of calls for about ``seconds`` (at least one batch), keeping the best."""
        start = cpu_clock()
        while True:
            t0 = cpu_clock()
            for _ in range(self.per_slice):
                self.call()
            t1 = cpu_clock()
            self.best = min(self.best, (t1 - t0) / self.per_slice)
            if t1 - start >= seconds:
                return


class GemmTimer:
    """Best times of a list of products, refined round by round."""

    def __init__(self, gemms: Sequence[Gemm]) -> None:
        self.gemms = list(gemms)
        total = sum(g.flops for g in self.gemms)
        self._weights = [g.flops / total for g in self.gemms]
        self._timers = [tuple(_Best(c) for c in _calls(g)) for g in self.gemms]

    def round(self, seconds: float) -> None:
        """One round over every product, ``seconds`` shared in proportion to their FLOPs."""
        for (update_kernel, per_member), weight, g in zip(self._timers, self._weights, self.gemms):
            if g.members == 1:
                update_kernel.time(seconds * weight)
            else:
                update_kernel.time(seconds * weight / 2)
                per_member.time(seconds * weight / 2)

    def rates(self) -> list[ShapeRate]:
        """Each product's best times so far."""
        return [
            ShapeRate(g, kernel.best, kernel.best if g.members == 1 else loop.best)
            for g, (kernel, loop) in zip(self.gemms, self._timers)
        ]


def shape_rates(gemms: Sequence[Gemm], seconds: float, rounds: int = 3) -> list[ShapeRate]:
    """Best time of each product over ``rounds`` rounds sharing ``seconds``."""
    timer = GemmTimer(gemms)
    for _ in range(rounds):
        timer.round(seconds / rounds)
    return timer.rates()


def weighted_gflops(rates: Sequence[ShapeRate], per_member_mm: bool = False) -> float:
    """All FLOPs over the summed best times (``per_member_mm``: the faster of bmm and the mm loop per shape)."""
    flops = sum(r.gemm.flops for r in rates)
    seconds = sum((min(r.best_s, r.per_member_mm_s) if per_member_mm else r.best_s) * r.gemm.count for r in rates)
    return flops / seconds / 1e9


def square_gflops(size: int = 256, seconds: float = 0.5) -> float:
    """GFLOP/s of one ``[size, size] @ [size, size]`` product (the default network's hidden layer)."""
    return shape_rates([Gemm(1, size, size, size)], seconds)[0].gflops
