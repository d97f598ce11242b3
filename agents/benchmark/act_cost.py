"""What one training action costs when the loop asks for it, against the same call repeated at once.

In the loop, each action is computed right after an update. The probe times the torch actor's
policy sample of a Pendulum-size agent (:meth:`kiln.learner.sac.SoftActorCritic.act_all`) three ways:
right after an update, repeated at once, and after a busy pause as long as an update that touches
no data (a loop reading the clock). If the call after the pause costs what it costs after an update, its extra cost
is not the update's doing (its operands displacing the acting code from the caches) but the time
that passed: on a shared virtual machine other tenants run on the same cores in between.
"""

from __future__ import annotations

import statistics
import time
from dataclasses import dataclass

import numpy as np
import torch

from kiln.benchmark.cases import SMALL
from kiln.learner.sac import MemberSetup, SoftActorCritic
from kiln.training.replay import PopulationReplay


@dataclass(frozen=True)
class ActCost:
    """Median microseconds of one ``act_all`` call: repeated back to back, right after an update, and
    after a busy pause as long as the update before it."""

    warm_us: float
    after_update_us: float
    after_pause_us: float

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
    warm, cold, paused = [], [], []
    for _ in range(rounds):
        t0 = time.perf_counter()
        agent.update(replay.sample(case.batch_size))
        t1 = time.perf_counter()
        agent.act_all(obs)
        t2 = time.perf_counter()
        agent.act_all(obs)
        t3 = time.perf_counter()
        while time.perf_counter() - t3 < t1 - t0:  # the pause: only the clock is read
            pass
        t4 = time.perf_counter()
        agent.act_all(obs)
        t5 = time.perf_counter()
        cold.append(t2 - t1)
        warm.append(t3 - t2)
        paused.append(t5 - t4)
    return ActCost(*(statistics.median(x) * 1e6 for x in (warm, cold, paused)))
