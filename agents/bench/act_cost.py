"""What one training action costs when the loop asks for it, against the same call repeated at once.

In the loop, each action is computed right after an update, whose few megabytes of operands and
thousands of kernels displace the acting code's instructions and data from the caches; on a shared
virtual machine, other tenants do the same between any two calls. The probe times the NumPy policy
sample of a Pendulum-size agent (:meth:`agents.sac.SoftActorCritic.act_all`) both ways, so the loop's
acting share can be read against what the arithmetic itself costs.
"""

from __future__ import annotations

import statistics
import time
from dataclasses import dataclass

import numpy as np
import torch

from agents.bench.cases import SMALL
from agents.replay import PopulationReplay
from agents.sac import MemberSetup, SoftActorCritic


@dataclass(frozen=True)
class ActCost:
    """Median microseconds of one ``act_all`` call, repeated back to back and right after an update."""

    warm_us: float
    after_update_us: float

    @property
    def ratio(self) -> float:
        """How many times dearer the call is right after an update."""
        return self.after_update_us / self.warm_us


def act_cost(rounds: int = 200) -> ActCost:
    """Time ``act_all`` of a one-agent Pendulum-size learner (obs 3, act 1, 2×64) ``rounds`` times each way."""
    case, generator = SMALL, torch.Generator().manual_seed(0)
    agent = SoftActorCritic(case.obs_dim, case.act_dim, case.settings(), [MemberSetup((-1.0,), generator)])
    replay = PopulationReplay(4 * case.batch_size, case.obs_dim, case.act_dim, [generator])
    rng = np.random.default_rng(0)
    for _ in range(4 * case.batch_size):
        replay.buffers[0].add(
            rng.normal(size=case.obs_dim), rng.uniform(-1, 1, case.act_dim), float(rng.normal()), rng.normal(size=case.obs_dim), False
        )
    obs = rng.normal(size=(1, case.obs_dim)).astype(np.float32)
    warm, cold = [], []
    for _ in range(rounds):
        agent.update(replay.sample(case.batch_size))
        t0 = time.perf_counter()
        agent.act_all(obs)
        t1 = time.perf_counter()
        agent.act_all(obs)
        t2 = time.perf_counter()
        cold.append(t1 - t0)
        warm.append(t2 - t1)
    return ActCost(statistics.median(warm) * 1e6, statistics.median(cold) * 1e6)
