"""Run Kiln's entry points as a user would: a subprocess in a temporary working folder."""

import os
import shutil
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def run_script(
    name: str, *args: str, cwd: Path, timeout: float = 600, env: dict | None = None,
    preexec_fn: Callable[[], None] | None = None,
) -> subprocess.CompletedProcess:
    """Run ``scripts/<name>.py``; ``preexec_fn`` runs in the child first (limits, dropped permissions)."""
    env = dict(os.environ, PYTHONUNBUFFERED="1", **(env or {}))
    return subprocess.run(
        [sys.executable, str(REPO / "scripts" / f"{name}.py"), *args],
        cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout, preexec_fn=preexec_fn,
    )  # fmt: skip


def kiln_command() -> list[str]:
    """The installed ``kiln`` console command of this Python (as the README install makes it), or,
    where this environment has none, the same entry point through ``python -m``."""
    installed = shutil.which("kiln", path=str(Path(sys.executable).parent))
    return [installed] if installed else [sys.executable, "-m", "kiln.cli.command"]


def run_kiln(
    *args: str, cwd: Path, timeout: float = 600, env: dict | None = None,
    preexec_fn: Callable[[], None] | None = None,
) -> subprocess.CompletedProcess:
    """Run the ``kiln`` command; ``preexec_fn`` as for :func:`run_script`."""
    env = dict(os.environ, PYTHONUNBUFFERED="1", **(env or {}))
    return subprocess.run(
        [*kiln_command(), *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout,
        preexec_fn=preexec_fn,
    )  # fmt: skip


def assert_one_line_error(proc: subprocess.CompletedProcess, *phrases: str) -> str:
    """Kiln's rule for bad input: exit 2, one ``kiln: error:`` line naming the problem, no traceback,
    no usage text (requirement of the project; no outside source). Returns the line."""
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr and "usage:" not in proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, proc.stderr
    assert lines[0].startswith("kiln: error: "), lines[0]
    for phrase in phrases:
        assert phrase in lines[0], lines[0]
    return lines[0]


# A run small enough for seconds: the smallest settings that still exercise every part of the loop.
TINY_RUN = (
    "steps=300", "collect.warmup_steps=100", "evaluate.every=150", "evaluate.episodes=2",
    "evaluate.bias_episodes=1", "log.every=100", "agent.layer_widths=[16,16]", "agent.batch_size=32",
    "agent.replay_capacity=300",
)  # fmt: skip
