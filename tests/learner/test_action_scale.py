"""ActionScale against the affine map of [−1, 1] onto a Box's bounds.

Reference: a = low + (u + 1)/2 · (high − low) (the affine map spec.json states; hand arithmetic),
clipped as numpy.clip would, in float64 before the float32 result.
"""

import numpy as np

from kiln.learner.action_scale import ActionScale

LOW, HIGH = np.array([-2.0, 0.0, -0.5], np.float32), np.array([2.0, 1.0, 3.0], np.float32)


def test_centre_and_half_width_by_hand():
    # (high + low) / 2 and (high − low) / 2 of [−2, 2], [0, 1], [−0.5, 3]: centres 0, 0.5, 1.25; half-widths 2, 0.5, 1.75.
    scale = ActionScale(LOW, HIGH)
    np.testing.assert_array_equal(scale.centre, [0.0, 0.5, 1.25])
    np.testing.assert_array_equal(scale.half_width, [2.0, 0.5, 1.75])


def test_to_env_is_the_affine_map_clipped_to_the_bounds():
    scale = ActionScale(LOW, HIGH)
    u = np.random.default_rng(0).uniform(-1.2, 1.2, size=(200, 3)).astype(np.float32)
    expected = np.clip(LOW.astype(np.float64) + (u + 1.0) / 2.0 * (HIGH.astype(np.float64) - LOW), LOW, HIGH)
    got = scale.to_env(u)
    assert got.dtype == np.float32 and got.shape == (200, 3)
    np.testing.assert_allclose(got, expected.astype(np.float32), rtol=1e-6, atol=1e-6)
    assert np.all((got >= LOW) & (got <= HIGH))
    # The ends by hand: −1 ↦ low, +1 ↦ high, 0 ↦ the centre.
    np.testing.assert_array_equal(scale.to_env(np.array([[-1.0] * 3, [1.0] * 3, [0.0] * 3])), [LOW, HIGH, [0.0, 0.5, 1.25]])


def test_nan_stays_nan_and_one_row_maps_as_in_a_batch():
    # A NaN action must reach the task's finite check, not be clipped into a bound.
    scale = ActionScale(LOW, HIGH)
    rows = np.random.default_rng(1).uniform(-1.5, 1.5, size=(50, 3)).astype(np.float32)
    rows[0, 0] = np.nan
    batched = scale.to_env(rows)
    assert np.isnan(batched[0, 0]) and not np.isnan(batched[1:]).any()
    np.testing.assert_array_equal(np.stack([scale.to_env(r) for r in rows]), batched)


def test_to_agent_inverts_to_env_inside_the_bounds():
    scale = ActionScale(LOW, HIGH)
    u = np.random.default_rng(2).uniform(-1.0, 1.0, size=(100, 3)).astype(np.float32)
    back = scale.to_agent(scale.to_env(u))
    assert back.dtype == np.float32
    np.testing.assert_allclose(back, u, atol=1e-6)
