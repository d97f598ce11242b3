"""Updates/s of :class:`kiln.learner.sac.SoftActorCritic` on random data, one agent or a population.

Rates are the best of several timed rounds, in CPU time of the measuring thread
(:data:`kiln.benchmark.cases.cpu_clock`): on a shared machine other work only slows a round down.
Random data suffice: an update's cost depends on the sizes, not on the values.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import torch

from kiln.benchmark.cases import UpdateCase, cpu_clock
from kiln.config.agent_settings import AgentSettings
from kiln.learner.sac import Batch, MemberSetup, SoftActorCritic

_ROUNDS = 5  # timed rounds per measurement; the best is kept
WARMUP_UPDATES = 3  # first calls allocate the optimisers' moments and let BLAS pick kernels


def build_agent(obs_dim: int, act_dim: int, settings: AgentSettings, population: int = 1, seed: int = 0) -> SoftActorCritic:
    """``population`` agents on one member axis, each with target entropy −dim(A) and its own generator."""
    members = [
        MemberSetup(target_entropy=(-float(act_dim),), generator=torch.Generator().manual_seed(seed + k))
        for k in range(population)
    ]
    return SoftActorCritic(obs_dim, act_dim, settings, members)


def random_batch(obs_dim: int, act_dim: int, rows: int, population: int = 1, seed: int = 0) -> Batch:
    """``rows`` random transitions per agent, ``[population, rows, ...]`` (actions in (−1, 1), none terminal)."""
    g = torch.Generator().manual_seed(seed)
    p = population
    return Batch(
        obs=torch.randn(p, rows, obs_dim, generator=g),
        action=torch.rand(p, rows, act_dim, generator=g) * 2 - 1,
        reward=torch.randn(p, rows, generator=g),
        next_obs=torch.randn(p, rows, obs_dim, generator=g),
        terminated=torch.zeros(p, rows),
    )


def timed_round(step: Callable[[], object], seconds: float) -> float:
    """Calls per CPU-second of ``step`` over one round of about ``seconds`` (at least one call)."""
    n, t0 = 0, cpu_clock()
    while n == 0 or cpu_clock() - t0 < seconds:
        step()
        n += 1
    return n / (cpu_clock() - t0)


def best_rate(step: Callable[[], object], seconds: float) -> float:
    """Best calls per CPU-second of ``step`` over :data:`_ROUNDS` rounds sharing ``seconds``."""
    for _ in range(WARMUP_UPDATES):
        step()
    return max(timed_round(step, seconds / _ROUNDS) for _ in range(_ROUNDS))


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


@dataclass(frozen=True)
class PopulationSpeed:
    """Agent-updates/s of K agents updated together (one K-member agent) and one after another."""

    population: int
    together: float
    one_after_another: float

    @property
    def speedup(self) -> float:
        """How many times more agent-updates/s the member axis gives."""
        return self.together / self.one_after_another


def population_speed(case: UpdateCase, population: int, seconds: float) -> PopulationSpeed:
    """Measure ``population`` agents of ``case``'s size both ways, ``seconds`` for each way.

    Each agent gets its own minibatch in both ways, so both do the same arithmetic; the two ways
    take turns round by round, so both see the same load, and each keeps its best round.
    """
    s, k = case.settings(), population
    together = build_agent(case.obs_dim, case.act_dim, s, population=k)
    batch = random_batch(case.obs_dim, case.act_dim, case.batch_size, population=k)
    separate = [build_agent(case.obs_dim, case.act_dim, s, seed=i) for i in range(k)]
    # Agent i alone gets the rows agent i gets in the population (slices of the same batch).
    fields = (batch.obs, batch.action, batch.reward, batch.next_obs, batch.terminated)
    batches = [Batch(*(t[i : i + 1] for t in fields)) for i in range(k)]
    steps = (lambda: together.update(batch), one_after_another(separate, batches))
    for step in steps:
        for _ in range(WARMUP_UPDATES):
            step()
    best = [0.0, 0.0]
    for _ in range(_ROUNDS):
        for i, step in enumerate(steps):
            best[i] = max(best[i], timed_round(step, seconds / _ROUNDS))
    return PopulationSpeed(k, k * best[0], k * best[1])
