"""Registers Kiln's own tasks with Gymnasium under the ``kiln/`` namespace.

Each task is a ``BatchedDynamics`` class; ``kiln.envs.task_entry.register_task`` gives it a single-copy
``entry_point`` and a batched ``vector_entry_point``, so both ``gymnasium.make(id)`` and
``gymnasium.make_vec(id, num_envs=N, vectorization_mode="vector_entry_point")`` work. Keyword arguments to
either are the task's options (the fields of its ``options_type``; see each task's module).
"""

from __future__ import annotations

import gymnasium

from kiln.envs.bandit import DamperTrimDynamics
from kiln.envs.dock import CarDockDynamics
from kiln.envs.lqr import FiringHoldDynamics
from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_entry import register_task

# id -> (dynamics, time limit or None)
KILN_TASKS: dict[str, tuple[type[BatchedDynamics], int | None]] = {
    # Linear-quadratic set-point holding with Gaussian noise; exact soft solution in kiln.envs.lqr_solution.
    "kiln/FiringHold-v0": (FiringHoldDynamics, 200),
    # One-step bandit on a tanh-bounded action; terminates itself, so no time limit is needed.
    "kiln/DamperTrim-v0": (DamperTrimDynamics, None),
    # Reaching with a true terminal state inside a time limit (terminated vs truncated).
    "kiln/CarDock-v0": (CarDockDynamics, 200),
}


def register_kiln_tasks() -> None:
    """Register every Kiln task id with Gymnasium; safe to call more than once.

    Ids already present in ``gymnasium.registry`` are left untouched, so re-importing ``envs`` (or a
    user registering their own variant first) never raises or warns.
    """
    for task_id, (dynamics_type, time_limit) in KILN_TASKS.items():
        if task_id not in gymnasium.registry:
            register_task(task_id, dynamics_type, time_limit)
