"""Exact soft-optimal policies for DamperTrim, by quadrature (SciPy), independent of any agent code.

For r(a) = -(k / 2)(a - a0)^2 and temperature alpha, the soft objective of a policy q over actions is
J(q) = E_q[r(a)] + alpha H(q), with H the differential entropy of the action a (the quantity Kiln's
squashed-Gaussian actor measures through log pi(a) = log N(u) - log(1 - tanh^2 u)).

Two optima are reported:

* Free-form: over every density on (low, high) the maximiser is q*(a) proportional to exp(r(a) / alpha)
  (Gibbs variational principle), with soft value J(q*) = alpha log integral exp(r(a) / alpha) da.
  With wide bounds this is N(a0, alpha / k) (standard Gaussian integral).
* Squashed-Gaussian family: the best a = tanh(u), u ~ N(mu, sigma^2). Its objective is below the
  free-form value by alpha KL(q || q*). **This is the one an SAC actor should match**: the actor is a
  squashed Gaussian, and its policy step minimises KL(pi || exp(Q / alpha) / Z) within that family,
  which in a one-step bandit (Q(a) = r(a) exactly) is the same as maximising J over the family.
  Likewise the automatic temperature tuner settles where the *family* optimum has the target entropy
  (``bandit_alpha_for_entropy(..., family="squashed_gaussian")``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.integrate
import scipy.optimize

Family = Literal["free", "squashed_gaussian"]
# Expectations over u ~ N(mu, sigma^2) use the trapezoid rule on mu +- 12 sigma. For integrands analytic
# in a strip (tanh has its nearest poles at +-i pi / 2) times a Gaussian, the trapezoid rule converges
# geometrically; a step of min(0.05, sigma / 3) puts the error at rounding level (checked against
# adaptive quadrature in the tests), where a fixed Gauss-Hermite rule loses accuracy as sigma grows.
_SPAN = 12.0


def _gaussian_grid(mu: float, sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes u and weights (summing to ~1) for E over u ~ N(mu, sigma^2)."""
    step = min(0.05, sigma / 3.0)
    half_count = int(np.ceil(_SPAN * sigma / step))
    offsets = step * np.arange(-half_count, half_count + 1)
    weights = np.exp(-0.5 * (offsets / sigma) ** 2) * step / (np.sqrt(2 * np.pi) * sigma)
    return mu + offsets, weights


@dataclass(frozen=True)
class BanditOptimum:
    """A soft-optimal DamperTrim policy and its statistics (all in nats / action units).

    Attributes:
        alpha: Temperature.
        mean: E[a].
        std: Standard deviation of a.
        entropy: Differential entropy of a.
        expected_reward: E[r(a)].
        soft_value: E[r(a)] + alpha * entropy (for the free form, alpha log integral exp(r / alpha)).
        pre_squash_mean: E[u] with u = atanh of the action rescaled to (-1, 1); for the squashed-Gaussian
            family this is the Gaussian's mu.
        pre_squash_std: Standard deviation of u; for the family, the Gaussian's sigma. For the free form
            u is not Gaussian, so these two only locate and size it.
    """

    alpha: float
    mean: float
    std: float
    entropy: float
    expected_reward: float
    soft_value: float
    pre_squash_mean: float
    pre_squash_std: float


def _check_bandit(stiffness: float, target: float, alpha: float) -> None:
    if not (np.isfinite(stiffness) and stiffness > 0):
        raise ValueError(f"stiffness must be finite and > 0, got {stiffness}; pass e.g. 4.0")
    if not np.isfinite(target):
        raise ValueError(f"target must be finite, got {target}; pass e.g. 0.5")
    if not (np.isfinite(alpha) and alpha > 0):
        raise ValueError(
            f"alpha must be finite and > 0, got {alpha}; as alpha -> 0 the optimum is the point clip(a0)"
        )


def _integrate(function, low: float, high: float, centre: float, width: float) -> float:
    """Integral over [low, high] split at centre +- width * 4^j, so narrow peaks are never missed."""
    offsets = width * 4.0 ** np.arange(0, 12)
    cuts = np.concatenate(([low, high, centre], centre - offsets, centre + offsets))
    cuts = np.unique(np.clip(cuts, low, high))
    total = 0.0
    for left, right in zip(cuts[:-1], cuts[1:]):
        if right > left:
            total += scipy.integrate.quad(function, left, right, epsabs=0.0, epsrel=1e-12, limit=200)[0]
    return total


def bandit_soft_optimum(
    stiffness: float, target: float, alpha: float, low: float = -1.0, high: float = 1.0
) -> BanditOptimum:
    """Free-form soft-optimal policy q*(a) proportional to exp(r(a) / alpha) on (low, high), by quadrature.

    Args:
        stiffness: k > 0.
        target: a0.
        alpha: Temperature, > 0.
        low: Lower action bound (DamperTrim: -1).
        high: Upper action bound (DamperTrim: 1); widen both to approach the unbounded case.

    Returns:
        The BanditOptimum; pre-squash statistics use u = atanh((a - mid) / half_width).

    Raises:
        ValueError: On non-positive stiffness or alpha, or bounds that are not finite with low < high.
    """
    _check_bandit(stiffness, target, alpha)
    if not (np.isfinite(low) and np.isfinite(high) and low < high):
        raise ValueError(f"bounds must be finite with low < high, got ({low}, {high}); pass e.g. (-1, 1)")
    peak = float(np.clip(target, low, high))
    best_reward = -0.5 * stiffness * (peak - target) ** 2
    # Width of exp(r / alpha) around its peak: sqrt(alpha / k) inside the bounds; when a0 lies outside,
    # the density decays from the bound over alpha / (k |a0 - bound|), which may be narrower.
    width = np.sqrt(alpha / stiffness)
    if peak != target:
        width = min(width, alpha / (stiffness * abs(target - peak)))

    def excess(a: float) -> float:
        return -0.5 * stiffness * (a - target) ** 2 - best_reward  # r(a) - max r, <= 0

    def weight(a: float) -> float:
        return float(np.exp(excess(a) / alpha))  # <= 1, so no overflow at any alpha

    def average(function) -> float:
        return _integrate(lambda a: function(a) * weight(a), low, high, peak, width) / mass

    mass = _integrate(weight, low, high, peak, width)
    mean = average(lambda a: a)
    variance = average(lambda a: (a - mean) ** 2)
    mean_excess = average(excess)
    log_normaliser = np.log(mass)  # log integral exp((r - max r) / alpha)
    # H = -E[log q*] = log Z - E[r] / alpha, written with the shifted reward to avoid cancellation.
    entropy = log_normaliser - mean_excess / alpha
    centre, half = (high + low) / 2, (high - low) / 2

    def pre_squash(a: float) -> float:
        return float(np.arctanh(np.clip((a - centre) / half, -1.0, 1.0)))

    u_mean = average(pre_squash)
    u_variance = average(lambda a: (pre_squash(a) - u_mean) ** 2)
    return BanditOptimum(
        alpha=float(alpha),
        mean=float(mean),
        std=float(np.sqrt(variance)),
        entropy=float(entropy),
        expected_reward=float(best_reward + mean_excess),
        soft_value=float(best_reward + alpha * log_normaliser),
        pre_squash_mean=float(u_mean),
        pre_squash_std=float(np.sqrt(u_variance)),
    )


def squashed_gaussian_statistics(
    mu: float, sigma: float, stiffness: float, target: float
) -> tuple[float, float, float, float]:
    """Statistics of a = tanh(u), u ~ N(mu, sigma^2), under DamperTrim's reward (trapezoid rule).

    Useful to score a trained actor's (mu, sigma) against the optimum.

    Args:
        mu: Pre-squash mean.
        sigma: Pre-squash standard deviation, > 0.
        stiffness: k > 0.
        target: a0.

    Returns:
        (E[r(a)], entropy of a, E[a], std of a).

    Raises:
        ValueError: If sigma is not positive.
    """
    if not (np.isfinite(sigma) and sigma > 0):
        raise ValueError(f"sigma must be finite and > 0, got {sigma}; pass the pre-squash std")
    u, weights = _gaussian_grid(float(mu), float(sigma))
    a = np.tanh(u)
    # log(1 - tanh(u)^2) in the stable form 2 (log 2 - u - softplus(-2u)).
    log_slope = 2.0 * (np.log(2.0) - u - np.logaddexp(0.0, -2.0 * u))
    # Change of variables: H(a) = H(u) + E[log |da/du|], H(u) = 1/2 log(2 pi e sigma^2).
    entropy = 0.5 * np.log(2 * np.pi * np.e * sigma**2) + weights @ log_slope
    reward = weights @ (-0.5 * stiffness * (a - target) ** 2)
    mean = weights @ a
    std = np.sqrt(max(weights @ (a - mean) ** 2, 0.0))
    return float(reward), float(entropy), float(mean), float(std)


def bandit_squashed_gaussian_optimum(stiffness: float, target: float, alpha: float) -> BanditOptimum:
    """Best squashed Gaussian a = tanh(u), u ~ N(mu, sigma^2): maximises E[r] + alpha H(a).

    Args:
        stiffness: k > 0.
        target: a0.
        alpha: Temperature, > 0.

    Returns:
        The BanditOptimum; pre_squash_mean / pre_squash_std are the optimal mu and sigma.

    Raises:
        ValueError: On non-positive stiffness or alpha.
    """
    _check_bandit(stiffness, target, alpha)

    def negative_objective(params: np.ndarray) -> float:
        reward, entropy, _, _ = squashed_gaussian_statistics(params[0], np.exp(params[1]), stiffness, target)
        return -(reward + alpha * entropy)

    free = bandit_soft_optimum(stiffness, target, alpha)
    # Two starts: the free-form optimum's pre-squash location/size, and a broad policy near the
    # family's maximum-entropy point, in case the objective has a second local optimum at high alpha.
    starts = [
        np.array([free.pre_squash_mean, np.log(max(free.pre_squash_std, 1e-8))]),
        np.array([np.arctanh(np.clip(target, -0.9, 0.9)), np.log(0.9)]),
    ]
    best = None
    for start in starts:
        result = scipy.optimize.minimize(
            negative_objective,
            start,
            method="Nelder-Mead",
            options={"xatol": 1e-10, "fatol": 1e-14, "maxiter": 4000},
        )
        if best is None or result.fun < best.fun:
            best = result
    mu, sigma = float(best.x[0]), float(np.exp(best.x[1]))
    reward, entropy, mean, std = squashed_gaussian_statistics(mu, sigma, stiffness, target)
    return BanditOptimum(
        alpha=float(alpha),
        mean=mean,
        std=std,
        entropy=entropy,
        expected_reward=reward,
        soft_value=reward + alpha * entropy,
        pre_squash_mean=mu,
        pre_squash_std=sigma,
    )


def _largest_entropy(family: Family) -> float:
    """Supremum of the action entropy on (-1, 1): log 2 (uniform) free-form; the best tanh(N) otherwise."""
    if family == "free":
        return float(np.log(2.0))
    result = scipy.optimize.minimize_scalar(
        lambda log_sigma: -squashed_gaussian_statistics(0.0, np.exp(log_sigma), 1.0, 0.0)[1],
        bounds=(-3.0, 2.0),
        method="bounded",
        options={"xatol": 1e-10},
    )
    return float(-result.fun)


def bandit_alpha_for_entropy(
    stiffness: float, target: float, target_entropy: float, family: Family = "free"
) -> BanditOptimum:
    """Find the temperature whose optimal policy has entropy ``target_entropy`` (root-find on log alpha).

    The optimum's entropy is non-decreasing in alpha for any policy family (compare the optimality
    conditions at two temperatures), so the root is unique where the entropy is strictly increasing.

    Args:
        stiffness: k > 0.
        target: a0.
        target_entropy: Entropy H-bar in nats, below the family's largest entropy on (-1, 1)
            (log 2 = 0.693 for the free form, 0.6836 for squashed Gaussians).
        family: "free" (density proportional to exp(r / alpha)) or "squashed_gaussian" (what an SAC
            actor with automatic temperature tuning should converge to).

    Returns:
        The BanditOptimum at the found alpha (``.alpha`` and ``.entropy`` are the answer).

    Raises:
        ValueError: On an unknown family, a non-finite target, or one the family cannot reach.
    """
    if family not in ("free", "squashed_gaussian"):
        raise ValueError(f"family must be 'free' or 'squashed_gaussian', got {family!r}; pick one of those")
    _check_bandit(stiffness, target, 1.0)
    ceiling = _largest_entropy(family)
    if not (np.isfinite(target_entropy) and target_entropy < ceiling):
        raise ValueError(
            f"target_entropy must be below {ceiling:.4f} nats for family {family!r} on (-1, 1), "
            f"got {target_entropy}; pass a smaller target (SAC's usual one is -1 per action dimension)"
        )
    solve = bandit_soft_optimum if family == "free" else bandit_squashed_gaussian_optimum

    def gap(log_alpha: float) -> float:
        return solve(stiffness, target, float(np.exp(log_alpha))).entropy - target_entropy

    # Start from the narrow-policy limit N(a0, alpha / k), entropy 1/2 log(2 pi e alpha / k), and widen
    # the bracket by factors of 10 until it holds a sign change.
    guess = np.log(stiffness) + 2 * target_entropy - np.log(2 * np.pi * np.e)
    low, high = guess - 1.0, guess + 1.0
    for _ in range(60):
        if gap(low) < 0:
            break
        low -= np.log(10.0)
    for _ in range(60):
        if gap(high) > 0:
            break
        high += np.log(10.0)
    log_alpha = scipy.optimize.brentq(gap, low, high, xtol=1e-13, rtol=1e-13)
    return solve(stiffness, target, float(np.exp(log_alpha)))
