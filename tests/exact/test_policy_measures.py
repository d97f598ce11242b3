"""The measurements behind the agent-vs-exact checks, against torch.distributions and SciPy quadrature."""

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.stats
import torch
from torch.distributions import AffineTransform, Normal, TanhTransform, TransformedDistribution

from kiln.exact.policy_measures import actor_mean_action, actor_sampler
from kiln.learner.action_scale import ActionScale
from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import Policy

BOUND = 10.0  # FiringHold's default action bound


def _policy(seed: int = 0) -> Policy:
    actor = SquashedGaussianActor(2, 1, (16, 16), "relu", (-20.0, 2.0), torch.Generator().manual_seed(seed))
    return Policy(actor=actor, scale=ActionScale(np.array([-BOUND]), np.array([BOUND])), spec={})


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
