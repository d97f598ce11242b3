"""Squashed-Gaussian density and entropy against torch.distributions and SciPy quadrature.

The log-density against TransformedDistribution(Normal, TanhTransform) on u ∈ [−20, 20] is a row of
the verify table, tested in tests/exact/test_solver_checks.py.
"""

import math

import numpy as np
import pytest
import torch
from scipy import integrate, stats
from torch.distributions import Normal, TransformedDistribution
from torch.distributions.transforms import TanhTransform

from kiln.learner import squashed_gaussian as sg


def test_log_jacobian_equals_minus_two_log_cosh_in_float64():
    # Independent identity: 1 − tanh²u = sech²u, so log(1 − tanh²u) = −2 log cosh u
    # = −2(|u| + log1p(e^{−2|u|}) − log 2), evaluated in float64 (standard hyperbolic identities).
    u = torch.linspace(-20.0, 20.0, 801, dtype=torch.float64)
    expected = -2.0 * (u.abs() + torch.log1p(torch.exp(-2.0 * u.abs())) - math.log(2.0))
    ours = sg.log_one_minus_tanh_sq(u.float()).double()
    torch.testing.assert_close(ours, expected, atol=1e-5, rtol=0)


def test_sample_log_prob_agrees_with_density_at_the_sample():
    # The log-prob returned with a sample must be the density of that same sample
    # (reference: torch.distributions, with the cached pre-squash value).
    g = torch.Generator().manual_seed(0)
    mean = torch.randn(1000, 3, generator=g)
    log_std = torch.randn(1000, 3, generator=g).clamp(-3, 1)
    action, log_prob = sg.sample(mean, log_std, torch.Generator().manual_seed(1))
    u = mean + log_std.exp() * torch.randn(mean.shape, generator=torch.Generator().manual_seed(1))
    tanh = TanhTransform(cache_size=1)
    reference = TransformedDistribution(Normal(mean, log_std.exp()), [tanh]).log_prob(tanh(u))
    torch.testing.assert_close(action, torch.tanh(u))
    torch.testing.assert_close(log_prob, reference, atol=1e-4, rtol=1e-5)


def _squashed_entropy_by_quadrature(mu: float, sigma: float) -> float:
    # Density of a = tanh(u), u ~ N(mu, sigma²): p(a) = N(atanh a) / (1 − a²). Integrate −p log p
    # over u instead (a = tanh u), which avoids the endpoint singularities in a:
    # H = −E_u[log N(u) − log(1 − tanh²u)] = H(N) + E_u[log(1 − tanh²u)].
    def integrand(u):
        return stats.norm.pdf(u, mu, sigma) * (-2.0 * (abs(u) + math.log1p(math.exp(-2 * abs(u))) - math.log(2)))

    expectation, _ = integrate.quad(integrand, mu - 12 * sigma, mu + 12 * sigma, limit=200)
    return float(stats.norm(mu, sigma).entropy()) + expectation


def test_standard_squashed_entropy_by_quadrature_is_0_6698():
    # N(0,1) squashed has entropy ≈ 0.6698 nats: the value is from memory; the Monte Carlo test below
    # checks the quadrature against torch.distributions' density independently.
    assert _squashed_entropy_by_quadrature(0.0, 1.0) == pytest.approx(0.6698, abs=1e-4)


@pytest.mark.parametrize("mu,sigma", [(0.0, 1.0), (0.7, 0.5), (-1.5, 2.0)])
def test_monte_carlo_entropy_from_log_prob_matches_quadrature(mu, sigma):
    # Reference: SciPy quadrature of the squashed density. The estimate −mean(log π(a)) over samples
    # has standard error ≈ std(log π)/√n; 200k samples keep it below 0.01.
    n = 200_000
    mean = torch.full((n, 1), mu)
    log_std = torch.full((n, 1), math.log(sigma))
    _, log_prob = sg.sample(mean, log_std, torch.Generator().manual_seed(0))
    estimate = -log_prob.double().mean().item()
    stderr = log_prob.double().std().item() / math.sqrt(n)
    assert abs(estimate - _squashed_entropy_by_quadrature(mu, sigma)) < 4 * stderr + 1e-3


def test_reparameterised_gradient_matches_finite_difference():
    # d/dμ E[tanh(u)] by the pathwise estimator vs a central finite difference of the quadrature
    # E[tanh(u)] = ∫ tanh(u) N(u; μ, σ²) du (SciPy), a check independent of the sampler.
    mu, sigma = 0.4, 0.8
    mean = torch.tensor([[mu]], requires_grad=True)
    log_std = torch.full((200_000, 1), math.log(sigma))
    action, _ = sg.sample(mean.expand(200_000, 1), log_std, torch.Generator().manual_seed(3))
    action.mean().backward()

    def expected_tanh(m):
        return integrate.quad(lambda u: np.tanh(u) * stats.norm.pdf(u, m, sigma), m - 12 * sigma, m + 12 * sigma)[0]

    h = 1e-4
    fd = (expected_tanh(mu + h) - expected_tanh(mu - h)) / (2 * h)
    assert mean.grad.item() == pytest.approx(fd, abs=5e-3)
