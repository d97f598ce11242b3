"""Checking that runs can be compared, sorting them into groups, and choosing the step to compare at."""

from __future__ import annotations

import math
from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from typing import Any

from kiln.comparison.runs import Run, config_lookup
from kiln.errors import CompareInputError

TARGET_ENTROPY_KEY = "agent.temperature.target_entropy"
TARGET_ENTROPY_TAG = "temperature/target_entropy"

# Scalars are stored as float32, so a target of -0.3 reads back as -0.30000001; six significant
# digits make it equal to the -0.3 that result.json (float64) holds.
_SIGNIFICANT = 6

_LISTED = 3  # runs named in one error line before "and N more"


@dataclass(frozen=True)
class Group:
    """Runs sharing one value of the grouping key.

    Attributes:
        value: The normalised key value (hashable).
        label: The value as shown in tables and legends.
        runs: The runs, in path order.
    """

    value: Hashable
    label: str
    runs: tuple[Run, ...]


def _name_runs(runs: Sequence[Run], detail: dict[Run, str] | None = None) -> str:
    """Names the first few runs (with an optional detail each) for an error line."""
    parts = [f"{run.path}" + (f" ({detail[run]})" if detail and run in detail else "") for run in runs[:_LISTED]]
    if len(runs) > _LISTED:
        parts.append(f"and {len(runs) - _LISTED} more")
    return ", ".join(parts)


def normalise_value(value: Any) -> Hashable:
    """Makes a config value hashable and comparable: numbers rounded, lists as tuples.

    Args:
        value: A plain config value.

    Returns:
        The normalised value.
    """
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int | float):
        number = float(value)
        # NaN is not equal to itself, so as a group key it would split every run into its own group.
        return float(f"{number:.{_SIGNIFICANT}g}") if math.isfinite(number) else str(number)
    if isinstance(value, list | tuple):
        return tuple(normalise_value(item) for item in value)
    if isinstance(value, dict):
        return tuple(sorted((str(k), normalise_value(v)) for k, v in value.items()))
    return str(value)


def format_value(value: Hashable) -> str:
    """Shows a normalised value the way a config file would.

    Args:
        value: Output of :func:`normalise_value`.

    Returns:
        Short text.
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, tuple):
        return "[" + ", ".join(format_value(item) for item in value) + "]"
    return str(value)


def resolved_target_entropy(run: Run) -> Hashable | None:
    """The number the run's temperature tuner aimed at, ``minus_action_dims`` resolved.

    Taken from result.json's ``target_entropy``, else the last ``temperature/target_entropy``
    scalar, else the config when it holds a number (or list); ``minus_action_dims`` (or a run's
    older word for it) alone cannot be resolved here because −dim(A) needs the task's action space.

    Args:
        run: The run.

    Returns:
        The normalised target, or None if it cannot be resolved.
    """
    if run.result is not None and run.result.get("target_entropy") is not None:
        return normalise_value(run.result["target_entropy"])
    series = run.scalars.get(TARGET_ENTROPY_TAG)
    if series is not None and series.values.size:
        return normalise_value(float(series.values[-1]))
    found, value = config_lookup(run.config, TARGET_ENTROPY_KEY)
    if found and not isinstance(value, str | type(None)):
        return normalise_value(value)
    return None


def check_one_task(runs: Sequence[Run]) -> str | None:
    """Makes sure all runs train the same task.

    Args:
        runs: The runs.

    Returns:
        The task id, or None if no run names one.

    Raises:
        CompareInputError: If runs of different ``env.id`` are mixed.
    """
    by_task: dict[str, list[Run]] = {}
    for run in runs:
        if run.env_id is not None:
            by_task.setdefault(run.env_id, []).append(run)
    if len(by_task) > 1:
        counts = ", ".join(f"{task} ({len(members)} runs)" for task, members in sorted(by_task.items()))
        raise CompareInputError(
            f"the runs train different tasks (env.id): {counts}",
            "compare one task at a time: pass only the sweep or run directories of one task",
        )
    return next(iter(by_task), None)


def group_runs(runs: Sequence[Run], key: str) -> list[Group]:
    """Sorts runs into groups by a config key (the target entropy by its resolved value).

    Args:
        runs: The runs.
        key: Dotted config key.

    Returns:
        Groups ordered by value (numbers ascending, then other values as text).

    Raises:
        CompareInputError: If some runs lack the key, or a target entropy cannot be resolved.
    """
    values: dict[Run, Hashable] = {}
    missing: list[Run] = []
    for run in runs:
        if key == TARGET_ENTROPY_KEY:
            value = resolved_target_entropy(run)
            if value is None:
                missing.append(run)
            else:
                values[run] = value
            continue
        found, raw = config_lookup(run.config, key)
        if found:
            values[run] = normalise_value(raw)
        else:
            missing.append(run)
    if missing:
        if key == TARGET_ENTROPY_KEY:
            raise CompareInputError(
                f"cannot resolve the target entropy of {len(missing)} run(s): {_name_runs(missing)} "
                f"(no {key} number in config.yaml, no result.json, no {TARGET_ENTROPY_TAG} scalar)",
                "let those runs log temperature/target_entropy or finish, or leave them out",
            )
        raise CompareInputError(
            f"{len(missing)} of {len(runs)} runs have no '{key}' in config.yaml: {_name_runs(missing)}",
            "pass --group-by with a dotted key that every run's config.yaml has",
        )

    members: dict[Hashable, list[Run]] = {}
    for run in runs:
        members.setdefault(values[run], []).append(run)

    def order(value: Hashable) -> tuple[int, float, str]:
        if isinstance(value, float) and not isinstance(value, bool):
            return (0, value, "")
        return (1, 0.0, format_value(value))

    return [Group(value, format_value(value), tuple(members[value])) for value in sorted(members, key=order)]


def check_metric(runs: Sequence[Run], metric: str) -> None:
    """Makes sure every run logged the metric.

    Args:
        runs: The runs.
        metric: Scalar tag.

    Raises:
        CompareInputError: If some runs lack it.
    """
    missing = [run for run in runs if metric not in run.scalars or run.scalars[metric].steps.size == 0]
    if not missing:
        return
    everywhere = set.intersection(*(set(run.scalars) for run in runs)) if runs else set()
    choices = ", ".join(sorted(everywhere)[:8]) or "none"
    raise CompareInputError(
        f"{len(missing)} of {len(runs)} runs have no '{metric}' scalar: {_name_runs(missing)}",
        f"pass --metric with a tag every run logged (common tags: {choices}), or leave those runs out",
    )


def choose_step(runs: Sequence[Run], metric: str, requested: int | None) -> tuple[int, list[str]]:
    """The env step to compare at, and notes on how runs differ around it.

    Without ``requested`` it is the last step at which every run logged the metric (or, if their
    logging steps never coincide, the earliest last step among the runs).

    Args:
        runs: The runs, all holding ``metric``.
        metric: Scalar tag.
        requested: The step the user asked for, or None.

    Returns:
        ``(step, notes)``.

    Raises:
        CompareInputError: If some run did not reach ``requested`` or logged nothing before it.
    """
    notes: list[str] = []
    series = {run: run.scalars[metric] for run in runs}
    last = {run: s.last_step for run, s in series.items()}
    if requested is None:
        common = set.intersection(*(set(s.steps.tolist()) for s in series.values()))
        step = max(common) if common else min(last.values())
        if len(set(last.values())) > 1:
            notes.append(
                f"runs end at different steps ({min(last.values()):,} to {max(last.values()):,}); "
                f"compared at step {step:,}, the last step all runs reached"
            )
    else:
        step = requested
        short = [run for run in runs if last[run] < step]
        if short:
            lowest = min(last[run] for run in short)
            raise CompareInputError(
                f"{len(short)} run(s) never logged '{metric}' at step {step:,} or later: "
                f"{_name_runs(short, {run: f'last at {last[run]:,}' for run in short})}",
                f"pass --step {lowest} or lower, or leave those runs out",
            )
    early = [run for run in runs if series[run].value_at(step) is None]
    if early:
        raise CompareInputError(
            f"{len(early)} run(s) logged no '{metric}' at or before step {step:,}: {_name_runs(early)}",
            "pass a later --step, or leave out the runs that stopped before the others began logging",
        )
    inexact = [run for run in runs if series[run].value_at(step)[0] != step]  # type: ignore[index]
    if inexact:
        notes.append(
            f"{len(inexact)} run(s) logged no '{metric}' exactly at step {step:,}; "
            "their last value before it is used"
        )
    bad = [run for run in runs if not math.isfinite(series[run].value_at(step)[1])]  # type: ignore[index]
    if bad:
        raise CompareInputError(
            f"'{metric}' is not a finite number at step {step:,} in {len(bad)} run(s): {_name_runs(bad)}",
            "leave the diverged runs out or pass an earlier --step",
        )
    return step, notes
