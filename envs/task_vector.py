"""Many copies of a Kiln task as one ``gymnasium.vector.VectorEnv`` (what ``vector_entry_point`` builds).

All copies step together in numpy, so ``gymnasium.make_vec(id, num_envs=N,
vectorization_mode="vector_entry_point")`` costs about as much as one copy for small N.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from gymnasium.vector import AutoresetMode, VectorEnv
from gymnasium.vector.utils import batch_space

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_error import TaskError

_SUPPORTED_MODES = (AutoresetMode.NEXT_STEP, AutoresetMode.SAME_STEP)


def _is_count(value: Any) -> bool:
    """Whether ``value`` is a whole number >= 1 (``2`` or ``2.0``; not ``True``, ``"2"`` or ``None``)."""
    # The type is checked first: int() of a text, a list or None raises an error of its own, not a TaskError.
    try:
        return not isinstance(value, bool) and isinstance(value, (int, float, np.integer)) and int(value) == value >= 1
    except (OverflowError, ValueError):  # inf, nan
        return False


class TaskVectorEnv(VectorEnv):
    """Runs ``num_envs`` copies of a task's ``BatchedDynamics`` with time limits and autoreset.

    Autoreset follows Gymnasium's modes: ``NEXT_STEP`` (the default, as in Gymnasium's own vector
    envs) returns the last observation of a finished episode and resets that copy on the following
    step, which then reports reward 0 and ignores its action; ``SAME_STEP`` resets at once, returning the
    new start observation and putting the last one in ``infos["final_obs"]`` (mask ``"_final_obs"``).
    Seeding: ``reset(seed=s)`` seeds one generator shared by all copies, so runs are reproducible for a
    given (seed, num_envs) but copy i does not match a single env seeded with s + i.
    """

    def __init__(
        self,
        dynamics: BatchedDynamics,
        num_envs: int,
        max_episode_steps: int | None = None,
        autoreset_mode: AutoresetMode | str = AutoresetMode.NEXT_STEP,
    ) -> None:
        """Create the batch.

        Args:
            dynamics: The task's batched dynamics.
            num_envs: Number of copies, >= 1.
            max_episode_steps: Steps after which an episode is truncated; None for no limit.
            autoreset_mode: AutoresetMode.NEXT_STEP or AutoresetMode.SAME_STEP (or their values).

        Raises:
            TaskError: If num_envs, max_episode_steps or autoreset_mode is invalid.
        """
        if not _is_count(num_envs):
            raise TaskError(f"num_envs must be an integer >= 1, got {num_envs!r}; pass e.g. 8")
        if max_episode_steps is not None and not _is_count(max_episode_steps):
            raise TaskError(
                f"max_episode_steps must be an integer >= 1 or None, got {max_episode_steps!r}; pass e.g. 200"
            )
        try:
            mode = AutoresetMode(autoreset_mode)
        except ValueError:
            mode = None
        if mode not in _SUPPORTED_MODES:
            raise TaskError(
                f"autoreset_mode must be NEXT_STEP or SAME_STEP, got {autoreset_mode!r}; "
                "pass gymnasium.vector.AutoresetMode.NEXT_STEP"
            )
        self.dynamics = dynamics
        self.num_envs = int(num_envs)
        self.max_episode_steps = None if max_episode_steps is None else int(max_episode_steps)
        self.metadata = {"render_modes": [], "autoreset_mode": mode}
        self.render_mode = None
        self.single_observation_space = dynamics.observation_space
        self.single_action_space = dynamics.action_space
        self.observation_space = batch_space(self.single_observation_space, self.num_envs)
        self.action_space = batch_space(self.single_action_space, self.num_envs)
        self._states = np.zeros((self.num_envs, dynamics.state_size))
        self._elapsed = np.zeros(self.num_envs, dtype=np.int64)
        self._needs_reset = np.zeros(self.num_envs, dtype=bool)

    @property
    def states(self) -> np.ndarray:
        """The current (float64) internal states, shape (num_envs, state_size); a copy."""
        return self._states.copy()

    def reset(
        self, *, seed: int | None = None, options: dict[str, Any] | None = None
    ) -> tuple[np.ndarray, dict[str, Any]]:
        """Reset every copy; ``options={"start_state": s}`` sets the start state(s) explicitly.

        Raises:
            ValueError: If seed is not an int or None.
        """
        if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer))):
            raise ValueError(
                f"seed must be an int or None for a Kiln vector task, got {type(seed).__name__}; "
                "pass one int (all copies share one generator)"
            )
        super().reset(seed=None if seed is None else int(seed))
        if options is not None and "start_state" in options:
            self._states = self.dynamics.check_start_states(options["start_state"], self.num_envs)
        else:
            self._states = self.dynamics.sample_start(self.np_random, self.num_envs)
        self._elapsed[:] = 0
        self._needs_reset[:] = False
        return self.dynamics.observe(self._states), {}

    def step(
        self, actions: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict[str, Any]]:
        """Step every copy; see ``gymnasium.vector.VectorEnv.step`` and the class docstring."""
        actions = self.dynamics.clip_actions(actions, self.num_envs)
        states, rewards, terminated = self.dynamics.advance(self._states, actions, self.np_random)
        self._elapsed += 1
        truncated = np.zeros(self.num_envs, dtype=bool)
        if self.max_episode_steps is not None:
            # As Gymnasium's TimeLimit: a copy may report both flags on its last allowed step; terminated
            # then wins for bootstrapping (no state follows).
            truncated = self._elapsed >= self.max_episode_steps
        infos: dict[str, Any] = {}
        mode = self.metadata["autoreset_mode"]
        if mode == AutoresetMode.NEXT_STEP:
            restart = self._needs_reset
            if restart.any():
                # These copies finished last step: start them afresh, discarding this step's outcome.
                states[restart] = self.dynamics.sample_start(self.np_random, int(restart.sum()))
                rewards[restart] = 0.0
                terminated[restart] = False
                truncated[restart] = False
                self._elapsed[restart] = 0
            self._states = states
            self._needs_reset = terminated | truncated
            return self.dynamics.observe(states), rewards, terminated, truncated, infos
        done = terminated | truncated
        observations = self.dynamics.observe(states)
        if done.any():
            infos = {
                "final_obs": observations.copy(),
                "_final_obs": done.copy(),
                "final_info": {},
                "_final_info": done.copy(),
            }
            states[done] = self.dynamics.sample_start(self.np_random, int(done.sum()))
            self._elapsed[done] = 0
            observations = self.dynamics.observe(states)
        self._states = states
        return observations, rewards, terminated, truncated, infos
