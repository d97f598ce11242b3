"""The solver and squashed-Gaussian rows of the verify table, against the sources they cite."""

from __future__ import annotations

import math

import numpy as np
import pytest

from kiln.envs.gridworld import BOOK_V_STAR
from kiln.exact.solver_checks import gridworld_check, log_prob_check, soft_bound_check, squashed_entropy_check


@pytest.mark.parametrize("alpha", [0.0, 1e-9])
def test_soft_value_iteration_reproduces_the_book_v_star(alpha: float) -> None:
    row = gridworld_check(alpha)
    # Source: Sutton & Barto 2018, Example 3.8 / Figure 3.5, printed to 1 decimal, so rounded values are
    # compared: the worst of the 25 cells differs by exactly 0, i.e. every cell equals the book's.
    # α = 1e-9 is ordinary value iteration up to α log|A| / (1 − γ) = 1.4e-8.
    assert row.passed and row.error == 0.0, row
    assert row.got == row.expected and row.expected in BOOK_V_STAR


def test_gridworld_row_fails_when_the_values_differ_from_the_book() -> None:
    # α = 1 lifts the soft values by up to α log 4 / (1 − γ) = 13.9 (bound below), far past the rounding.
    row = gridworld_check(1.0)
    assert not row.passed and row.error >= 0.1 and row.got > row.expected


@pytest.mark.parametrize("alpha", [0.01, 0.1, 1.0])
def test_soft_value_lies_within_entropy_bound_of_v_star(alpha: float) -> None:
    row = soft_bound_check(alpha)
    # Hand arithmetic: α log|A| / (1 − γ) with |A| = 4, γ = 0.9 is α · 13.8629.
    assert row.expected == pytest.approx(alpha * math.log(4) / 0.1, rel=1e-12)
    # Source: max q ≤ α log Σ exp(q / α) ≤ max q + α log|A|, carried through the γ-contraction:
    # 0 ≤ V_soft − v* ≤ α log|A| / (1 − γ) on every state, up to the 1e-9 slack of the 1e-12 solves.
    assert row.passed and row.tolerance == 1e-9, row
    # The bound is not vacuous: some state sits strictly above v*.
    assert row.got > 0.1 * alpha


def test_log_prob_matches_torch_transformed_distribution_up_to_u_20() -> None:
    row = log_prob_check()
    # Source: torch.distributions TransformedDistribution(Normal, TanhTransform) on u ∈ [−20, 20]
    # (Haarnoja et al. 2018, Appendix C). The rule |Δ| ≤ 1e-5 (1 + |log π|) at every point is
    # torch.testing.assert_close(atol=1e-5, rtol=1e-5).
    assert row.passed and row.tolerance == 1e-5, row
    assert math.isfinite(row.expected) and math.isfinite(row.got)
    # One measure throughout: the error is the scaled difference of the two values the row shows.
    assert row.error == pytest.approx(abs(row.got - row.expected) / (1 + abs(row.expected)), rel=1e-3, abs=1e-9)


def test_squashed_entropy_from_kiln_log_prob_matches_quadrature() -> None:
    row = squashed_entropy_check()
    # Source: SciPy quadrature, the entropy of tanh(u), u ~ N(0, 1), is 0.6698 nats (recomputed by an
    # independent formula in tests/learner/test_squashed_gaussian.py).
    assert row.expected == 0.6698
    assert row.passed and row.tolerance == 1e-4, row
    assert row.error == pytest.approx(abs(row.got - row.expected), abs=1e-15)
    assert np.isclose(row.got, 0.6698, atol=1e-4)
