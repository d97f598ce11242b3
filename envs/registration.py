"""Registers Kiln's own tasks with Gymnasium under the ``kiln/`` namespace.

Each id has a single-copy ``entry_point`` and a numpy-batched ``vector_entry_point``, so both
``gymnasium.make(id)`` and ``gymnasium.make_vec(id, num_envs=N, vectorization_mode="vector_entry_point")``
work. Keyword arguments to either are the task's options (see each task's module).
"""

from __future__ import annotations

import gymnasium

# id -> (module:class for one copy, module:class for the batch, time limit or None)
KILN_TASKS: dict[str, tuple[str, str, int | None]] = {
    # Linear-quadratic set-point holding with Gaussian noise; exact soft solution in envs.lqr_solution.
    "kiln/FiringHold-v0": ("envs.lqr:FiringHoldEnv", "envs.lqr:FiringHoldVectorEnv", 200),
    # One-step bandit on a tanh-bounded action; terminates itself, so no time limit is needed.
    "kiln/DamperTrim-v0": ("envs.bandit:DamperTrimEnv", "envs.bandit:DamperTrimVectorEnv", None),
    # Reaching with a true terminal state inside a time limit (terminated vs truncated).
    "kiln/CarDock-v0": ("envs.dock:CarDockEnv", "envs.dock:CarDockVectorEnv", 200),
}


def register_kiln_tasks() -> None:
    """Register every Kiln task id with Gymnasium; safe to call more than once.

    Ids already present in ``gymnasium.registry`` are left untouched, so re-importing ``envs`` (or a
    user registering their own variant first) never raises or warns.
    """
    for task_id, (entry_point, vector_entry_point, time_limit) in KILN_TASKS.items():
        if task_id in gymnasium.registry:
            continue
        gymnasium.register(
            id=task_id,
            entry_point=entry_point,
            vector_entry_point=vector_entry_point,
            max_episode_steps=time_limit,
        )
