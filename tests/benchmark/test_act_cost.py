"""The acting probe's arithmetic on injected timings: the clock is a fake that moves one tick per read,
and the agent a subclass of Kiln's whose update and acting move it by known amounts (acting costs more
right after an update), so each of the three medians is hand arithmetic. Never the speed itself."""

from __future__ import annotations

from types import SimpleNamespace

import pytest

from kiln.benchmark import act_cost
from kiln.benchmark.act_cost import ActCost
from kiln.learner.sac import SoftActorCritic

TICK = 2.0**-20  # seconds per clock read (exact in binary, about 1 µs)
UPDATE, ACT_AFTER_UPDATE, ACT = 100 * TICK, 30 * TICK, 10 * TICK


class Clock:
    now = 0.0

    @classmethod
    def perf_counter(cls) -> float:
        value = cls.now
        cls.now += TICK
        return value


class ProbeAgent(SoftActorCritic):
    """Kiln's agent, with fake costs added to the fake clock after each real call."""

    last = "none"
    updates = 0

    def update(self, batch):
        result = super().update(batch)
        Clock.now += UPDATE
        ProbeAgent.last, ProbeAgent.updates = "update", ProbeAgent.updates + 1
        return result

    def act_all(self, obs):
        action = super().act_all(obs)
        Clock.now += ACT_AFTER_UPDATE if ProbeAgent.last == "update" else ACT
        ProbeAgent.last = "act"
        return action


def test_three_medians_by_hand(monkeypatch: pytest.MonkeyPatch):
    Clock.now, ProbeAgent.updates = 0.0, 0
    monkeypatch.setattr(act_cost, "time", SimpleNamespace(perf_counter=Clock.perf_counter))
    monkeypatch.setattr(act_cost, "SoftActorCritic", ProbeAgent)
    cost = act_cost.act_cost(rounds=3)
    assert ProbeAgent.updates == 3
    # Each timed call spans its own cost plus the one tick of the read that starts it: right after an
    # update 30 + 1 ticks, repeated at once 10 + 1; after the pause (which reads the clock until the
    # update's 100 + 1 ticks have passed) the call is not right after an update, so 10 + 1 again.
    assert cost.after_update_us == pytest.approx(31 * TICK * 1e6, rel=1e-12)
    assert cost.warm_us == pytest.approx(11 * TICK * 1e6, rel=1e-12)
    assert cost.after_pause_us == pytest.approx(11 * TICK * 1e6, rel=1e-12)
    assert cost.ratio == pytest.approx(31 / 11, rel=1e-12)


def test_ratio_by_hand():
    # 150 µs after an update against 30 µs repeated at once: five times dearer.
    assert ActCost(warm_us=30.0, after_update_us=150.0, after_pause_us=120.0).ratio == 5.0
