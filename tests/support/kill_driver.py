"""Train a run in a child process that SIGKILLs itself at a chosen moment (for the resume tests).

    python -m tests.support.kill_driver RUN_DIR POINT N [override ...]

POINT is where the N-th call kills the process: ``none`` (run to the end), ``warmup`` (a collector
step during warm-up), ``update`` (inside an update: after the critic, actor and α steps, before the
target networks move), ``evaluation`` (inside an evaluation rollout), ``checkpoint`` (between the
files of a checkpoint being written), ``replay_chunk`` (while a checkpoint's replay rows are
written). A SIGKILL cannot be caught: nothing of Kiln runs after it. Used by
tests/training/test_resume_bitwise.py.
"""

import os
import signal
import sys
from pathlib import Path


def _kill_on_call(owner: object, name: str, n: int) -> None:
    original = getattr(owner, name)
    calls = {"n": 0}

    def wrapped(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == n:
            os.kill(os.getpid(), signal.SIGKILL)
        return original(*args, **kwargs)

    setattr(owner, name, wrapped)


def main() -> None:
    run_dir, point, n, overrides = Path(sys.argv[1]), sys.argv[2], int(sys.argv[3]), sys.argv[4:]
    import kiln.learner.sac
    import kiln.training.checkpoint
    import kiln.training.collector
    import kiln.training.trainer
    from kiln.config.presets import compose_config

    targets = {
        "warmup": (kiln.training.collector.Collector, "step"),
        "update": (kiln.learner.sac.SoftActorCritic, "polyak_update"),
        "evaluation": (kiln.training.trainer, "run_episodes"),
        "checkpoint": (kiln.training.checkpoint, "_write_file"),
        "replay_chunk": (kiln.training.checkpoint, "write_bytes_atomic"),
    }
    if point != "none":
        _kill_on_call(*targets[point], n)
    kiln.training.trainer.train(compose_config("train", overrides), run_dir)


if __name__ == "__main__":
    main()
