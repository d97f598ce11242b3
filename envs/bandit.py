"""DamperTrim: set a kiln's flue damper once (a one-step continuous bandit on a bounded action).

Before a firing the operator sets the flue damper to a position a in [-1, 1] (fully shut to fully
open, scaled); the draught it gives is best at a target position a0 and the loss grows quadratically
away from it:

    r(a) = -(stiffness / 2) (a - a0)^2.

The episode ends after that single step (terminated=True), so there is no bootstrapping at all; the
observation is a constant. Its soft-optimal policy is computed independently of any agent by
quadrature in ``kiln.envs.bandit_solution``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from gymnasium import spaces

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_error import TaskError
from kiln.envs.task_options import finite_number

DEFAULT_STIFFNESS = 4.0
DEFAULT_TARGET = 0.5


@dataclass(frozen=True)
class DamperTrimOptions:
    """DamperTrim's options.

    Attributes:
        stiffness: k > 0, the curvature of the loss.
        target: a0, the best position (may lie outside [-1, 1]; the optimum then sits at a bound).
    """

    stiffness: float = DEFAULT_STIFFNESS
    target: float = DEFAULT_TARGET

    def __post_init__(self) -> None:
        """Validate and store both as floats.

        Raises:
            TaskError: If stiffness is not positive and finite or target is not finite.
        """
        stiffness = finite_number(self.stiffness, "stiffness")
        if stiffness <= 0:
            raise TaskError(f"stiffness must be finite and > 0, got {self.stiffness}; pass e.g. 4.0")
        object.__setattr__(self, "stiffness", stiffness)
        object.__setattr__(self, "target", finite_number(self.target, "target"))


class DamperTrimDynamics(BatchedDynamics):
    """Batched DamperTrim: one step, reward -(stiffness / 2)(a - target)^2, always terminates."""

    options_type = DamperTrimOptions
    state_size = 1

    def __init__(self, options: DamperTrimOptions) -> None:
        """Set up the spaces: one constant observation, one damper position in [-1, 1].

        Args:
            options: The loss curvature and the best damper position.
        """
        super().__init__(options)
        self.observation_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)
        self.action_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)

    def sample_start(self, rng: np.random.Generator, count: int) -> np.ndarray:
        """The single state is always 0."""
        return np.zeros((count, 1))

    def advance(
        self, states: np.ndarray, actions: np.ndarray, rng: np.random.Generator
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Pay -(k / 2)(a - a0)^2 and terminate."""
        rewards = -0.5 * self.options.stiffness * (actions[:, 0] - self.options.target) ** 2
        return states.copy(), rewards, np.ones(states.shape[0], dtype=bool)

    def observe(self, states: np.ndarray) -> np.ndarray:
        """A constant zero observation (the bandit has no context)."""
        return np.zeros((states.shape[0], 1), dtype=np.float32)
