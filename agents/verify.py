"""Kiln's ground-truth checks as one table: the exact solvers, and the trained agent against them.

Solver checks (seconds): soft value iteration at α → 0 against a printed textbook table, the
soft-vs-hard value bound, the squashed-Gaussian log-density against torch.distributions, and its
entropy against a quadrature value. Agent checks (minutes): short training runs on Kiln's
exact-answer tasks, measured by :mod:`agents.agent_vs_exact` (shared with the slow tests).
``scripts/verify.py`` is the command; this module holds the logic.
"""

from __future__ import annotations

import math
import tempfile
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import scipy.integrate
import torch
from torch.distributions import Normal, TransformedDistribution
from torch.distributions.transforms import TanhTransform

from agents import squashed_gaussian
from agents.agent_vs_exact import (
    AgentCheck,
    bandit_fixed_alpha_check,
    bandit_tuned_alpha_check,
    lqr_check,
)
from agents.book_gridworld import BOOK_DISCOUNT, BOOK_SOURCE, BOOK_V_STAR, book_gridworld
from agents.soft_dp import soft_value_iteration

# DESIGN.md ("Checks against outside sources"): entropy of tanh(u), u ~ N(0, 1), by SciPy quadrature.
SQUASHED_NORMAL_ENTROPY = 0.6698
# Printed to 4 decimals, so the true value lies within 5e-5 of it; 1e-4 leaves room for quadrature.
SQUASHED_ENTROPY_TOLERANCE = 1e-4
# float32 evaluation of two algebraically equal forms; the unit test holds the same bound.
LOG_PROB_TOLERANCE = 1e-5
# The bound check allows this much for the solver's own 1e-12 convergence tolerance.
_BOUND_SLACK = 1e-9


@dataclass(frozen=True)
class CheckRow:
    """One line of the verification table.

    Attributes:
        check: What is checked.
        source: The reference the expected value comes from.
        expected: The reference value.
        got: Kiln's value.
        error: The measured error (its kind is given by ``tolerance``); NaN where not applicable.
        tolerance: The pass rule, as text (e.g. ``"≤ 5 % rel"``).
        passed: Whether the check passed.
    """

    check: str
    source: str
    expected: float
    got: float
    error: float
    tolerance: str
    passed: bool


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


def gridworld_check() -> CheckRow:
    """Soft value iteration with α = 0 reproduces the book's v* table, compared rounded to 0.1."""
    transitions, reward = book_gridworld()
    hard = soft_value_iteration(transitions, reward, alpha=0.0, discount=BOOK_DISCOUNT, tolerance=1e-12)
    # The book prints one decimal (one cell sits 0.05 from its rounding), so rounded values must match.
    worst = float(np.max(np.abs(np.round(hard.v.reshape(5, 5), 1) - BOOK_V_STAR)))
    return CheckRow(
        "soft VI α=0: max |round(V,1) − v*| over 25 cells", BOOK_SOURCE, 0.0, worst, worst, "= 0 (rounded to 0.1)",
        hard.converged and worst == 0.0,
    )  # fmt: skip


def soft_bound_check(alpha: float = 1.0) -> CheckRow:
    """0 ≤ V_soft − v* ≤ α log|A| / (1 − γ) on the book gridworld."""
    transitions, reward = book_gridworld()
    hard = soft_value_iteration(transitions, reward, alpha=0.0, discount=BOOK_DISCOUNT, tolerance=1e-12)
    soft = soft_value_iteration(transitions, reward, alpha=alpha, discount=BOOK_DISCOUNT, tolerance=1e-12)
    gap = soft.v - hard.v
    bound = alpha * math.log(transitions.shape[1]) / (1 - BOOK_DISCOUNT)
    passed = bool(gap.min() >= -_BOUND_SLACK and gap.max() <= bound + _BOUND_SLACK)
    return CheckRow(
        f"soft VI α={alpha:g}: max (V_soft − v*) within bound", "DESIGN.md: 0 ≤ V_soft − v* ≤ α log|A|/(1−γ)",
        bound, float(gap.max()), float("nan"), f"0 ≤ got ≤ expected (min {gap.min():.2g})", passed,
    )  # fmt: skip


def log_prob_check() -> CheckRow:
    """Kiln's squashed-Gaussian log-density against TransformedDistribution(Normal, TanhTransform)."""
    u = torch.linspace(-20.0, 20.0, 401).unsqueeze(-1)
    mean, log_std = torch.full_like(u, 0.3), torch.full_like(u, -0.2)
    # cache_size=1 lets torch reuse u rather than atanh(tanh(u)), which float32 cannot invert near 20.
    tanh = TanhTransform(cache_size=1)
    reference = TransformedDistribution(Normal(mean, log_std.exp()), [tanh]).log_prob(tanh(u))
    difference = (squashed_gaussian.squashed_log_prob(u, mean, log_std) - reference).abs()
    # |log π| reaches ~300 at |u| = 20, where one float32 step is 3e-5: scale the error by 1 + |log π|
    # (the unit test's atol = rtol = 1e-5 rule, in one number).
    error = float((difference / (1.0 + reference.abs())).max())
    return CheckRow(
        "squashed-Gaussian log π, u ∈ [−20, 20]: max |Δ|", "torch.distributions TanhTransform",
        0.0, float(difference.max()), error, f"|Δ|/(1+|log π|) ≤ {LOG_PROB_TOLERANCE:g}", error <= LOG_PROB_TOLERANCE,
    )  # fmt: skip


def squashed_entropy_check() -> CheckRow:
    """Entropy of tanh(N(0, 1)) from Kiln's log-density, integrated over u with SciPy."""
    zero = torch.zeros(1, dtype=torch.float64)  # mean 0 and log-std 0: N(0, 1)

    def integrand(u: float) -> float:
        log_pi = squashed_gaussian.squashed_log_prob(torch.tensor([u], dtype=torch.float64), zero, zero)
        return -math.exp(-0.5 * u * u) / math.sqrt(2 * math.pi) * float(log_pi)

    entropy = scipy.integrate.quad(integrand, -12.0, 12.0, limit=200)[0]
    error = abs(entropy - SQUASHED_NORMAL_ENTROPY)
    return CheckRow(
        "entropy of tanh(N(0,1)) from Kiln's log π", "DESIGN.md (SciPy quadrature)", SQUASHED_NORMAL_ENTROPY,
        entropy, error, f"≤ {SQUASHED_ENTROPY_TOLERANCE:g} abs", error <= SQUASHED_ENTROPY_TOLERANCE,
    )  # fmt: skip


SOLVER_CHECKS: tuple[Callable[[], CheckRow], ...] = (gridworld_check, soft_bound_check, log_prob_check, squashed_entropy_check)
AGENT_CHECKS: tuple[tuple[str, Callable[[Path, int], AgentCheck]], ...] = (
    ("bandit_fixed_alpha", bandit_fixed_alpha_check),
    ("bandit_tuned_alpha", bandit_tuned_alpha_check),
    ("lqr", lqr_check),
)


def agent_rows(result: AgentCheck) -> list[CheckRow]:
    """Table rows for one train-and-measure check."""
    return [
        CheckRow(c.label, c.source, c.expected, c.got, c.error, f"≤ {c.tolerance * 100:g} % rel", c.passed)
        for c in result.measurements
    ]


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
                report.rows.extend(agent_rows(result))
                run = {"check": name, "steps": result.steps, "updates": result.updates, "wall_s": result.wall_s}
                report.runs.append(run | {"details": result.details})
    report.wall_s = time.perf_counter() - started
    return report


def _number(x: float) -> str:
    return "—" if math.isnan(x) else f"{x:.4g}"


def format_table(report: VerifyReport) -> str:
    """The report as a fixed-width text table, one check per line, and a summary line."""
    header = ("check", "reference", "expected", "got", "error", "tolerance", "result")
    lines = [
        (r.check, r.source, _number(r.expected), _number(r.got), _number(r.error), r.tolerance, "pass" if r.passed else "FAIL")
        for r in report.rows
    ]  # fmt: skip
    widths = [max(len(str(row[i])) for row in [header, *lines]) for i in range(len(header))]
    text = ["  ".join(str(cell).ljust(w) for cell, w in zip(row, widths)).rstrip() for row in [header, *lines]]
    text.insert(1, "  ".join("-" * w for w in widths))
    failed = sum(not r.passed for r in report.rows)
    text.append(f"{len(report.rows) - failed} of {len(report.rows)} checks passed in {report.wall_s:.0f} s")
    return "\n".join(text)


def report_json(report: VerifyReport, quick: bool, seed: int) -> dict[str, Any]:
    """The report as JSON-ready data (NaN errors become null)."""
    rows = [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in asdict(r).items()} for r in report.rows]
    summary = {"quick": quick, "seed": seed, "passed": report.passed, "wall_s": report.wall_s}
    return summary | {"checks": rows, "runs": report.runs}
