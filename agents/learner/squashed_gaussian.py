"""The tanh-squashed diagonal Gaussian used by the actor.

The log-density of ``a = tanh(u)``, ``u ~ N(mean, std²)`` is (Haarnoja et al. 2018, arXiv 1812.05905,
Appendix C)::

    log π(a) = log N(u; mean, std) − Σᵢ log(1 − tanh²(uᵢ))

``log(1 − tanh²(u))`` is evaluated as ``2(log 2 − u − softplus(−2u))``, which is exact algebra and
stays finite for any float32 ``u``; computing it from the action instead would fail because
``tanh(20)`` rounds to exactly 1 in float32. Everything here therefore takes the pre-squash ``u``.
"""

from __future__ import annotations

import math

import torch
import torch.nn.functional as F

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)
_LOG_2 = math.log(2.0)


def log_one_minus_tanh_sq(u: torch.Tensor) -> torch.Tensor:
    """Return ``log(1 − tanh²(u))`` elementwise, stable for large ``|u|``."""
    return 2.0 * (_LOG_2 - u - F.softplus(-2.0 * u))


def gaussian_log_prob(u: torch.Tensor, mean: torch.Tensor, log_std: torch.Tensor) -> torch.Tensor:
    """Elementwise log-density of ``N(mean, exp(log_std)²)`` at ``u``."""
    z = (u - mean) * torch.exp(-log_std)
    return -0.5 * z * z - log_std - _LOG_SQRT_2PI


def squashed_log_prob(u: torch.Tensor, mean: torch.Tensor, log_std: torch.Tensor) -> torch.Tensor:
    """Per-dimension log-density of ``tanh(u)`` (last axis = action dimensions, not summed)."""
    return gaussian_log_prob(u, mean, log_std) - log_one_minus_tanh_sq(u)


def sample(
    mean: torch.Tensor, log_std: torch.Tensor, generator: torch.Generator | None = None
) -> tuple[torch.Tensor, torch.Tensor]:
    """Draw a reparameterised sample.

    Returns:
        ``(action, log_prob_per_dim)``: ``action = tanh(u)`` in (−1, 1) and the per-dimension
        log-density, both differentiable with respect to ``mean`` and ``log_std``.
    """
    noise = torch.randn(mean.shape, generator=generator, dtype=mean.dtype, device=mean.device)
    return transform(mean, log_std, noise)


def pre_squash(mean: torch.Tensor, log_std: torch.Tensor, noise: torch.Tensor) -> torch.Tensor:
    """``u = mean + exp(log_std) · noise`` for standard-normal ``noise``: the Gaussian sample before tanh."""
    return mean + torch.exp(log_std) * noise


def transform(mean: torch.Tensor, log_std: torch.Tensor, noise: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """The sample of :func:`sample` for given standard-normal ``noise``: ``(tanh(u), log_prob_per_dim)``."""
    u = pre_squash(mean, log_std, noise)
    # log N(u) simplifies to −½ noise² − log_std − log√(2π): no division needed.
    log_prob = -0.5 * noise * noise - log_std - _LOG_SQRT_2PI - log_one_minus_tanh_sq(u)
    return torch.tanh(u), log_prob
