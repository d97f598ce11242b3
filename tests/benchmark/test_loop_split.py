"""The training loop's time split: its arithmetic by hand, the overrides it trains with (against the
preset file read with PyYAML), and its timing of the loop's parts on injected timings: the trainer and the
clock are replaced by stand-ins whose methods take a known number of fake seconds, so every bucket is hand
arithmetic. The timed methods must be put back afterwards (README.md, "Use from Python": a call leaves
your process as it found it)."""

from __future__ import annotations

from types import SimpleNamespace

import pytest
import yaml

from kiln.benchmark import loop_split
from kiln.benchmark.loop_split import LoopSplit, measure_loop, pendulum_overrides
from kiln.config.presets import CONFIG_DIR


class Clock:
    """Fake seconds: reading costs nothing; the stand-ins below move it on."""

    now = 0.0

    @classmethod
    def perf_counter(cls) -> float:
        return cls.now


class FakeAgent:
    def act(self) -> str:
        Clock.now += 0.5
        return "action"


class FakeLoop:
    def evaluate(self) -> None:
        Clock.now += 3.0
        FakeAgent().act()  # acting inside an evaluation: counted as evaluation, not as acting

    def checkpoint(self) -> None:
        Clock.now += 2.0


def test_split_arithmetic_by_hand():
    split = LoopSplit(steps=1000, loop_s=20.0, env_step_s=5.0, update_s=6.0, evaluate_s=4.0, checkpoint_s=2.0, act_s=1.0)
    # 1000 steps in 20 s; overhead 1 − (5 + 6) / 20 = 0.45; other 20 − 5 − 6 − 4 − 2 − 1 = 2 s.
    assert split.env_steps_per_s == 50.0 and split.overhead_fraction == pytest.approx(0.45)
    assert split.other_s == 2.0
    assert split.shares() == {"env_step": 0.25, "update": 0.3, "evaluate": 0.2, "checkpoint": 0.1, "act": 0.05,
                              "other": 0.1}  # fmt: skip
    unknown = LoopSplit(1000, 20.0, 5.0, 6.0, evaluate_s=4.0, checkpoint_s=None, act_s=1.0)
    assert unknown.other_s is None and unknown.shares()["checkpoint"] is None and unknown.shares()["other"] is None


def test_pendulum_overrides():
    assert pendulum_overrides(1500) == ["env=pendulum", "log.progress=off", "steps=1500"]
    assert pendulum_overrides(1500, periodic=False) == [
        "env=pendulum", "log.progress=off", "steps=1500", "evaluate.every=1500", "checkpoint.every=1500"]  # fmt: skip
    # Without a budget the preset's own: configs/env/pendulum.yaml's steps, read with PyYAML.
    steps = yaml.safe_load((CONFIG_DIR / "env" / "pendulum.yaml").read_text())["steps"]
    assert pendulum_overrides(None, periodic=False)[-2:] == [f"evaluate.every={steps}", f"checkpoint.every={steps}"]


def _fake_train(calls: list):
    def train(raw, run_dir):
        calls.append((raw["steps"], raw["env"]["id"], run_dir.name))
        FakeLoop().evaluate()
        FakeLoop().checkpoint()
        FakeAgent().act()
        FakeAgent().act()
        return SimpleNamespace(steps=raw["steps"], time_split_s={"loop": 20.0, "env_step": 5.0, "update": 6.0})

    return train


@pytest.fixture
def stand_ins(monkeypatch: pytest.MonkeyPatch) -> list:
    calls: list = []
    Clock.now = 0.0
    monkeypatch.setattr(loop_split, "time", Clock)
    monkeypatch.setattr(loop_split, "train", _fake_train(calls))
    monkeypatch.setattr(loop_split, "_TIMED", (
        (__name__, "FakeLoop", "evaluate", "evaluate"), (__name__, "FakeLoop", "checkpoint", "checkpoint"),
        (__name__, "FakeAgent", "act", "act"),
    ))  # fmt: skip
    return calls


def test_parts_are_timed_by_wrapping_and_put_back(stand_ins: list):
    originals = (FakeLoop.evaluate, FakeLoop.checkpoint, FakeAgent.act)
    split = measure_loop(pendulum_overrides(1200))
    # The config composed from the overrides reached the trainer, in a run folder of its own.
    assert stand_ins == [(1200, "Pendulum-v1", "run")]
    # Hand arithmetic: evaluate 3 + 0.5 (its own acting) = 3.5 s; checkpoint 2 s; acting 2 · 0.5 = 1 s.
    assert (split.evaluate_s, split.checkpoint_s, split.act_s) == (3.5, 2.0, 1.0)
    assert (split.steps, split.loop_s, split.env_step_s, split.update_s) == (1200, 20.0, 5.0, 6.0)
    assert split.other_s == 20.0 - 5.0 - 6.0 - 3.5 - 2.0 - 1.0
    assert (FakeLoop.evaluate, FakeLoop.checkpoint, FakeAgent.act) == originals


def test_a_part_that_is_not_there_is_none(stand_ins: list, monkeypatch: pytest.MonkeyPatch):
    monkeypatch.setattr(loop_split, "_TIMED", (
        (__name__, "FakeLoop", "evaluate", "evaluate"), (__name__, "FakeLoop", "checkpoint", "checkpoint"),
        (__name__, "NoSuchClass", "act", "act"),
    ))  # fmt: skip
    split = measure_loop(pendulum_overrides(1200))
    assert split.act_s is None and split.other_s is None and split.evaluate_s == 3.5


def test_wrappers_are_removed_when_training_fails(stand_ins: list, monkeypatch: pytest.MonkeyPatch):
    originals = (FakeLoop.evaluate, FakeLoop.checkpoint, FakeAgent.act)

    def failing(raw, run_dir):
        raise RuntimeError("diverged")

    monkeypatch.setattr(loop_split, "train", failing)
    with pytest.raises(RuntimeError, match="diverged"):
        measure_loop(pendulum_overrides(1200))
    assert (FakeLoop.evaluate, FakeLoop.checkpoint, FakeAgent.act) == originals


def test_timed_parts_name_real_methods_of_the_loop():
    # The parts loop_split times must exist, or its figures silently read None.
    import importlib

    for module, cls_name, method, _ in loop_split._TIMED:
        assert callable(getattr(getattr(importlib.import_module(module), cls_name), method))
