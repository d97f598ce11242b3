"""The shared parts of every task's batched dynamics: start states chosen by the caller and actions
clipped to the Box as an actuator saturates (checked by hand and against numpy.clip), and the
abstract methods a task must write."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from gymnasium import spaces

from kiln.envs.task_base import BatchedDynamics


@dataclass(frozen=True)
class PlaneOptions:
    pass


class PlaneDynamics(BatchedDynamics):
    """Two state numbers, two actions in [-1, 2] × [0, 3]."""

    options_type = PlaneOptions
    state_size = 2

    def __init__(self, options: PlaneOptions) -> None:
        super().__init__(options)
        self.observation_space = spaces.Box(-np.inf, np.inf, shape=(2,), dtype=np.float32)
        self.action_space = spaces.Box(np.array([-1.0, 0.0], np.float32), np.array([2.0, 3.0], np.float32))

    def sample_start(self, rng, count):
        return np.zeros((count, 2))

    def advance(self, states, actions, rng):
        return states + actions, np.zeros(len(states)), np.zeros(len(states), dtype=bool)

    def observe(self, states):
        return states.astype(np.float32)


def test_options_are_kept():
    options = PlaneOptions()
    assert PlaneDynamics(options).options is options


def test_one_start_state_is_given_to_every_copy_and_one_per_copy_is_kept():
    dynamics = PlaneDynamics(PlaneOptions())
    starts = dynamics.check_start_states([1, 2], 3)
    assert starts.dtype == np.float64 and starts.tolist() == [[1.0, 2.0]] * 3
    starts[0, 0] = 9.0  # a real array, not a broadcast view: one copy's state changes alone
    assert starts[1, 0] == 1.0
    assert dynamics.check_start_states([[1, 2], [3, 4]], 2).tolist() == [[1.0, 2.0], [3.0, 4.0]]


@pytest.mark.parametrize("start", [[1.0], [[1.0, 2.0], [3.0, 4.0]], [1.0, 2.0, 3.0]])
def test_start_states_of_the_wrong_shape_are_refused(start):
    with pytest.raises(ValueError) as info:
        PlaneDynamics(PlaneOptions()).check_start_states(start, 3)
    message = str(info.value)
    assert message.startswith("start_state must have shape (2,) or (3, 2), got ") and "\n" not in message


def test_actions_are_reshaped_and_clipped_per_dimension():
    dynamics = PlaneDynamics(PlaneOptions())
    actions = [[-5.0, 5.0], [0.5, 1.5], [3.0, -1.0]]
    clipped = dynamics.clip_actions(actions, 3)
    # Source: numpy.clip against the Box's own bounds; by hand: [-1, 3], [0.5, 1.5], [2, 0].
    np.testing.assert_array_equal(clipped, np.clip(actions, [-1.0, 0.0], [2.0, 3.0]))
    assert clipped.tolist() == [[-1.0, 3.0], [0.5, 1.5], [2.0, 0.0]] and clipped.dtype == np.float64
    # A single copy's action in its own shape (2,) is read as a batch of one.
    assert dynamics.clip_actions(np.array([9.0, 9.0], np.float32), 1).tolist() == [[2.0, 3.0]]


def test_actions_of_the_wrong_size_are_refused():
    with pytest.raises(ValueError, match=r"actions must have shape \(3, 2\) \(or the single-copy shape \(2,\)\), got \(2, 2\)"):
        PlaneDynamics(PlaneOptions()).clip_actions(np.zeros((2, 2)), 3)


def test_a_task_must_write_the_three_dynamics_methods():
    class Partial(BatchedDynamics):
        options_type = PlaneOptions

        def sample_start(self, rng, count):
            return np.zeros((count, 1))

    # Python's abc: a class with abstract methods left cannot be built.
    with pytest.raises(TypeError, match="advance"):
        Partial(PlaneOptions())
