"""The fast update computes what the plain formulation of the published equations computes.

Reference: one soft actor-critic gradient step written directly from Haarnoja et al. 2018 (arXiv
1812.05905): the soft Bellman target and J_Q (Eqs. 5–6 with twin target critics, Algorithm 1),
J_π (Eq. 7 with the reparameterised squashed Gaussian, Appendix C), J(α) (Eq. 18); and Adam's first
step from Kingma & Ba 2015 (Algorithm 1: θ ← θ − lr · m̂ / (√v̂ + ε), which for the first step is
lr · g / (|g| + ε)). The reference runs in float64 with torch.distributions.Normal for the Gaussian
density and autograd for the gradients; Kiln's update runs in float32 with its fused optimiser,
batched members, packed replay rows and closed-form temperature gradient. They must agree to 1e-5
relative (the issue's bound) on one batch, for a population of two agents.
"""

import torch
import torch.nn.functional as F
from torch.distributions import Normal

from kiln.config.agent_settings import AgentSettings, TemperatureSettings
from kiln.learner.sac import Batch, MemberSetup, SoftActorCritic

OBS, ACT, BATCH, WIDTHS = 4, 2, 128, (32, 32)
LOW, HIGH = -20.0, 2.0  # agent.actor.log_std_soft_limits defaults


def _mlp(x, layers):
    for i, (w, b) in enumerate(layers):
        x = x @ w + b
        if i < len(layers) - 1:
            x = torch.relu(x)
    return x


def _layers(state, prefix, row):
    n = len(WIDTHS) + 1
    return [(state[f"{prefix}.body.layers.{2 * i}.weight"][row].double().requires_grad_(True),
             state[f"{prefix}.body.layers.{2 * i}.bias"][row].double().requires_grad_(True)) for i in range(n)]  # fmt: skip


def _policy(obs, actor, noise):
    out = _mlp(obs, actor)
    mean, raw = out[:, :ACT], out[:, ACT:]
    log_std = LOW + F.softplus(HIGH - F.softplus(HIGH - raw) - LOW)  # the soft limits (kiln.learner.actor.soft_clamp)
    u = mean + log_std.exp() * noise
    # log π(a) = log N(u; μ, σ) − Σ log(1 − tanh²u)  (Appendix C, Eq. 21), per dimension
    log_prob = Normal(mean, log_std.exp()).log_prob(u) - torch.log(1 - torch.tanh(u) ** 2)
    return torch.tanh(u), log_prob


def _adam_first_step(param, grad, lr, eps=1e-8):
    return param - lr * grad / (grad.abs() + eps)


def _reference(state, batch, k, noise_next, noise_now, settings, target_entropy):
    """Losses and gradients of agent k's first update, float64, straight from the equations."""
    s, a, r, s2, d = (t[k].double() for t in (batch.obs, batch.action, batch.reward, batch.next_obs, batch.terminated))
    actor = _layers(state, "actor", k)
    count = settings.critic.count
    critics = [_layers(state, "critic", k * count + j) for j in range(count)]
    targets = [_layers(state, "critic_target", k * count + j) for j in range(count)]
    alpha = state["temperature.log_alpha"][k].double().exp()
    with torch.no_grad():
        a2, lp2 = _policy(s2, actor, noise_next[k].double())
        q2 = torch.stack([_mlp(torch.cat([s2, a2], 1), t)[:, 0] for t in targets]).min(0).values
        y = r + settings.discount * (1 - d) * (q2 - alpha * lp2.sum(1))
    q = [_mlp(torch.cat([s, a], 1), c)[:, 0] for c in critics]
    j_q = sum(0.5 * ((qj - y) ** 2).mean() for qj in q)
    critic_params = [p for c in critics for layer in c for p in layer]
    critic_grads = torch.autograd.grad(j_q, critic_params)
    stepped = [_adam_first_step(p.detach(), g, settings.critic.lr) for p, g in zip(critic_params, critic_grads)]
    it = iter(stepped)
    new_critics = [[(next(it), next(it)) for _ in c] for c in critics]
    act_now, lp = _policy(s, actor, noise_now[k].double())
    q_pi = torch.stack([_mlp(torch.cat([s, act_now], 1), c)[:, 0] for c in new_critics]).min(0).values
    j_pi = (alpha * lp.sum(1) - q_pi).mean()
    actor_params = [p for layer in actor for p in layer]
    actor_grads = torch.autograd.grad(j_pi, actor_params)
    log_alpha = state["temperature.log_alpha"][k].double().clone().requires_grad_(True)
    j_alpha = (-log_alpha.exp() * (lp.detach().sum(1) + target_entropy)).mean()
    (alpha_grad,) = torch.autograd.grad(j_alpha, log_alpha)
    return {"td_mse": 2 * j_q.detach() / count, "j_pi": j_pi.detach(), "j_alpha": j_alpha.detach(),
            "critic_grads": critic_grads, "critic_after": stepped, "actor_grads": actor_grads, "alpha_grad": alpha_grad}  # fmt: skip


def _close(ours: torch.Tensor, reference: torch.Tensor, what: str) -> None:
    # 1e-5 relative to the tensor's scale (an elementwise relative bound is meaningless at entries near 0).
    scale = reference.abs().max().item()
    torch.testing.assert_close(ours.double(), reference, rtol=1e-5, atol=1e-5 * scale, msg=what)


def test_first_update_matches_the_equations_in_float64():
    settings = AgentSettings(layer_widths=WIDTHS, batch_size=BATCH, temperature=TemperatureSettings(start=0.4))
    targets = ((-2.0,), (-0.5,))
    agent = SoftActorCritic(OBS, ACT, settings, [MemberSetup(t, torch.Generator().manual_seed(i)) for i, t in enumerate(targets)])
    g = torch.Generator().manual_seed(7)
    batch = Batch(torch.randn(2, BATCH, OBS, generator=g), torch.rand(2, BATCH, ACT, generator=g) * 2 - 1,
                  torch.randn(2, BATCH, generator=g), torch.randn(2, BATCH, OBS, generator=g),
                  (torch.rand(2, BATCH, generator=g) < 0.2).float())  # fmt: skip
    state = {k: v.clone() for k, v in agent.state_dict().items()}
    # The update draws, per agent from its own generator, the next-state noise and then the current-state noise.
    copies = [torch.Generator().manual_seed(0) for _ in targets]
    for c, m in zip(copies, agent.members):
        c.set_state(m.generator.get_state())
    noise_next = torch.stack([torch.randn(BATCH, ACT, generator=c) for c in copies])
    noise_now = torch.stack([torch.randn(BATCH, ACT, generator=c) for c in copies])
    metrics = agent.update(batch)
    count = settings.critic.count
    for k, target in enumerate(targets):
        ref = _reference(state, batch, k, noise_next, noise_now, settings, target[0])
        _close(metrics["critic/td_mse"][k], ref["td_mse"], "critic/td_mse")
        _close(metrics["actor/objective"][k], ref["j_pi"], "actor/objective")
        _close(metrics["temperature/objective"][k], ref["j_alpha"], "temperature/objective")
        # Critic gradients and the parameters after Adam's first step, network by network.
        n = len(WIDTHS) + 1
        for j in range(count):
            for i, layer in enumerate(agent.critic.body.linears()):
                row = k * count + j
                for which, param in enumerate((layer.weight, layer.bias)):
                    flat = (j * n + i) * 2 + which
                    _close(param.grad[row], ref["critic_grads"][flat], f"critic grad {j}.{i}.{which}")
                    _close(param.detach()[row], ref["critic_after"][flat], f"critic after {j}.{i}.{which}")
        for i, layer in enumerate(agent.actor.body.linears()):
            for which, param in enumerate((layer.weight, layer.bias)):
                _close(param.grad[k], ref["actor_grads"][i * 2 + which], f"actor grad {i}.{which}")
        _close(agent.temperature.log_alpha.grad[k], ref["alpha_grad"].reshape(1), "log α grad")
