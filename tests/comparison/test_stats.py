"""Point statistics of the comparison against SciPy and hand arithmetic (Agarwal et al. 2021,
NeurIPS, "Deep RL at the Edge of the Statistical Precipice": IQM, probability of improvement,
performance profiles)."""

import numpy as np
import pytest
from scipy import stats

from kiln.comparison.stats import iqm, performance_profile, probability_of_improvement

SCORES = np.array([3.1, -2.0, 7.5, 0.4, 9.9, 5.5, 1.2, -4.4, 6.0, 2.2, 8.1, -0.7])


@pytest.mark.parametrize("n", range(1, 13))
def test_iqm_equals_scipy_trim_mean_for_every_run_count(n: int) -> None:
    sample = SCORES[:n]
    # Source: scipy.stats.trim_mean(x, 0.25) is the IQM of Agarwal et al. 2021 (NeurIPS, Section 4: the
    # 25 % trimmed mean).
    np.testing.assert_allclose(iqm(sample), stats.trim_mean(sample, 0.25), rtol=1e-13, atol=0)


def test_iqm_along_an_axis_equals_scipy_row_by_row() -> None:
    matrix = np.random.default_rng(3).normal(size=(7, 9))
    # Source: scipy.stats.trim_mean with axis=1.
    np.testing.assert_allclose(iqm(matrix, axis=1), stats.trim_mean(matrix, 0.25, axis=1), rtol=1e-13)
    np.testing.assert_allclose(iqm(matrix, axis=0), stats.trim_mean(matrix, 0.25, axis=0), rtol=1e-13)


def test_iqm_by_hand_drops_a_quarter_at_each_end() -> None:
    # Hand arithmetic: 8 runs, int(0.25·8) = 2 cut from each end of 1..8 → mean(3, 4, 5, 6) = 4.5,
    # and the outliers 1000 and -1000 replacing 1 and 8 change nothing.
    assert iqm([8, 1, 7, 2, 6, 3, 5, 4]) == 4.5
    assert iqm([-1000, 2, 3, 4, 5, 6, 7, 1000]) == 4.5


def test_iqm_of_no_runs_is_an_error() -> None:
    with pytest.raises(ValueError):
        iqm([])


@pytest.mark.parametrize(
    ("x", "y"),
    [
        ([2.0, 3.0, 5.0, 0.5], [1.0, 2.0, 2.0, 5.0, 9.0]),  # ties across the groups
        ([1.0, 1.0, 1.0], [1.0, 1.0]),  # all tied
        ([10.0, 11.0], [0.0, 1.0, 2.0]),  # x always better
        (list(SCORES[:5]), list(SCORES[5:])),
    ],
)
def test_probability_of_improvement_equals_mann_whitney_u_over_nm(x: list, y: list) -> None:
    # Source: scipy.stats.mannwhitneyu(x, y).statistic is U of x (ties counted 1/2); P = U / (n·m).
    expected = stats.mannwhitneyu(x, y).statistic / (len(x) * len(y))
    assert probability_of_improvement(x, y) == pytest.approx(expected, rel=1e-15)


def test_probability_of_improvement_by_hand() -> None:
    # Hand arithmetic: x = [1, 3], y = [2, 3]. Pairs: (1,2) loss, (1,3) loss, (3,2) win, (3,3) tie
    # → (1 + 0.5) / 4 = 0.375.
    assert probability_of_improvement([1.0, 3.0], [2.0, 3.0]) == 0.375


def test_probability_of_improvement_broadcasts_over_resamples() -> None:
    x = np.array([[1.0, 3.0], [5.0, 5.0]])
    y = np.array([[2.0, 3.0], [5.0, 6.0]])
    # Hand arithmetic: row 0 as above 0.375; row 1: (5,5) tie ×2, (5,6) loss ×2 → 1/4 = 0.25.
    np.testing.assert_array_equal(probability_of_improvement(x, y), [0.375, 0.25])


def test_performance_profile_by_hand() -> None:
    scores = [1.0, 2.0, 2.0, 4.0]
    levels = [0.0, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0]
    # Hand count of runs with score strictly above τ, out of 4:
    # τ=0: 4, τ=1: 3 (2, 2, 4), τ=1.5: 3, τ=2: 1 (4), τ=3: 1, τ=4: 0, τ=5: 0.
    expected = [1.0, 0.75, 0.75, 0.25, 0.25, 0.0, 0.0]
    np.testing.assert_array_equal(performance_profile(scores, levels), expected)


def test_performance_profile_per_resample_row() -> None:
    resamples = np.array([[1.0, 2.0, 2.0, 4.0], [4.0, 4.0, 4.0, 4.0]])
    # Hand count: row 0 as above; row 1 all at 4 → 1 below τ=4, 0 at τ=4 (strictly above).
    np.testing.assert_array_equal(
        performance_profile(resamples, [3.0, 4.0], axis=1), [[0.25, 0.0], [1.0, 0.0]]
    )
