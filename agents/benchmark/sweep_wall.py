"""Wall time of a small entropy-target comparison on all cores: separate jobs against populations.

The sweep is the Pendulum-v1 preset's comparison cut to 2 targets × 4 seeds, launched exactly as a
user would (``kiln train sweep=target_entropy ...`` in a subprocess): once through the local
launcher (one single-thread job per core) and once with ``launcher=population`` (members that share
a network shape trained together in one process).
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

from kiln.config.presets import CONFIG_DIR
from kiln.errors import KilnError

TARGETS = "-2.0,-0.5"
SEEDS = "range(4)"


def sweep_command(sweep_dir: Path, steps: int | None, population: bool) -> list[str]:
    """The ``kiln train`` command line of the comparison (the preset's budget unless ``steps`` is given)."""
    command = [
        sys.executable, "-m", "kiln.cli.train", "sweep=target_entropy", f"agent.temperature.target_entropy={TARGETS}",
        f"seed={SEEDS}", f"hydra.sweep.dir={sweep_dir}", "log.progress=off",
    ]  # fmt: skip
    if steps is not None:
        command.append(f"steps={steps}")
    # Both launchers named: the sweep presets default to populations, so the jobs side must ask for local.
    command.append("launcher=population" if population else "launcher=local")
    return command


def population_launcher_exists() -> bool:
    """Whether Kiln has a ``launcher=population`` preset yet."""
    return (CONFIG_DIR / "launcher" / "population.yaml").is_file()


def sweep_wall_seconds(steps: int | None, population: bool, timeout_s: float = 3600.0) -> float:
    """Run the comparison in a temporary folder and return its wall time in seconds.

    Raises:
        KilnError: If the sweep command fails (its last error line is quoted).
    """
    with tempfile.TemporaryDirectory(prefix="kiln-bench-sweep-") as tmp:
        command = sweep_command(Path(tmp) / "sweep", steps, population)
        t0 = time.perf_counter()
        proc = subprocess.run(command, cwd=tmp, capture_output=True, text=True, timeout=timeout_s)
        wall = time.perf_counter() - t0
    if proc.returncode != 0:
        last = (proc.stderr.strip().splitlines() or ["(no message)"])[-1]
        raise KilnError(f"the benchmark's sweep ({' '.join(command[1:])}) failed with exit {proc.returncode}: {last}")
    return wall
