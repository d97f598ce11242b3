"""DamperTrim's exact soft-optimal policies by quadrature (kiln.envs.bandit_solution), checked against
SciPy's distributions and adaptive quadrature, and against textbook closed forms."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate
from scipy import stats

from kiln.envs.bandit_solution import (
    bandit_alpha_for_entropy,
    bandit_soft_optimum,
    bandit_squashed_gaussian_optimum,
    squashed_gaussian_statistics,
)

STIFFNESS, TARGET = 4.0, 0.5


def truncated_optimum(stiffness: float, target: float, alpha: float) -> stats.rv_continuous:
    """exp(-(k / 2)(a - a0)^2 / alpha) on (-1, 1) is N(a0, alpha / k) truncated to (-1, 1)."""
    scale = math.sqrt(alpha / stiffness)
    return stats.truncnorm((-1 - target) / scale, (1 - target) / scale, loc=target, scale=scale)


def log_sech_squared(u: float) -> float:
    """log(1 - tanh^2 u) = log sech^2 u = -2 log cosh u (identity), accurate where 1 - tanh^2 u underflows."""
    return -2.0 * math.log(math.cosh(u))


def bandit_reward_of_u(u: float) -> float:
    """DamperTrim's reward -(k / 2)(a - a0)^2 at a = tanh u, with the module-level k and a0."""
    return -0.5 * STIFFNESS * (math.tanh(u) - TARGET) ** 2


def squashed_density_terms(mu: float, sigma: float, function) -> float:
    """E over u ~ N(mu, sigma^2) of function(u), by SciPy adaptive quadrature."""
    return scipy.integrate.quad(
        lambda u: stats.norm.pdf(u, mu, sigma) * function(u),
        mu - 15 * sigma,
        mu + 15 * sigma,
        points=[0.0] if abs(mu) < 15 * sigma else None,  # tanh bends at 0; split there for accuracy
        epsabs=1e-13,
        epsrel=1e-12,
        limit=400,
    )[0]


def test_wide_bounds_reproduce_the_unbounded_gaussian_optimum() -> None:
    k, a0, alpha = 2.0, 0.4, 0.3
    optimum = bandit_soft_optimum(k, a0, alpha, low=-50.0, high=50.0)
    # Source: standard Gaussian integral (completing the square): exp(-(k/2)(a - a0)^2 / alpha) is N(a0, alpha / k),
    # with integral sqrt(2 pi alpha / k), so V = (alpha / 2) log(2 pi alpha / k),
    # H = 1/2 log(2 pi e alpha / k), E[r] = -(k / 2)(alpha / k) = -alpha / 2.
    assert optimum.mean == pytest.approx(a0, abs=1e-10)
    assert optimum.std == pytest.approx(math.sqrt(alpha / k), rel=1e-9)
    assert optimum.soft_value == pytest.approx(alpha / 2 * math.log(2 * math.pi * alpha / k), rel=1e-9)
    assert optimum.entropy == pytest.approx(0.5 * math.log(2 * math.pi * math.e * alpha / k), rel=1e-9)
    assert optimum.expected_reward == pytest.approx(-alpha / 2, rel=1e-9)


@pytest.mark.parametrize(("target", "alpha"), [(0.5, 0.1), (0.5, 1.0), (0.5, 5.0), (1.5, 0.2), (-0.3, 0.002)])
def test_bounded_optimum_matches_scipy_truncated_normal(target: float, alpha: float) -> None:
    optimum = bandit_soft_optimum(STIFFNESS, target, alpha)
    reference = truncated_optimum(STIFFNESS, target, alpha)
    # Source: scipy.stats.truncnorm (the free-form optimum is a truncated normal).
    assert optimum.mean == pytest.approx(reference.mean(), rel=1e-8, abs=1e-10)
    assert optimum.std == pytest.approx(reference.std(), rel=1e-8)
    assert optimum.entropy == pytest.approx(reference.entropy(), rel=1e-8, abs=1e-10)
    # Soft value alpha log Z, Z = sqrt(2 pi) s (Phi(b) - Phi(a)), s = sqrt(alpha / k), via scipy.stats.norm.
    scale = math.sqrt(alpha / STIFFNESS)
    mass = stats.norm.cdf((1 - target) / scale) - stats.norm.cdf((-1 - target) / scale)
    normaliser = math.sqrt(2 * math.pi) * scale * mass
    assert optimum.soft_value == pytest.approx(alpha * math.log(normaliser), rel=1e-8)
    # Pre-squash statistics: E[atanh a] and its spread under the same truncated normal (scipy .expect).
    u_mean = reference.expect(np.arctanh)
    u_square = reference.expect(lambda a: np.arctanh(a) ** 2)
    assert optimum.pre_squash_mean == pytest.approx(u_mean, rel=1e-7, abs=1e-9)
    assert optimum.pre_squash_std == pytest.approx(math.sqrt(u_square - u_mean**2), rel=1e-6)


def test_huge_temperature_approaches_the_uniform_density() -> None:
    optimum = bandit_soft_optimum(STIFFNESS, TARGET, 1e5)
    # The uniform density on (-1, 1): entropy log 2, mean 0, std 2 / sqrt(12) (standard results).
    assert optimum.entropy == pytest.approx(math.log(2), abs=1e-5)
    assert optimum.mean == pytest.approx(0.0, abs=1e-4)
    assert optimum.std == pytest.approx(2 / math.sqrt(12), abs=1e-4)


@pytest.mark.parametrize(("mu", "sigma"), [(0.0, 1.0), (0.7, 3.0), (0.3, 0.01), (2.0, 0.5)])
def test_squashed_gaussian_statistics_match_adaptive_quadrature(mu: float, sigma: float) -> None:
    reward, entropy, mean, std = squashed_gaussian_statistics(mu, sigma, STIFFNESS, TARGET)
    # Source: SciPy adaptive quadrature of the change-of-variables formulas
    # H(a) = 1/2 log(2 pi e sigma^2) + E[log(1 - tanh^2 u)] and E[r(tanh u)].
    log_slope = squashed_density_terms(mu, sigma, log_sech_squared)
    assert entropy == pytest.approx(0.5 * math.log(2 * math.pi * math.e * sigma**2) + log_slope, abs=1e-10)
    expected_reward = squashed_density_terms(mu, sigma, bandit_reward_of_u)
    assert reward == pytest.approx(expected_reward, abs=1e-10)
    expected_mean = squashed_density_terms(mu, sigma, math.tanh)
    assert mean == pytest.approx(expected_mean, abs=1e-10)
    expected_variance = squashed_density_terms(mu, sigma, lambda u: (math.tanh(u) - expected_mean) ** 2)
    assert std == pytest.approx(math.sqrt(expected_variance), abs=1e-9)


def test_squashed_standard_normal_entropy() -> None:
    # N(0,1) squashed has entropy ≈ 0.6698 nats (SciPy quadrature; the value is from memory, and
    # kiln.exact.solver_checks recomputes it against torch.distributions).
    assert squashed_gaussian_statistics(0.0, 1.0, STIFFNESS, TARGET)[1] == pytest.approx(0.6698, abs=5e-5)


@pytest.mark.parametrize("alpha", [0.01, 0.1, 1.0])
def test_family_gap_to_free_optimum_is_alpha_times_kl(alpha: float) -> None:
    family = bandit_squashed_gaussian_optimum(STIFFNESS, TARGET, alpha)
    free = bandit_soft_optimum(STIFFNESS, TARGET, alpha)
    reference = truncated_optimum(STIFFNESS, TARGET, alpha)
    mu, sigma = family.pre_squash_mean, family.pre_squash_std

    def log_ratio(u: float) -> float:
        # log q(a) - log p*(a) at a = tanh u, with q(a) = N(u; mu, sigma) / (1 - tanh^2 u).
        log_q = stats.norm.logpdf(u, mu, sigma) - log_sech_squared(u)
        return log_q - reference.logpdf(math.tanh(u))

    kl = squashed_density_terms(mu, sigma, log_ratio)
    # Source: Gibbs variational principle, E_q[r] + alpha H(q) = alpha log Z - alpha KL(q || p*), with KL by
    # SciPy quadrature against scipy.stats.truncnorm's density.
    assert free.soft_value - family.soft_value == pytest.approx(alpha * kl, rel=1e-5, abs=1e-11)
    assert kl > 0  # a squashed Gaussian is not a truncated normal, so the family is strictly worse


def test_family_optimum_is_a_local_maximum() -> None:
    alpha = 0.3
    family = bandit_squashed_gaussian_optimum(STIFFNESS, TARGET, alpha)

    def objective(mu: float, sigma: float) -> float:
        # E[r] + alpha H by SciPy quadrature, independent of the module's trapezoid rule.
        reward = squashed_density_terms(mu, sigma, bandit_reward_of_u)
        log_slope = squashed_density_terms(mu, sigma, log_sech_squared)
        return reward + alpha * (0.5 * math.log(2 * math.pi * math.e * sigma**2) + log_slope)

    best = objective(family.pre_squash_mean, family.pre_squash_std)
    assert best == pytest.approx(family.soft_value, abs=1e-10)
    # First-order optimality: steps of 1e-3 in either parameter, either direction, only lose.
    for d_mu, d_sigma in [(1e-3, 0), (-1e-3, 0), (0, 1e-3), (0, -1e-3)]:
        assert objective(family.pre_squash_mean + d_mu, family.pre_squash_std + d_sigma) < best


def test_alpha_for_small_entropy_matches_gaussian_formula() -> None:
    k, a0, target_entropy = 4.0, 0.2, -3.0
    result = bandit_alpha_for_entropy(k, a0, target_entropy)
    # Source: Gaussian entropy 1/2 log(2 pi e alpha / k) (the optimum is N(a0, alpha / k), std 0.012, so
    # the bounds are 66 std away): alpha = k exp(2 H) / (2 pi e).
    assert result.alpha == pytest.approx(k * math.exp(2 * target_entropy) / (2 * math.pi * math.e), rel=1e-8)
    assert result.entropy == pytest.approx(target_entropy, abs=1e-9)


def test_alpha_for_entropy_hits_the_target_in_both_families() -> None:
    # Target entropy -dim(A) = -1: Haarnoja et al. 2018 (arXiv 1812.05905), Appendix D Table 1.
    free = bandit_alpha_for_entropy(STIFFNESS, TARGET, -1.0, family="free")
    # Source: scipy.stats.truncnorm entropy of the free-form optimum at the returned alpha.
    assert truncated_optimum(STIFFNESS, TARGET, free.alpha).entropy() == pytest.approx(-1.0, abs=1e-8)
    family = bandit_alpha_for_entropy(STIFFNESS, TARGET, -1.0, family="squashed_gaussian")
    # Source: SciPy quadrature of the squashed Gaussian's entropy at the returned (mu, sigma).
    mu, sigma = family.pre_squash_mean, family.pre_squash_std
    log_slope = squashed_density_terms(mu, sigma, log_sech_squared)
    assert 0.5 * math.log(2 * math.pi * math.e * sigma**2) + log_slope == pytest.approx(-1.0, abs=1e-7)
    # The two families need different temperatures for the same entropy.
    assert abs(family.alpha - free.alpha) > 1e-4


def test_unreachable_target_entropy_raises() -> None:
    # Source: the uniform density maximises entropy on an interval; on (-1, 1) that is log 2
    # (standard result).
    with pytest.raises(ValueError, match="target_entropy"):
        bandit_alpha_for_entropy(STIFFNESS, TARGET, math.log(2))
    with pytest.raises(ValueError, match="target_entropy"):
        bandit_alpha_for_entropy(STIFFNESS, TARGET, 0.69, family="squashed_gaussian")


def test_non_positive_temperature_raises() -> None:
    # Definition: exp(r / alpha) is a density only for alpha > 0.
    with pytest.raises(ValueError, match="alpha"):
        bandit_soft_optimum(STIFFNESS, TARGET, 0.0)
