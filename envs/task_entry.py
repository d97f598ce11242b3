"""Gymnasium entry points for any ``BatchedDynamics``: the only adapter code a Kiln task needs.

A task writes its dynamics class and a frozen dataclass of options; ``register_task`` gives Gymnasium a
single-copy ``entry_point`` and a batched ``vector_entry_point`` built from them, so both
``gymnasium.make(id, **options)`` and ``gymnasium.make_vec(id, num_envs=N,
vectorization_mode="vector_entry_point", **options)`` work, with one check of option names for all tasks.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import gymnasium
from gymnasium.vector import AutoresetMode

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_env import TaskEnv
from kiln.envs.task_options import options_from_kwargs
from kiln.envs.task_vector import TaskVectorEnv


# Entry points are small frozen dataclasses rather than closures: they compare equal when they build
# the same task (the registry can be checked), and pickle by reference for Gymnasium's async vector env.
@dataclass(frozen=True)
class TaskEntry:
    """A registered task's dynamics, read from keyword arguments; the base of both entry points.

    Attributes:
        task_id: The registered id (named in messages).
        dynamics_type: The task's dynamics class.
    """

    task_id: str
    dynamics_type: type[BatchedDynamics]

    def dynamics(self, options: Mapping[str, Any]) -> BatchedDynamics:
        """Read the options and build the dynamics.

        Args:
            options: Keyword arguments naming fields of ``dynamics_type.options_type``.

        Returns:
            The dynamics.

        Raises:
            TaskError: On an unknown or invalid option.
        """
        return self.dynamics_type(options_from_kwargs(self.task_id, self.dynamics_type.options_type, options))


class SingleCopyEntry(TaskEntry):
    """``entry_point`` of a task: ``gymnasium.make`` calls it with the task's options."""

    def __call__(self, render_mode: str | None = None, **options: Any) -> TaskEnv:
        """Build one copy.

        Args:
            render_mode: Must be None (Kiln's tasks draw nothing).
            **options: The task's options.

        Returns:
            The environment (``gymnasium.make`` adds the time limit).

        Raises:
            TaskError: On an unknown or invalid option, or a render mode.
        """
        return TaskEnv(self.dynamics(options), render_mode)


class BatchEntry(TaskEntry):
    """``vector_entry_point`` of a task: ``gymnasium.make_vec`` calls it with the copy count and options."""

    def __call__(
        self,
        num_envs: int = 1,
        max_episode_steps: int | None = None,
        autoreset_mode: AutoresetMode | str = AutoresetMode.NEXT_STEP,
        **options: Any,
    ) -> TaskVectorEnv:
        """Build ``num_envs`` copies stepped together.

        Args:
            num_envs: Number of copies.
            max_episode_steps: Time limit (``gymnasium.make_vec`` fills in the registered one).
            autoreset_mode: Gymnasium autoreset mode, NEXT_STEP or SAME_STEP.
            **options: The task's options.

        Returns:
            The vector environment.

        Raises:
            TaskError: On an unknown or invalid option, or a bad copy count, limit or mode.
        """
        return TaskVectorEnv(self.dynamics(options), num_envs, max_episode_steps, autoreset_mode)


def register_task(task_id: str, dynamics_type: type[BatchedDynamics], max_episode_steps: int | None = None) -> None:
    """Register a task written as batched dynamics with Gymnasium, in single-copy and batched forms.

    Args:
        task_id: The id, e.g. ``kiln/FiringHold-v0`` or a user's ``MyTask-v0``.
        dynamics_type: A ``BatchedDynamics`` subclass whose ``options_type`` is a dataclass.
        max_episode_steps: The registered time limit; None for a task that ends episodes itself.

    Raises:
        TypeError: If ``dynamics_type`` is not such a class (a mistake in the task's code).
    """
    if not (isinstance(dynamics_type, type) and issubclass(dynamics_type, BatchedDynamics)):
        raise TypeError(f"dynamics_type must be a BatchedDynamics subclass, got {dynamics_type!r}")
    if not dataclasses.is_dataclass(getattr(dynamics_type, "options_type", None)):
        raise TypeError(
            f"{dynamics_type.__name__}.options_type must be a dataclass of the task's options; declare one"
        )
    gymnasium.register(
        id=task_id,
        entry_point=SingleCopyEntry(task_id, dynamics_type),
        vector_entry_point=BatchEntry(task_id, dynamics_type),
        max_episode_steps=max_episode_steps,
    )
