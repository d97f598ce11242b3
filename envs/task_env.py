"""One copy of a Kiln task as a ``gymnasium.Env`` (what the registered ``entry_point`` builds)."""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import numpy as np

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_error import TaskError


class TaskEnv(gym.Env[np.ndarray, np.ndarray]):
    """Runs a batch-of-one of a task's ``BatchedDynamics``.

    Time limits come from Gymnasium's ``max_episode_steps`` (the ``TimeLimit`` wrapper ``gymnasium.make``
    adds); the task itself only ever reports ``terminated``. ``reset(options={"start_state": s})`` starts
    from a chosen state instead of a sampled one.
    """

    metadata = {"render_modes": []}

    def __init__(self, dynamics: BatchedDynamics, render_mode: str | None = None) -> None:
        """Wrap the given dynamics.

        Args:
            dynamics: The task's batched dynamics.
            render_mode: Must be None: Kiln's tasks are numeric and draw nothing.

        Raises:
            TaskError: If a render mode is requested.
        """
        if render_mode is not None:
            raise TaskError(
                f"Kiln's own tasks cannot render (got render_mode={render_mode!r}); pass render_mode=None"
            )
        self.render_mode = None
        self.dynamics = dynamics
        self.observation_space = dynamics.observation_space
        self.action_space = dynamics.action_space
        self._states = np.zeros((1, dynamics.state_size))

    @property
    def state(self) -> np.ndarray:
        """The current (float64) internal state, shape (state_size,); a copy."""
        return self._states[0].copy()

    def reset(
        self, *, seed: int | None = None, options: dict[str, Any] | None = None
    ) -> tuple[np.ndarray, dict[str, Any]]:
        """Start an episode; see ``gymnasium.Env.reset``."""
        super().reset(seed=seed)
        if options is not None and "start_state" in options:
            self._states = self.dynamics.check_start_states(options["start_state"], 1)
        else:
            self._states = self.dynamics.sample_start(self.np_random, 1)
        return self.dynamics.observe(self._states)[0], {}

    def step(self, action: np.ndarray) -> tuple[np.ndarray, float, bool, bool, dict[str, Any]]:
        """Advance one step; see ``gymnasium.Env.step``. Truncation is left to ``TimeLimit``."""
        actions = self.dynamics.clip_actions(action, 1)
        self._states, rewards, terminated = self.dynamics.advance(self._states, actions, self.np_random)
        return self.dynamics.observe(self._states)[0], float(rewards[0]), bool(terminated[0]), False, {}
