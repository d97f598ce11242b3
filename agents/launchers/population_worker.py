"""What one population worker process does: train its members, print their reports, say how each ended.

Runs inside a loky worker of the population launcher. It gets plain data (resolved configs and run
folders), never Hydra's objects, and returns plain :class:`Outcome` records, so nothing depends on
pickling Kiln's errors.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from kiln.errors import USER_ERRORS, RunStopped
from kiln.launchers.stop_note import PopulationStop, launcher_gone
from kiln.storage.run_folder import RunFolder, RunResult
from kiln.storage.run_summary import describe_run
from kiln.training.population import train_population
from kiln.training.process_state import torch_settings


@dataclass(frozen=True)
class Outcome:
    """How one member ended: ``done`` (``value`` is its final evaluation return), ``failed`` or ``stopped``
    (``message`` and ``exit_code`` as the one-line error of a single run would give them)."""

    kind: str
    value: float | None = None
    message: str = ""
    exit_code: int = 0


def _finished(run_dir: Path) -> RunResult | None:
    """The member's result if its folder holds a finished run (it may have finished before a stop)."""
    folder = RunFolder(run_dir)
    try:
        return folder.read_result() if folder.is_finished() else None
    except (OSError, ValueError, KeyError, TypeError):  # unreadable (name too long, damaged): no result
        return None


def _all_ended(run_dirs: Sequence[Path], kind: str, message: str, exit_code: int) -> list[RunResult | Outcome]:
    """Every member ended the same way, except those whose run finished before it happened."""
    return [_finished(d) or Outcome(kind, message=message, exit_code=exit_code) for d in run_dirs]


def run_population(
    raw_configs: Sequence[dict[str, Any]], run_dirs: Sequence[Path], launcher_pid: int, note: Path
) -> list[Outcome]:
    """Train one population and report each member as ``kiln train`` reports a run.

    Args:
        raw_configs: The members' resolved run configs (they share a population key).
        run_dirs: Their run folders, one each.
        launcher_pid: The launching process, watched so that an orphaned worker stops and ends.
        note: The launcher's stop note (see :mod:`.stop`).

    Returns:
        One outcome per member, in the order given.
    """
    # Every member shares `threads` (it is not a member key), so the first member's value holds for all.
    stop = PopulationStop(launcher_pid, note)
    with torch_settings(int(raw_configs[0].get("threads", 1))), stop.held():
        try:
            if stop.requested:  # handed out after the launcher was stopped: leave its folders untouched
                raise RunStopped(f"{stop.reason} before the population started", stop.exit_code)
            ended: list[Any] = list(train_population(raw_configs, run_dirs, stop))
        except RunStopped as err:
            ended = _all_ended(run_dirs, "stopped", str(err), err.exit_code)
        except USER_ERRORS as err:  # the population as a whole (folder in use, damaged checkpoint, task)
            ended = _all_ended(run_dirs, "failed", str(err), getattr(err, "exit_code", 2))
    if launcher_gone(launcher_pid):
        # Nobody is left to report to, and a pool worker would otherwise wait for tasks for ever.
        print("kiln: stopped: the sweep's launcher is gone; this worker's unfinished members wrote a checkpoint: "
              "run the same command again to resume them", file=sys.stderr, flush=True)  # fmt: skip
        os._exit(stop.exit_code if stop.requested else 143)
    outcomes = []
    for run_dir, end in zip(run_dirs, ended):
        if isinstance(end, RunResult):
            print(describe_run(Path(run_dir), end))
            outcomes.append(Outcome("done", value=float(end.final.return_eval)))
            continue
        # A member's own error (divergence) fails that member only; the others went on.
        if not isinstance(end, Outcome):
            end = Outcome("failed", message=str(end), exit_code=getattr(end, "exit_code", 2))
        if end.kind == "failed":
            print(f"\nrun folder   {run_dir}\nfailed       {end.message}")
        outcomes.append(end)
    sys.stdout.flush()
    return outcomes
