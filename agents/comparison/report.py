"""Writing a comparison to a folder (markdown, CSV, JSON, PNG) and summarising it for the terminal."""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from kiln.comparison.grouping import TARGET_ENTROPY_KEY
from kiln.comparison.summary import Comparison, GroupSummary
from kiln.comparison.tables import NO_CI, markdown_table, text_table
from kiln.comparison.writing import write_csv, write_json
from kiln.errors import CompareInputError
from kiln.storage.run_folder import write_text_atomic
from kiln.storage.writable import check_writable, kept_only_if_complete

REPORT_FOLDER = "report"

# File names inside the report folder; only these are written, anything else there is left alone.
MARKDOWN = "report.md"
GROUPS_CSV = "groups.csv"
RUNS_CSV = "runs.csv"
CURVES_CSV = "curves.csv"
PROFILES_CSV = "profiles.csv"
NUMBERS_JSON = "comparison.json"
CURVES_PNG = "learning_curves.png"
ENTROPY_PNG = "entropy_alpha.png"
PROFILE_PNG = "performance_profile.png"
FINAL_PNG = "final_scores.png"

_OUT_FIX = "pass --out with a folder you can write to"


def input_root(paths: Sequence[Path]) -> Path:
    """The folder the compared runs are under: the one input folder, or the inputs' common folder.

    Args:
        paths: The sweep and/or run directories compared.

    Returns:
        The absolute folder.
    """
    resolved = [path.resolve() for path in paths]
    return resolved[0] if len(resolved) == 1 else Path(os.path.commonpath(resolved))


def default_out_dir(paths: Sequence[Path]) -> Path:
    """Where the report goes when no folder is given: ``report/`` in the (common) input folder.

    Args:
        paths: The sweep and/or run directories compared.

    Returns:
        The report folder.
    """
    return input_root(paths) / REPORT_FOLDER


def _shown(path: Path, root: Path | None) -> str:
    """A run's path as the report files show it: relative to ``root`` when under it.

    Relative paths keep the report readable and valid when the sweep folder is moved or shared.
    """
    if root is not None and path.resolve().is_relative_to(root.resolve()):
        return path.resolve().relative_to(root.resolve()).as_posix() or "."
    return str(path)


def check_out_dir(out_dir: Path) -> None:
    """Refuses a report folder that cannot be one, or cannot be written, before any work is done.

    Args:
        out_dir: The intended report folder.

    Raises:
        CompareInputError: If ``out_dir`` exists and is not a directory.
        KilnError: If no file can be written there (the folder is left as it was).
    """
    if out_dir.exists() and not out_dir.is_dir():
        raise CompareInputError(f"{out_dir} exists and is not a directory", "pass --out with a folder path")
    check_writable(out_dir, _OUT_FIX)


def _describe_grouping(comparison: Comparison) -> str:
    """One line saying what the groups are."""
    key = comparison.settings.group_by
    if key == TARGET_ENTROPY_KEY:
        return f"grouped by {key}, resolved (minus_action_dims counts as -dim(A))"
    return f"grouped by {key}"


def _headline(comparison: Comparison) -> str:
    """One line saying what was compared."""
    settings = comparison.settings
    task = settings.env_id or "an unnamed task"
    return (f"{len(comparison.runs)} runs of {task} in {len(comparison.groups)} groups, "
            f"{settings.metric} at step {settings.step:,}")


def _method(comparison: Comparison) -> str:
    """One line saying how the intervals were made."""
    settings = comparison.settings
    return (f"{settings.confidence:.0%} percentile bootstrap CIs over runs, {settings.n_resamples} resamples, "
            f"seed {settings.seed}; higher {settings.metric} is better")


def terminal_summary(comparison: Comparison, out_dir: Path | None = None) -> str:
    """The text printed after a comparison: what, how, the table, notes and where the files are.

    Args:
        comparison: The comparison.
        out_dir: Report folder to point at, if one was written.

    Returns:
        ASCII text (several lines).
    """
    lines = [
        f"Comparison: {_headline(comparison)}",
        _describe_grouping(comparison),
        _method(comparison),
        "",
        text_table(comparison),
    ]
    if comparison.notes:
        lines += [""] + [f"note: {note}" for note in comparison.notes]
    if out_dir is not None:
        lines += ["", f"report: {out_dir / MARKDOWN}"]
    return "\n".join(lines)


def _ci_note(group: GroupSummary) -> str:
    """The CSV note column: why a CI is missing, or that the group is the reference."""
    parts = []
    if group.n_runs < 2:
        parts.append(NO_CI)
    if group.is_best:
        parts.append("reference (best IQM)")
    elif group.improvement_ci is None and group.n_runs >= 2:
        parts.append(f"p_above_best: best group {NO_CI}")
    return "; ".join(parts)


def _group_rows(comparison: Comparison) -> list[list[Any]]:
    """groups.csv rows."""
    rows = []
    for group in comparison.groups:
        rows.append([
            comparison.settings.group_by, group.label, group.n_runs, group.iqm,
            group.iqm_ci.low if group.iqm_ci else None, group.iqm_ci.high if group.iqm_ci else None,
            group.median, group.mean, group.entropy, group.alpha, group.target_entropy, group.is_best,
            group.improvement,
            group.improvement_ci.low if group.improvement_ci else None,
            group.improvement_ci.high if group.improvement_ci else None,
            _ci_note(group),
        ])
    return rows


_GROUP_HEADER = [
    "grouped_by", "group", "runs", "iqm", "iqm_ci_low", "iqm_ci_high", "median", "mean",
    "entropy_iqm_nats", "alpha_iqm", "target_entropy", "best", "p_above_best", "p_above_best_ci_low",
    "p_above_best_ci_high", "note",
]


def _numbers(comparison: Comparison, root: Path | None) -> dict[str, Any]:
    """Every number of the comparison as nested plain data for comparison.json."""
    settings = comparison.settings
    return {
        "settings": {
            "grouped_by": settings.group_by, "metric": settings.metric, "step": settings.step,
            "env_id": settings.env_id, "confidence": settings.confidence,
            "resamples": settings.n_resamples, "resample_seed": settings.seed,
        },
        "notes": comparison.notes,
        "groups": [
            {
                "group": group.label, "runs": group.n_runs, "scores": group.scores,
                "iqm": group.iqm,
                "iqm_ci": [group.iqm_ci.low, group.iqm_ci.high] if group.iqm_ci else None,
                "median": group.median, "mean": group.mean,
                "entropy_iqm_nats": group.entropy, "alpha_iqm": group.alpha,
                "target_entropy": group.target_entropy, "best": group.is_best,
                "p_above_best": group.improvement,
                "p_above_best_ci": ([group.improvement_ci.low, group.improvement_ci.high]
                                    if group.improvement_ci else None),
                "note": _ci_note(group),
            }
            for group in comparison.groups
        ],
        "runs": [
            {
                "run": _shown(row.path, root), "group": row.group, "seed": row.seed, "step": row.logged_step,
                "score": row.score, "entropy_nats": row.entropy, "alpha": row.alpha,
                "target_entropy": row.target_entropy, "finished": row.finished,
            }
            for row in comparison.runs
        ],
        "curves": [
            {
                "group": curve.group, "tag": curve.tag, "runs": curve.n_runs,
                "interpolated": curve.interpolated, "steps": curve.steps, "iqm": curve.center,
                "ci_low": curve.low, "ci_high": curve.high,
            }
            for curve in comparison.curves
        ],
        "profiles": [
            {
                "group": profile.group, "levels": profile.thresholds, "fraction_above": profile.fraction,
                "ci_low": profile.low, "ci_high": profile.high,
            }
            for profile in comparison.profiles
        ],
    }


def _markdown(comparison: Comparison, root: Path | None) -> str:
    """report.md: summary, table, figures, runs, and how to read it."""
    settings = comparison.settings
    percent = f"{settings.confidence:.0%}"
    lines = [
        f"# Comparison: {settings.env_id or 'unnamed task'}",
        "",
        f"- {_headline(comparison)}",
        f"- {_describe_grouping(comparison)}",
        f"- {_method(comparison)}",
        f"- best group by IQM: **{comparison.best.label}**",
    ]
    if comparison.notes:
        lines += ["", "**Notes**", ""] + [f"- {note}" for note in comparison.notes]
    lines += [
        "", f"## Groups at step {settings.step:,}", "", markdown_table(comparison), "",
        f"IQM: mean of the middle 50 % of runs. Entropy and α: IQM over runs at the same step. "
        f"P(> best): probability that a run of the group scores above a run of the best group "
        f"(ties count one half); 0.5 means no difference. {NO_CI}: a single run gives no interval.",
        "", f"![final scores]({FINAL_PNG})",
        "", "## Learning curves", "", f"![learning curves]({CURVES_PNG})",
        "", "## Entropy and temperature", "", f"![entropy and alpha]({ENTROPY_PNG})",
        "", "## Performance profile", "",
        f"Fraction of each group's runs scoring above a level τ; a curve further right is better. "
        f"Band: {percent} CI.",
        "", f"![performance profile]({PROFILE_PNG})",
        "", "## Runs", "",
        *([f"Run folders relative to the compared folder `{root.name}/`.", ""] if root is not None else []),
        "| run | group | seed | step | score | entropy (nats) | α |",
        "|---|---|---|---|---|---|---|",
    ]
    for row in comparison.runs:
        mark = "" if row.finished else " (unfinished)"
        lines.append(f"| {_shown(row.path, root)}{mark} | {row.group} | {row.seed} | {row.logged_step:,} | "
                     f"{row.score:.6g} | {row.entropy:.4g} | {row.alpha:.4g} |")
    lines += [
        "", "## Files", "",
        f"{GROUPS_CSV}, {RUNS_CSV}, {CURVES_CSV}, {PROFILES_CSV}: the numbers above in full precision; "
        f"{NUMBERS_JSON}: all of them together with the settings.",
        "",
    ]
    return "\n".join(lines)


def write_report(comparison: Comparison, out_dir: Path, runs_root: Path | None = None) -> list[Path]:
    """Writes the report files into ``out_dir``, each atomically; other files there are kept.

    Args:
        comparison: The comparison.
        out_dir: Report folder (created if missing).
        runs_root: The compared folder (see :func:`input_root`); run paths in the files are shown
            relative to it. None shows them as loaded.

    Returns:
        The files written.

    Raises:
        CompareInputError: If ``out_dir`` exists as a file.
        KilnError: If a file cannot be written (a folder this call created is removed again).
    """
    from kiln.comparison import (
        plots,  # matplotlib is slow to import; only a written report needs it
    )

    check_out_dir(out_dir)
    # A report folder this call created goes again if a write fails; files of an earlier report stay
    # whole (each write is atomic), and the markdown that ties them together is written last.
    with kept_only_if_complete(out_dir, "the report", _OUT_FIX):
        written = []

        def target(name: str) -> Path:
            written.append(out_dir / name)
            return out_dir / name

        write_csv(target(GROUPS_CSV), _GROUP_HEADER, _group_rows(comparison))
        write_csv(
            target(RUNS_CSV),
            ["run", "group", "seed", "step", "score", "entropy_nats", "alpha", "target_entropy", "finished"],
            [[_shown(row.path, runs_root), row.group, row.seed, row.logged_step, row.score, row.entropy,
              row.alpha, row.target_entropy, row.finished] for row in comparison.runs],
        )
        write_csv(
            target(CURVES_CSV),
            ["group", "tag", "step", "iqm", "ci_low", "ci_high", "runs", "interpolated"],
            [[curve.group, curve.tag, int(step), float(center), float(low), float(high), curve.n_runs,
              curve.interpolated]
             for curve in comparison.curves
             for step, center, low, high in zip(curve.steps, curve.center, curve.low, curve.high, strict=True)],
        )
        write_csv(
            target(PROFILES_CSV),
            ["group", "level", "fraction_above", "ci_low", "ci_high"],
            [[profile.group, float(level), float(fraction), float(low), float(high)]
             for profile in comparison.profiles
             for level, fraction, low, high in zip(profile.thresholds, profile.fraction, profile.low,
                                                    profile.high, strict=True)],
        )
        write_json(target(NUMBERS_JSON), _numbers(comparison, runs_root))
        plots.save_png(plots.learning_curves(comparison), target(CURVES_PNG))
        plots.save_png(plots.entropy_and_alpha(comparison), target(ENTROPY_PNG))
        plots.save_png(plots.performance_profiles(comparison), target(PROFILE_PNG))
        plots.save_png(plots.final_scores(comparison), target(FINAL_PNG))
        # The markdown goes last so that it never points at figures that were not written.
        write_text_atomic(target(MARKDOWN), _markdown(comparison, runs_root))
    return written
