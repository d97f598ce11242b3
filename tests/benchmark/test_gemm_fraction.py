"""The GEMM fraction's arithmetic on given rates (hand arithmetic), and the measurement's rounds on
injected timings: both clocks replaced by one fake clock that advances a fixed step per read, so the
figures are exact and do not depend on the machine."""

from __future__ import annotations

import pytest

from kiln.benchmark import gemm_rate, update_speed
from kiln.benchmark.cases import UpdateCase
from kiln.benchmark.gemm_fraction import UpdateVsGemm, measure_update_vs_gemm
from kiln.benchmark.gemm_rate import ShapeRate
from kiln.benchmark.gemm_shapes import Gemm, total_flops, update_gemms

TINY = UpdateCase("tiny", 3, 1, (8,), 16, 2)
TICK = 2.0**-6


def test_fraction_by_hand():
    rates = [
        ShapeRate(Gemm(1, 1000, 1000, 1000), best_s=0.02, per_member_mm_s=0.02),  # 2e9 FLOPs
        ShapeRate(Gemm(2, 100, 100, 500, count=2), best_s=0.01, per_member_mm_s=0.002),  # 4e7 FLOPs
    ]
    figures = UpdateVsGemm(TINY, updates_per_s=20.0, rates=rates)
    # Hand arithmetic: 2.04 GFLOP per update; as the update runs them, 2.04e9 FLOPs in 0.02 + 2 · 0.01 s
    # = 51 GFLOP/s; with the mm loop for the second, 0.02 + 2 · 0.002 s = 85 GFLOP/s.
    assert figures.update_gflop == pytest.approx(2.04, rel=1e-12)
    assert figures.gemm_gflops == pytest.approx(51.0, rel=1e-12)
    assert figures.gemm_gflops_per_member_mm == pytest.approx(85.0, rel=1e-12)
    # 20 updates/s · 2.04 GFLOP = 40.8 GFLOP/s of products, over 51: a fraction of 0.8.
    assert figures.gemm_fraction == pytest.approx(0.8, rel=1e-12)


def test_measurement_alternates_rounds_and_keeps_the_update_shapes(monkeypatch: pytest.MonkeyPatch):
    now = [0.0]

    def clock() -> float:
        value, now[0] = now[0], now[0] + TICK
        return value

    monkeypatch.setattr(gemm_rate, "cpu_clock", clock)
    monkeypatch.setattr(update_speed, "cpu_clock", clock)
    updates = []
    original = update_speed.SoftActorCritic.update
    monkeypatch.setattr(update_speed.SoftActorCritic, "update", lambda self, batch: updates.append(1) or original(self, batch))
    figures = measure_update_vs_gemm(TINY, seconds=2 * 4 * TICK, rounds=2)
    # The rates cover exactly the update's products (as listed by gemm_shapes.update_gemms).
    assert [r.gemm for r in figures.rates] == update_gemms(3, 1, (8,), 16, 2)
    assert figures.update_gflop == pytest.approx(total_flops(update_gemms(3, 1, (8,), 16, 2)) / 1e9, rel=1e-12)
    # Each round's update part lasts 4 TICK: reads at TICK … 4 TICK after its start, so 4 updates
    # over 5 TICK; two rounds, after 3 warm-up updates.
    assert len(updates) == 3 + 2 * 4 and figures.updates_per_s == 4 / (5 * TICK)
    # Every product's slice is one call (0.005 s / TICK < 1) lasting TICK, so the GEMM time of an update is
    # TICK per product call and the fraction is 4 / (5 TICK) · TICK · (product calls) = 0.8 · calls.
    calls = sum(r.gemm.count for r in figures.rates)
    assert all(r.best_s == TICK for r in figures.rates)
    assert figures.gemm_fraction == pytest.approx(0.8 * calls, rel=1e-12) and figures.case is TINY
