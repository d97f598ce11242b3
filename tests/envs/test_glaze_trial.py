"""The glaze-trial MDP built as its module describes it (three states, two actions), checked entry by
entry by hand. What the soft backups make of it is tested in tests/exact/test_soft_dp.py."""

import numpy as np
import pytest

from kiln.envs.glaze_trial import DECIDE, DONE, EXPERIMENTAL, PRIZE, STANDARD, glaze_trial_mdp


def test_transitions_and_rewards_by_hand():
    transitions, reward = glaze_trial_mdp(standard_sale=2.0, prize_value=30.0, prize_chance=0.25)
    assert transitions.shape == (3, 2, 3) and reward.shape == (3, 2)
    # Every row P[s, a, :] is a probability distribution.
    np.testing.assert_allclose(transitions.sum(axis=-1), 1.0, rtol=0, atol=1e-15)
    # Standard glaze: certain sale now, then the load is done.
    assert transitions[DECIDE, STANDARD].tolist() == [0.0, 0.0, 1.0] and reward[DECIDE, STANDARD] == 2.0
    # Experimental glaze: nothing now; the prize with chance 0.25, else done.
    assert transitions[DECIDE, EXPERIMENTAL].tolist() == [0.0, 0.25, 0.75] and reward[DECIDE, EXPERIMENTAL] == 0.0
    # In the prize state both actions collect the prize and end the load; done is absorbing and pays 0.
    assert transitions[PRIZE, :, DONE].tolist() == [1.0, 1.0] and reward[PRIZE].tolist() == [30.0, 30.0]
    assert transitions[DONE, :, DONE].tolist() == [1.0, 1.0] and reward[DONE].tolist() == [0.0, 0.0]


def test_standard_glaze_is_better_in_expectation_by_default():
    transitions, reward = glaze_trial_mdp()
    # Hand arithmetic with the defaults: standard pays 1; experimental pays 0.01 · 50 = 0.5 in expectation.
    experimental = reward[DECIDE, EXPERIMENTAL] + transitions[DECIDE, EXPERIMENTAL] @ reward[:, 0]
    assert reward[DECIDE, STANDARD] == 1.0 and experimental == pytest.approx(0.5, rel=1e-15)


@pytest.mark.parametrize("chance", [0.0, 1.0, -0.1, 1.5])
def test_prize_chance_must_lie_strictly_between_0_and_1(chance):
    # A chance of 0 or 1 makes the trial certain, and the task exists to show a rare windfall.
    with pytest.raises(ValueError, match=r"prize_chance must be in \(0, 1\)") as info:
        glaze_trial_mdp(prize_chance=chance)
    assert "\n" not in str(info.value)
