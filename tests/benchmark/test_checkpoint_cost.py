"""The checkpoint-cost figures: the keys and units of what they return, on a small replay buffer, and the
share of a run on injected timings (the trainer and the clock replaced by stand-ins, so the share is hand
arithmetic and nothing trains). The timed method must be put back afterwards (README.md, "Use from
Python": a call leaves your process as it found it). Never the speed itself."""

from __future__ import annotations

from types import SimpleNamespace

import pytest

from kiln.benchmark import checkpoint_cost
from kiln.benchmark.checkpoint_cost import full_replay_pauses, run_share
from kiln.training import trainer


def test_replay_pauses_report_seconds_bytes_and_rows():
    figures = full_replay_pauses(capacity=2048, obs_dim=3, act_dim=1, new_rows=10)
    assert set(figures) == {"full_write_s", "incremental_write_s", "resume_load_s", "bytes_on_disk", "new_rows"}
    assert figures["new_rows"] == 10
    assert all(figures[key] > 0 for key in ("full_write_s", "incremental_write_s", "resume_load_s"))
    # Hand arithmetic: 2048 rows of (3 + 1 + 1 + 3 + 1) float32 numbers are at least 73 728 bytes, all on disk.
    assert figures["bytes_on_disk"] >= 2048 * 9 * 4


def test_share_of_a_run_on_injected_timings(monkeypatch: pytest.MonkeyPatch):
    now = [0.0]
    written = []

    def checkpoint(self) -> None:  # stands in for TrainingLoop._checkpoint: 1.5 fake seconds
        written.append(self)
        now[0] += 1.5

    def train(raw, run_dir):
        # Four checkpoints and 4 fake seconds of other work: a 10-second run.
        for _ in range(4):
            trainer.TrainingLoop._checkpoint("loop")
        now[0] += 4.0
        assert raw["log"]["progress"] == "off" and raw["steps"] == 50

    monkeypatch.setattr(trainer.TrainingLoop, "_checkpoint", checkpoint)
    monkeypatch.setattr(trainer, "train", train)
    monkeypatch.setattr(checkpoint_cost, "time", SimpleNamespace(perf_counter=lambda: now[0]))
    figures = run_share(["steps=50"])
    # Hand arithmetic: 4 checkpoints of 1.5 s in a 10 s run, a share of 0.6.
    assert figures == {"checkpoints": 4, "checkpoint_s": 6.0, "run_s": 10.0, "share": 0.6}
    assert written == ["loop"] * 4
    assert trainer.TrainingLoop._checkpoint is checkpoint  # the wrapper is gone again


def test_the_wrapper_is_removed_when_the_run_fails(monkeypatch: pytest.MonkeyPatch):
    original = trainer.TrainingLoop._checkpoint

    def train(raw, run_dir):
        raise RuntimeError("diverged")

    monkeypatch.setattr(trainer, "train", train)
    with pytest.raises(RuntimeError, match="diverged"):
        run_share([])
    assert trainer.TrainingLoop._checkpoint is original
