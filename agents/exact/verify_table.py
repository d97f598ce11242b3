"""Kiln's ground-truth checks as one table: the exact solvers, and the trained agent against them.

Solver checks (seconds) come from :mod:`kiln.exact.solver_checks`, agent checks (minutes, short
training runs on Kiln's exact-answer tasks) from :mod:`kiln.exact.agent_vs_exact`; the tests assert
on the same rows. ``scripts/verify.py`` is the command; this module runs the checks and lays out the
table.
"""

from __future__ import annotations

import math
import tempfile
import textwrap
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from kiln.exact.agent_vs_exact import AgentCheck, bandit_fixed_alpha_check, bandit_tuned_alpha_check, lqr_check
from kiln.exact.check_row import CheckRow
from kiln.exact.solver_checks import gridworld_check, log_prob_check, soft_bound_check, squashed_entropy_check

# The table fits a 120-column terminal; long text cells wrap onto continuation lines.
TABLE_WIDTH = 120
_GAP = "  "
_HEADER = ("check", "reference", "expected", "got", "error", "tolerance", "result")
_WRAPPED = (0, 1, 5)  # check, reference and tolerance wrap; numbers and the result never do
_NARROWEST = 12  # a wrapped column never gets narrower than this

SOLVER_CHECKS: tuple[Callable[[], CheckRow], ...] = (
    gridworld_check,
    soft_bound_check,
    log_prob_check,
    squashed_entropy_check,
)
AGENT_CHECKS: tuple[tuple[str, Callable[[Path, int], AgentCheck]], ...] = (
    ("bandit_fixed_alpha", bandit_fixed_alpha_check),
    ("bandit_tuned_alpha", bandit_tuned_alpha_check),
    ("lqr", lqr_check),
)


@dataclass
class VerifyReport:
    """All rows, plus the training runs behind the agent rows."""

    rows: list[CheckRow] = field(default_factory=list)
    runs: list[dict[str, Any]] = field(default_factory=list)
    wall_s: float = 0.0

    @property
    def passed(self) -> bool:
        """True when every check passed."""
        return all(row.passed for row in self.rows)


def run_verify(quick: bool, seed: int, say: Callable[[str], None] = print) -> VerifyReport:
    """Run the checks and collect the table.

    Args:
        quick: Solver checks only (seconds); otherwise the training checks too (minutes).
        seed: Seed of the training runs.
        say: Where progress lines go.

    Returns:
        The report (rows in table order, plus steps and wall time of each training run).
    """
    started = time.perf_counter()
    report = VerifyReport(rows=[check() for check in SOLVER_CHECKS])
    if not quick:
        with tempfile.TemporaryDirectory(prefix="kiln-verify-") as work:
            for name, check in AGENT_CHECKS:
                say(f"training {name} (seed {seed}) ...")
                result = check(Path(work) / name, seed)
                say(f"  {result.steps} steps, {result.updates} updates, {result.wall_s:.0f} s")
                report.rows.extend(result.measurements)
                run = {"check": name, "steps": result.steps, "updates": result.updates, "wall_s": result.wall_s}
                report.runs.append(run | {"details": result.details})
    report.wall_s = time.perf_counter() - started
    return report


def _number(x: float) -> str:
    return "—" if math.isnan(x) else f"{x:.4g}"


def _column_widths(cells: list[tuple[str, ...]], width: int) -> list[int]:
    """Natural column widths, narrowing the widest wrapped column until the row fits ``width``."""
    widths = [max(len(row[i]) for row in cells) for i in range(len(_HEADER))]
    while sum(widths) + len(_GAP) * (len(widths) - 1) > width:
        widest = max(_WRAPPED, key=lambda i: widths[i])
        if widths[widest] <= _NARROWEST:
            break  # the numbers alone overflow; better a long line than an unreadable table
        widths[widest] -= 1
    return widths


def format_table(report: VerifyReport, width: int = TABLE_WIDTH) -> str:
    """The report as a fixed-width text table and a summary line, no line longer than ``width``.

    Each check starts on a line that ends with its result (``pass`` or ``FAIL``); text too long for
    its column continues on the lines below it.
    """
    numbers = [(_number(r.expected), _number(r.got), _number(r.error)) for r in report.rows]
    cells = [_HEADER] + [
        (r.check, r.source, *values, r.rule, "pass" if r.passed else "FAIL") for r, values in zip(report.rows, numbers)
    ]
    widths = _column_widths(cells, width)
    text = []
    for row in cells:
        wrapped = [textwrap.wrap(cell, w) or [""] for cell, w in zip(row, widths)]
        for line in range(max(len(parts) for parts in wrapped)):
            parts = [p[line] if line < len(p) else "" for p in wrapped]
            text.append(_GAP.join(part.ljust(w) for part, w in zip(parts, widths)).rstrip())
    text.insert(1, _GAP.join("-" * w for w in widths))
    failed = sum(not r.passed for r in report.rows)
    text.append(f"{len(report.rows) - failed} of {len(report.rows)} checks passed in {report.wall_s:.0f} s")
    return "\n".join(text)


def report_json(report: VerifyReport, quick: bool, seed: int) -> dict[str, Any]:
    """The report as JSON-ready data (NaN and infinite errors become null)."""
    rows = [
        {k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in asdict(r).items()}
        | {"passed": r.passed}
        for r in report.rows
    ]
    summary = {"quick": quick, "seed": seed, "passed": report.passed, "wall_s": report.wall_s}
    return summary | {"checks": rows, "runs": report.runs}
