"""One comparison of a value Kiln computes against a value from an outside source."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class CheckRow:
    """A value Kiln computes next to its reference, and the rule that decides whether it passes.

    ``error`` and ``tolerance`` are in the same measure, named by ``measure``, and the row passes when
    ``error ≤ tolerance``; ``expected`` and ``got`` are the two values that measure compares.

    Attributes:
        key: Short identifier, e.g. ``"std"``.
        check: What is compared, for a table.
        source: The published source or outside tool the expected value comes from.
        expected: The reference value.
        got: Kiln's value.
        error: How far ``got`` is from ``expected``, in ``measure``.
        tolerance: The largest error that passes.
        measure: What ``error`` measures, e.g. ``"rel"`` for |got − expected| / |expected|.
    """

    key: str
    check: str
    source: str
    expected: float
    got: float
    error: float
    tolerance: float
    measure: str

    @property
    def passed(self) -> bool:
        """Whether the error is within the tolerance (a NaN error fails)."""
        return bool(self.error <= self.tolerance)

    @property
    def rule(self) -> str:
        """The pass rule as text, e.g. ``"≤ 0.05 rel"``."""
        return f"≤ {self.tolerance:g} {self.measure}"


def relative_row(key: str, check: str, source: str, expected: float, got: float, tolerance: float) -> CheckRow:
    """A row scored by the relative error |got − expected| / |expected|."""
    return CheckRow(key, check, source, expected, got, abs(got - expected) / abs(expected), tolerance, "rel")


def absolute_row(key: str, check: str, source: str, expected: float, got: float, tolerance: float) -> CheckRow:
    """A row scored by the absolute error |got − expected|."""
    return CheckRow(key, check, source, expected, got, abs(got - expected), tolerance, "abs")
