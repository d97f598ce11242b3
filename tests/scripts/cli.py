"""Run Kiln's entry points as a user would: a subprocess in a temporary working folder."""

import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def run_script(name: str, *args: str, cwd: Path, timeout: float = 600) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.run(
        [sys.executable, str(REPO / "scripts" / f"{name}.py"), *args],
        cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout,
    )  # fmt: skip


# A run small enough for seconds: the smallest settings that still exercise every part of the loop.
TINY_RUN = (
    "steps=300", "collect.warmup_steps=100", "evaluate.every=150", "evaluate.episodes=2",
    "evaluate.bias_episodes=1", "log.every=100", "agent.layer_widths=[16,16]", "agent.batch_size=32",
    "agent.replay_capacity=300",
)  # fmt: skip
