"""Point statistics for comparing runs (Agarwal et al. 2021, NeurIPS, "Deep Reinforcement Learning
at the Edge of the Statistical Precipice"): interquartile mean, probability of improvement and the
performance profile.

Every function takes the runs along one axis so that a whole bootstrap distribution (one row per
resample) is computed in a single vectorised call.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike


def iqm(scores: ArrayLike, axis: int = -1) -> np.ndarray:
    """Interquartile mean: the mean of the middle half of the runs (25 % trimmed mean).

    The number cut from each end is ``int(0.25 * n)``, the same rounding as
    ``scipy.stats.trim_mean(x, 0.25)``, so with fewer than four runs nothing is cut and the IQM is
    the plain mean.

    Args:
        scores: Scores with the runs along ``axis``; at least one run.
        axis: The axis holding the runs.

    Returns:
        The IQM with ``axis`` removed (a 0-d array for 1-D input).

    Raises:
        ValueError: If there are no runs.
    """
    values = np.sort(np.asarray(scores, dtype=np.float64), axis=axis)
    n = values.shape[axis]
    if n == 0:
        raise ValueError("IQM of zero runs is undefined")
    cut = int(0.25 * n)
    middle = np.take(values, np.arange(cut, n - cut), axis=axis)
    return middle.mean(axis=axis)


def probability_of_improvement(x: ArrayLike, y: ArrayLike) -> np.ndarray:
    """Probability that a run of X scores higher than a run of Y, ties counting one half.

    This is the Mann–Whitney U statistic of X against Y divided by n·m: the fraction of all
    (x, y) pairs with x > y, plus half the fraction with x == y.

    Args:
        x: Scores of X with the runs along the last axis (n runs); leading axes broadcast with y's.
        y: Scores of Y with the runs along the last axis (m runs).

    Returns:
        P(X > Y) with the run axis removed.

    Raises:
        ValueError: If either side has no runs.
    """
    xs = np.asarray(x, dtype=np.float64)
    ys = np.asarray(y, dtype=np.float64)
    if xs.shape[-1] == 0 or ys.shape[-1] == 0:
        raise ValueError("probability of improvement needs at least one run on each side")
    # All n·m pairs at once: the run counts are small (seeds), so the pair grid stays small.
    left = xs[..., :, np.newaxis]
    right = ys[..., np.newaxis, :]
    wins = (left > right).mean(axis=(-2, -1))
    ties = (left == right).mean(axis=(-2, -1))
    return wins + 0.5 * ties


def performance_profile(scores: ArrayLike, thresholds: ArrayLike, axis: int = -1) -> np.ndarray:
    """Fraction of runs whose score is strictly above each threshold.

    Args:
        scores: Scores with the runs along ``axis``.
        thresholds: 1-D array of score levels τ.
        axis: The axis holding the runs.

    Returns:
        Array with ``axis`` removed and a trailing axis of ``len(thresholds)``: the fraction of
        runs with score > τ for each τ.

    Raises:
        ValueError: If there are no runs.
    """
    values = np.moveaxis(np.asarray(scores, dtype=np.float64), axis, -1)
    if values.shape[-1] == 0:
        raise ValueError("performance profile of zero runs is undefined")
    levels = np.asarray(thresholds, dtype=np.float64)
    return (values[..., :, np.newaxis] > levels).mean(axis=-2)
