"""Sutton & Barto's Example 3.8 grid, built as the book describes it."""

import numpy as np

from kiln.envs.gridworld import BOOK_V_STAR, book_gridworld

NORTH, SOUTH, EAST, WEST = range(4)


def _state(row: int, col: int) -> int:
    return row * 5 + col


def test_special_states_off_grid_moves_and_ordinary_moves():
    transitions, reward = book_gridworld()
    assert transitions.shape == (25, 4, 25) and reward.shape == (25, 4)
    np.testing.assert_array_equal(transitions.sum(axis=-1), 1.0)  # deterministic moves
    # Source: Sutton & Barto 2018, Example 3.8: from A every action jumps to A′ with +10, from B to B′
    # with +5; an action off the grid leaves the state unchanged with −1; every other move pays 0.
    a, a_prime, b, b_prime = _state(0, 1), _state(4, 1), _state(0, 3), _state(2, 3)
    assert np.all(transitions[a, :, a_prime] == 1.0) and np.all(reward[a] == 10.0)
    assert np.all(transitions[b, :, b_prime] == 1.0) and np.all(reward[b] == 5.0)
    corner = _state(0, 0)
    assert transitions[corner, NORTH, corner] == 1.0 and reward[corner, NORTH] == -1.0
    assert transitions[corner, WEST, corner] == 1.0 and reward[corner, WEST] == -1.0
    assert transitions[corner, SOUTH, _state(1, 0)] == 1.0 and reward[corner, SOUTH] == 0.0
    assert transitions[_state(2, 2), EAST, _state(2, 3)] == 1.0 and reward[_state(2, 2), EAST] == 0.0
    # Figure 3.5's printed v*: A is the best state (24.4), the bottom-right corner the worst (11.7).
    assert BOOK_V_STAR[0, 1] == BOOK_V_STAR.max() == 24.4 and BOOK_V_STAR[4, 4] == BOOK_V_STAR.min() == 11.7
