"""A tabular task with a rare windfall: the glaze-trial decision.

A pottery workshop has one kiln load to fire. It can fire its standard glaze (a certain, modest sale)
or try an experimental glaze that almost always comes out unsaleable but, rarely, yields a prize piece
worth far more. In expectation the standard glaze is better, so a planner that treats the kiln's
outcome as chance (the fixed-dynamics soft backup) fires standard; a planner that lets inference also
"choose" the outcome (the exact-posterior, log-expectation-exp backup) chases the prize. The task exists
to show that risk-seeking bias next to ``kiln.exact.soft_dp``.

States: 0 = load ready (the decision), 1 = prize piece out of the kiln, 2 = load done (absorbing).
Actions: 0 = standard glaze, 1 = experimental glaze. In states 1 and 2 both actions do the same thing.
"""

from __future__ import annotations

import numpy as np

DECIDE, PRIZE, DONE = 0, 1, 2
STANDARD, EXPERIMENTAL = 0, 1


def glaze_trial_mdp(
    standard_sale: float = 1.0, prize_value: float = 50.0, prize_chance: float = 0.01
) -> tuple[np.ndarray, np.ndarray]:
    """Build the glaze-trial MDP.

    Args:
        standard_sale: Reward for firing the standard glaze (paid at the decision step).
        prize_value: Reward collected in the prize state (paid one step after the decision).
        prize_chance: Probability that the experimental glaze gives the prize, in (0, 1).

    Returns:
        (P, R): transitions of shape (3, 2, 3) and rewards of shape (3, 2).

    Raises:
        ValueError: If prize_chance is not strictly between 0 and 1.
    """
    if not 0.0 < prize_chance < 1.0:
        raise ValueError(f"prize_chance must be in (0, 1), got {prize_chance}; pass e.g. 0.01")
    transitions = np.zeros((3, 2, 3))
    transitions[DECIDE, STANDARD, DONE] = 1.0
    transitions[DECIDE, EXPERIMENTAL, PRIZE] = prize_chance
    transitions[DECIDE, EXPERIMENTAL, DONE] = 1.0 - prize_chance
    transitions[PRIZE, :, DONE] = 1.0
    transitions[DONE, :, DONE] = 1.0
    reward = np.zeros((3, 2))
    reward[DECIDE, STANDARD] = standard_sale
    reward[PRIZE, :] = prize_value
    return transitions, reward
