"""DamperTrim: set a kiln's flue damper once (a one-step continuous bandit on a bounded action).

Before a firing the operator sets the flue damper to a position a in [-1, 1] (fully shut to fully
open, scaled); the draught it gives is best at a target position a0 and the loss grows quadratically
away from it:

    r(a) = -(stiffness / 2) (a - a0)^2.

The episode ends after that single step (terminated=True), so there is no bootstrapping at all; the
observation is a constant. Its soft-optimal policy is computed independently of any agent by
quadrature in ``envs.bandit_solution``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from gymnasium import spaces

from envs.task_base import BatchedDynamics
from envs.task_env import TaskEnv
from envs.task_vector import TaskVectorEnv

DEFAULT_STIFFNESS = 4.0
DEFAULT_TARGET = 0.5


class DamperTrimDynamics(BatchedDynamics):
    """Batched DamperTrim: one step, reward -(stiffness / 2)(a - target)^2, always terminates."""

    state_size = 1

    def __init__(self, stiffness: float = DEFAULT_STIFFNESS, target: float = DEFAULT_TARGET) -> None:
        """Set the loss curvature and the best damper position.

        Args:
            stiffness: k > 0, the curvature of the loss.
            target: a0, the best position (may lie outside [-1, 1]; the optimum then sits at a bound).

        Raises:
            ValueError: If stiffness is not positive and finite or target is not finite.
        """
        if not (np.isfinite(stiffness) and stiffness > 0):
            raise ValueError(f"stiffness must be finite and > 0, got {stiffness}; pass e.g. 4.0")
        if not np.isfinite(target):
            raise ValueError(f"target must be finite, got {target}; pass e.g. 0.5")
        self.stiffness = float(stiffness)
        self.target = float(target)
        self.observation_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)
        self.action_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)

    def sample_start(self, rng: np.random.Generator, count: int) -> np.ndarray:
        """The single state is always 0."""
        return np.zeros((count, 1))

    def advance(
        self, states: np.ndarray, actions: np.ndarray, rng: np.random.Generator
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Pay -(k / 2)(a - a0)^2 and terminate."""
        rewards = -0.5 * self.stiffness * (actions[:, 0] - self.target) ** 2
        return states.copy(), rewards, np.ones(states.shape[0], dtype=bool)

    def observe(self, states: np.ndarray) -> np.ndarray:
        """A constant zero observation (the bandit has no context)."""
        return np.zeros((states.shape[0], 1), dtype=np.float32)


class DamperTrimEnv(TaskEnv):
    """One DamperTrim copy."""

    def __init__(
        self,
        stiffness: float = DEFAULT_STIFFNESS,
        target: float = DEFAULT_TARGET,
        render_mode: str | None = None,
    ) -> None:
        """See ``DamperTrimDynamics``; render_mode must be None."""
        super().__init__(DamperTrimDynamics(stiffness, target), render_mode)


class DamperTrimVectorEnv(TaskVectorEnv):
    """``num_envs`` DamperTrim copies stepped together."""

    def __init__(
        self,
        num_envs: int = 1,
        max_episode_steps: int | None = None,
        autoreset_mode: Any = "NextStep",
        stiffness: float = DEFAULT_STIFFNESS,
        target: float = DEFAULT_TARGET,
    ) -> None:
        """See ``TaskVectorEnv`` and ``DamperTrimDynamics``."""
        super().__init__(DamperTrimDynamics(stiffness, target), num_envs, max_episode_steps, autoreset_mode)
