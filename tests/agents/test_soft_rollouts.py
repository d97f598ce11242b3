"""The measurements behind the agent-vs-exact checks, against closed forms, torch.distributions and SciPy."""

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.stats
import torch
from torch.distributions import AffineTransform, Normal, TanhTransform, TransformedDistribution

from agents.action_scale import ActionScale
from agents.actor import SquashedGaussianActor
from agents.policy_io import SavedPolicy
from agents.soft_rollouts import actor_mean_action, actor_sampler, soft_returns
from envs.lqr import LinearQuadraticModel
from envs.lqr_solution import soft_lq_solution

BOUND = 10.0  # FiringHold's default action bound


def _policy(seed: int = 0) -> SavedPolicy:
    actor = SquashedGaussianActor(2, 1, (16, 16), "relu", (-20.0, 2.0), torch.Generator().manual_seed(seed))
    return SavedPolicy(actor=actor, scale=ActionScale(np.array([-BOUND]), np.array([BOUND])), spec={})


def test_soft_returns_of_the_exact_optimum_match_the_closed_form():
    model, alpha, discount = LinearQuadraticModel(), 1.0, 0.9
    exact = soft_lq_solution(model, alpha, discount)
    rng = np.random.default_rng(5)
    factor = math.sqrt(float(exact.covariance[0, 0]))

    def optimal(observations):
        mean = exact.mean_action(observations)
        actions = mean + factor * rng.standard_normal(mean.shape)
        # scipy.stats.norm gives the Gaussian log-density in env units, independently of Kiln.
        return actions, scipy.stats.norm.logpdf(actions[:, 0], mean[:, 0], factor)

    returns, starts = soft_returns(optimal, "kiln/FiringHold-v0", {}, None, alpha, discount, 2000, seed=3)
    excess = returns - exact.value(starts)
    stderr = excess.std(ddof=1) / math.sqrt(len(excess))
    # Source: envs/lqr_solution.py (closed form via scipy.linalg.solve_discrete_are): for the optimal
    # policy E[G | x₀] = V*(x₀). The 200-step limit leaves γ^200 = 7e-10 of the tail; 4 standard errors.
    assert abs(excess.mean()) < 4 * stderr
    assert stderr < 0.02  # the control variate V*(x₀) keeps the check sharp
    np.testing.assert_allclose(starts.std(axis=0), 1.0, atol=0.05)  # x₀ ~ N(0, I): start_std = 1


def test_sampler_log_density_is_the_task_unit_density():
    policy = _policy()
    obs = np.random.default_rng(1).normal(size=(256, 2)).astype(np.float32)
    actions, log_prob = actor_sampler(policy, torch.Generator().manual_seed(2))(obs)
    with torch.no_grad():
        mean, log_std = policy.actor(torch.as_tensor(obs))
    # Source: torch.distributions — Normal pushed through tanh and the affine map a ↦ 10 a, in float64.
    reference = TransformedDistribution(
        Normal(mean.double(), log_std.double().exp()), [TanhTransform(), AffineTransform(0.0, BOUND)]
    ).log_prob(torch.as_tensor(actions, dtype=torch.float64))
    # Actions come back as float32, so torch's atanh inverts a rounded action: 1e-3 covers it.
    np.testing.assert_allclose(log_prob, reference[:, 0].numpy(), atol=1e-3)
    assert np.all(np.abs(actions) <= BOUND)


def test_mean_action_matches_scipy_quadrature():
    policy = _policy(seed=4)
    states = np.array([[0.0, 0.0], [1.5, -0.5], [-2.0, 2.0]])
    got = actor_mean_action(policy, states)[:, 0]
    with torch.no_grad():
        mean, log_std = policy.actor(torch.as_tensor(states, dtype=torch.float32))
    for i in range(len(states)):
        m, s = float(mean[i, 0]), float(log_std[i, 0].exp())
        # Source: SciPy quadrature of E[10 tanh(u)], u ~ N(m, s²).
        def integrand(u, m=m, s=s):
            return BOUND * math.tanh(u) * scipy.stats.norm.pdf(u, m, s)

        expected = scipy.integrate.quad(integrand, m - 12 * s, m + 12 * s)[0]
        assert got[i] == pytest.approx(expected, abs=1e-6)
