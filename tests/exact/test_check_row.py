"""A check row's pass rule, and the relative and absolute rows, by hand arithmetic."""

import math

import pytest

from kiln.exact.check_row import CheckRow, absolute_row, relative_row


def test_relative_row_by_hand():
    row = relative_row("std", "bandit: std of a", "quadrature", 0.15, 0.16, 0.05)
    # |0.16 − 0.15| / 0.15 = 0.0667 > 0.05: fails, and the rule reads in the error's own measure.
    assert row.error == pytest.approx(0.01 / 0.15)
    assert not row.passed and row.rule == "≤ 0.05 rel"
    # |0.155 − 0.15| / 0.15 = 0.0333 ≤ 0.05: passes.
    assert relative_row("std", "bandit: std of a", "quadrature", 0.15, 0.155, 0.05).passed


def test_absolute_row_and_edge_of_the_rule():
    # |0.6699 − 0.6698| = 1e-4 up to rounding: on the edge of a 1e-4 rule, just past a 0.9e-4 one.
    assert absolute_row("h", "entropy", "SciPy", 0.6698, 0.6699, 1.01e-4).passed
    assert not absolute_row("h", "entropy", "SciPy", 0.6698, 0.6699, 0.9e-4).passed
    # A NaN error (a broken computation) fails whatever the tolerance.
    assert not CheckRow("n", "c", "s", 1.0, math.nan, math.nan, math.inf, "abs").passed
