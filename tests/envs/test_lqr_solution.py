"""FiringHold's exact maximum-entropy solution (kiln.envs.lqr_solution), checked against a fixed-point
Riccati iteration, the quadratic formula, SciPy quadrature of the soft Bellman equation and Monte Carlo
rollouts in the registered task."""

from __future__ import annotations

import math

import gymnasium as gym
import numpy as np
import pytest
import scipy.integrate

import kiln.envs  # noqa: F401  (registers the kiln/ ids)
from kiln.envs.lqr import LinearQuadraticModel
from kiln.envs.lqr_solution import linear_gaussian_soft_value, soft_lq_solution

ALPHA = 0.1
DISCOUNT = 0.9  # gamma^200 = 7e-10: the 200-step time limit is as good as an infinite horizon here


def riccati_by_fixed_point(model: LinearQuadraticModel, discount: float) -> np.ndarray:
    """Plain iteration of P <- Q + g A'PA - g^2 A'PB (R + g B'PB)^-1 B'PA from P = 0."""
    a, b, q, r = model.state_matrix, model.input_matrix, model.state_cost, model.input_cost
    p = np.zeros_like(q)
    for _ in range(5000):
        curvature = r + discount * b.T @ p @ b
        correction = a.T @ p @ b @ np.linalg.solve(curvature, b.T @ p @ a)
        p_next = q + discount * a.T @ p @ a - discount**2 * correction
        if np.max(np.abs(p_next - p)) < 1e-14:
            return p_next
        p = p_next
    raise AssertionError("fixed-point iteration did not converge")


def soft_returns(
    model: LinearQuadraticModel, gain: np.ndarray, covariance: np.ndarray, copies: int, seed: int
) -> tuple[np.ndarray, np.ndarray, float]:
    """Roll out u ~ N(-Kx, Sigma) in the registered vector env for its 200-step limit.

    Returns per-copy soft returns sum_t gamma^t (r_t - alpha log pi(u_t|x_t)), the start states, and the
    fraction of sampled actions outside the action bound (which the env would clip).
    """
    vector_env = gym.make_vec(
        "kiln/FiringHold-v0",
        num_envs=copies,
        vectorization_mode="vector_entry_point",
        state_matrix=model.state_matrix,
        input_matrix=model.input_matrix,
        state_cost=model.state_cost,
        input_cost=model.input_cost,
        noise_covariance=model.noise_covariance,
        start_std=model.start_std,
        action_bound=model.action_bound,
    )
    rng = np.random.default_rng(seed + 1)
    factor = np.linalg.cholesky(covariance)
    log_normaliser = 0.5 * np.linalg.slogdet(2 * np.pi * covariance)[1]
    observations, _ = vector_env.reset(seed=seed)
    starts = observations.astype(np.float64)
    returns = np.zeros(copies)
    clipped = 0
    for t in range(200):
        noise = rng.standard_normal((copies, gain.shape[0]))
        actions = -observations.astype(np.float64) @ gain.T + noise @ factor.T
        clipped += int(np.sum(np.abs(actions) > model.action_bound))
        log_prob = -0.5 * np.sum(noise**2, axis=1) - log_normaliser
        observations, rewards, terminated, truncated, _ = vector_env.step(actions)
        returns += DISCOUNT**t * (rewards - ALPHA * log_prob)
        assert not terminated.any()
        assert truncated.all() == (t == 199)  # the registered time limit truncates at step 200
    return returns, starts, clipped / (200 * copies * gain.shape[0])


def test_riccati_solution_matches_fixed_point_iteration() -> None:
    model = LinearQuadraticModel()
    solution = soft_lq_solution(model, ALPHA, DISCOUNT)
    # Source: the discounted Riccati recursion, written out in riccati_by_fixed_point above and iterated to
    # its fixed point (from memory: Bertsekas, Dynamic Programming and Optimal Control, Vol. I, ch. 4, with
    # the discount folded in as √γ A, √γ B).
    np.testing.assert_allclose(solution.riccati, riccati_by_fixed_point(model, DISCOUNT), rtol=1e-10)


def test_scalar_riccati_matches_quadratic_formula() -> None:
    a, b, q, r, g = 0.9, 0.5, 1.0, 0.1, 0.95
    model = LinearQuadraticModel(
        state_matrix=a, input_matrix=b, state_cost=q, input_cost=r, noise_covariance=0.01
    )
    # Hand algebra, n = m = 1: P = q + g a^2 P - g^2 a^2 b^2 P^2 / (r + g b^2 P). Multiplying out,
    # g b^2 P^2 + (r - g q b^2 - g a^2 r) P - q r = 0, whose positive root is P.
    linear = r - g * q * b**2 - g * a**2 * r
    expected = (-linear + math.sqrt(linear**2 + 4 * g * b**2 * q * r)) / (2 * g * b**2)
    solution = soft_lq_solution(model, alpha=0.5, discount=g)
    assert solution.riccati[0, 0] == pytest.approx(expected, rel=1e-12)
    # K = g b P a / (r + g b^2 P) and Sigma = (alpha / 2) / (r + g b^2 P), derived in envs/lqr_solution.py's docstring.
    assert solution.gain[0, 0] == pytest.approx(g * b * expected * a / (r + g * b**2 * expected), rel=1e-12)
    assert solution.covariance[0, 0] == pytest.approx(0.25 / (r + g * b**2 * expected), rel=1e-12)


@pytest.mark.parametrize("state", [(0.0, 0.0), (1.0, -0.5), (-2.0, 1.5)])
def test_soft_bellman_equation_holds_by_quadrature(state: tuple[float, float]) -> None:
    model = LinearQuadraticModel()
    solution = soft_lq_solution(model, ALPHA, DISCOUNT)
    x = np.array(state)
    a, b, p = model.state_matrix, model.input_matrix, solution.riccati

    def soft_q(u: float) -> float:
        # Q(x, u) = r(x, u) + g E[V*(x')], with E[x''P x'] = mean'P mean + tr(P W) for Gaussian noise.
        mean_next = a @ x + b[:, 0] * u
        spread = np.trace(p @ model.noise_covariance)
        expected_next = -(mean_next @ p @ mean_next + spread) - solution.constant
        return -(x @ model.state_cost @ x + model.input_cost[0, 0] * u**2) + DISCOUNT * expected_next

    centre = float(solution.mean_action(x)[0])
    spread = 12 * math.sqrt(solution.covariance[0, 0])
    shift = soft_q(centre)  # largest Q, so exp((Q - shift) / alpha) <= 1

    def moment(power: int) -> float:
        return scipy.integrate.quad(
            lambda u: (u - centre) ** power * math.exp((soft_q(u) - shift) / ALPHA),
            centre - spread,
            centre + spread,
            epsabs=1e-13,  # the odd moment is ~0, where only an absolute tolerance is meaningful
            epsrel=1e-12,
        )[0]

    # Source: soft Bellman equation V(x) = alpha log integral exp(Q(x, u) / alpha) du, integrated by SciPy
    # quadrature (this is where the constant c, without an e, is confirmed numerically).
    mass = moment(0)
    assert shift + ALPHA * math.log(mass) == pytest.approx(float(solution.value(x)), abs=1e-9)
    # The maximiser of that integral is the policy exp((Q - V) / alpha): mean -Kx, variance Sigma.
    assert moment(1) / mass == pytest.approx(0.0, abs=1e-9)
    assert moment(2) / mass == pytest.approx(solution.covariance[0, 0], rel=1e-9)


def test_policy_evaluation_at_the_optimum_reproduces_the_closed_form() -> None:
    model = LinearQuadraticModel()
    solution = soft_lq_solution(model, ALPHA, DISCOUNT)
    value_matrix, constant = linear_gaussian_soft_value(
        model, solution.gain, solution.covariance, ALPHA, DISCOUNT
    )
    # Two independent formulas (Lyapunov evaluation with the e of the Gaussian entropy, and the closed form's
    # constant without it) must agree at the optimal policy: tr(M Sigma) = alpha m / 2 absorbs the e.
    np.testing.assert_allclose(value_matrix, solution.riccati, rtol=1e-10)
    assert constant == pytest.approx(solution.constant, rel=1e-10)


def test_closed_form_matches_monte_carlo_rollouts() -> None:
    model = LinearQuadraticModel()
    solution = soft_lq_solution(model, ALPHA, DISCOUNT)
    returns, starts, clipped_fraction = soft_returns(
        model, solution.gain, solution.covariance, 20_000, seed=7
    )
    # E[G | x_0] = V*(x_0), so G - V*(x_0) has mean 0; subtracting V*(x_0) removes start-state variance.
    residual = returns - solution.value(starts)
    standard_error = residual.std(ddof=1) / math.sqrt(residual.size)
    # Source: the closed form (derived in envs/lqr_solution.py) vs Monte Carlo; 4 standard
    # errors (a false alarm about once in 16,000 runs; fixed seed here).
    assert abs(residual.mean()) < 4 * standard_error
    # The same estimate against the start-distribution average -tr(P S0) - c.
    expected_mean = solution.mean_value(model.start_std**2 * np.eye(2))
    assert abs(returns.mean() - expected_mean) < 4 * returns.std(ddof=1) / math.sqrt(returns.size)
    # The default bound is wide enough that the optimal policy is (almost) never clipped.
    assert clipped_fraction < 1e-5


@pytest.mark.parametrize(
    ("gain_scale", "covariance_scale"),
    [(1.2, 1.0), (0.8, 1.0), (1.0, 1.5), (1.0, 0.5), (1.2, 1.5), (0.8, 0.5)],
)
def test_perturbed_linear_gaussian_policies_score_lower(gain_scale: float, covariance_scale: float) -> None:
    model = LinearQuadraticModel()
    solution = soft_lq_solution(model, ALPHA, DISCOUNT)
    start_covariance = model.start_std**2 * np.eye(2)
    value_matrix, constant = linear_gaussian_soft_value(
        model, gain_scale * solution.gain, covariance_scale * solution.covariance, ALPHA, DISCOUNT
    )
    # Optimality of the soft-optimal policy: every other policy has a lower soft value, here at the
    # origin, at a unit state and on average over the start distribution.
    for x in (np.zeros(2), np.array([1.0, -1.0])):
        assert -x @ value_matrix @ x - constant < float(solution.value(x)) - 1e-6
    average = -np.trace(value_matrix @ start_covariance) - constant
    assert average < solution.mean_value(start_covariance) - 1e-6


def test_covariance_perturbation_loss_matches_hand_formula() -> None:
    model = LinearQuadraticModel()
    solution = soft_lq_solution(model, ALPHA, DISCOUNT)
    scale = 1.5
    _, constant = linear_gaussian_soft_value(
        model, solution.gain, scale * solution.covariance, ALPHA, DISCOUNT
    )
    # Hand algebra: at fixed K, per step the soft value changes by -tr(M dSigma) + alpha dH with
    # tr(M Sigma*) = alpha m / 2 (m = 1) and dH = (1/2) log(scale), so
    # c(scale) - c* = [alpha / 2 (scale - 1) - alpha / 2 log(scale)] / (1 - g) > 0.
    expected = (ALPHA / 2 * (scale - 1) - ALPHA / 2 * math.log(scale)) / (1 - DISCOUNT)
    assert constant - solution.constant == pytest.approx(expected, rel=1e-9)


def test_perturbed_policy_evaluation_matches_monte_carlo() -> None:
    model = LinearQuadraticModel()
    solution = soft_lq_solution(model, ALPHA, DISCOUNT)
    gain, covariance = 1.3 * solution.gain, 2.0 * solution.covariance
    value_matrix, constant = linear_gaussian_soft_value(model, gain, covariance, ALPHA, DISCOUNT)
    returns, starts, _ = soft_returns(model, gain, covariance, 20_000, seed=11)
    residual = returns + np.einsum("bi,ij,bj->b", starts, value_matrix, starts) + constant
    # Source: Monte Carlo rollouts in the env vs the closed-form (Lyapunov) policy evaluation; 4 s.e.
    assert abs(residual.mean()) < 4 * residual.std(ddof=1) / math.sqrt(residual.size)


def test_zero_temperature_is_ordinary_discounted_lqg() -> None:
    model = LinearQuadraticModel()
    hard = soft_lq_solution(model, alpha=0.0, discount=DISCOUNT)
    # Ordinary discounted LQ control with additive noise (certainty equivalence; from memory, e.g.
    # Bertsekas, Dynamic Programming and Optimal Control, Vol. I, ch. 4): deterministic u = -Kx with the
    # same Riccati P, and the noise costs gamma tr(PW) / (1 - gamma).
    np.testing.assert_array_equal(hard.covariance, np.zeros((1, 1)))
    expected = DISCOUNT * np.trace(hard.riccati @ model.noise_covariance) / (1 - DISCOUNT)
    assert hard.constant == pytest.approx(expected, rel=1e-12)
    # The entropy term (alpha / 2) log det(2 pi Sigma) ~ alpha log alpha vanishes as alpha -> 0.
    nearly_hard = soft_lq_solution(model, alpha=1e-9, discount=DISCOUNT)
    assert nearly_hard.constant == pytest.approx(expected, abs=1e-6)


def test_bad_alpha_and_discount_raise() -> None:
    model = LinearQuadraticModel()
    # Definitions: a temperature is >= 0; the discounted Riccati equation needs 0 <= gamma < 1.
    with pytest.raises(ValueError, match="alpha"):
        soft_lq_solution(model, alpha=-1.0, discount=0.9)
    with pytest.raises(ValueError, match="discount"):
        soft_lq_solution(model, alpha=0.1, discount=1.0)
