"""The exact solver and the squashed Gaussian against outside sources, one row per check.

Each function computes one comparison and returns a :class:`~kiln.exact.check_row.CheckRow`; the
unit tests assert on these rows and ``scripts/verify.py`` prints them, so the two cannot drift apart.
Sources: Sutton & Barto, *Reinforcement Learning: An Introduction*, 2nd ed. (2018), Example 3.8 /
Figure 3.5; the log-sum-exp bound; Haarnoja et al. 2018 (arXiv 1812.05905), Appendix C, and
torch.distributions' ``TanhTransform``; SciPy quadrature.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.integrate
import torch
from torch.distributions import Normal, TransformedDistribution
from torch.distributions.transforms import TanhTransform

from kiln.envs.gridworld import BOOK_DISCOUNT, BOOK_SOURCE, BOOK_V_STAR, book_gridworld
from kiln.exact.check_row import CheckRow, absolute_row
from kiln.exact.soft_dp import SoftSolution, soft_value_iteration
from kiln.learner import squashed_gaussian

# Solver tolerance of every gridworld solve: far below the book's 0.05 rounding and the bound's slack.
SOLVER_TOLERANCE = 1e-12
# The bound check allows this much for the two solves' own SOLVER_TOLERANCE.
BOUND_SLACK = 1e-9
# |Δ| ≤ 1e-5 (1 + |log π|): float32 evaluation of two algebraically equal forms. |log π| reaches ~300
# at |u| = 20, where one float32 step is 3e-5, so the difference is scaled by 1 + |log π|.
LOG_PROB_TOLERANCE = 1e-5
# Entropy of tanh(u), u ~ N(0, 1), by SciPy quadrature (recomputed independently of Kiln's code in
# tests/learner/test_squashed_gaussian.py).
SQUASHED_NORMAL_ENTROPY = 0.6698
# Printed to 4 decimals, so the true value lies within 5e-5 of it; 1e-4 leaves room for quadrature.
SQUASHED_ENTROPY_TOLERANCE = 1e-4
_BOUND_SOURCE = "analytic: log-sum-exp bound through the γ-contraction"
_LOG_PROB_SOURCE = "Haarnoja et al. 2018, App. C; torch.distributions TanhTransform"
_ENTROPY_SOURCE = "SciPy quadrature"


def _solve_gridworld(alpha: float) -> SoftSolution:
    transitions, reward = book_gridworld()
    return soft_value_iteration(transitions, reward, alpha=alpha, discount=BOOK_DISCOUNT, tolerance=SOLVER_TOLERANCE)


def gridworld_check(alpha: float = 0.0) -> CheckRow:
    """Soft value iteration on Example 3.8 against the book's printed v*, compared rounded to 0.1.

    At α = 0 soft value iteration is ordinary value iteration; a tiny α differs from it by at most
    α log|A| / (1 − γ). The book prints one decimal and one cell of its tables sits 0.05 from its
    rounding, so the rounded values must match exactly rather than to a tight tolerance.

    Args:
        alpha: Temperature of the solve (0, or small enough not to move the rounded values).

    Returns:
        The row for the worst of the 25 cells: v* there, the rounded V there, and their difference
        (tolerance 0). An unconverged solve counts as failed (error ∞).
    """
    solution = _solve_gridworld(alpha)
    rounded = np.round(solution.v.reshape(BOOK_V_STAR.shape), 1)
    differences = np.abs(rounded - BOOK_V_STAR)
    worst = np.unravel_index(np.argmax(differences), differences.shape)
    error = float(differences[worst]) if solution.converged else math.inf
    row, col = (int(i) for i in worst)
    label = f"soft VI α={alpha:g} vs v*, rounded to 0.1 (worst of 25 cells: ({row}, {col}))"
    expected, got = float(BOOK_V_STAR[worst]), float(rounded[worst])
    return CheckRow("gridworld", label, BOOK_SOURCE, expected, got, error, 0.0, "abs")


def soft_bound_check(alpha: float = 1.0) -> CheckRow:
    """0 ≤ V_soft − v* ≤ α log|A| / (1 − γ) on every state of Example 3.8.

    The bound follows from max q ≤ α log Σₐ exp(q/α) ≤ max q + α log|A|, carried through the
    γ-contraction of the backup.

    Args:
        alpha: Temperature of the soft solve, > 0.

    Returns:
        The row: the bound α log|A| / (1 − γ) as expected, the largest V_soft − v* as got, and as error
        how far any state's V_soft − v* lies outside [0, bound] (tolerance: the solves' slack).
    """
    gap = _solve_gridworld(alpha).v - _solve_gridworld(0.0).v
    bound = alpha * math.log(book_gridworld()[0].shape[1]) / (1 - BOOK_DISCOUNT)
    outside = max(0.0, float(-gap.min()), float(gap.max() - bound))
    label = f"soft VI α={alpha:g}: largest V_soft − v* ≤ α log|A| / (1 − γ)"
    return CheckRow("soft_bound", label, _BOUND_SOURCE, bound, float(gap.max()), outside, BOUND_SLACK,
                    "outside [0, expected]")  # fmt: skip


def log_prob_check() -> CheckRow:
    """Kiln's squashed-Gaussian log-density against ``TransformedDistribution(Normal, TanhTransform)``.

    401 pre-squash points u ∈ [−20, 20] (mean 0.3, log-std −0.2): the reference's cache lets torch
    reuse u rather than atanh(tanh(u)), which float32 cannot invert near |u| = 20.

    Returns:
        The row for the point of largest scaled error |Δ| / (1 + |log π|): torch's log π there as
        expected, Kiln's as got (equivalent to ``torch.testing.assert_close(atol=rtol=1e-5)``).
    """
    u = torch.linspace(-20.0, 20.0, 401).unsqueeze(-1)
    mean, log_std = torch.full_like(u, 0.3), torch.full_like(u, -0.2)
    tanh = TanhTransform(cache_size=1)
    reference = TransformedDistribution(Normal(mean, log_std.exp()), [tanh]).log_prob(tanh(u))
    ours = squashed_gaussian.squashed_log_prob(u, mean, log_std)
    scaled = (ours - reference).abs() / (1.0 + reference.abs())
    worst = int(torch.argmax(scaled))  # a NaN is the argmax, so a NaN anywhere fails the row
    label = f"squashed-Gaussian log π, worst of 401 u in [−20, 20] (u = {float(u[worst]):g})"
    return CheckRow("log_prob", label, _LOG_PROB_SOURCE, float(reference[worst]), float(ours[worst]),
                    float(scaled[worst]), LOG_PROB_TOLERANCE, "|Δ|/(1+|expected|)")  # fmt: skip


def squashed_entropy_check() -> CheckRow:
    """Entropy of tanh(N(0, 1)) from Kiln's log-density, integrated over u with SciPy's ``quad``.

    Returns:
        The row: 0.6698 nats as expected, Kiln's integral as got, absolute error (tolerance 1e-4).
    """
    zero = torch.zeros(1, dtype=torch.float64)  # mean 0 and log-std 0: N(0, 1)

    def integrand(u: float) -> float:
        log_pi = squashed_gaussian.squashed_log_prob(torch.tensor([u], dtype=torch.float64), zero, zero)
        return -math.exp(-0.5 * u * u) / math.sqrt(2 * math.pi) * float(log_pi)

    entropy = scipy.integrate.quad(integrand, -12.0, 12.0, limit=200)[0]
    label = "entropy of tanh(N(0,1)) from Kiln's log π (nats)"
    return absolute_row("entropy", label, _ENTROPY_SOURCE, SQUASHED_NORMAL_ENTROPY, entropy, SQUASHED_ENTROPY_TOLERANCE)
