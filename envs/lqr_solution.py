"""Exact maximum-entropy solution of FiringHold (and any ``LinearQuadraticModel``).

Soft return used throughout (and by Kiln's critics):

    G = sum_{t>=0} gamma^t (r_t - alpha log pi(u_t | x_t)),   r_t = -(x_t'Q x_t + u_t'R u_t),

whose expectation equals sum_t gamma^t (r_t + alpha H(pi(.|x_t))): the entropy bonus is earned at every
step including the first, and the cost is that of the state the action is taken in. Action clipping is
ignored here; the env's default bound makes it negligible (see ``kiln.envs.lqr``).

Derivation of the constant (guess V(x) = -x'Px - c and apply the soft Bellman equation
V(x) = alpha log integral exp(Q(x, u) / alpha) du):

    Q(x, u) = -x'Qx - u'Ru + gamma E[V(Ax + Bu + w)]
            = -x'Qx - u'Ru - gamma (Ax + Bu)'P(Ax + Bu) - gamma tr(PW) - gamma c.
    With M = R + gamma B'PB and K = gamma M^-1 B'PA, completing the square in u:
    Q(x, u) = -(u + Kx)'M(u + Kx) - x'(Q + gamma A'PA - K'MK)x - gamma tr(PW) - gamma c.
    exp(Q / alpha) in u is Gaussian with mean -Kx and covariance Sigma = (alpha / 2) M^-1, and
    alpha log integral exp(-(u + Kx)'M(u + Kx) / alpha) du = (alpha / 2) log det(2 pi Sigma).
    Matching the quadratic terms gives the discounted Riccati equation
        P = Q + gamma A'PA - gamma^2 A'PB M^-1 B'PA,
    and matching constants gives -c = -gamma tr(PW) - gamma c + (alpha / 2) log det(2 pi Sigma), i.e.
        c = [gamma tr(PW) - (alpha / 2) log det(2 pi Sigma)] / (1 - gamma).
    There is no e inside the log det: the e of the Gaussian entropy (alpha / 2) log det(2 pi e Sigma) is
    cancelled by the expected quadratic penalty E[(u + Kx)'M(u + Kx)] = tr(M Sigma) = (alpha / 2) m.
tests/envs/test_lqr_solution.py checks this constant against a Monte Carlo estimate and against a Lyapunov
evaluation of the policy with the Gaussian entropy's e written out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike

from kiln.envs.lqr import LinearQuadraticModel


@dataclass(frozen=True)
class SoftLqSolution:
    """The soft-optimal policy N(-K x, Sigma) and soft value V*(x) = -x'Px - c.

    Attributes:
        riccati: P, shape (n, n).
        gain: K, shape (m, n); the optimal mean action is -K x.
        covariance: Sigma, shape (m, m) (zeros when alpha = 0).
        constant: c.
        alpha: Temperature used.
        discount: Discount used.
    """

    riccati: np.ndarray
    gain: np.ndarray
    covariance: np.ndarray
    constant: float
    alpha: float
    discount: float

    def value(self, states: ArrayLike) -> np.ndarray:
        """V*(x) = -x'Px - c for one state (n,) or a batch (count, n)."""
        x = np.asarray(states, dtype=np.float64)
        return -np.einsum("...i,ij,...j->...", x, self.riccati, x) - self.constant

    def mean_value(self, start_covariance: ArrayLike) -> float:
        """E[V*(x_0)] for x_0 ~ N(0, start_covariance): -tr(P S_0) - c."""
        return float(-np.trace(self.riccati @ np.asarray(start_covariance, dtype=np.float64)) - self.constant)

    def mean_action(self, states: ArrayLike) -> np.ndarray:
        """-K x for one state (n,) or a batch (count, n)."""
        return -np.asarray(states, dtype=np.float64) @ self.gain.T


def _check_alpha_discount(alpha: float, discount: float) -> None:
    if not (np.isfinite(alpha) and alpha >= 0):
        raise ValueError(f"alpha must be finite and >= 0, got {alpha}; use 0 for ordinary LQR")
    if not 0.0 <= discount < 1.0:
        raise ValueError(f"discount must satisfy 0 <= discount < 1, got {discount}; pass e.g. 0.99")


def soft_lq_solution(model: LinearQuadraticModel, alpha: float, discount: float) -> SoftLqSolution:
    """Exact maximum-entropy solution: P, K, Sigma and c (see the module docstring).

    Args:
        model: The plant and costs.
        alpha: Temperature, >= 0.
        discount: Discount, 0 <= discount < 1.

    Returns:
        The SoftLqSolution.

    Raises:
        ValueError: On invalid alpha or discount, or if the discounted Riccati equation has no
            stabilising solution (the plant is not stabilisable at this discount).
    """
    _check_alpha_discount(alpha, discount)
    a, b = model.state_matrix, model.input_matrix
    root = np.sqrt(discount)
    try:
        # X = A'XA - A'XB(R + B'XB)^-1 B'XA + Q with A -> sqrt(gamma) A, B -> sqrt(gamma) B is exactly the
        # discounted Riccati equation above.
        riccati = scipy.linalg.solve_discrete_are(root * a, root * b, model.state_cost, model.input_cost)
    except (np.linalg.LinAlgError, ValueError) as error:
        raise ValueError(
            f"no stabilising Riccati solution ({error}); make (A, B) stabilisable or lower the discount"
        ) from None
    riccati = (riccati + riccati.T) / 2
    curvature = model.input_cost + discount * b.T @ riccati @ b  # M = R + gamma B'PB
    gain = discount * np.linalg.solve(curvature, b.T @ riccati @ a)
    covariance = (alpha / 2) * np.linalg.inv(curvature)
    covariance = (covariance + covariance.T) / 2
    entropy_term = 0.0
    if alpha > 0:
        entropy_term = (alpha / 2) * np.linalg.slogdet(2 * np.pi * covariance)[1]
    constant = (discount * np.trace(riccati @ model.noise_covariance) - entropy_term) / (1 - discount)
    return SoftLqSolution(riccati, gain, covariance, float(constant), float(alpha), float(discount))


def linear_gaussian_soft_value(
    model: LinearQuadraticModel,
    gain: ArrayLike,
    covariance: ArrayLike,
    alpha: float,
    discount: float,
) -> tuple[np.ndarray, float]:
    """Soft value of any policy u ~ N(-K x, Sigma): V_pi(x) = -x'P_pi x - c_pi (same soft return).

    P_pi solves P_pi = Q + K'RK + gamma F'P_pi F with F = A - BK, and
    c_pi = [tr(R Sigma) + gamma tr(P_pi (B Sigma B' + W)) - (alpha / 2) log det(2 pi e Sigma)] / (1 - gamma),
    the last term being alpha times the Gaussian entropy per step.

    Args:
        model: The plant and costs.
        gain: K, shape (m, n).
        covariance: Sigma, shape (m, m); positive definite when alpha > 0.
        alpha: Temperature, >= 0.
        discount: Discount, 0 <= discount < 1.

    Returns:
        (P_pi, c_pi).

    Raises:
        ValueError: On bad shapes, a non-positive-definite Sigma with alpha > 0, or a gain for which
            the discounted closed loop diverges (infinite cost).
    """
    _check_alpha_discount(alpha, discount)
    n, m = model.state_size, model.action_size
    gain = np.asarray(gain, dtype=np.float64)
    covariance = np.asarray(covariance, dtype=np.float64)
    if gain.shape != (m, n):
        raise ValueError(f"gain must have shape ({m}, {n}), got {gain.shape}; pass K with u = -K x")
    if covariance.shape != (m, m):
        raise ValueError(f"covariance must have shape ({m}, {m}), got {covariance.shape}; pass Sigma")
    closed_loop = model.state_matrix - model.input_matrix @ gain
    if discount * np.max(np.abs(np.linalg.eigvals(closed_loop))) ** 2 >= 1:
        raise ValueError(
            "this gain makes the discounted closed loop diverge (infinite cost); pass a stabilising gain"
        )
    entropy = 0.0
    if alpha > 0:
        sign, logdet = np.linalg.slogdet(2 * np.pi * np.e * covariance)
        if sign <= 0 or np.min(np.linalg.eigvalsh((covariance + covariance.T) / 2)) <= 0:
            raise ValueError("covariance must be positive definite when alpha > 0; pass a full-rank Sigma")
        entropy = 0.5 * logdet
    stage = model.state_cost + gain.T @ model.input_cost @ gain
    # solve_discrete_lyapunov solves X = a X a' + q; a = sqrt(gamma) F' gives P = gamma F'PF + stage.
    value_matrix = scipy.linalg.solve_discrete_lyapunov(np.sqrt(discount) * closed_loop.T, stage)
    value_matrix = (value_matrix + value_matrix.T) / 2
    spread = model.input_matrix @ covariance @ model.input_matrix.T + model.noise_covariance
    constant = (
        np.trace(model.input_cost @ covariance)
        + discount * np.trace(value_matrix @ spread)
        - alpha * entropy
    ) / (1 - discount)
    return value_matrix, float(constant)
