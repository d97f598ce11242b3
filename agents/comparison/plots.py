"""Figures of a comparison, drawn on plain matplotlib Figures (no pyplot state, no display needed).

A ``Figure`` made directly saves through matplotlib's Agg renderer whatever backend the process
has chosen, so Kiln never selects one: a caller's own plotting is left as it was.
"""

from __future__ import annotations

import io
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib import rc_context
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import EngFormatter, LogFormatter

from kiln.comparison.summary import ALPHA_TAG, ENTROPY_TAG, Comparison
from kiln.comparison.tables import NO_CI
from kiln.storage.run_folder import write_bytes_atomic

_STYLE = {
    "figure.dpi": 120,
    "savefig.dpi": 120,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.alpha": 0.25,
    "grid.linewidth": 0.6,
    "axes.titlesize": 11,
    "axes.labelsize": 10,
    "legend.fontsize": 9,
    "legend.title_fontsize": 9,
    "legend.frameon": False,
}
_BAND_ALPHA = 0.2
_PROFILE_BAND_ALPHA = 0.12  # profile bands are wide steps that overlap; fainter keeps the lines readable



class _PlainLogFormatter(LogFormatter):
    """Log-axis labels as plain numbers (0.05, 0.1) instead of powers of ten; matplotlib still
    decides which ticks get a label."""

    def __call__(self, x: float, pos: int | None = None) -> str:
        return f"{x:g}" if super().__call__(x, pos) else ""


AXIS_LABELS = {
    "return/eval": "evaluation return (sum of rewards per episode)",
    "return/train": "training return (sum of rewards per episode)",
    "return/eval_std": "std of evaluation return across episodes",
    ENTROPY_TAG: "policy entropy (nats)",
    ALPHA_TAG: "temperature α (log scale)",
}


def axis_label(tag: str) -> str:
    """Axis label with units for a scalar tag (the tag itself when Kiln has no label for it).

    Args:
        tag: Scalar tag.

    Returns:
        Label text.
    """
    return AXIS_LABELS.get(tag, tag)


@contextmanager
def _style() -> Iterator[None]:
    """Kiln's plot style, applied only while drawing."""
    with rc_context(_STYLE):
        yield


def _colours(comparison: Comparison) -> dict[str, tuple[float, float, float, float]]:
    """One fixed colour per group so a group looks the same in every figure."""
    palette = matplotlib.colormaps["tab10"]
    return {group.label: palette(index % 10) for index, group in enumerate(comparison.groups)}


def _legend_title(comparison: Comparison) -> str:
    """Legend title naming the grouped key."""
    key = comparison.settings.group_by
    return f"{key} (resolved)" if key.endswith("target_entropy") else key


def _legend_below(figure: Figure, comparison: Comparison, axes: Axes) -> None:
    """One legend under the plot, in a row: the key's name is long, and below it takes no plot width."""
    handles, labels = axes.get_legend_handles_labels()
    figure.legend(handles, labels, title=_legend_title(comparison), loc="outside lower center",
                  ncols=min(len(labels), 5))


def _task(comparison: Comparison) -> str:
    """Task name for titles."""
    return comparison.settings.env_id or "unknown task"


def _draw_curves(axes: Axes, comparison: Comparison, tag: str, colours: dict) -> bool:
    """Draws the IQM curve and CI band of every group for ``tag``; False if none was logged."""
    drawn = False
    for curve in (c for c in comparison.curves if c.tag == tag):
        colour = colours[curve.group]
        axes.plot(curve.steps, curve.center, color=colour, linewidth=1.6,
                  marker="o" if curve.steps.size == 1 else None,  # a lone point draws no line
                  label=f"{curve.group}  (n={curve.n_runs})")
        if np.isfinite(curve.low).any():
            axes.fill_between(curve.steps, curve.low, curve.high, color=colour, alpha=_BAND_ALPHA, linewidth=0)
        drawn = True
    if not drawn:
        axes.text(0.5, 0.5, f"{tag} was not logged by these runs", transform=axes.transAxes, ha="center",
                  va="center", color="0.4")
    axes.xaxis.set_major_formatter(EngFormatter(sep=""))
    axes.set_xlabel("env steps")
    axes.set_ylabel(axis_label(tag))
    return drawn


def learning_curves(comparison: Comparison) -> Figure:
    """The compared metric against env steps: IQM over runs per group with a CI band.

    Args:
        comparison: The comparison.

    Returns:
        The figure.
    """
    settings = comparison.settings
    colours = _colours(comparison)
    with _style():
        figure = Figure(figsize=(8, 5.2), layout="constrained")
        axes = figure.add_subplot()
        _draw_curves(axes, comparison, settings.metric, colours)
        axes.axvline(settings.step, color="0.4", linestyle=":", linewidth=1, label="step compared")
        axes.set_title(f"{_task(comparison)}: {settings.metric}, IQM over runs with {settings.confidence:.0%} CI")
        _legend_below(figure, comparison, axes)
    return figure


def entropy_and_alpha(comparison: Comparison) -> Figure:
    """Policy entropy (with each group's target) and temperature α against env steps.

    Args:
        comparison: The comparison.

    Returns:
        The figure (two panels).
    """
    colours = _colours(comparison)
    with _style():
        figure = Figure(figsize=(12, 5.2), layout="constrained")
        left, right = figure.subplots(1, 2)
        _draw_curves(left, comparison, ENTROPY_TAG, colours)
        for group in comparison.groups:
            if group.target_entropy is not None:
                left.axhline(group.target_entropy, color=colours[group.label], linestyle="--", linewidth=1)
        left.plot([], [], color="0.3", linestyle="--", linewidth=1, label="target entropy")
        left.set_title("policy entropy (dashed: target)")
        _legend_below(figure, comparison, left)
        if _draw_curves(right, comparison, ALPHA_TAG, colours):
            right.set_yscale("log")  # α moves over orders of magnitude while it tunes
            right.yaxis.set_major_formatter(_PlainLogFormatter())
            right.yaxis.set_minor_formatter(_PlainLogFormatter(minor_thresholds=(2, 0.5)))
        right.set_title("temperature α")
        figure.suptitle(f"{_task(comparison)}: IQM over runs with {comparison.settings.confidence:.0%} CI",
                        fontsize=11)
    return figure


def performance_profiles(comparison: Comparison) -> Figure:
    """Fraction of runs scoring above each level, per group, with a CI band.

    Args:
        comparison: The comparison.

    Returns:
        The figure.
    """
    settings = comparison.settings
    colours = _colours(comparison)
    with _style():
        figure = Figure(figsize=(8, 5.2), layout="constrained")
        axes = figure.add_subplot()
        for profile in comparison.profiles:
            colour = colours[profile.group]
            axes.step(profile.thresholds, profile.fraction, where="post", color=colour, linewidth=1.6,
                      label=profile.group)
            if np.isfinite(profile.low).any():
                axes.fill_between(profile.thresholds, profile.low, profile.high, step="post", color=colour,
                                  alpha=_PROFILE_BAND_ALPHA, linewidth=0)
        axes.set_ylim(-0.02, 1.02)
        axes.set_xlabel(f"{axis_label(settings.metric)} at step {settings.step:,}  (level τ)")
        axes.set_ylabel("fraction of runs scoring above τ")
        axes.set_title(f"{_task(comparison)}: performance profile with {settings.confidence:.0%} CI")
        _legend_below(figure, comparison, axes)
    return figure


def final_scores(comparison: Comparison) -> Figure:
    """Per group: every run's score with the IQM and its CI; and P(group > best) with its CI.

    Args:
        comparison: The comparison.

    Returns:
        The figure (two panels, groups on the vertical axis).
    """
    settings = comparison.settings
    colours = _colours(comparison)
    groups = comparison.groups
    positions = np.arange(len(groups))[::-1]  # first group on top
    with _style():
        figure = Figure(figsize=(11, 1.2 + 0.55 * len(groups) + 1.6), layout="constrained")
        left, right = figure.subplots(1, 2, sharey=True)
        for position, group in zip(positions, groups, strict=True):
            colour = colours[group.label]
            left.scatter(group.scores, np.full(group.scores.shape, position + 0.18), s=14, color=colour,
                         alpha=0.6, linewidth=0)
            if group.iqm_ci is not None:
                left.plot([group.iqm_ci.low, group.iqm_ci.high], [position, position], color=colour, linewidth=5,
                          alpha=0.45, solid_capstyle="butt")
            left.plot([group.iqm], [position], marker="|", markersize=14, markeredgewidth=2.5, color=colour)
            if group.iqm_ci is None:
                left.annotate(NO_CI, (group.iqm, position), xytext=(8, -3), textcoords="offset points",
                              fontsize=8, color="0.35", va="top")
            if not group.is_best:
                if group.improvement_ci is not None:
                    right.plot([group.improvement_ci.low, group.improvement_ci.high], [position, position],
                               color=colour, linewidth=5, alpha=0.45, solid_capstyle="butt")
                right.plot([group.improvement], [position], marker="|", markersize=14, markeredgewidth=2.5,
                           color=colour)
                if group.improvement_ci is None:
                    right.annotate("no CI (a group has n=1)", (group.improvement, position), xytext=(8, -3),
                                   textcoords="offset points", fontsize=8, color="0.35", va="top")
            else:
                right.text(0.52, position, "best group (reference)", ha="left", va="center", fontsize=9,
                           color="0.35")
        left.set_yticks(positions, [f"{group.label}  (n={group.n_runs})" for group in groups])
        left.set_ylabel(_legend_title(comparison))
        left.set_xlabel(f"{axis_label(settings.metric)} at step {settings.step:,}")
        left.set_title(f"IQM (tick) with {settings.confidence:.0%} CI (bar); dots: individual runs")
        right.axvline(0.5, color="0.4", linestyle=":", linewidth=1)
        right.set_xlim(-0.02, 1.02)
        right.set_xlabel(f"P(a run of the group scores above a run of group {comparison.best.label})")
        right.set_title(f"probability of improvement with {settings.confidence:.0%} CI")
        left.set_ylim(-0.7, len(groups) - 0.3)
        figure.suptitle(f"{_task(comparison)}: {settings.metric} at step {settings.step:,}", fontsize=11)
    return figure


def save_png(figure: Figure, path: Path) -> None:
    """Saves a figure as PNG atomically.

    Args:
        figure: The figure.
        path: Destination file.
    """
    buffer = io.BytesIO()
    with _style():
        figure.savefig(buffer, format="png")
    write_bytes_atomic(path, buffer.getvalue())
