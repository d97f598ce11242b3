"""Updates/s of :class:`agents.sac.SoftActorCritic` on random data, one agent or a population.

Rates are the best of several timed rounds: on a shared machine other work only slows a round down.
Random data suffice: an update's cost depends on the sizes, not on the values.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import torch

from agents.bench.cases import cpu_clock
from agents.replay import Batch
from agents.sac import SoftActorCritic
from agents.settings import AgentSettings

_ROUNDS = 5  # timed rounds per measurement; the best is kept
_WARMUP_UPDATES = 3  # first calls allocate the optimisers' moments and let BLAS pick kernels


def build_agent(obs_dim: int, act_dim: int, settings: AgentSettings, seed: int = 0) -> SoftActorCritic:
    """One agent with the published target entropy −dim(A) and its own generator."""
    return SoftActorCritic(obs_dim, act_dim, settings, (-float(act_dim),), torch.Generator().manual_seed(seed))


def random_batch(obs_dim: int, act_dim: int, rows: int, seed: int = 0) -> Batch:
    """A minibatch of ``rows`` random transitions (actions in (−1, 1), none terminal)."""
    g = torch.Generator().manual_seed(seed)
    return Batch(
        obs=torch.randn(rows, obs_dim, generator=g),
        action=torch.rand(rows, act_dim, generator=g) * 2 - 1,
        reward=torch.randn(rows, generator=g),
        next_obs=torch.randn(rows, obs_dim, generator=g),
        terminated=torch.zeros(rows),
    )


def best_rate(step: Callable[[], object], seconds: float) -> float:
    """Best calls per CPU-second of ``step`` over :data:`_ROUNDS` rounds sharing ``seconds`` (at least one call each)."""
    for _ in range(_WARMUP_UPDATES):
        step()
    best = 0.0
    for _ in range(_ROUNDS):
        n, t0 = 0, cpu_clock()
        while n == 0 or cpu_clock() - t0 < seconds / _ROUNDS:
            step()
            n += 1
        best = max(best, n / (cpu_clock() - t0))
    return best


def updates_per_second(obs_dim: int, act_dim: int, settings: AgentSettings, seconds: float) -> float:
    """Updates/s of one agent on one fixed random minibatch."""
    agent = build_agent(obs_dim, act_dim, settings)
    batch = random_batch(obs_dim, act_dim, settings.batch_size)
    return best_rate(lambda: agent.update(batch), seconds)


def one_after_another(agents: Sequence[SoftActorCritic], batches: Sequence[Batch]) -> Callable[[], None]:
    """A step that updates each agent once, in turn (how K runs share one core without a member axis)."""

    def step() -> None:
        for agent, batch in zip(agents, batches):
            agent.update(batch)

    return step
