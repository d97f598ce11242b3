"""Every number of a comparison, computed in process on invented runs and checked against SciPy
(trim_mean, bootstrap with the same seed, mannwhitneyu) and hand arithmetic; the statistics are those
of Agarwal et al. 2021 (NeurIPS): IQM, stratified percentile bootstrap CIs, performance profiles and
the probability of improvement."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from kiln.comparison.events import ScalarSeries
from kiln.comparison.runs import Run
from kiln.comparison.summary import summarise

RESAMPLES, SEED = 400, 5
STEPS = np.array([0, 500, 1000])
# Invented finals of two groups (target entropy -2 and -0.5), four seeds each.
FINALS = {-2.0: [-150.0, -170.0, -140.0, -400.0], -0.5: [-210.0, -190.0, -230.0, -205.0]}


def _run(path: Path, seed: int, target: float, final: float, *, steps=STEPS, entropy: float | None = -1.0) -> Run:
    curve = final - 100.0 * (1 - steps / steps[-1])  # rises by 100 to the final value
    scalars = {
        "return/eval": ScalarSeries(steps, curve),
        "temperature/value": ScalarSeries(steps, np.full(steps.shape, 0.1)),
        "temperature/target_entropy": ScalarSeries(steps, np.full(steps.shape, target)),
    }
    if entropy is not None:
        scalars["actor/entropy_nats"] = ScalarSeries(steps, np.full(steps.shape, entropy))
    config = {"seed": seed, "env": {"id": "Pendulum-v1"}, "agent": {"temperature": {"target_entropy": target}}}
    return Run(path=path / f"{target}_{seed}", config=config, result={"env_id": "Pendulum-v1"}, scalars=scalars)


def _runs(tmp_path: Path) -> list[Run]:
    return [_run(tmp_path, seed, target, final) for target, finals in FINALS.items() for seed, final in enumerate(finals)]


def _scipy_iqm(sample, axis):
    return stats.trim_mean(sample, 0.25, axis=axis)


def test_group_table_against_scipy(tmp_path: Path) -> None:
    comparison = summarise(_runs(tmp_path), n_resamples=RESAMPLES, seed=SEED)
    assert comparison.settings.step == 1000 and comparison.settings.env_id == "Pendulum-v1"
    by_label = {group.label: group for group in comparison.groups}
    assert list(by_label) == ["-2", "-0.5"]  # numbers ascending
    for target, finals in FINALS.items():
        group = by_label[f"{target:g}"]
        x = np.array(finals)
        # Source: scipy.stats.trim_mean(x, 0.25) (the IQM), numpy median and mean.
        assert group.iqm == pytest.approx(stats.trim_mean(x, 0.25), rel=1e-12)
        assert (group.median, group.mean) == (pytest.approx(np.median(x)), pytest.approx(np.mean(x)))
        # Source: scipy.stats.bootstrap(method="percentile") with a fresh Generator of the same seed.
        ci = stats.bootstrap((x,), _scipy_iqm, method="percentile", n_resamples=RESAMPLES, vectorized=True,
                             rng=np.random.default_rng(SEED)).confidence_interval  # fmt: skip
        assert (group.iqm_ci.low, group.iqm_ci.high) == pytest.approx((ci.low, ci.high), rel=1e-12)
        assert group.target_entropy == target and group.entropy == -1.0 and group.alpha == pytest.approx(0.1)
    # Hand arithmetic: IQM of -2's finals is mean(-170, -150) = -160, of -0.5's mean(-210, -205) = -207.5,
    # so -2 is the best (the reference), though one of its seeds failed (-400).
    best, other = by_label["-2"], by_label["-0.5"]
    assert best.is_best and not other.is_best and comparison.best is best
    assert best.improvement == 0.5 and best.improvement_ci is None  # against itself: ties count one half
    # Source: scipy.stats.mannwhitneyu(x, y).statistic / (n·m); by hand: of the 16 pairs only the four
    # against -400 are wins, so 4/16 = 0.25.
    x, y = np.array(FINALS[-0.5]), np.array(FINALS[-2.0])
    assert other.improvement == pytest.approx(stats.mannwhitneyu(x, y).statistic / 16, rel=1e-15) == 0.25
    two_sample = stats.bootstrap(
        (x, y), lambda a, b, axis: stats.mannwhitneyu(a, b, axis=axis).statistic / (a.shape[axis] * b.shape[axis]),
        method="percentile", n_resamples=RESAMPLES, vectorized=True, rng=np.random.default_rng(SEED),
    ).confidence_interval
    assert (other.improvement_ci.low, other.improvement_ci.high) == pytest.approx((two_sample.low, two_sample.high), abs=1e-12)


def test_run_rows_and_profiles_by_hand(tmp_path: Path) -> None:
    comparison = summarise(_runs(tmp_path), n_resamples=50, seed=0)
    rows = {(row.group, row.seed): row for row in comparison.runs}
    assert len(rows) == 8 and rows[("-2", 3)].score == -400.0 and rows[("-2", 3)].logged_step == 1000
    assert rows[("-0.5", 0)].target_entropy == -0.5 and rows[("-0.5", 0)].finished
    profile = next(p for p in comparison.profiles if p.group == "-0.5")
    levels = profile.thresholds
    # Hand count of -0.5's finals (-230, -210, -205, -190) strictly above τ; every final is a level.
    for level, fraction in ((-230.0, 0.75), (-210.0, 0.5), (-190.0, 0.0)):
        assert profile.fraction[np.flatnonzero(levels == level)[0]] == fraction
    # The grid spans all eight finals with a 5 % margin: (−140 − (−400)) · 0.05 = 13 on each side.
    assert levels[0] == pytest.approx(-413.0) and levels[-1] == pytest.approx(-127.0)


def test_curves_are_iqm_over_runs_with_a_bootstrap_band(tmp_path: Path) -> None:
    comparison = summarise(_runs(tmp_path), n_resamples=RESAMPLES, seed=SEED)
    curve = next(c for c in comparison.curves if c.group == "-2" and c.tag == "return/eval")
    assert curve.steps.tolist() == [0, 500, 1000] and curve.n_runs == 4 and not curve.interpolated
    # Hand arithmetic: each curve rises by 100 to its final, so the IQM at step 0 is -160 − 100 = -260.
    assert curve.center.tolist() == pytest.approx([-260.0, -210.0, -160.0])
    # Source: the band resamples whole runs with the same seed, so its last column is SciPy's percentile
    # bootstrap of the finals.
    ci = stats.bootstrap((np.array(FINALS[-2.0]),), _scipy_iqm, method="percentile", n_resamples=RESAMPLES,
                         vectorized=True, rng=np.random.default_rng(SEED)).confidence_interval  # fmt: skip
    assert (curve.low[-1], curve.high[-1]) == pytest.approx((ci.low, ci.high), rel=1e-12)
    assert {c.tag for c in comparison.curves} == {"return/eval", "actor/entropy_nats", "temperature/value"}


def test_single_run_groups_have_no_interval_and_a_note(tmp_path: Path) -> None:
    runs = [_run(tmp_path, 0, -2.0, -150.0), _run(tmp_path, 1, -2.0, -160.0), _run(tmp_path, 0, -0.5, -100.0)]
    comparison = summarise(runs, n_resamples=50)
    single = next(group for group in comparison.groups if group.label == "-0.5")
    assert single.n_runs == 1 and single.iqm_ci is None and single.iqm == -100.0 and single.is_best
    other = next(group for group in comparison.groups if group.label == "-2")
    assert other.improvement == 0.0 and other.improvement_ci is None  # the best group has one run
    assert "group(s) -0.5 have a single run: no confidence interval is possible; add seeds to those groups" in comparison.notes
    curve = next(c for c in comparison.curves if c.group == "-0.5" and c.tag == "return/eval")
    assert np.isnan(curve.low).all() and np.isnan(curve.high).all()


def test_tied_best_goes_to_the_first_group_in_key_order(tmp_path: Path) -> None:
    runs = [_run(tmp_path, 0, -2.0, -100.0), _run(tmp_path, 0, -0.5, -100.0)]
    comparison = summarise(runs, n_resamples=10)
    assert [group.is_best for group in comparison.groups] == [True, False]


def test_notes_on_curves_that_stop_early_or_were_interpolated(tmp_path: Path) -> None:
    short = _run(tmp_path, 0, -2.0, -150.0, steps=np.array([0, 500, 1000]))
    long = _run(tmp_path, 1, -2.0, -160.0, steps=np.array([0, 500, 1000, 1500]))
    odd = _run(tmp_path, 0, -0.5, -170.0, steps=np.array([0, 400, 800, 1200]))
    offset = _run(tmp_path, 1, -0.5, -180.0, steps=np.array([100, 600, 1100]))
    comparison = summarise([short, long, odd, offset], n_resamples=10, step=1000)
    notes = "\n".join(comparison.notes)
    assert ("'return/eval' curve of group -2 stops at step 1,000, the last step all its runs logged "
            "(its longest run reached 1,500)") in notes  # fmt: skip
    # Group -0.5's runs share no step: values are interpolated onto the union of steps both cover,
    # 100 … 1100 (np.interp, linear).
    curve = next(c for c in comparison.curves if c.group == "-0.5" and c.tag == "return/eval")
    assert curve.interpolated and curve.steps.tolist() == [100, 400, 600, 800, 1100]
    assert "'return/eval' of group -0.5: runs logged at different steps; values interpolated onto shared steps" in notes


def test_a_run_without_entropy_is_left_out_of_that_iqm(tmp_path: Path) -> None:
    runs = [_run(tmp_path, 0, -2.0, -150.0, entropy=None), _run(tmp_path, 1, -2.0, -160.0, entropy=-3.0)]
    group = summarise(runs, n_resamples=10).groups[0]
    assert group.entropy == -3.0  # only the run that logged it
    assert np.isnan(next(row.entropy for row in summarise(runs, n_resamples=10).runs if row.seed == 0))


@pytest.mark.parametrize("kwargs", [{"n_resamples": 0}, {"confidence": 1.0}, {"confidence": 0.0}])
def test_bad_settings_are_value_errors(tmp_path: Path, kwargs: dict) -> None:
    with pytest.raises(ValueError, match="n_resamples must be ≥ 1 and confidence in \\(0, 1\\)"):
        summarise(_runs(tmp_path), **kwargs)
    with pytest.raises(ValueError, match="no runs to compare"):
        summarise([])
