"""The soft actor-critic update against the published equations (Haarnoja et al. 2018, arXiv 1812.05905),
and the agent's acting calls against the actor's sampling contract (torch.randn from each agent's own
generator) and torch.distributions' density of the tanh-squashed Gaussian.

The Temperature's own equations are in tests/learner/test_temperature.py.
"""

import math

import numpy as np
import pytest
import torch
from torch.distributions import Normal, TransformedDistribution
from torch.distributions.transforms import TanhTransform

from kiln.config.agent_settings import AgentSettings, TemperatureSettings, resolve_target_entropy
from kiln.learner.sac import Batch, MemberSetup, SoftActorCritic


def _agent(**temperature) -> SoftActorCritic:
    settings = AgentSettings(layer_widths=(8,), temperature=TemperatureSettings(**temperature))
    target = resolve_target_entropy(settings.temperature.target_entropy, 1)
    return SoftActorCritic.single(2, 1, settings, target, torch.Generator().manual_seed(0))


def _batch(rows: int, obs_dim: int, act_dim: int, seed: int, agents: int = 1) -> Batch:
    g = torch.Generator().manual_seed(seed)
    return Batch(torch.randn(agents, rows, obs_dim, generator=g), torch.rand(agents, rows, act_dim, generator=g) * 2 - 1,
                 torch.randn(agents, rows, generator=g), torch.randn(agents, rows, obs_dim, generator=g),
                 torch.zeros(agents, rows))  # fmt: skip


def _temperature_step(agent: SoftActorCritic, log_prob: torch.Tensor) -> None:
    agent.temperature.log_alpha.grad = agent.temperature.gradient(log_prob)
    agent.temperature_opt.step()


class _FixedQ(torch.nn.Module):
    """A stand-in target critic returning fixed per-network values [agents, networks, B]."""

    def __init__(self, values):
        super().__init__()
        self.values = torch.tensor(values)

    def forward(self, obs, action):
        return self.values


def test_critic_target_terminated_truncated_and_ongoing_by_hand():
    # Eq. for the soft Bellman target (paper §4.2 / Algorithm 1, with twin target critics):
    #   y = r + γ (1 − d) [min_k Q̄_k(s′, a′) − α log π(a′|s′)]
    # Three rows: terminated (d = 1), cut by a time limit (stored with d = 0) and ongoing (d = 0).
    agent = _agent(start=0.5, mode="fixed")
    agent.critic_target = _FixedQ([[[3.0, 1.0, -2.0], [2.0, 4.0, -1.0]]])
    log_prob = torch.tensor([[[-0.4], [0.2], [1.0]]])
    agent.actor.sample = lambda obs, generator=None: (torch.zeros(1, 3, 1), log_prob, torch.zeros(1, 3, 1))
    batch = Batch(
        obs=torch.zeros(1, 3, 2),
        action=torch.zeros(1, 3, 1),
        reward=torch.tensor([[1.0, -1.0, 0.5]]),
        next_obs=torch.zeros(1, 3, 2),
        terminated=torch.tensor([[1.0, 0.0, 0.0]]),
    )
    y = agent.critic_target_value(batch)
    # Hand arithmetic, γ = 0.99, α = 0.5:
    #   row 0 terminated: y = 1.0
    #   row 1 truncated:  min(1, 4) = 1;  1 − 0.5·0.2 = 0.9;   y = −1 + 0.99·0.9 = −0.109
    #   row 2 ongoing:    min(−2, −1) = −2; −2 − 0.5·1.0 = −2.5; y = 0.5 + 0.99·(−2.5) = −1.975
    torch.testing.assert_close(y, torch.tensor([[1.0, -0.109, -1.975]]))


def test_polyak_update_is_tau_weighted_average():
    # θ̄ ← τ θ + (1 − τ) θ̄ (paper, Algorithm 1), τ = 0.005 (Table 1).
    agent = _agent()
    with torch.no_grad():
        for p in agent.critic.parameters():
            p.add_(1.0)
    before = [p.clone() for p in agent.critic_target.parameters()]
    online = [p.clone() for p in agent.critic.parameters()]
    agent.polyak_update()
    for tp, old, new in zip(agent.critic_target.parameters(), before, online):
        torch.testing.assert_close(tp, 0.005 * new + 0.995 * old)


@pytest.mark.parametrize("log_prob_value,direction", [(2.0, +1), (-4.0, -1)])
def test_temperature_moves_toward_the_target(log_prob_value, direction):
    # Eq. 18: J(α) = E[−α log π − α H̄]. Entropy −log π below the target (log π = 2 → H = −2 < H̄ = −1)
    # must raise α; entropy above it (H = 4 > −1) must lower α.
    agent = _agent(start=0.3, mode="tuned", target_entropy=-1.0)
    before = agent.temperature.alpha().item()
    _temperature_step(agent, torch.full((1, 16, 1), log_prob_value))
    after = agent.temperature.alpha().item()
    assert math.copysign(1, after - before) == direction


def test_fixed_temperature_never_moves():
    agent = _agent(start=0.2, mode="fixed")
    batch = _batch(32, 2, 1, seed=1)
    for _ in range(5):
        agent.update(batch)
    assert agent.temperature.alpha().item() == pytest.approx(0.2)


def test_fixed_and_tuned_members_side_by_side():
    # A population may mix fixed and tuned temperatures: the fixed agent's α stays exactly where it started.
    settings = AgentSettings(layer_widths=(8,))
    members = [MemberSetup((-1.0,), torch.Generator().manual_seed(0), 0.2, False), MemberSetup((-1.0,), torch.Generator().manual_seed(1), 0.2, True)]
    agent = SoftActorCritic(2, 1, settings, members)
    batch = _batch(32, 2, 1, seed=1, agents=2)
    for _ in range(5):
        agent.update(batch)
    alpha = agent.temperature.alpha()[:, 0]
    assert alpha[0].item() == pytest.approx(0.2, abs=0, rel=1e-7) and alpha[1].item() != pytest.approx(0.2, rel=1e-4)


def test_per_dimension_targets_give_one_alpha_per_dimension():
    # With a per-dimension target list each dimension gets its own α (README, "Training": a list gives one target per action dimension).
    settings = AgentSettings(layer_widths=(8,), temperature=TemperatureSettings(target_entropy=[-1.0, 0.5]))
    agent = SoftActorCritic.single(2, 2, settings, (-1.0, 0.5), torch.Generator().manual_seed(0))
    assert agent.temperature.alpha().shape == (1, 2)
    # Dimension 0 has entropy below its target, dimension 1 above: α₀ rises, α₁ falls.
    _temperature_step(agent, torch.tensor([[2.0, -3.0]]).expand(1, 8, 2))
    alpha = agent.temperature.alpha()[0]
    assert alpha[0] > 1.0 > alpha[1]


def test_one_update_steps_critic_actor_and_targets():
    # Algorithm 1: each gradient step updates the critics, the actor, α, then the target critics.
    agent = _agent()
    batch = _batch(64, 2, 1, seed=2)
    critic_before = [p.clone() for p in agent.critic.parameters()]
    actor_before = [p.clone() for p in agent.actor.parameters()]
    target_before = [p.clone() for p in agent.critic_target.parameters()]
    metrics = agent.update(batch)
    assert all(not torch.equal(a, b) for a, b in zip(critic_before, agent.critic.parameters()))
    assert all(not torch.equal(a, b) for a, b in zip(actor_before, agent.actor.parameters()))
    assert all(not torch.equal(a, b) for a, b in zip(target_before, agent.critic_target.parameters()))
    assert set(metrics) >= {"critic/td_mse", "actor/entropy_nats", "temperature/value", "critic/q_spread"}
    assert all(v.shape == (1,) for v in metrics.values())
    assert all(p.requires_grad for p in agent.critic.parameters())  # unfrozen after the actor step


def test_update_steps_torch_adam_once_per_part_and_clears_gradients_between_updates():
    # torch.optim.Adam's state after one step: step count 1 for every parameter it holds (torch docs).
    agent = _agent(mode="tuned")
    agent.update(_batch(32, 2, 1, seed=3))
    for opt in (agent.critic_opt, agent.actor_opt, agent.temperature_opt):
        assert opt.defaults["fused"] is True
        assert all(float(opt.state[p]["step"]) == 1.0 for group in opt.param_groups for p in group["params"])
    # Gradients do not accumulate: after a second update each gradient is that update's alone, as in an
    # agent whose gradients were cleared by hand between the two updates.
    cleared = _agent(mode="tuned")
    cleared.update(_batch(32, 2, 1, seed=3))
    for p in cleared.parameters():
        p.grad = None
    second = _batch(32, 2, 1, seed=4)
    agent.update(second)
    cleared.update(second)
    for (name, p), q in zip(agent.named_parameters(), cleared.parameters()):
        assert (p.grad is None) == (q.grad is None) and (p.grad is None or torch.equal(p.grad, q.grad)), name


def _settings() -> AgentSettings:
    return AgentSettings(layer_widths=(16, 16))


@pytest.mark.parametrize("population,act_dim", [(1, 1), (3, 2)])
def test_act_all_draws_randn_1_by_act_dim_from_each_agents_generator(population, act_dim):
    """Agent k's training action is tanh(mean + std·e) with e = torch.randn((1, act_dim),
    generator=generators[k]), and each generator ends where that draw leaves it."""
    members = [MemberSetup((-1.0,), torch.Generator().manual_seed(k)) for k in range(population)]
    agent = SoftActorCritic(3, act_dim, _settings(), members)
    with torch.no_grad():  # log-stds past both soft limits
        agent.actor.body.linears()[-1].bias[..., act_dim:] = torch.tensor([30.0, -30.0][:act_dim])
    copies = [torch.Generator().manual_seed(0) for _ in range(population)]
    for c, g in zip(copies, agent.generators):
        c.set_state(g.get_state())
    obs = np.random.default_rng(1).normal(size=(population, 3)).astype(np.float32) * 3
    got = agent.act_all(obs)
    with torch.no_grad():
        mean, log_std = agent.actor(torch.from_numpy(obs).unsqueeze(1))
    noise = torch.stack([torch.randn((1, act_dim), generator=c) for c in copies])
    expected = torch.tanh(mean + log_std.exp() * noise)[:, 0].numpy()
    assert got.shape == (population, act_dim) and got.dtype == np.float32
    np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6)
    assert all(torch.equal(a.get_state(), b.get_state()) for a, b in zip(agent.generators, copies))


@pytest.mark.parametrize("targets", [(-2.0,), (-1.0, -0.5)])  # one temperature, and one per action dimension
def test_sample_with_log_prob_and_entropy_terms_against_torch_distributions(targets):
    """The Q-bias diagnostic's samples: noise torch.randn((n, act_dim), generator), the density of
    TransformedDistribution(Normal, TanhTransform) at the sample, and α·log π by hand."""
    agent = SoftActorCritic(3, 2, _settings(), [MemberSetup(targets, torch.Generator().manual_seed(0), 0.3)])
    with torch.no_grad():  # a second temperature unlike the first, and log-stds past both soft limits
        agent.temperature.log_alpha[0, -1] = -2.0
        agent.actor.body.linears()[-1].bias[:, :, 2:] = torch.tensor([30.0, -30.0])
    obs = np.random.default_rng(3).normal(size=(5, 3)).astype(np.float32) * 2
    ours, copy = torch.Generator().manual_seed(4), torch.Generator().manual_seed(4)
    action, log_prob = agent.sample_with_log_prob(obs, ours)
    with torch.no_grad():
        mean, log_std = agent.actor(torch.from_numpy(obs))
    noise = torch.randn((5, 2), generator=copy)
    # In float64: with a log-std near −20, u − mean would round to 0 in float32 and the reference
    # Gaussian's own density would lose the sample's ½e².
    mean, log_std, noise = mean.double(), log_std.double(), noise.double()
    u = mean + log_std.exp() * noise
    tanh = TanhTransform(cache_size=1)
    density = TransformedDistribution(Normal(mean, log_std.exp()), [tanh]).log_prob(tanh(u))
    assert action.dtype == log_prob.dtype == np.float32 and action.shape == log_prob.shape == (5, 2)
    np.testing.assert_allclose(action, torch.tanh(u).numpy(), rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(log_prob, density.numpy(), rtol=1e-5, atol=1e-4)
    assert torch.equal(ours.get_state(), copy.get_state())
    # α·log π: one α times the summed density, or each dimension's α times its own.
    alpha = np.exp(agent.temperature.log_alpha.detach().numpy()[0])
    by_hand = alpha[0] * log_prob.sum(axis=-1) if len(targets) == 1 else log_prob @ alpha
    np.testing.assert_allclose(agent.entropy_terms(log_prob), by_hand, rtol=1e-5, atol=1e-5)
    # A stack of several steps' log-densities gives each step's terms as a call of its own would.
    stacked = agent.entropy_terms(np.stack([log_prob, log_prob[::-1]]))
    np.testing.assert_allclose(stacked, np.stack([by_hand, by_hand[::-1]]), rtol=1e-5, atol=1e-5)
