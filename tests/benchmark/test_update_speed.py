"""The update-speed measurement's logic: the agents and data it builds, and its rates on injected timings
(a fake clock advancing a fixed step per read, so every rate is hand arithmetic). Never the speed itself.

A population's member k must start as an agent of its own seed (DEVELOPERS.md, "The agent (agents/)":
member k of a population starts as a run of its own), so the comparison of the two ways is fair.
"""

from __future__ import annotations

import pytest
import torch

from kiln.benchmark import update_speed
from kiln.benchmark.cases import UpdateCase
from kiln.benchmark.update_speed import (
    WARMUP_UPDATES,
    PopulationSpeed,
    best_rate,
    build_agent,
    one_after_another,
    population_speed,
    random_batch,
    timed_round,
)
from kiln.config.agent_settings import AgentSettings

TINY = UpdateCase("tiny", 3, 2, (8,), 16, 2)
TICK = 2.0**-4  # seconds per clock read (exact in binary)


class FakeClock:
    def __init__(self) -> None:
        self.now = 0.0

    def __call__(self) -> float:
        value, self.now = self.now, self.now + TICK
        return value


@pytest.fixture
def clock(monkeypatch: pytest.MonkeyPatch) -> FakeClock:
    fake = FakeClock()
    monkeypatch.setattr(update_speed, "cpu_clock", fake)
    return fake


def test_population_members_start_as_agents_of_their_own_seed():
    together = build_agent(3, 2, TINY.settings(), population=3, seed=10)
    for k in range(3):
        alone = build_agent(3, 2, TINY.settings(), seed=10 + k)
        for key, value in alone.member_state(0).items():
            torch.testing.assert_close(together.member_state(k)[key], value, rtol=0, atol=0)
    # Target entropy −dim(A) (Table 1 of Haarnoja et al. 2018) for every member: −2 here.
    assert [m.target_entropy for m in together.members] == [(-2.0,)] * 3 and together.population == 3


def test_random_batch_shapes_and_ranges():
    batch = random_batch(3, 2, 16, population=4, seed=1)
    assert batch.obs.shape == batch.next_obs.shape == (4, 16, 3)
    assert batch.action.shape == (4, 16, 2) and batch.reward.shape == batch.terminated.shape == (4, 16)
    # Actions in the agent's (−1, 1); no transition is terminal.
    assert batch.action.abs().max() < 1 and not batch.terminated.any()
    again = random_batch(3, 2, 16, population=4, seed=1)
    assert torch.equal(batch.obs, again.obs) and torch.equal(batch.action, again.action)


def test_timed_round_by_hand(clock: FakeClock):
    calls = []
    rate = timed_round(lambda: calls.append(1), seconds=0.25)
    # Reads at 0 (start), then one after each call: TICK, 2 TICK, ... The loop stops after the call whose
    # read is ≥ 0.25 s past the start (4 TICK), and the rate is 4 calls over the next read, 5 TICK.
    assert len(calls) == 4 and rate == 4 / (5 * TICK)


def test_timed_round_makes_at_least_one_call(clock: FakeClock):
    calls = []
    assert timed_round(lambda: calls.append(1), seconds=0.0) == 1 / (2 * TICK) and len(calls) == 1


def test_best_rate_warms_up_first(clock: FakeClock):
    calls = []
    rate = best_rate(lambda: calls.append(1), seconds=5 * 0.25)
    # 3 warm-up calls, then 5 rounds of 0.25 s as above: 4 calls each, every round 4 / (5 TICK).
    assert WARMUP_UPDATES == 3 and len(calls) == 3 + 5 * 4 and rate == 4 / (5 * TICK)


def test_one_after_another_updates_each_agent_once_with_its_own_batch():
    seen = []

    class Agent:
        def __init__(self, name: str) -> None:
            self.name = name

        def update(self, batch) -> None:
            seen.append((self.name, batch))

    step = one_after_another([Agent("a"), Agent("b")], ["batch a", "batch b"])
    step()
    assert seen == [("a", "batch a"), ("b", "batch b")]


def test_population_speed_counts_agent_updates(clock: FakeClock):
    speed = population_speed(TINY, population=2, seconds=5 * 0.25)
    # With every round 4 / (5 TICK) calls per second both ways, a 2-member update counts 2 agent-updates
    # a call, and the two separate agents 2 a step as well: the same, so the speed-up is exactly 1.
    assert speed.population == 2
    assert speed.together == speed.one_after_another == 2 * 4 / (5 * TICK)
    assert speed.speedup == 1.0


def test_speedup_is_the_ratio_of_the_two_rates():
    # Hand arithmetic: 800 against 250 agent-updates/s is 3.2 times as many.
    assert PopulationSpeed(8, together=800.0, one_after_another=250.0).speedup == 3.2


def test_updates_per_second_runs_real_updates(monkeypatch: pytest.MonkeyPatch, clock: FakeClock):
    counted = []
    original = update_speed.SoftActorCritic.update

    def counting(self, batch):
        counted.append(batch.obs.shape)
        return original(self, batch)

    monkeypatch.setattr(update_speed.SoftActorCritic, "update", counting)
    rate = update_speed.updates_per_second(3, 2, AgentSettings(layer_widths=(8,), batch_size=16), seconds=5 * 0.25)
    # One fixed minibatch of batch_size rows for the one agent, updated 3 + 5 · 4 times.
    assert counted == [(1, 16, 3)] * 23 and rate == 4 / (5 * TICK)
