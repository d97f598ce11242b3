"""Percentile bootstrap CIs of the comparison against scipy.stats.bootstrap (same data, same seed)
and a stratified case worked out by hand."""

import numpy as np
import pytest
from scipy import stats

from kiln.comparison import bootstrap
from kiln.comparison.bootstrap import bootstrap_distribution, iqm_interval, percentile_interval
from kiln.comparison.stats import iqm, probability_of_improvement

RESAMPLES = 999
FINALS = np.array([-310.5, -250.0, -402.25, -198.0, -275.5, -330.0, -222.75, -289.0])


def scipy_iqm(sample: np.ndarray, axis: int) -> np.ndarray:
    return stats.trim_mean(sample, 0.25, axis=axis)


def scipy_improvement(x: np.ndarray, y: np.ndarray, axis: int) -> np.ndarray:
    return stats.mannwhitneyu(x, y, axis=axis).statistic / (x.shape[axis] * y.shape[axis])


@pytest.mark.parametrize("seed", [0, 7])
@pytest.mark.parametrize("confidence", [0.95, 0.9])
def test_iqm_interval_equals_scipy_percentile_bootstrap(seed: int, confidence: float) -> None:
    ours = iqm_interval([FINALS], confidence=confidence, n_resamples=RESAMPLES, rng=np.random.default_rng(seed))
    # Source: scipy.stats.bootstrap(method="percentile") with the same Generator draws the same
    # resamples (one stratum), so the interval matches up to float rounding of the trimmed mean.
    reference = stats.bootstrap(
        (FINALS,), scipy_iqm, method="percentile", confidence_level=confidence, n_resamples=RESAMPLES,
        vectorized=True, rng=np.random.default_rng(seed),
    ).confidence_interval
    assert ours.low == pytest.approx(reference.low, rel=1e-12)
    assert ours.high == pytest.approx(reference.high, rel=1e-12)


def test_improvement_interval_equals_scipy_two_sample_bootstrap() -> None:
    x = FINALS[:5]
    y = np.array([-300.0, -250.0, -250.0, -199.5, -260.0, -410.0])
    ours = bootstrap_distribution(
        [x, y], probability_of_improvement, n_resamples=RESAMPLES, rng=np.random.default_rng(0)
    )
    # Source: scipy.stats.bootstrap resamples each of two independent samples in turn, as we do per
    # stratum; statistic from scipy.stats.mannwhitneyu / (n·m).
    reference = stats.bootstrap(
        (x, y), scipy_improvement, method="percentile", n_resamples=RESAMPLES, vectorized=True,
        rng=np.random.default_rng(0),
    )
    np.testing.assert_allclose(ours, reference.bootstrap_distribution, rtol=0, atol=1e-12)
    low, high = percentile_interval(ours, 0.95)
    assert low == pytest.approx(reference.confidence_interval.low, abs=1e-12)
    assert high == pytest.approx(reference.confidence_interval.high, abs=1e-12)


def test_batched_evaluation_keeps_scipy_draws(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(bootstrap, "_BATCH_ELEMENTS", 7)  # force many small batches
    ours = bootstrap_distribution(
        [FINALS], lambda resampled: iqm(resampled, axis=1), n_resamples=101, rng=np.random.default_rng(2)
    )
    # Source: scipy.stats.bootstrap's bootstrap_distribution for the same Generator (one stratum).
    reference = stats.bootstrap(
        (FINALS,), scipy_iqm, method="percentile", n_resamples=101, vectorized=True, rng=np.random.default_rng(2)
    ).bootstrap_distribution
    np.testing.assert_allclose(ours, reference, rtol=1e-12)


def test_stratified_resamples_keep_each_stratum_by_hand() -> None:
    low_stratum, high_stratum = [0.0, 1.0], [100.0, 101.0]
    means = bootstrap_distribution(
        [low_stratum, high_stratum],
        lambda a, b: np.concatenate([a, b], axis=1).mean(axis=1),
        n_resamples=4000,
        rng=np.random.default_rng(0),
    )
    # Hand arithmetic: two draws from each stratum → pooled mean = 50 + k/4, where k, the number of
    # draws that hit the larger value of its stratum, is Binomial(4, 1/2): P = 1, 4, 6, 4, 1 / 16.
    # Mixing strata would give means such as 0.5 (all four from the low stratum).
    levels, counts = np.unique(means, return_counts=True)
    np.testing.assert_array_equal(levels, [50.0, 50.25, 50.5, 50.75, 51.0])
    np.testing.assert_allclose(counts / means.size, np.array([1, 4, 6, 4, 1]) / 16, atol=0.03)


def test_stratified_iqm_interval_by_hand() -> None:
    interval = iqm_interval([[0.0, 1.0], [100.0, 101.0]], n_resamples=2000, rng=np.random.default_rng(1))
    # Hand arithmetic: a stratified resample holds two values ≤ 1 and two ≥ 100, so its IQM (the middle
    # two of four) is (max of the low pair + min of the high pair) / 2 ∈ {50, 50.5, 51} with
    # probabilities 3/16, 10/16, 3/16; both 2.5 % tails therefore fall on 50 and 51. Without strata the
    # IQM would fall below 2 with probability 5/16 (three or four draws from the low stratum).
    assert (interval.low, interval.high) == (50.0, 51.0)


def test_same_seed_same_interval() -> None:
    first = iqm_interval([FINALS], n_resamples=200, rng=np.random.default_rng(5))
    second = iqm_interval([FINALS], n_resamples=200, rng=np.random.default_rng(5))
    # Reproducibility requirement: one seed, one report.
    assert first == second


def test_percentile_interval_is_the_linear_quantile() -> None:
    values = np.arange(101.0)
    # Hand arithmetic: linear quantiles of 0..100 at 0.025 and 0.975 are 2.5 and 97.5.
    assert percentile_interval(values, 0.95) == pytest.approx((2.5, 97.5), abs=1e-12)
    with pytest.raises(ValueError):
        percentile_interval(values, 1.0)
