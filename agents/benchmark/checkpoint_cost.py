"""Measure what checkpoints cost: their share of a run's time, and the write and resume pauses of a
full 10⁶-transition replay buffer (``python -m kiln.benchmark.checkpoint_cost``).

Figures, not checks: nothing here is asserted on (speed is never tested).
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import torch

from kiln.config.presets import compose_config
from kiln.training.checkpoint import CheckpointStore
from kiln.training.process_state import torch_settings
from kiln.training.replay import ReplayBuffer


def run_share(overrides: list[str]) -> dict[str, float]:
    """Train the default task with checkpoints timed; returns their count, time and share of the run."""
    import kiln.training.trainer as trainer

    spent = {"seconds": 0.0, "count": 0}
    original = trainer.TrainingLoop._checkpoint

    def timed(self: trainer.TrainingLoop) -> None:
        t0 = time.perf_counter()
        original(self)
        spent["seconds"] += time.perf_counter() - t0
        spent["count"] += 1

    trainer.TrainingLoop._checkpoint = timed  # type: ignore[method-assign]
    try:
        with tempfile.TemporaryDirectory() as work:
            started = time.perf_counter()
            trainer.train(compose_config("train", ["log.progress=off", *overrides]), Path(work) / "run")
            wall = time.perf_counter() - started
    finally:
        trainer.TrainingLoop._checkpoint = original  # type: ignore[method-assign]
    return {"checkpoints": spent["count"], "checkpoint_s": spent["seconds"], "run_s": wall,
            "share": spent["seconds"] / wall}  # fmt: skip


def full_replay_pauses(capacity: int = 1_000_000, obs_dim: int = 17, act_dim: int = 6, new_rows: int = 10_000) -> dict[str, float]:
    """Write a checkpoint of a full buffer, then one after ``new_rows`` more transitions, then load it."""
    generator = torch.Generator().manual_seed(0)
    replay = ReplayBuffer(capacity, obs_dim, act_dim, generator)
    rows = torch.randn(capacity, 2 * obs_dim + act_dim + 2, generator=generator)
    replay.obs.copy_(rows[:, :obs_dim])
    replay.action.copy_(rows[:, obs_dim : obs_dim + act_dim])
    replay.next_obs.copy_(rows[:, obs_dim + act_dim : 2 * obs_dim + act_dim])
    replay._dirty = set(range((capacity + 65_535) // 65_536))
    replay.size, replay._next = capacity, 0
    small = {"weights": torch.zeros(10)}
    with tempfile.TemporaryDirectory() as work:
        store = CheckpointStore(Path(work) / "checkpoints", keep=2)
        t0 = time.perf_counter()
        store.write(1, small, {"config": "seed: 0\n"}, replay)
        first = time.perf_counter() - t0
        for i in range(new_rows):
            replay.add(rows[i, :obs_dim].numpy(), rows[i, :act_dim].numpy(), 0.0, rows[i, :obs_dim].numpy(), False)
        t0 = time.perf_counter()
        latest = store.write(2, small, {"config": "seed: 0\n"}, replay)
        incremental = time.perf_counter() - t0
        fresh = ReplayBuffer(capacity, obs_dim, act_dim, generator)
        t0 = time.perf_counter()
        CheckpointStore(Path(work) / "checkpoints", keep=2).load(latest, fresh, {"seed": 0})
        load = time.perf_counter() - t0
        size = sum(p.stat().st_size for p in (Path(work) / "checkpoints").rglob("*") if p.is_file())
    return {"full_write_s": first, "incremental_write_s": incremental, "resume_load_s": load,
            "bytes_on_disk": size, "new_rows": new_rows}  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--skip-run", action="store_true", help="only the 10^6 replay pauses")
    args = parser.parse_args()
    with torch_settings(threads=1):
        figures = {"replay_1e6": full_replay_pauses()}
        if not args.skip_run:
            figures["default_task"] = run_share([])
    print(json.dumps(figures, indent=1))


if __name__ == "__main__":
    main()
