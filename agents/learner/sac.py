"""The soft actor-critic update (Haarnoja et al. 2018, arXiv 1812.05905, Algorithm 1), for a
population of agents at once.

One call of :meth:`SoftActorCritic.update` performs, in the published order: a gradient step on
the soft Q-networks, one on the actor, one on the temperature, then Polyak averaging of the target
Q-networks. Every tensor carries a leading agent axis of size ``population``; the agents never
mix (each agent's losses depend on its own weights and rows only, and summing independent losses
gives each agent exactly its own gradient), so a population shares the per-operation cost of an
update among its agents. A single run is a population of one.
"""

from __future__ import annotations

import copy
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import torch
from torch import nn

from kiln.config.agent_settings import AgentSettings
from kiln.learner.actor import SquashedGaussianActor, observation_rows
from kiln.learner.critic import SoftQEnsemble
from kiln.learner.temperature import Temperature


@dataclass(frozen=True)
class Batch:
    """A minibatch of transitions; ``terminated`` is 1.0 where the next state is terminal."""

    obs: torch.Tensor
    action: torch.Tensor
    reward: torch.Tensor
    next_obs: torch.Tensor
    terminated: torch.Tensor


@dataclass(frozen=True)
class MemberSetup:
    """What may differ between the agents of one population.

    Attributes:
        target_entropy: The resolved entropy target(s) H̄ (one, or one per action dimension), from
            :func:`kiln.config.agent_settings.resolve_target_entropy`.
        generator: The agent's run generator: its initial weights and every policy sample come from it.
        temperature_start: α at step 0 (``None``: the settings' value).
        temperature_tuned: Whether α is tuned (``None``: the settings' mode).
    """

    target_entropy: tuple[float, ...]
    generator: torch.Generator
    temperature_start: float | None = None
    temperature_tuned: bool | None = None


def _adam(params: Sequence[torch.Tensor] | object, lr: float) -> torch.optim.Adam:
    # torch's fused kernel: Adam's arithmetic for a whole tensor in one pass; the same algorithm and
    # defaults as the plain implementation (torch.optim.Adam documentation).
    return torch.optim.Adam(params, lr=lr, fused=True)


class SoftActorCritic(nn.Module):
    """Actors, critic ensembles, target critics and temperatures of ``len(members)`` agents, with their optimisers.

    Args:
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions (actions in (−1, 1)).
        settings: Hyper-parameters shared by every agent.
        members: One :class:`MemberSetup` per agent.
    """

    def __init__(self, obs_dim: int, act_dim: int, settings: AgentSettings, members: Sequence[MemberSetup]) -> None:
        super().__init__()
        if not members:
            raise ValueError("a population needs at least one agent")
        self.settings, self.members, self.population = settings, tuple(members), len(members)
        self.generators = [m.generator for m in members]
        s, k, count = settings, len(members), settings.critic.count
        spare = torch.Generator()  # placeholder values, overwritten agent by agent below
        self.actor = SquashedGaussianActor(
            obs_dim, act_dim, s.layer_widths, s.nonlinearity, s.actor.log_std_soft_limits, spare, population=k
        )
        self.critic = SoftQEnsemble(obs_dim, act_dim, s.layer_widths, s.nonlinearity, count, spare, population=k)
        for i, m in enumerate(members):
            # The order a run of this agent's seed alone initialises in: actor, then critics.
            self.actor.body.reset_rows(slice(i, i + 1), m.generator)
            self.critic.body.reset_rows(slice(i * count, (i + 1) * count), m.generator)
        self.critic_target = copy.deepcopy(self.critic).requires_grad_(False)
        self.temperature = Temperature(
            [m.target_entropy for m in members],
            [s.temperature.start if m.temperature_start is None else m.temperature_start for m in members],
            [s.temperature.tuned if m.temperature_tuned is None else m.temperature_tuned for m in members],
        )
        self.actor_opt = _adam(self.actor.parameters(), s.actor.lr)
        self.critic_opt = _adam(self.critic.parameters(), s.critic.lr)
        self.temperature_opt = _adam([self.temperature.log_alpha], s.temperature.lr)
        self._online = list(self.critic.parameters())
        self._targets = list(self.critic_target.parameters())

    @classmethod
    def single(
        cls, obs_dim: int, act_dim: int, settings: AgentSettings, target_entropy: tuple[float, ...], generator: torch.Generator
    ) -> SoftActorCritic:
        """One agent (a population of one) with the settings' temperature."""
        return cls(obs_dim, act_dim, settings, [MemberSetup(tuple(target_entropy), generator)])

    # ----- acting (one agent, or every agent at once) ----------------------------------------------

    @torch.inference_mode()
    def act_all(self, obs: np.ndarray) -> np.ndarray:
        """A policy sample for every agent, ``[population, act_dim]``, from ``obs`` ``[population, obs_dim]``.

        Agent k's noise is ``torch.randn((1, act_dim), generator=generators[k])``, drawn by
        :meth:`kiln.learner.actor.SquashedGaussianActor.sample_action` as the update's ``sample`` draws
        it, so a run's generator follows the same course in a population as alone.
        """
        return self.actor.sample_action(observation_rows(obs).unsqueeze(1), self.generators)[:, 0].numpy()

    @torch.inference_mode()
    def sample_with_log_prob(self, obs: np.ndarray, generator: torch.Generator) -> tuple[np.ndarray, np.ndarray]:
        """Policy samples for observations ``[n, obs_dim]`` of a one-agent population, drawn from
        ``generator`` (noise ``torch.randn((n, act_dim), generator=generator)``), and their
        per-dimension log-densities, ``[n, act_dim]`` each (the Q-bias diagnostic's samples)."""
        action, log_prob, _ = self.actor.sample(observation_rows(obs), generator)
        return action.numpy(), log_prob.numpy()

    def entropy_terms(self, log_prob: np.ndarray) -> np.ndarray:
        """α·log π of a one-agent population for per-dimension log-densities ``[..., act_dim]``, ``[...]``
        (:meth:`kiln.learner.temperature.Temperature.bonus`, with the temperature as it is now)."""
        flat = torch.from_numpy(np.ascontiguousarray(log_prob, dtype=np.float32)).reshape(1, -1, log_prob.shape[-1])
        return self.temperature.bonus(flat)[0].reshape(log_prob.shape[:-1]).numpy()

    @torch.inference_mode()
    def soft_q(self, obs: np.ndarray, action: np.ndarray) -> np.ndarray:
        """The critic's soft-Q estimates min_k Q_k(s, a) for state-actions ``[n, ·]`` (actions in (−1, 1)), ``[n]``."""
        o = torch.as_tensor(np.asarray(obs), dtype=torch.float32).unsqueeze(0)
        a = torch.as_tensor(np.asarray(action), dtype=torch.float32).unsqueeze(0)
        return self.critic(o, a).min(dim=1).values[0].numpy()

    # ----- the update -------------------------------------------------------------------------------

    def critic_target_value(self, batch: Batch) -> torch.Tensor:
        """The soft Bellman target y = r + γ (1 − terminated) [min_k Q̄_k(s′, a′) − α log π(a′|s′)], ``[P, B]``.

        Only termination stops bootstrapping; a time-limit truncation is stored as not terminated.
        """
        with torch.no_grad():
            next_action, next_log_prob, _ = self.actor.sample(batch.next_obs, self.generators)
            next_q = self.critic_target(batch.next_obs, next_action).min(dim=1).values
            soft_next = next_q - self.temperature.bonus(next_log_prob)
            return batch.reward + self.settings.discount * (1.0 - batch.terminated) * soft_next

    def update(self, batch: Batch) -> dict[str, torch.Tensor]:
        """One gradient step on each part of every agent, then the target update.

        Args:
            batch: Rows ``[population, B, ...]`` (rewards and termination flags ``[population, B]``).

        Returns:
            Detached diagnostics, each ``[population]``.
        """
        # 1. Soft Q-networks: J_Q = E[½ (Q_k(s, a) − y)²], summed over the independent networks and agents.
        target = self.critic_target_value(batch)
        q = self.critic(batch.obs, batch.action)
        td = q - target.unsqueeze(1)
        critic_loss = 0.5 * td.pow(2).mean(dim=2).sum()
        self.critic_opt.zero_grad(set_to_none=True)
        critic_loss.backward()
        self.critic_opt.step()

        # 2. Actor: J_π = E[α log π(a|s) − min_k Q_k(s, a)], a reparameterised. The critic is frozen
        #    so that this backward pass does not compute gradients nobody uses.
        self.critic.requires_grad_(False)
        action, log_prob, log_std = self.actor.sample(batch.obs, self.generators)
        q_pi = self.critic(batch.obs, action).min(dim=1).values
        actor_losses = (self.temperature.bonus(log_prob) - q_pi).mean(dim=1)
        self.actor_opt.zero_grad(set_to_none=True)
        actor_losses.sum().backward()
        self.actor_opt.step()
        self.critic.requires_grad_(True)

        # 3. Temperature (Eq. 18), on the same actions; its gradient in closed form (Temperature.gradient).
        temperature_objective = self.temperature.loss(log_prob).detach()
        if self.temperature.any_tuned:
            self.temperature.log_alpha.grad = self.temperature.gradient(log_prob)
            self.temperature_opt.step()

        # 4. Targets: θ̄ ← τ θ + (1 − τ) θ̄ after every gradient step (Table 1: update interval 1).
        self.polyak_update()

        with torch.no_grad():
            return {
                # Mean squared TD error over an agent's networks and batch (its critic loss is half
                # of it, summed over networks).
                "critic/td_mse": td.detach().pow(2).mean(dim=(1, 2)),
                "critic/q_mean": q.detach().mean(dim=(1, 2)),
                "critic/q_spread": (q.max(dim=1).values - q.min(dim=1).values).mean(dim=1),
                "critic/target_mean": target.mean(dim=1),
                "actor/objective": actor_losses.detach(),
                "actor/entropy_nats": -log_prob.detach().sum(dim=-1).mean(dim=1),
                "actor/log_std_mean": log_std.detach().mean(dim=(1, 2)),
                "temperature/value": self.temperature.alpha().mean(dim=1),
                "temperature/objective": temperature_objective,
            }

    @torch.no_grad()
    def polyak_update(self) -> None:
        """Move each target weight a fraction τ toward its online weight: θ̄ ← θ̄ + τ (θ − θ̄)."""
        tau = self.settings.critic.target_smoothing
        for target, online in zip(self._targets, self._online):
            target.lerp_(online, tau)

    # ----- one agent's slice ------------------------------------------------------------------------

    def rows(self, tensor: torch.Tensor, agent: int) -> slice:
        """The rows of ``tensor`` (a weight, buffer or optimiser moment of this population) that belong to ``agent``."""
        per = tensor.shape[0] // self.population
        return slice(agent * per, (agent + 1) * per)

    def member_state(self, agent: int) -> dict[str, torch.Tensor]:
        """Agent ``agent``'s weights and buffers, shaped as a one-agent population's ``state_dict``."""
        return {k: v[self.rows(v, agent)].clone() for k, v in self.state_dict().items()}

    def load_member_state(self, agent: int, state: dict[str, torch.Tensor]) -> None:
        """Put one agent's ``state_dict`` (as :meth:`member_state` gives it) into its rows.

        Raises:
            KeyError, RuntimeError: If a tensor is missing or of the wrong shape.
        """
        with torch.no_grad():
            for key, value in self.state_dict().items():
                value[self.rows(value, agent)].copy_(state[key])

    def member(self, agent: int) -> SoftActorCritic:
        """A one-agent copy of agent ``agent`` (for evaluation and saving; it does not train the population)."""
        m = self.members[agent]
        alone = SoftActorCritic(
            self.actor.obs_dim, self.actor.act_dim, self.settings,
            [MemberSetup(m.target_entropy, torch.Generator(), m.temperature_start, m.temperature_tuned)],
        )  # fmt: skip
        alone.load_state_dict(self.member_state(agent))
        return alone
