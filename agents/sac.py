"""The soft actor-critic update (Haarnoja et al. 2018, arXiv 1812.05905, Algorithm 1).

One call of :meth:`SoftActorCritic.update` performs, in the published order: a gradient step on
the soft Q-networks, one on the actor, one on the temperature, then Polyak averaging of the target
Q-networks.
"""

from __future__ import annotations

import copy

import numpy as np
import torch
from torch import nn

from agents.actor import SquashedGaussianActor
from agents.critic import SoftQEnsemble
from agents.replay import Batch
from agents.settings import AgentSettings
from agents.temperature import Temperature


class SoftActorCritic(nn.Module):
    """Actor, critic ensemble, target critics and temperature, with their optimisers.

    Args:
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions (actions in (−1, 1)).
        settings: Hyper-parameters.
        target_entropy: The resolved entropy target(s) H̄ (one, or one per action dimension), from
            :func:`agents.settings.resolve_target_entropy`, called once per run.
        generator: The run's torch generator: initial weights and every policy sample come from it.
    """

    def __init__(
        self,
        obs_dim: int,
        act_dim: int,
        settings: AgentSettings,
        target_entropy: tuple[float, ...],
        generator: torch.Generator,
    ) -> None:
        super().__init__()
        self.settings = settings
        self.generator = generator
        s = settings
        self.actor = SquashedGaussianActor(
            obs_dim, act_dim, s.layer_widths, s.nonlinearity, s.actor.log_std_soft_limits, generator
        )
        self.critic = SoftQEnsemble(obs_dim, act_dim, s.layer_widths, s.nonlinearity, s.critic.count, generator)
        self.critic_target = copy.deepcopy(self.critic).requires_grad_(False)
        self.temperature = Temperature(target_entropy, s.temperature.start, s.temperature.tuned)
        self.actor_opt = torch.optim.Adam(self.actor.parameters(), lr=s.actor.lr)
        self.critic_opt = torch.optim.Adam(self.critic.parameters(), lr=s.critic.lr)
        self.temperature_opt = torch.optim.Adam([self.temperature.log_alpha], lr=s.temperature.lr)

    @torch.no_grad()
    def act(self, obs: np.ndarray, deterministic: bool, generator: torch.Generator | None = None) -> np.ndarray:
        """Action in (−1, 1) for one observation: ``tanh(mean)`` or a policy sample.

        ``generator`` defaults to the training generator; evaluation passes its own so that how
        often a run evaluates never changes what it learns.
        """
        x = torch.as_tensor(obs, dtype=torch.float32).unsqueeze(0)
        if deterministic:
            return self.actor.deterministic(x)[0].numpy()
        action, _, _ = self.actor.sample(x, generator or self.generator)
        return action[0].numpy()

    @torch.no_grad()
    def act_with_bonus(self, obs: np.ndarray, generator: torch.Generator) -> tuple[np.ndarray, float]:
        """A policy sample for one observation (drawn from ``generator``) and its entropy term α·log π(a|s)."""
        x = torch.as_tensor(obs, dtype=torch.float32).unsqueeze(0)
        action, log_prob, _ = self.actor.sample(x, generator)
        return action[0].numpy(), float(self.temperature.bonus(log_prob)[0])

    def critic_target_value(self, batch: Batch) -> torch.Tensor:
        """The soft Bellman target y = r + γ (1 − terminated) [min_k Q̄_k(s′, a′) − α log π(a′|s′)].

        Only termination stops bootstrapping; a time-limit truncation is stored as not terminated.
        """
        with torch.no_grad():
            next_action, next_log_prob, _ = self.actor.sample(batch.next_obs, self.generator)
            next_q = self.critic_target(batch.next_obs, next_action).min(dim=0).values
            soft_next = next_q - self.temperature.bonus(next_log_prob)
            return batch.reward + self.settings.discount * (1.0 - batch.terminated) * soft_next

    def update(self, batch: Batch) -> dict[str, torch.Tensor]:
        """One gradient step on each part, then the target update; returns detached diagnostics."""
        # 1. Soft Q-networks: J_Q = E[½ (Q_k(s, a) − y)²], summed over the independent members.
        target = self.critic_target_value(batch)
        q = self.critic(batch.obs, batch.action)
        critic_loss = 0.5 * (q - target).pow(2).mean(dim=1).sum()
        self.critic_opt.zero_grad(set_to_none=True)
        critic_loss.backward()
        self.critic_opt.step()

        # 2. Actor: J_π = E[α log π(a|s) − min_k Q_k(s, a)], a reparameterised. The critic is frozen
        #    so that this backward pass does not compute gradients nobody uses.
        self.critic.requires_grad_(False)
        action, log_prob, log_std = self.actor.sample(batch.obs, self.generator)
        q_pi = self.critic(batch.obs, action).min(dim=0).values
        actor_loss = (self.temperature.bonus(log_prob) - q_pi).mean()
        self.actor_opt.zero_grad(set_to_none=True)
        actor_loss.backward()
        self.actor_opt.step()
        self.critic.requires_grad_(True)

        # 3. Temperature (Eq. 18), on the same actions.
        temperature_loss = self.temperature.loss(log_prob)
        if self.temperature.tuned:
            self.temperature_opt.zero_grad(set_to_none=True)
            temperature_loss.backward()
            self.temperature_opt.step()

        # 4. Targets: θ̄ ← τ θ + (1 − τ) θ̄ after every gradient step (Table 1: update interval 1).
        self.polyak_update()

        with torch.no_grad():
            spread = q.max(dim=0).values - q.min(dim=0).values
            return {
                # Mean squared TD error over members and batch (the critic loss is half of it, summed
                # over members).
                "critic/td_mse": 2.0 * critic_loss.detach() / q.shape[0],
                "critic/q_mean": q.mean(),
                "critic/q_spread": spread.mean(),
                "critic/target_mean": target.mean(),
                "actor/objective": actor_loss.detach(),
                "actor/entropy_nats": -log_prob.detach().sum(dim=-1).mean(),
                "actor/log_std_mean": log_std.detach().mean(),
                "temperature/value": self.temperature.alpha().mean(),
                "temperature/objective": temperature_loss.detach(),
            }

    @torch.no_grad()
    def polyak_update(self) -> None:
        """Move each target weight a fraction τ toward its online weight."""
        tau = self.settings.critic.target_smoothing
        for target_p, p in zip(self.critic_target.parameters(), self.critic.parameters()):
            target_p.lerp_(p, tau)

    @torch.no_grad()
    def soft_q(self, obs: np.ndarray, action: np.ndarray) -> float:
        """The critic's soft-Q estimate min_k Q_k(s, a) for one state-action (action in (−1, 1))."""
        o = torch.as_tensor(obs, dtype=torch.float32).unsqueeze(0)
        a = torch.as_tensor(action, dtype=torch.float32).unsqueeze(0)
        return float(self.critic(o, a).min(dim=0).values[0])
