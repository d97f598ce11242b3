"""The one definition of a Kiln task's dynamics, written for a batch of copies at once.

Each Kiln task writes its dynamics once, on arrays with a leading copy axis, and takes its options from
a frozen dataclass. ``kiln.envs.task_env`` runs one copy as a ``gymnasium.Env``, ``kiln.envs.task_vector`` runs
many as a ``gymnasium.vector.VectorEnv``, and ``kiln.envs.task_entry`` registers both for any dynamics class.
Keeping a single batched definition means the single and vector forms cannot drift apart.
"""

from __future__ import annotations

import abc
from typing import Any, ClassVar

import numpy as np
from gymnasium import spaces


class BatchedDynamics(abc.ABC):
    """Dynamics of one task on a batch of copies (states float64, shape (count, state_size)).

    Subclasses set the class attribute ``options_type``: a frozen dataclass whose fields are the task's
    options (the keyword arguments of ``gymnasium.make``), with defaults, validated in its
    ``__post_init__`` (raising ``kiln.envs.task_error.TaskError``). Their ``__init__(options)`` calls this one and
    sets ``observation_space`` and ``action_space`` (float32 Boxes for a single copy) and ``state_size``;
    they implement the three abstract methods below.
    """

    options_type: ClassVar[type]
    observation_space: spaces.Box
    action_space: spaces.Box
    state_size: int

    def __init__(self, options: Any) -> None:
        """Keep the task's options.

        Args:
            options: An instance of ``options_type``, already validated.
        """
        self.options = options

    @abc.abstractmethod
    def sample_start(self, rng: np.random.Generator, count: int) -> np.ndarray:
        """Draw ``count`` start states, shape (count, state_size)."""

    @abc.abstractmethod
    def advance(
        self, states: np.ndarray, actions: np.ndarray, rng: np.random.Generator
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Take one step on every copy.

        Args:
            states: Current states, shape (count, state_size).
            actions: Actions already clipped to ``action_space``, float64, shape (count, action_size).
            rng: The generator all randomness must come from (for seeding).

        Returns:
            (next_states, rewards of shape (count,), terminated flags of shape (count,)).
        """

    @abc.abstractmethod
    def observe(self, states: np.ndarray) -> np.ndarray:
        """Observations for the given states, float32, shape (count, *observation_space.shape)."""

    def check_start_states(self, start: np.ndarray, count: int) -> np.ndarray:
        """Broadcast a caller-chosen start state (``reset(options={"start_state": ...})``) to the batch.

        Args:
            start: One state of shape (state_size,) or one per copy, shape (count, state_size).
            count: Number of copies.

        Returns:
            float64 states, shape (count, state_size).

        Raises:
            ValueError: If the shape does not fit.
        """
        start = np.asarray(start, dtype=np.float64)
        if start.shape not in ((self.state_size,), (count, self.state_size)):
            raise ValueError(
                f"start_state must have shape ({self.state_size},) or ({count}, {self.state_size}), "
                f"got {start.shape}; pass one state or one per copy"
            )
        return np.array(np.broadcast_to(start, (count, self.state_size)))

    def clip_actions(self, actions: np.ndarray, count: int) -> np.ndarray:
        """Reshape actions to (count, action_size) float64 and clip them to the action bounds.

        Raises:
            ValueError: If the actions cannot be reshaped to (count, action_size).
        """
        shape = (count, *self.action_space.shape)
        actions = np.asarray(actions, dtype=np.float64)
        if actions.size != int(np.prod(shape)):
            raise ValueError(
                f"actions must have shape {shape} (or the single-copy shape {self.action_space.shape}), "
                f"got {actions.shape}; pass one action per copy"
            )
        # Out-of-bounds actions are clipped, as a physical actuator saturates; tasks say in their
        # docstrings whether clipping matters for their exact solution.
        return np.clip(actions.reshape(shape), self.action_space.low, self.action_space.high)
