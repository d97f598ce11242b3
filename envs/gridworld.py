"""The 5×5 gridworld of Sutton & Barto, *Reinforcement Learning: An Introduction*, 2nd ed., Example 3.8.

A finite MDP with a printed optimal value table (Figure 3.5). Kiln's exact soft solver
(``kiln.exact.soft_dp``) is checked against it in its α → 0 limit; the data lives here, beside the
other tabular task (``kiln.envs.glaze_trial``), because tasks never import the learner.
"""

from __future__ import annotations

import numpy as np

# Figure 3.5 of the book: the optimal state values v* (γ = 0.9), rows top to bottom, printed to one
# decimal.
BOOK_V_STAR = np.array(
    [
        [22.0, 24.4, 22.0, 19.4, 17.5],
        [19.8, 22.0, 19.8, 17.8, 16.0],
        [17.8, 19.8, 17.8, 16.0, 14.4],
        [16.0, 17.8, 16.0, 14.4, 13.0],
        [14.4, 16.0, 14.4, 13.0, 11.7],
    ]
)
BOOK_DISCOUNT = 0.9
BOOK_SOURCE = "Sutton & Barto 2018, Ex. 3.8 / Fig. 3.5"


def book_gridworld() -> tuple[np.ndarray, np.ndarray]:
    """Build Example 3.8: 5×5 grid, rows top to bottom, actions north, south, east, west.

    From A = (0, 1) every action jumps to A′ = (4, 1) with +10; from B = (0, 3) to B′ = (2, 3) with
    +5; a move off the grid leaves the state unchanged with −1; every other move pays 0.

    Returns:
        (transitions ``P[s, a, s′]`` of shape (25, 4, 25), rewards ``R[s, a]`` of shape (25, 4)),
        with state index ``row * 5 + col``.
    """
    size = 5
    moves = [(-1, 0), (1, 0), (0, 1), (0, -1)]
    transitions = np.zeros((size * size, 4, size * size))
    reward = np.zeros((size * size, 4))
    for row in range(size):
        for col in range(size):
            s = row * size + col
            for a, (d_row, d_col) in enumerate(moves):
                if (row, col) == (0, 1):
                    transitions[s, a, 4 * size + 1] = 1.0
                    reward[s, a] = 10.0
                elif (row, col) == (0, 3):
                    transitions[s, a, 2 * size + 3] = 1.0
                    reward[s, a] = 5.0
                elif 0 <= row + d_row < size and 0 <= col + d_col < size:
                    transitions[s, a, (row + d_row) * size + col + d_col] = 1.0
                else:
                    transitions[s, a, s] = 1.0
                    reward[s, a] = -1.0
    return transitions, reward
