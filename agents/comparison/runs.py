"""Finding run directories under the paths the user gives, and loading each one."""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from omegaconf import OmegaConf

from kiln.comparison.events import ScalarSeries, has_event_files, read_scalars
from kiln.errors import CompareInputError
from kiln.storage.run_folder import CONFIG, RESULT

# A sweep nests runs one level (sweep/<job>/) or two (multirun/<date>/<time>/<job>/); a little
# more costs nothing and stops a mistaken path like ~ from walking the whole disk.
_MAX_DEPTH = 4

_MISSING = object()


@dataclass(frozen=True, eq=False)  # identity equality: runs key dicts, and two runs are never "equal"
class Run:
    """One training run as the comparison sees it.

    Attributes:
        path: The run directory.
        config: The resolved run config as plain data.
        result: The contents of result.json, or None if the run has not finished.
        scalars: Tag → series from the event files.
    """

    path: Path
    config: dict[str, Any]
    result: dict[str, Any] | None
    scalars: dict[str, ScalarSeries] = field(repr=False)

    @property
    def env_id(self) -> str | None:
        """The task id from the config, else from result.json, else None."""
        found, value = config_lookup(self.config, "env.id")
        if found and value is not None:
            return str(value)
        if self.result is not None and self.result.get("env_id") is not None:
            return str(self.result["env_id"])
        return None

    @property
    def finished(self) -> bool:
        """Whether the run wrote result.json (the training loop writes it last)."""
        return self.result is not None

    @property
    def seed(self) -> Any:
        """The run's seed from its config, or None."""
        return self.config.get("seed")


def config_lookup(config: dict[str, Any], key: str) -> tuple[bool, Any]:
    """Looks up a dotted key such as ``agent.temperature.target_entropy``.

    Args:
        config: Plain nested mappings.
        key: Dotted path.

    Returns:
        ``(True, value)`` if every part of the path exists, else ``(False, None)``.
    """
    node: Any = config
    for part in key.split("."):
        if not isinstance(node, dict) or part not in node:
            return False, None
        node = node[part]
    return True, node


def is_run_dir(path: Path) -> bool:
    """Whether ``path`` is a run directory: config.yaml plus event files or result.json.

    Args:
        path: Folder to test.

    Returns:
        True for a run directory.
    """
    if not (path / CONFIG).is_file():
        return False
    return has_event_files(path) or (path / RESULT).is_file()


def _walk(root: Path, depth: int, found: list[Path], half_runs: list[Path]) -> None:
    """Collects run directories under ``root``, not descending into runs or hidden folders."""
    if is_run_dir(root):
        found.append(root)
        return
    if (root / CONFIG).is_file():
        half_runs.append(root)
    if depth >= _MAX_DEPTH:
        return
    try:
        children = sorted(child for child in root.iterdir() if child.is_dir())
    except OSError:
        return  # an unreadable folder holds no runs we could read anyway
    for child in children:
        # Hydra keeps a copy of the config in .hydra/; hidden folders are never runs.
        if child.name.startswith("."):
            continue
        _walk(child, depth + 1, found, half_runs)


def find_run_dirs(paths: Sequence[Path], skipped: list[Path] | None = None) -> list[Path]:
    """Run directories named by, or found under, the given paths.

    Args:
        paths: Sweep directories and/or run directories.
        skipped: If given, receives folders that hold config.yaml but neither event files nor
            result.json (runs that have not logged yet), so the caller can mention them.

    Returns:
        The run directories, resolved, without duplicates, in sorted order.

    Raises:
        CompareInputError: If a path does not exist, is not a folder, or holds no runs.
    """
    runs: set[Path] = set()
    for path in paths:
        if not path.exists():
            raise CompareInputError(f"{path} does not exist", "pass a sweep directory or run directories")
        if not path.is_dir():
            raise CompareInputError(f"{path} is not a directory", "pass a sweep directory or run directories")
        found: list[Path] = []
        half_runs: list[Path] = []
        _walk(path.resolve(), 0, found, half_runs)
        if not found:
            if half_runs:
                raise CompareInputError(
                    f"no finished or logging runs under {path}: {half_runs[0]} has config.yaml "
                    "but no events.out.tfevents.* file or result.json",
                    "wait until the runs have logged, or pass the directories of runs that did",
                )
            raise CompareInputError(
                f"no runs found under {path}",
                "pass a sweep directory or run directories, each run holding config.yaml "
                "and events.out.tfevents.* files",
            )
        runs.update(found)
        if skipped is not None:
            skipped.extend(half_runs)
    return sorted(runs)


def _result_series(result: dict[str, Any]) -> dict[str, ScalarSeries]:
    """Series built from result.json, for a run whose event files are gone: one point per final
    value at ``steps``, and the evaluation curve when result.json holds one."""
    steps = result.get("steps")
    final = result.get("final") or {}
    if not isinstance(steps, int | float) or not isinstance(final, dict):
        return {}
    pairs = {
        "return/eval": final.get("return_eval"),
        "actor/entropy_nats": final.get("entropy"),
        "temperature/value": final.get("alpha"),
        "temperature/target_entropy": result.get("target_entropy"),
    }
    step = np.array([int(steps)], dtype=np.int64)
    series = {
        tag: ScalarSeries(step, np.array([float(value)]))
        for tag, value in pairs.items()
        if isinstance(value, int | float) and not isinstance(value, bool)
    }
    # The training loop also keeps the evaluation curve as [[step, return], ...]; use it when intact.
    curve = result.get("eval_curve")
    try:
        points = {int(point[0]): float(point[1]) for point in curve} if isinstance(curve, list) and curve else {}
    except (TypeError, ValueError, IndexError):
        points = {}
    if points:
        ordered = sorted(points)
        series["return/eval"] = ScalarSeries(
            np.array(ordered, dtype=np.int64), np.array([points[s] for s in ordered], dtype=np.float64)
        )
    return series


def load_run(path: Path) -> Run:
    """Loads one run directory.

    Args:
        path: A run directory (see :func:`is_run_dir`).

    Returns:
        The run.

    Raises:
        CompareInputError: If config.yaml, result.json or the event files cannot be read.
    """
    config_path = path / CONFIG
    try:
        config = OmegaConf.to_container(OmegaConf.load(config_path), resolve=True)
    except Exception as error:  # OmegaConf raises several unrelated types for a bad file
        # The first line of the parser's message says where; the rest would break the one-line rule.
        first_line = next(iter(str(error).splitlines()), "")
        raise CompareInputError(
            f"cannot read {config_path} ({type(error).__name__}: {first_line})",
            "repair the file or leave that run out",
        ) from error
    if not isinstance(config, dict):
        raise CompareInputError(
            f"{config_path} is not a mapping of config keys", "repair the file or leave that run out"
        )

    result = None
    result_path = path / RESULT
    if result_path.is_file():
        try:
            result = json.loads(result_path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as error:
            raise CompareInputError(
                f"cannot read {result_path} ({type(error).__name__})", "repair the file or leave that run out"
            ) from error
        if not isinstance(result, dict):
            raise CompareInputError(f"{result_path} is not a JSON object", "repair the file or leave that run out")

    if has_event_files(path):
        try:
            scalars = read_scalars(path)
        except Exception as error:  # the reader's errors are not part of its public API
            raise CompareInputError(
                f"cannot read the event files in {path} ({type(error).__name__})",
                "leave that run out or repair its events.out.tfevents.* files",
            ) from error
    else:
        scalars = _result_series(result or {})
    return Run(path=path, config=config, result=result, scalars=scalars)


def load_runs(paths: Sequence[Path], skipped: list[Path] | None = None) -> list[Run]:
    """Finds and loads every run under ``paths``.

    Args:
        paths: Sweep directories and/or run directories.
        skipped: If given, receives folders passed over as not yet logging (see :func:`find_run_dirs`).

    Returns:
        The runs, in sorted path order.

    Raises:
        CompareInputError: See :func:`find_run_dirs` and :func:`load_run`.
    """
    return [load_run(path) for path in find_run_dirs(paths, skipped)]


def listed(paths: Sequence[Path], shown: int = 3) -> str:
    """The first few paths, comma-separated, and ``and N more`` for the rest: one readable line."""
    rest = len(paths) - shown
    return ", ".join(str(path) for path in paths[:shown]) + (f" and {rest} more" if rest > 0 else "")


def select_finished(runs: Sequence[Run], include_unfinished: bool) -> tuple[list[Run], list[str]]:
    """Leave out runs without result.json (still training, or killed), unless asked to keep them.

    A run that has not finished stops at some step of its own, so its numbers are not those of a
    finished run; it is compared only on request and then marked.

    Args:
        runs: The loaded runs.
        include_unfinished: Keep unfinished runs (they are marked in the report).

    Returns:
        The runs to compare, and a note naming the unfinished ones (empty if there are none).

    Raises:
        CompareInputError: If every run is unfinished and they are not to be included.
    """
    unfinished = [run.path for run in runs if not run.finished]
    if not unfinished:
        return list(runs), []
    if include_unfinished:
        note = f"included {len(unfinished)} unfinished run(s) (no result.json yet), marked unfinished in the run table: "
        return list(runs), [note + listed(unfinished)]
    finished = [run for run in runs if run.finished]
    if not finished:
        raise CompareInputError(
            f"every run found is unfinished (no result.json yet): {listed(unfinished)}",
            "wait until they finish, or pass --include-unfinished to compare them as they stand",
        )
    note = f"left out {len(unfinished)} unfinished run(s) (no result.json yet): {listed(unfinished)}"
    return finished, [note + "; pass --include-unfinished to include them"]
