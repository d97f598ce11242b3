"""The per-group table as plain text (terminal) and as markdown (report)."""

from __future__ import annotations

import math
from collections.abc import Callable

from kiln.comparison.bootstrap import Interval
from kiln.comparison.summary import Comparison, GroupSummary

NO_CI = "n=1, no CI"


def format_number(value: float) -> str:
    """Short text for a table cell: about four significant digits, no exponent for returns.

    Args:
        value: The number (NaN shows as a dash).

    Returns:
        Text.
    """
    if not math.isfinite(value):
        return "-"
    size = abs(value)
    if size >= 100:
        return f"{value:.1f}"
    if size >= 1:
        return f"{value:.2f}"
    if size == 0:
        return "0"
    return f"{value:.3g}"


def format_probability(value: float) -> str:
    """A probability with two decimals, so that a column of them lines up.

    Args:
        value: Probability in [0, 1].

    Returns:
        Text.
    """
    return f"{value:.2f}"


def _with_interval(center: float, interval: Interval | None, n_runs: int,
                   fmt: Callable[[float], str] = format_number) -> str:
    """``center [low, high]``, or the center marked as having no CI."""
    if interval is None:
        return f"{fmt(center)} ({NO_CI})" if n_runs < 2 else fmt(center)
    return f"{fmt(center)} [{fmt(interval.low)}, {fmt(interval.high)}]"


def group_header(key: str) -> str:
    """Column title for the grouping key: its last part in words.

    Args:
        key: Dotted config key.

    Returns:
        E.g. "target entropy" for ``agent.temperature.target_entropy``.
    """
    return key.split(".")[-1].replace("_", " ")


def _improvement_cell(group: GroupSummary, best: GroupSummary) -> str:
    """P(group > best) with its CI; the best group is the reference."""
    if group.is_best:
        return "reference (best IQM)"
    if group.improvement_ci is None:
        whose = NO_CI if group.n_runs < 2 else f"best group {NO_CI}"
        return f"{format_probability(group.improvement)} ({whose})"
    return _with_interval(group.improvement, group.improvement_ci, group.n_runs, format_probability)


def table_rows(comparison: Comparison, *, ascii_only: bool) -> list[list[str]]:
    """Header and one row per group.

    Args:
        comparison: The comparison.
        ascii_only: Write "alpha" instead of "α" (terminals with a narrow encoding).

    Returns:
        Rows of cells, header first.
    """
    percent = f"{comparison.settings.confidence:.0%}"
    header = [
        group_header(comparison.settings.group_by),
        "runs",
        f"IQM [{percent} CI]",
        "median",
        "mean",
        "entropy (nats)",
        "alpha" if ascii_only else "α",
        f"P(> best) [{percent} CI]",
    ]
    rows = [header]
    for group in comparison.groups:
        rows.append(
            [
                group.label,
                str(group.n_runs),
                _with_interval(group.iqm, group.iqm_ci, group.n_runs),
                format_number(group.median),
                format_number(group.mean),
                format_number(group.entropy),
                format_number(group.alpha),
                _improvement_cell(group, comparison.best),
            ]
        )
    return rows


def text_table(comparison: Comparison) -> str:
    """The table aligned in columns for a terminal.

    Args:
        comparison: The comparison.

    Returns:
        Lines joined by newlines, ASCII only.
    """
    rows = table_rows(comparison, ascii_only=True)
    widths = [max(len(row[column]) for row in rows) for column in range(len(rows[0]))]
    lines = []
    for index, row in enumerate(rows):
        lines.append("  ".join(cell.ljust(width) for cell, width in zip(row, widths, strict=True)).rstrip())
        if index == 0:
            lines.append("  ".join("-" * width for width in widths))
    return "\n".join(lines)


def markdown_table(comparison: Comparison) -> str:
    """The table in GitHub-flavoured markdown.

    Args:
        comparison: The comparison.

    Returns:
        Markdown lines joined by newlines.
    """
    rows = table_rows(comparison, ascii_only=False)
    lines = ["| " + " | ".join(rows[0]) + " |", "|" + "|".join("---" for _ in rows[0]) + "|"]
    lines += ["| " + " | ".join(row) + " |" for row in rows[1:]]
    return "\n".join(lines)
