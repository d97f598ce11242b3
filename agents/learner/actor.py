"""Squashed-Gaussian actor: an MLP with mean and log-std heads, actions in (−1, 1).

Actions leave the network in (−1, 1); mapping them to the task's bounds happens outside the
network (:mod:`kiln.learner.action_scale`), so a saved policy stays independent of the task's units.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

from kiln.learner import squashed_gaussian
from kiln.learner.actor_steps import Affine, Hidden, SoftLimits, SplitHeads, Squash, Step
from kiln.learner.nets import EnsembleLinear, EnsembleMLP


def soft_clamp(x: torch.Tensor, low: float, high: float) -> torch.Tensor:
    """Clamp ``x`` into ``(low, high)`` smoothly: near-identity inside, a gradient everywhere.

    A hard clamp zeroes the gradient outside the bounds, so a log-std pushed past a bound could
    never come back; a tanh rescaling instead would start every log-std at the bounds' midpoint
    (−9 for the usual (−20, 2)), an almost deterministic initial policy.
    """
    x = high - F.softplus(high - x)
    return low + F.softplus(x - low)


class SquashedGaussianActor(nn.Module):
    """Gaussian policy over pre-squash ``u``; the action is ``tanh(u)``.

    Args:
        obs_dim: Length of the flat observation.
        act_dim: Number of action dimensions.
        layer_widths: Widths of the hidden layers.
        nonlinearity: Name of the hidden nonlinearity (see :data:`kiln.config.nonlinearities.NONLINEARITIES`).
        log_std_soft_limits: ``(low, high)`` for the log standard deviation of ``u``.
        generator: Source of the initial weights (owned by the run).
        population: Number of agents (one actor each, stacked on the leading axis).
    """

    def __init__(
        self,
        obs_dim: int,
        act_dim: int,
        layer_widths: Sequence[int],
        nonlinearity: str,
        log_std_soft_limits: tuple[float, float],
        generator: torch.Generator | None = None,
        population: int = 1,
    ) -> None:
        super().__init__()
        low, high = float(log_std_soft_limits[0]), float(log_std_soft_limits[1])
        if not low < high:
            raise ValueError(f"log_std_soft_limits must be increasing, got {log_std_soft_limits}")
        self.obs_dim, self.act_dim = obs_dim, act_dim
        self.layer_widths, self.nonlinearity = tuple(int(h) for h in layer_widths), nonlinearity
        self.log_std_low, self.log_std_high = low, high
        # One network with 2·act_dim outputs: the first half is the mean, the second the raw log-std.
        self.population = population
        self.body = EnsembleMLP(population, obs_dim, layer_widths, 2 * act_dim, nonlinearity, generator)

    def forward(self, obs: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """Return ``(mean, log_std)`` of ``u``: each ``[B, act_dim]`` for ``obs`` ``[B, obs_dim]`` (one
        agent), or ``[population, B, act_dim]`` for ``obs`` ``[population, B, obs_dim]``."""
        out = self.body(obs)
        if obs.dim() == 2:
            out = out[0]
        mean, raw = out.chunk(2, dim=-1)
        return mean, soft_clamp(raw, self.log_std_low, self.log_std_high)

    def sample(
        self, obs: torch.Tensor, generator: torch.Generator | Sequence[torch.Generator] | None = None
    ) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
        """Reparameterised action in (−1, 1), its per-dimension log-density, and the log-std.

        For ``obs`` ``[population, B, obs_dim]`` pass one generator per agent: each agent's noise
        comes from its own run's generator, as it would in a run of its own.
        """
        mean, log_std = self(obs)
        action, log_prob = squashed_gaussian.transform(mean, log_std, _noise(mean, generator))
        return action, log_prob, log_std

    def sample_action(
        self, obs: torch.Tensor, generator: torch.Generator | Sequence[torch.Generator] | None = None
    ) -> torch.Tensor:
        """The action of :meth:`sample` alone, ``tanh(u)``, from the same noise drawn the same way.

        Acting needs no log-density, and skipping it halves the operators of a one-step action (a
        training action, an evaluation sample): measured 94 → 55 µs per Pendulum-size action
        (DEVELOPERS.md, "Benchmark").
        """
        mean, log_std = self(obs)
        return torch.tanh(squashed_gaussian.pre_squash(mean, log_std, _noise(mean, generator)))

    @torch.inference_mode()
    def deterministic(self, obs: torch.Tensor) -> torch.Tensor:
        """The policy's mode in u-space, squashed: ``tanh(mean)`` (the log-std head is not needed)."""
        out = self.body(obs)
        if obs.dim() == 2:
            out = out[0]
        return torch.tanh(out[..., : self.act_dim])

    def steps(self, agent: int = 0) -> list[Step]:
        """Agent ``agent``'s computation, observation → action, as typed steps in the order applied.

        Derived from the modules the actor runs: each affine layer (its weight ``[in, out]`` and bias
        as detached views of row ``agent``), each nonlinearity module between them, then the split of
        the last layer's output into mean and raw log-std, the log-std soft limits and the tanh squash.
        Saved policies' ``spec.json`` and the ONNX export are both written from this list.

        Args:
            agent: Which agent of the population (0 for a one-agent actor).

        Returns:
            The steps (see :mod:`kiln.learner.actor_steps`).

        Raises:
            IndexError: If ``agent`` is not an agent of this actor.
        """
        if not 0 <= agent < self.population:
            raise IndexError(f"agent {agent} is not one of this actor's {self.population}")
        steps: list[Step] = []
        affine = 0
        for module in self.body.layers:
            if isinstance(module, EnsembleLinear):
                steps.append(Affine(affine, module.weight.detach()[agent], module.bias.detach()[agent, 0]))
                affine += 1
            else:
                steps.append(Hidden(self.nonlinearity, module))
        return [*steps, SplitHeads(self.act_dim), SoftLimits(self.log_std_low, self.log_std_high), Squash()]

    @torch.inference_mode()
    def act_batch(self, obs: np.ndarray, deterministic: bool, generator: torch.Generator | None = None) -> np.ndarray:
        """Actions in (−1, 1) for observations ``[n, obs_dim]`` of a one-agent actor: the mode of
        :meth:`deterministic`, or a sample of :meth:`sample`, whose noise is
        ``torch.randn((n, act_dim), generator=generator)``. The one way evaluation acts, in training
        and in the evaluate command alike.

        Args:
            obs: Observations (any float dtype; float64 from MuJoCo tasks is cast to float32).
            deterministic: Return ``tanh(mean)`` instead of a sample.
            generator: Source of the sample's noise (torch's global generator if ``None``).

        Returns:
            ``[n, act_dim]`` float32 actions.
        """
        x = observation_rows(obs)
        if deterministic:
            return self.deterministic(x).numpy()
        return self.sample_action(x, generator).numpy()


def _noise(mean: torch.Tensor, generator: torch.Generator | Sequence[torch.Generator] | None) -> torch.Tensor:
    """Standard-normal noise shaped like ``mean``: with one generator per agent (``mean`` ``[P, B, A]``),
    agent k's rows are ``torch.randn((B, A), generator=generator[k])``, as a run of its own draws them."""
    if isinstance(generator, Sequence):
        if len(generator) == 1:
            return torch.randn(mean.shape[1:], generator=generator[0]).unsqueeze(0)
        return torch.stack([torch.randn(mean.shape[1:], generator=g) for g in generator])
    return torch.randn(mean.shape, generator=generator, dtype=mean.dtype, device=mean.device)


def observation_rows(obs: np.ndarray) -> torch.Tensor:
    """Observations as a float32 tensor of their own (a copy: a task may hand out read-only arrays,
    which torch would share and warn about)."""
    return torch.from_numpy(np.array(obs, dtype=np.float32))
