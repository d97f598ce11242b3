"""The squashed-Gaussian actor against outside references.

References: torch.nn.functional (linear, softplus, sigmoid, the hidden nonlinearities) for the
network; torch.distributions' TransformedDistribution(Normal, TanhTransform) for the sample's
log-density (Haarnoja et al. 2018, arXiv 1812.05905, Appendix C); hand arithmetic, written out,
for the soft clamp's limits and gradient.
"""

import math
import warnings

import numpy as np
import pytest
import torch
import torch.nn.functional as F
from torch.distributions import Normal, TransformedDistribution
from torch.distributions.transforms import TanhTransform

from kiln.config.nonlinearities import NONLINEARITIES
from kiln.learner.actor import SquashedGaussianActor, soft_clamp
from kiln.learner.actor_steps import Affine, Hidden, SoftLimits, SplitHeads, Squash
from kiln.learner.nets import EnsembleLinear

# torch.nn.functional's definitions of each name Kiln offers (torch docs: ELU's alpha defaults to 1).
FUNCTIONAL = {"relu": F.relu, "tanh": torch.tanh, "elu": F.elu, "silu": F.silu}


def _actor(nonlinearity: str = "relu", population: int = 1, act_dim: int = 2, limits=(-5.0, 1.0)) -> SquashedGaussianActor:
    return SquashedGaussianActor(3, act_dim, (16, 8), nonlinearity, limits, torch.Generator().manual_seed(0), population=population)


def _reference_heads(actor: SquashedGaussianActor, obs: torch.Tensor, agent: int = 0) -> tuple[torch.Tensor, torch.Tensor]:
    """Mean and log-std of u from torch.nn.functional, in float64: F.linear(x, Wᵀ, b) per layer (the
    actor stores W as [in, out]), the nonlinearity between layers, then the soft clamp by its formula."""
    x = obs.double()
    layers = actor.body.linears()
    for i, layer in enumerate(layers):
        x = F.linear(x, layer.weight[agent].detach().double().T, layer.bias[agent, 0].detach().double())
        if i < len(layers) - 1:
            x = FUNCTIONAL[actor.nonlinearity](x)
    mean, raw = x[..., : actor.act_dim], x[..., actor.act_dim :]
    low, high = actor.log_std_low, actor.log_std_high
    return mean, low + F.softplus(high - F.softplus(high - raw) - low)


# ----- the soft clamp ----------------------------------------------------------------------------


@pytest.mark.parametrize("low,high", [(-5.0, 1.0), (-20.0, 2.0)])
def test_soft_clamp_limits_are_low_and_low_plus_softplus_of_the_width(low, high):
    # Hand arithmetic: x → −∞ makes the outer softplus vanish, so the value → low; x → +∞ makes the
    # inner softplus vanish, so the value → low + softplus(high − low) = high + log1p(e^−(high−low)).
    # torch's softplus is linear above its threshold 20 (torch.nn.functional.softplus docs), so for a
    # width of 22 the upper limit is high itself.
    x = torch.tensor([-1e4, -200.0, 200.0, 1e4], dtype=torch.float64)
    got = soft_clamp(x, low, high)
    upper = high + (math.log1p(math.exp(-(high - low))) if high - low <= 20 else 0.0)
    torch.testing.assert_close(got, torch.tensor([low, low, upper, upper], dtype=torch.float64), rtol=0, atol=1e-12)
    inside = soft_clamp(torch.linspace(-1e3, 1e3, 20001, dtype=torch.float64), low, high)
    assert bool((inside >= low).all()) and bool((inside <= upper).all())


def test_soft_clamp_is_near_identity_between_the_limits():
    # Hand arithmetic: softplus(z) = z + log1p(e^−z) with 0 < log1p(e^−z) ≤ e^−z. So y = high − softplus(high − x)
    # = x − ε₁ with ε₁ ≤ e^−(high−x), and soft_clamp(x) = y + ε₂ with ε₂ ≤ e^−(y−low) = e^−(x−low)·e^ε₁:
    # |soft_clamp(x) − x| ≤ max(ε₁, ε₂) ≤ (e^−(high−x) + e^−(x−low)) up to the factor e^ε₁ ≈ 1 where ε₂ matters.
    # At the midpoint −9 of (−20, 2) that is below 2·e^−11 ≈ 3.4e-5.
    low, high = -20.0, 2.0
    x = torch.linspace(-18.0, 0.0, 181, dtype=torch.float64)
    bound = torch.exp(-(high - x)) + torch.exp(-(x - low))
    assert bool(((soft_clamp(x, low, high) - x).abs() <= 1.01 * bound).all())
    assert abs(soft_clamp(torch.tensor(-9.0, dtype=torch.float64), low, high).item() + 9.0) < 3.4e-5


def test_soft_clamp_gradient_is_the_chain_rule_and_never_zero():
    # d/dx [low + softplus(high − softplus(high − x) − low)] = sigmoid(y − low) · sigmoid(high − x) with
    # y = high − softplus(high − x), since softplus′ = sigmoid (chain rule by hand). A hard clamp's
    # gradient would be 0 past the limits; this one stays positive at ±30.
    low, high = -5.0, 1.0
    x = torch.tensor([-30.0, -8.0, -5.0, -2.0, 0.0, 1.0, 3.0, 30.0], dtype=torch.float64, requires_grad=True)
    soft_clamp(x, low, high).sum().backward()
    y = high - F.softplus(high - x.detach())
    expected = torch.sigmoid(y - low) * torch.sigmoid(high - x.detach())
    torch.testing.assert_close(x.grad, expected, rtol=1e-12, atol=0)
    assert bool((x.grad > 0).all())


def test_decreasing_limits_are_refused():
    with pytest.raises(ValueError, match="increasing"):
        SquashedGaussianActor(3, 1, (8,), "relu", (2.0, -20.0))


# ----- the network -------------------------------------------------------------------------------


@pytest.mark.parametrize("nonlinearity", sorted(NONLINEARITIES))
def test_heads_equal_torch_functional_layers(nonlinearity):
    actor = _actor(nonlinearity)
    obs = torch.randn(50, 3, generator=torch.Generator().manual_seed(1)) * 3
    with torch.no_grad():
        mean, log_std = actor(obs)
    ref_mean, ref_log_std = _reference_heads(actor, obs)
    torch.testing.assert_close(mean.double(), ref_mean, rtol=1e-5, atol=1e-6)
    torch.testing.assert_close(log_std.double(), ref_log_std, rtol=1e-5, atol=1e-6)
    torch.testing.assert_close(actor.deterministic(obs).double(), torch.tanh(ref_mean), rtol=1e-5, atol=1e-6)


def test_population_rows_are_each_agents_own_network():
    actor = _actor(population=3)
    obs = torch.randn(3, 20, 3, generator=torch.Generator().manual_seed(2))
    with torch.no_grad():
        mean, log_std = actor(obs)
    for k in range(3):
        ref_mean, ref_log_std = _reference_heads(actor, obs[k], agent=k)
        torch.testing.assert_close(mean[k].double(), ref_mean, rtol=1e-5, atol=1e-6)
        torch.testing.assert_close(log_std[k].double(), ref_log_std, rtol=1e-5, atol=1e-6)


# ----- sampling ----------------------------------------------------------------------------------


def _tanh_normal_log_prob(mean: torch.Tensor, log_std: torch.Tensor, noise: torch.Tensor) -> torch.Tensor:
    """torch.distributions' per-dimension log-density of tanh(u), u = mean + std·noise (cached u)."""
    u = mean + log_std.exp() * noise
    tanh = TanhTransform(cache_size=1)
    return TransformedDistribution(Normal(mean, log_std.exp()), [tanh]).log_prob(tanh(u))


def test_sample_with_one_generator_draws_randn_of_the_batch_and_its_density():
    actor = _actor(limits=(-3.0, 1.0))
    obs = torch.randn(200, 3, generator=torch.Generator().manual_seed(3))
    ours, copy = torch.Generator().manual_seed(5), torch.Generator().manual_seed(5)
    with torch.no_grad():
        action, log_prob, log_std = actor.sample(obs, ours)
        mean, expected_log_std = actor(obs)
    noise = torch.randn((200, 2), generator=copy)
    torch.testing.assert_close(log_std, expected_log_std)
    torch.testing.assert_close(action, torch.tanh(mean + expected_log_std.exp() * noise))
    torch.testing.assert_close(log_prob, _tanh_normal_log_prob(mean, expected_log_std, noise), atol=1e-4, rtol=1e-5)
    assert torch.equal(ours.get_state(), copy.get_state())


def test_sample_with_one_generator_per_agent_draws_each_agents_noise_from_its_own():
    # Agent k's noise is torch.randn(shape of one agent's batch, generator=generators[k]), in agent order.
    actor = _actor(population=3)
    obs = torch.randn(3, 4, 3, generator=torch.Generator().manual_seed(4))
    ours = [torch.Generator().manual_seed(10 + k) for k in range(3)]
    copies = [torch.Generator().manual_seed(10 + k) for k in range(3)]
    with torch.no_grad():
        action, log_prob, _ = actor.sample(obs, ours)
        mean, log_std = actor(obs)
    noise = torch.stack([torch.randn((4, 2), generator=g) for g in copies])
    torch.testing.assert_close(action, torch.tanh(mean + log_std.exp() * noise))
    torch.testing.assert_close(log_prob, _tanh_normal_log_prob(mean, log_std, noise), atol=1e-4, rtol=1e-5)
    assert all(torch.equal(a.get_state(), b.get_state()) for a, b in zip(ours, copies))


@pytest.mark.parametrize("population,batch", [(1, 1), (1, 50), (3, 4)])
def test_sample_action_is_samples_action_from_the_same_draws(population, batch):
    # The action alone is tanh(mean + std·e) with e drawn exactly as sample() draws it (checked above
    # against torch.randn and torch.distributions): the same numbers, and the generators end alike.
    actor = _actor(population=population)
    shape = (population, batch, 3) if population > 1 else (batch, 3)
    obs = torch.randn(*shape, generator=torch.Generator().manual_seed(8))
    seeds = range(20, 20 + population)
    if population > 1:
        ours, theirs = [torch.Generator().manual_seed(s) for s in seeds], [torch.Generator().manual_seed(s) for s in seeds]
    else:
        ours, theirs = torch.Generator().manual_seed(20), torch.Generator().manual_seed(20)
    with torch.no_grad():
        action = actor.sample_action(obs, ours)
        expected, _, _ = actor.sample(obs, theirs)
    assert torch.equal(action, expected)
    pairs = zip(ours, theirs) if population > 1 else [(ours, theirs)]
    assert all(torch.equal(a.get_state(), b.get_state()) for a, b in pairs)


def test_sample_action_with_a_one_agent_list_of_generators_draws_as_a_run_of_its_own():
    actor = _actor(population=1)
    obs = torch.randn(1, 1, 3, generator=torch.Generator().manual_seed(2))
    with torch.no_grad():
        in_list = actor.sample_action(obs, [torch.Generator().manual_seed(4)])
        alone = actor.sample_action(obs, torch.Generator().manual_seed(4))
    assert torch.equal(in_list, alone)


@pytest.mark.parametrize("nonlinearity", sorted(NONLINEARITIES))
def test_act_batch_is_the_mode_or_a_sample_drawn_as_randn_n_by_act_dim(nonlinearity):
    """What evaluation acts with: tanh(mean), or tanh(mean + std·e) with e = torch.randn((n, act_dim),
    generator=g), in float32; observations in float64, as MuJoCo tasks give them."""
    actor = SquashedGaussianActor(5, 3, (32, 32), nonlinearity, (-20.0, 2.0), torch.Generator().manual_seed(1))
    obs = np.random.default_rng(4).normal(size=(10, 5)) * 2.0
    ours, copy = torch.Generator().manual_seed(9), torch.Generator().manual_seed(9)
    mode, sample = actor.act_batch(obs, True), actor.act_batch(obs, False, ours)
    mean, log_std = _reference_heads(actor, torch.as_tensor(obs, dtype=torch.float32))
    noise = torch.randn((10, 3), generator=copy).double()
    assert mode.shape == sample.shape == (10, 3) and mode.dtype == sample.dtype == np.float32
    np.testing.assert_allclose(mode, torch.tanh(mean).numpy(), rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(sample, torch.tanh(mean + log_std.exp() * noise).numpy(), rtol=1e-5, atol=1e-6)
    assert torch.equal(ours.get_state(), copy.get_state())


def test_act_batch_takes_read_only_observations_silently_and_records_no_graph():
    actor = _actor()
    obs = np.ones((2, 3), np.float32)
    obs.setflags(write=False)  # as a task may hand its observation out
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # torch warns when it would share a read-only array
        actor.act_batch(obs, False, torch.Generator().manual_seed(0))
    assert all(p.grad is None for p in actor.parameters())
    assert not torch.is_inference_mode_enabled() and torch.is_grad_enabled()


# ----- the steps ---------------------------------------------------------------------------------


def test_steps_list_the_computation_in_order_from_the_actors_own_modules():
    actor = _actor("elu", population=2)
    steps = actor.steps(agent=1)
    assert [type(s) for s in steps] == [Affine, Hidden, Affine, Hidden, Affine, SplitHeads, SoftLimits, Squash]
    affine = [s for s in steps if isinstance(s, Affine)]
    # Hand arithmetic for obs 3, widths (16, 8), 2 actions: [3, 16], [16, 8], [8, 2·2].
    assert [s.layer for s in affine] == [0, 1, 2]
    assert [tuple(s.weight.shape) for s in affine] == [(3, 16), (16, 8), (8, 4)]
    assert [tuple(s.bias.shape) for s in affine] == [(16,), (8,), (4,)]
    for step, layer in zip(affine, actor.body.linears()):
        # Views of agent 1's row of the parameters, not copies.
        assert step.weight.data_ptr() == layer.weight[1].data_ptr() and step.bias.data_ptr() == layer.bias[1, 0].data_ptr()
    modules = [m for m in actor.body.layers if not isinstance(m, EnsembleLinear)]
    assert [s.module for s in steps if isinstance(s, Hidden)] == modules and all(s.name == "elu" for s in steps[1:4:2])
    assert steps[5] == SplitHeads(2) and steps[6] == SoftLimits(-5.0, 1.0)
    with pytest.raises(IndexError):
        actor.steps(agent=2)


def test_steps_follow_an_optimiser_step():
    actor = _actor()
    steps = actor.steps()
    opt = torch.optim.Adam(actor.parameters(), lr=0.5)
    actor(torch.ones(4, 3))[0].sum().backward()
    opt.step()
    for step, layer in zip([s for s in steps if isinstance(s, Affine)], actor.body.linears()):
        assert torch.equal(step.weight, layer.weight.detach()[0]) and torch.equal(step.bias, layer.bias.detach()[0, 0])


@pytest.mark.parametrize("nonlinearity", sorted(NONLINEARITIES))
def test_steps_run_as_documented_reproduce_the_actors_mode_and_sample(nonlinearity):
    """Each step applied by its documented meaning (kiln.learner.actor_steps: x @ W + b, the module,
    the split, low + softplus(high − softplus(high − r) − low), tanh) gives the actor's actions."""
    actor = _actor(nonlinearity, act_dim=3)
    obs = torch.randn(30, 3, generator=torch.Generator().manual_seed(6)) * 2
    noise = torch.randn(30, 3, generator=torch.Generator().manual_seed(7))
    x, heads, log_std, actions = obs, None, None, None
    with torch.no_grad():
        for step in actor.steps():
            if isinstance(step, Affine):
                x = x @ step.weight + step.bias
            elif isinstance(step, Hidden):
                x = step.module(x)
            elif isinstance(step, SplitHeads):
                heads = x[:, : step.action_size], x[:, step.action_size :]
            elif isinstance(step, SoftLimits):
                log_std = step.low + F.softplus(step.high - F.softplus(step.high - heads[1]) - step.low)
            elif isinstance(step, Squash):
                actions = torch.tanh(heads[0]), torch.tanh(heads[0] + log_std.exp() * noise)
        sampled = actor.sample(obs, torch.Generator().manual_seed(7))[0]
    torch.testing.assert_close(actions[0], actor.deterministic(obs), rtol=1e-6, atol=1e-6)
    torch.testing.assert_close(actions[1], sampled, rtol=1e-6, atol=1e-6)
