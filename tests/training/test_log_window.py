"""The log window (kiln.training.log_window): per-agent means of the update diagnostics between two
log points, the speed figures, a blown-up diagnostic caught at its update, and a window continued
exactly after a checkpoint.

Sources: numpy (``np.mean`` over the updates of a window is what a mean must equal), hand arithmetic
for the rates written beside each check, and IEEE 754 (NaN compares false with everything, so a
NaN diagnostic must be caught as well as a large one).
"""

import math

import numpy as np
import pytest
import torch

from kiln.errors import DivergenceError
from kiln.training.log_window import BLOW_UP, UPDATE_TAGS, LogWindow


def _values(rows: np.ndarray) -> dict[str, torch.Tensor]:
    """One update's diagnostics from ``rows[agent, tag]``."""
    return {tag: torch.tensor(rows[:, j], dtype=torch.float32) for j, tag in enumerate(UPDATE_TAGS)}


def test_window_means_are_numpys_means_per_agent():
    rng = np.random.default_rng(0)
    updates = rng.normal(size=(5, 3, len(UPDATE_TAGS))).astype(np.float32)  # 5 updates, 3 agents
    window = LogWindow(agents=3)
    for u in range(5):
        assert window.add_update(_values(updates[u]), step=u + 1) == {}
    window.add_update_time(0.01)
    _, means = window.close()
    expected = updates.astype(np.float64).mean(axis=0)
    for agent in range(3):
        np.testing.assert_allclose([means[agent][t] for t in UPDATE_TAGS], expected[agent], rtol=1e-5, atol=1e-6)
    # The next window starts empty.
    window.add_update(_values(updates[0]), step=6)
    window.add_update_time(0.01)
    _, means = window.close()
    np.testing.assert_allclose([means[1][t] for t in UPDATE_TAGS], updates[0, 1], rtol=1e-6)


def test_speed_figures_by_hand(monkeypatch):
    clock = iter([100.0, 102.0])  # the window opens at 100 s and closes at 102 s
    monkeypatch.setattr("kiln.training.log_window.time.perf_counter", lambda: next(clock))
    window = LogWindow()
    for _ in range(500):
        window.add_step()
    for _ in range(4):
        window.add_update(_values(np.zeros((1, len(UPDATE_TAGS)))), step=1)
    window.add_update_time(0.5)
    speed, means = window.close()
    # 500 env steps in 2 s = 250 steps/s; 4 updates in 0.5 s of updating = 8 updates/s.
    assert speed == {"speed/env_steps_per_s": 250.0, "speed/updates_per_s": 8.0}
    assert (window.total_updates, window.total_update_time) == (4, 0.5)
    assert means == [dict.fromkeys(UPDATE_TAGS, 0.0)]


def test_updates_too_quick_to_measure_give_means_but_no_rate():
    # A clock that did not advance during the updates (a coarse clock, or a resumed window's first
    # updates) has no rate to show: the window still closes with its means.
    window = LogWindow()
    window.add_update(_values(np.ones((1, len(UPDATE_TAGS)))), step=1)
    window.add_update_time(0.0)
    speed, means = window.close()
    assert "speed/updates_per_s" not in speed and means == [dict.fromkeys(UPDATE_TAGS, 1.0)]


def test_a_window_without_updates_has_no_rate_and_no_means():
    window = LogWindow()
    window.add_step()
    speed, means = window.close()
    assert set(speed) == {"speed/env_steps_per_s"} and means is None


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf, BLOW_UP * 10])
def test_a_blown_up_diagnostic_names_its_agent_tag_and_step(bad):
    rows = np.zeros((3, len(UPDATE_TAGS)))
    rows[2, UPDATE_TAGS.index("critic/q_mean")] = bad
    rows[2, UPDATE_TAGS.index("temperature/value")] = bad  # a later tag of the same agent: the first is named
    errors = LogWindow(agents=3).add_update(_values(rows), step=1234)
    assert list(errors) == [2]
    err = errors[2]
    assert isinstance(err, DivergenceError) and err.quantity == "critic/q_mean" and err.where == "at env step 1234"
    assert err.value == pytest.approx(bad, nan_ok=True)  # float32 holds 1e16 within rtol 1e-6


def test_a_large_but_sane_diagnostic_passes():
    rows = np.full((1, len(UPDATE_TAGS)), BLOW_UP)  # exactly the limit: still accepted
    assert LogWindow().add_update(_values(rows), step=1) == {}


def test_a_window_continued_from_its_state_closes_as_the_uninterrupted_one():
    rng = np.random.default_rng(3)
    updates = rng.normal(size=(6, 2, len(UPDATE_TAGS))).astype(np.float32)
    straight, first = LogWindow(agents=2), LogWindow(agents=2)
    for u in range(6):
        straight.add_update(_values(updates[u]), step=u)
        straight.add_update_time(0.25)
        straight.add_step()
    for u in range(3):
        first.add_update(_values(updates[u]), step=u)
        first.add_update_time(0.25)
        first.add_step()
    counters, sums = first.state()
    assert counters["updates"] == 3 and counters["steps"] == 3 and sums.shape == (2, len(UPDATE_TAGS))
    resumed = LogWindow(agents=2)
    resumed.restore(counters, sums)
    for u in range(3, 6):
        resumed.add_update(_values(updates[u]), step=u)
        resumed.add_update_time(0.25)
        resumed.add_step()
    speed_straight, means_straight = straight.close()
    speed_resumed, means_resumed = resumed.close()
    assert means_resumed == means_straight  # the same float32 sums in the same order: equal
    # 6 updates in 6 · 0.25 s = 4 updates/s either way (hand arithmetic).
    assert speed_straight["speed/updates_per_s"] == speed_resumed["speed/updates_per_s"] == 4.0
    assert (resumed.total_updates, resumed.total_update_time) == (6, 1.5)
