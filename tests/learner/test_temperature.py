"""The automatic temperature against Eq. 18 of Haarnoja et al. 2018 (arXiv 1812.05905):
J(α) = E[−α log π(a|s) − α H̄], optimised over log α."""

import math

import pytest
import torch

from kiln.learner.temperature import Temperature


def test_alpha_starts_at_the_given_value_per_agent_and_group():
    t = Temperature([[-1.0, 0.5], [-2.0, 0.0]], [0.7, 0.2], [True, False])
    assert t.groups == 2
    torch.testing.assert_close(t.alpha(), torch.tensor([[0.7, 0.7], [0.2, 0.2]]))


def test_loss_value_is_eq_18_by_hand():
    # J(α) = −α (log π + H̄) averaged over the batch: α = 0.3, log π = 2, H̄ = −1 → −0.3·(2 − 1) = −0.3.
    t = Temperature([[-1.0]], [0.3], [True])
    assert t.loss(torch.full((1, 5, 1), 2.0)).item() == pytest.approx(-0.3)


def test_gradient_is_autograd_of_eq_18():
    # The closed-form ∂J/∂log α against torch.autograd of J(α) = E[−exp(log α)(log π + H̄)] (Eq. 18),
    # for two agents with two temperatures each (per-dimension targets).
    target = torch.tensor([[-1.0, 0.5], [-2.0, 0.0]])
    t = Temperature(target.tolist(), [0.7, 0.2], [True, True])
    log_prob = torch.randn(2, 64, 2, generator=torch.Generator().manual_seed(3))
    log_alpha = t.log_alpha.detach().clone().requires_grad_(True)
    reference = -(log_alpha.exp().unsqueeze(1) * (log_prob + target.unsqueeze(1))).mean(dim=1).sum()
    (expected,) = torch.autograd.grad(reference, log_alpha)
    torch.testing.assert_close(t.gradient(log_prob), expected, rtol=1e-6, atol=1e-7)
    # ... and against autograd of Kiln's own loss, which is the same J.
    (of_loss,) = torch.autograd.grad(t.loss(log_prob).sum(), t.log_alpha)
    torch.testing.assert_close(t.gradient(log_prob), of_loss, rtol=1e-6, atol=1e-7)


def test_one_target_sums_the_dimensions_into_one_group():
    # One target: log π(a) = Σᵢ log πᵢ (the diagonal Gaussian's density factorises), so the gradient
    # is −α (mean of Σᵢ log πᵢ + H̄): α = 0.5, per-dimension −0.25 and −1.0, H̄ = 1 → −0.5·(−1.25 + 1) = 0.125.
    t = Temperature([[1.0]], [0.5], [True])
    log_prob = torch.tensor([[[-0.25, -1.0]]]).expand(1, 4, 2)
    torch.testing.assert_close(t.gradient(log_prob), torch.tensor([[0.125]]))


def test_bonus_is_alpha_times_log_pi_per_group_by_hand():
    # α = (0.5, 2) per dimension, log π = (−1, 0.25): 0.5·(−1) + 2·0.25 = 0; with one α = 0.5: 0.5·(−0.75).
    per_dim = Temperature([[0.0, 0.0]], [1.0], [True])
    with torch.no_grad():
        per_dim.log_alpha.copy_(torch.tensor([[math.log(0.5), math.log(2.0)]]))
    log_prob = torch.tensor([[[-1.0, 0.25]]])
    torch.testing.assert_close(per_dim.bonus(log_prob), torch.tensor([[0.0]]))
    one = Temperature([[0.0]], [0.5], [True])
    torch.testing.assert_close(one.bonus(log_prob), torch.tensor([[-0.375]]))


def test_a_fixed_agents_gradient_is_zero():
    t = Temperature([[-1.0], [-1.0]], [0.2, 0.2], [False, True])
    g = t.gradient(torch.full((2, 8, 1), 3.0))
    assert g[0].item() == 0.0 and g[1].item() != 0.0


@pytest.mark.parametrize(
    "args,phrase",
    [(([[-1.0]], [0.0], [True]), "must be > 0"), (([[-1.0], [-1.0, 0.0]], [0.1, 0.1], [True, True]), "same number of targets")],
)
def test_bad_settings_are_refused(args, phrase):
    with pytest.raises(ValueError, match=phrase):
        Temperature(*args)
