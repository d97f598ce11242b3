"""Every number of a comparison: per-group table, learning curves, performance profiles and the
probability of improvement over the best group, each with a percentile bootstrap CI over runs.

Each interval draws from its own ``np.random.default_rng(seed)``, so any single number in the report
can be reproduced by ``scipy.stats.bootstrap`` with that seed and nothing else.
"""

from __future__ import annotations

import math
from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from kiln.comparison.bootstrap import (
    Interval,
    bootstrap_distribution,
    iqm_interval,
    percentile_interval,
)
from kiln.comparison.grouping import (
    TARGET_ENTROPY_KEY,
    Group,
    check_metric,
    check_one_task,
    choose_step,
    group_runs,
    resolved_target_entropy,
)
from kiln.comparison.runs import Run
from kiln.comparison.stats import iqm, performance_profile, probability_of_improvement

ENTROPY_TAG = "actor/entropy_nats"
ALPHA_TAG = "temperature/value"

# Curves are drawn, not read point by point: 200 points show the shape and keep the bootstrap of a
# long run (thousands of logged steps × runs × resamples) small.
_CURVE_POINTS = 200
_PROFILE_POINTS = 201


@dataclass(frozen=True)
class Settings:
    """What was compared and how.

    Attributes:
        group_by: Dotted config key the runs were grouped by.
        metric: Scalar tag compared (higher is better).
        step: Env step compared at.
        env_id: The task, or None if no run names one.
        confidence: Two-sided CI coverage.
        n_resamples: Bootstrap resamples per interval.
        seed: Seed of every bootstrap Generator.
    """

    group_by: str
    metric: str
    step: int
    env_id: str | None
    confidence: float
    n_resamples: int
    seed: int


@dataclass(frozen=True)
class RunRow:
    """One run's numbers at the compared step.

    Attributes:
        path: Run directory.
        group: Label of its group.
        seed: The run's config seed (None if absent).
        logged_step: Step of the metric value used (≤ the compared step).
        score: The metric value.
        entropy: Policy entropy (nats) at the step, NaN if not logged.
        alpha: Temperature α at the step, NaN if not logged.
        target_entropy: Resolved target entropy, None if unknown.
        finished: Whether the run wrote result.json (unfinished runs are compared only on request).
    """

    path: Path
    group: str
    seed: object
    logged_step: int
    score: float
    entropy: float
    alpha: float
    target_entropy: Hashable | None
    finished: bool = True


@dataclass(frozen=True)
class GroupSummary:
    """The table row of one group.

    Attributes:
        label: The group's key value as text.
        n_runs: Number of runs.
        scores: The runs' metric values at the step.
        iqm: Interquartile mean of ``scores``.
        iqm_ci: Its bootstrap CI, None when a group has one run.
        median: Median of ``scores``.
        mean: Mean of ``scores``.
        entropy: IQM over runs of the policy entropy at the step (NaN if not logged).
        alpha: IQM over runs of α at the step (NaN if not logged).
        target_entropy: The resolved target entropy if all runs share one number, else None.
        is_best: Whether this is the group with the highest IQM (the reference).
        improvement: P(a run of this group scores above a run of the best group).
        improvement_ci: Its bootstrap CI, None for the best group or when a side has one run.
    """

    label: str
    n_runs: int
    scores: np.ndarray
    iqm: float
    iqm_ci: Interval | None
    median: float
    mean: float
    entropy: float
    alpha: float
    target_entropy: float | None
    is_best: bool
    improvement: float
    improvement_ci: Interval | None


@dataclass(frozen=True)
class Curve:
    """IQM over a group's runs of one scalar against env steps, with a pointwise CI band.

    Attributes:
        group: Group label.
        tag: Scalar tag.
        steps: Env steps.
        center: IQM at each step.
        low: Lower CI end at each step (NaN when the group has one run).
        high: Upper CI end at each step (NaN when the group has one run).
        n_runs: Runs that logged the tag.
        interpolated: True if the runs' steps differ and values were interpolated onto shared steps.
    """

    group: str
    tag: str
    steps: np.ndarray
    center: np.ndarray
    low: np.ndarray
    high: np.ndarray
    n_runs: int
    interpolated: bool


@dataclass(frozen=True)
class Profile:
    """Performance profile of one group: fraction of runs scoring above each level.

    Attributes:
        group: Group label.
        thresholds: Score levels τ (shared by all groups).
        fraction: Fraction of the group's runs with score > τ.
        low: Lower CI end (NaN when the group has one run).
        high: Upper CI end (NaN when the group has one run).
    """

    group: str
    thresholds: np.ndarray
    fraction: np.ndarray
    low: np.ndarray
    high: np.ndarray


@dataclass(frozen=True)
class Comparison:
    """Everything the report shows.

    Attributes:
        settings: What was compared and how.
        groups: One summary per group, in group order.
        runs: One row per run.
        curves: Curves of the metric, the entropy and α per group (where logged).
        profiles: One performance profile per group.
        notes: Plain-language remarks about the input (unequal lengths, interpolation, ...).
    """

    settings: Settings
    groups: list[GroupSummary]
    runs: list[RunRow]
    curves: list[Curve]
    profiles: list[Profile]
    notes: list[str]

    @property
    def best(self) -> GroupSummary:
        """The reference group: highest IQM."""
        return next(group for group in self.groups if group.is_best)


def _value_at(run: Run, tag: str, step: int) -> float:
    """The run's last value of ``tag`` at or before ``step``; NaN if none."""
    series = run.scalars.get(tag)
    found = series.value_at(step) if series is not None else None
    return found[1] if found is not None else math.nan


def _iqm_of_finite(values: Sequence[float]) -> float:
    """IQM of the finite values; NaN if there are none."""
    finite = [value for value in values if math.isfinite(value)]
    return float(iqm(finite)) if finite else math.nan


def _aligned(runs: Sequence[Run], tag: str) -> tuple[np.ndarray, np.ndarray, bool] | None:
    """The runs' values of ``tag`` on shared steps as a (runs, steps) matrix.

    Shared steps are the steps every run logged; if fewer than two coincide (different logging
    cadences), the values are interpolated linearly onto all steps within the span every run covers.
    """
    series = [run.scalars[tag] for run in runs]
    common = np.array(sorted(set.intersection(*(set(s.steps.tolist()) for s in series))), dtype=np.int64)
    interpolated = False
    if common.size >= 2 or any(s.steps.size < 2 for s in series):
        steps = common
    else:
        start = max(int(s.steps[0]) for s in series)
        stop = min(int(s.steps[-1]) for s in series)
        union = np.unique(np.concatenate([s.steps for s in series]))
        steps = union[(union >= start) & (union <= stop)]
        interpolated = True
    if steps.size == 0:
        return None
    if steps.size > _CURVE_POINTS:
        keep = np.unique(np.linspace(0, steps.size - 1, _CURVE_POINTS).round().astype(int))
        steps = steps[keep]
    matrix = np.stack([np.interp(steps, s.steps, s.values) for s in series])
    return steps, matrix, interpolated


def _curve(group: Group, tag: str, settings: Settings) -> Curve | None:
    """IQM curve with a CI band for the runs of ``group`` that logged ``tag``."""
    runs = [run for run in group.runs if tag in run.scalars and run.scalars[tag].steps.size]
    if not runs:
        return None
    with_history = [run for run in runs if run.scalars[tag].steps.size >= 2]
    if with_history:
        # A run known only from result.json has a single point; it would cut everyone's curve to it.
        runs = with_history
    aligned = _aligned(runs, tag)
    if aligned is None:
        return None
    steps, matrix, interpolated = aligned
    center = iqm(matrix, axis=0)
    if len(runs) < 2:
        low = high = np.full(steps.shape, np.nan)
    else:
        distribution = bootstrap_distribution(
            [matrix],
            lambda resampled: iqm(resampled, axis=1),
            n_resamples=settings.n_resamples,
            rng=np.random.default_rng(settings.seed),
        )
        low, high = percentile_interval(distribution, settings.confidence)
    return Curve(group.label, tag, steps, center, low, high, len(runs), interpolated)


def _profile(label: str, scores: np.ndarray, thresholds: np.ndarray, settings: Settings) -> Profile:
    """Performance profile of one group with a CI band."""
    fraction = performance_profile(scores, thresholds)
    if scores.size < 2:
        low = high = np.full(thresholds.shape, np.nan)
    else:
        distribution = bootstrap_distribution(
            [scores],
            lambda resampled: performance_profile(resampled, thresholds, axis=1),
            n_resamples=settings.n_resamples,
            rng=np.random.default_rng(settings.seed),
        )
        low, high = percentile_interval(distribution, settings.confidence)
    return Profile(label, thresholds, fraction, low, high)


def _thresholds(scores: np.ndarray) -> np.ndarray:
    """Score levels: an even grid spanning every run's score with a margin, plus the scores
    themselves, so that each drop of the profile sits exactly at a run's score."""
    low, high = float(scores.min()), float(scores.max())
    margin = 0.05 * (high - low) if high > low else max(1.0, 0.05 * abs(high))
    return np.union1d(np.linspace(low - margin, high + margin, _PROFILE_POINTS), scores)


def summarise(
    runs: Sequence[Run],
    *,
    group_by: str = TARGET_ENTROPY_KEY,
    metric: str = "return/eval",
    step: int | None = None,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
    notes: Sequence[str] = (),
) -> Comparison:
    """Computes every number of the comparison.

    Args:
        runs: The runs (at least one), all of one task.
        group_by: Dotted config key to group by; the target entropy is grouped by resolved value.
        metric: Scalar tag to compare; higher is taken as better.
        step: Env step to compare at; None for the last step all runs reached.
        confidence: Two-sided CI coverage.
        n_resamples: Bootstrap resamples per interval.
        seed: Seed of every bootstrap Generator.
        notes: Remarks from earlier stages (e.g. folders skipped) to keep with the report.

    Returns:
        The comparison.

    Raises:
        CompareInputError: If the runs cannot be compared (see :mod:`kiln.comparison.grouping`).
        ValueError: If ``runs`` is empty or ``n_resamples``/``confidence`` are out of range.
    """
    if not runs:
        raise ValueError("no runs to compare")
    if n_resamples < 1 or not 0.0 < confidence < 1.0:
        raise ValueError("n_resamples must be ≥ 1 and confidence in (0, 1)")
    env_id = check_one_task(runs)
    groups = group_runs(runs, group_by)
    check_metric(runs, metric)
    chosen, step_notes = choose_step(runs, metric, step)
    notes = [*notes, *step_notes]
    settings = Settings(group_by, metric, chosen, env_id, confidence, n_resamples, seed)

    rows: list[RunRow] = []
    for group in groups:
        for run in group.runs:
            logged_step, score = run.scalars[metric].value_at(chosen)  # type: ignore[misc]
            rows.append(
                RunRow(
                    path=run.path,
                    group=group.label,
                    seed=run.seed,
                    logged_step=logged_step,
                    score=score,
                    entropy=_value_at(run, ENTROPY_TAG, chosen),
                    alpha=_value_at(run, ALPHA_TAG, chosen),
                    target_entropy=resolved_target_entropy(run),
                    finished=run.finished,
                )
            )

    scores = {group.label: np.array([row.score for row in rows if row.group == group.label]) for group in groups}
    centers = {label: float(iqm(values)) for label, values in scores.items()}
    # Highest IQM is the reference; on a tie the first group in key order wins, so it is stable.
    best_label = max(centers, key=lambda label: (centers[label], -list(centers).index(label)))
    best_scores = scores[best_label]

    summaries: list[GroupSummary] = []
    for group in groups:
        values = scores[group.label]
        members = [row for row in rows if row.group == group.label]
        targets = {row.target_entropy for row in members}
        target = next(iter(targets)) if len(targets) == 1 else None
        iqm_ci = None
        if values.size >= 2:
            iqm_ci = iqm_interval([values], confidence=confidence, n_resamples=n_resamples,
                                  rng=np.random.default_rng(seed))
        is_best = group.label == best_label
        improvement = float(probability_of_improvement(values, best_scores))
        improvement_ci = None
        if not is_best and values.size >= 2 and best_scores.size >= 2:
            distribution = bootstrap_distribution(
                [values, best_scores],
                probability_of_improvement,
                n_resamples=n_resamples,
                rng=np.random.default_rng(seed),
            )
            low, high = percentile_interval(distribution, confidence)
            improvement_ci = Interval(float(low), float(high), confidence)
        summaries.append(
            GroupSummary(
                label=group.label,
                n_runs=int(values.size),
                scores=values,
                iqm=centers[group.label],
                iqm_ci=iqm_ci,
                median=float(np.median(values)),
                mean=float(np.mean(values)),
                entropy=_iqm_of_finite([row.entropy for row in members]),
                alpha=_iqm_of_finite([row.alpha for row in members]),
                target_entropy=target if isinstance(target, float) else None,
                is_best=is_best,
                improvement=improvement,
                improvement_ci=improvement_ci,
            )
        )

    singles = [summary.label for summary in summaries if summary.n_runs == 1]
    if singles:
        notes.append(
            f"group(s) {', '.join(singles)} have a single run: no confidence interval is possible; "
            "add seeds to those groups"
        )

    curves: list[Curve] = []
    for tag in dict.fromkeys((metric, ENTROPY_TAG, ALPHA_TAG)):  # metric may be one of them
        for group in groups:
            curve = _curve(group, tag, settings)
            if curve is not None:
                curves.append(curve)
                longest = max(run.scalars[tag].last_step for run in group.runs if tag in run.scalars)
                if tag == metric and curve.steps[-1] < longest:
                    notes.append(f"'{tag}' curve of group {group.label} stops at step {int(curve.steps[-1]):,}, "
                                 f"the last step all its runs logged (its longest run reached {longest:,})")
                if curve.interpolated:
                    notes.append(f"'{tag}' of group {group.label}: runs logged at different steps; "
                                 "values interpolated onto shared steps")

    thresholds = _thresholds(np.concatenate(list(scores.values())))
    profiles = [_profile(label, values, thresholds, settings) for label, values in scores.items()]
    return Comparison(settings, summaries, rows, curves, profiles, notes)
