"""The GEMM rate's arithmetic on injected timings (a fake clock that advances a fixed step per read, so
every best time is hand arithmetic), the products it times against NumPy's matmul, and the units of what
it returns. Never the speed itself: no assertion here depends on how fast the machine is."""

from __future__ import annotations

import numpy as np
import pytest
import torch

from kiln.benchmark import gemm_rate
from kiln.benchmark.gemm_rate import ShapeRate, shape_rates, square_gflops, weighted_gflops
from kiln.benchmark.gemm_shapes import Gemm

TICK = 2.0**-10  # seconds per clock read: a power of two, so every difference below is exact


class FakeClock:
    """A clock that moves ``TICK`` seconds each time it is read, whatever ran in between."""

    def __init__(self) -> None:
        self.now, self.reads = 0.0, 0

    def __call__(self) -> float:
        self.reads += 1
        value, self.now = self.now, self.now + TICK
        return value


@pytest.fixture
def clock(monkeypatch: pytest.MonkeyPatch) -> FakeClock:
    fake = FakeClock()
    monkeypatch.setattr(gemm_rate, "cpu_clock", fake)
    return fake


def test_shape_rate_units_by_hand():
    g = Gemm(2, 64, 32, 16, count=3)
    rate = ShapeRate(g, best_s=1e-4, per_member_mm_s=2e-4)
    # One call: 2 · 2 members · 64 · 32 · 16 = 131 072 FLOPs; in 1e-4 s that is 1.31072 GFLOP/s.
    assert rate.gflops == pytest.approx(131_072 / 1e-4 / 1e9, rel=1e-12)
    assert rate.per_member_mm_gflops == pytest.approx(131_072 / 2e-4 / 1e9, rel=1e-12)


def test_weighted_rate_is_all_flops_over_all_best_times_by_hand():
    big = ShapeRate(Gemm(1, 100, 100, 100, count=2), best_s=1e-3, per_member_mm_s=1e-3)  # 4e6 FLOPs in all
    small = ShapeRate(Gemm(4, 10, 10, 10), best_s=1e-4, per_member_mm_s=5e-5)  # 8e3 FLOPs
    # (4e6 + 8e3) FLOPs over (2 · 1e-3 + 1e-4) s = 1.908 GFLOP/s; with the faster mm loop for the
    # small product, over (2e-3 + 5e-5) s = 1.9551... GFLOP/s.
    assert weighted_gflops([big, small]) == pytest.approx(4.008e6 / 2.1e-3 / 1e9, rel=1e-12)
    assert weighted_gflops([big, small], per_member_mm=True) == pytest.approx(4.008e6 / 2.05e-3 / 1e9, rel=1e-12)


@pytest.mark.parametrize("a_t,b_t", [(False, False), (True, False), (False, True)])
def test_timed_products_compute_the_product_as_numpy_does(a_t, b_t):
    g = Gemm(3, 5, 4, 2, a_transposed=a_t, b_transposed=b_t)
    update_kernel, per_member = gemm_rate._calls(g)
    out = update_kernel()
    first = out.clone()
    per_member()  # writes each member's product into the same output
    # Both ways give the same [members, m, n] product (one bmm, or one mm per member).
    assert first.shape == (3, 5, 2)
    torch.testing.assert_close(out, first, rtol=1e-6, atol=1e-6)
    a = gemm_rate._operand((3,), 5, 4, a_t, torch.Generator().manual_seed(0))
    assert a.shape == (3, 5, 4) and a.is_contiguous() == (not a_t)  # a transposed view, as autograd passes xᵀ


def test_one_member_product_against_numpy():
    g = Gemm(1, 6, 3, 4)
    out = gemm_rate._calls(g)[0]()
    gen = torch.Generator().manual_seed(0)
    a, b = torch.randn(6, 3, generator=gen), torch.randn(3, 4, generator=gen)
    # Source: numpy.matmul of the same operands (the timer's documented seed-0 draws, a then b).
    np.testing.assert_allclose(out.numpy(), a.numpy() @ b.numpy(), rtol=1e-5, atol=1e-6)


def test_best_time_of_timed_slices_by_hand(clock: FakeClock):
    calls = []
    best = gemm_rate._Best(lambda: calls.append(1))
    # Warm-up call, then one call timed between two reads (TICK): 0.005 s / TICK = 5.12 → 5 calls a slice.
    assert best.per_slice == 5 and len(calls) == 2
    best.time(2.5 * TICK)
    # Each slice reads the clock twice (TICK apart): best = TICK / 5. The slices end once a slice's end
    # is 2.5 TICK past the start: ends at 1, 3 TICK → two slices of 5 calls.
    assert best.best == TICK / 5 and len(calls) == 2 + 10


def test_timer_rates_with_the_fake_clock(clock: FakeClock):
    gemms = [Gemm(1, 8, 8, 8), Gemm(2, 4, 4, 4)]
    rates = shape_rates(gemms, seconds=10 * TICK, rounds=2)
    assert [r.gemm for r in rates] == gemms
    # Every slice spans one TICK and holds 5 calls, whatever the shape: best TICK / 5 both ways.
    assert all(r.best_s == TICK / 5 and r.per_member_mm_s == TICK / 5 for r in rates)
    # Hand arithmetic: 2 · 8³ + 2 · 2 · 4³ = 1024 + 256 FLOPs over 2 · TICK / 5 s.
    assert weighted_gflops(rates) == pytest.approx(1280 / (2 * TICK / 5) / 1e9, rel=1e-12)


def test_square_rate_by_hand(clock: FakeClock):
    # 2 · 8³ = 1024 FLOPs per product, best TICK / 5 s: 1024 · 5 · 1024 / 1e9 GFLOP/s.
    assert square_gflops(size=8, seconds=3 * TICK) == pytest.approx(1024 * 5 * 1024 / 1e9, rel=1e-12)
