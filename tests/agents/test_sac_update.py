"""The soft actor-critic update against the published equations (Haarnoja et al. 2018, arXiv 1812.05905)."""

import math

import pytest
import torch

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


def test_temperature_loss_value_is_eq_18():
    # J(α) = −α (log π + H̄) averaged over the batch: α = 0.3, log π = 2, H̄ = −1 → −0.3·(2 − 1) = −0.3.
    agent = _agent(start=0.3, mode="tuned", target_entropy=-1.0)
    assert agent.temperature.loss(torch.full((1, 5, 1), 2.0)).item() == pytest.approx(-0.3)


def test_temperature_gradient_is_autograd_of_eq_18():
    # The closed-form ∂J/∂log α against torch.autograd of J(α) = E[−exp(log α)(log π + H̄)] (Eq. 18),
    # for two agents with two temperatures each (per-dimension targets).
    settings = AgentSettings(layer_widths=(8,), temperature=TemperatureSettings(target_entropy=[-1.0, 0.5]))
    members = [MemberSetup((-1.0, 0.5), torch.Generator().manual_seed(0), 0.7), MemberSetup((-2.0, 0.0), torch.Generator().manual_seed(1), 0.2)]
    agent = SoftActorCritic(2, 2, settings, members)
    log_prob = torch.randn(2, 64, 2, generator=torch.Generator().manual_seed(3))
    log_alpha = agent.temperature.log_alpha.detach().clone().requires_grad_(True)
    target = torch.tensor([[-1.0, 0.5], [-2.0, 0.0]])
    reference = -(log_alpha.exp().unsqueeze(1) * (log_prob + target.unsqueeze(1))).mean(dim=1).sum()
    (expected,) = torch.autograd.grad(reference, log_alpha)
    torch.testing.assert_close(agent.temperature.gradient(log_prob), expected, rtol=1e-6, atol=1e-7)


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
