"""Build a Gymnasium task from a ``TaskSpec`` and check that Kiln can drive it."""

from __future__ import annotations

import importlib
import os
from collections.abc import Callable
from typing import Any, TypeVar

import gymnasium as gym
import numpy as np
from gymnasium.vector import VectorEnv

from kiln.envs.task_error import TaskError
from kiln.envs.task_spec import TaskSpec

Built = TypeVar("Built", gym.Env, VectorEnv)
_NOT_FOUND = (gym.error.NameNotFound, gym.error.NamespaceNotFound, gym.error.VersionNotFound)


def make_env(spec: TaskSpec, render_mode: str | None = None) -> gym.Env:
    """Create one copy of a task and validate its spaces.

    Args:
        spec: The task: a registered id (or ``module:id``), its options and time limit.
        render_mode: Passed to Gymnasium (``"rgb_array"`` for video).

    Returns:
        The environment, with Gymnasium's own time-limit wrapper.

    Raises:
        TaskError: If the id is unknown, its module cannot be imported, the task refuses its options,
            or the spaces are not a flat Box observation and a bounded Box action.
    """
    task_id, options = _registered_id(spec.id), _options(spec)
    if render_mode is not None:
        options["render_mode"] = render_mode
    env = _created(spec, lambda: gym.make(task_id, **options))
    _close_unless_drivable(env, env.observation_space, env.action_space, spec.id)
    return env


def make_vector_env(spec: TaskSpec, copies: int) -> VectorEnv:
    """Create ``copies`` copies of a task stepped together by its batched ``vector_entry_point``.

    Args:
        spec: The task; it must be registered with a ``vector_entry_point`` (every Kiln task is).
        copies: Number of copies, >= 1.

    Returns:
        The vector environment (time limit from the spec, else the registered one).

    Raises:
        TaskError: As for :func:`make_env`, or if the task has no batched form or copies is not >= 1.
    """
    if isinstance(copies, bool) or not isinstance(copies, (int, np.integer)) or copies < 1:
        raise TaskError(f"copies must be an integer >= 1, got {copies!r}; pass e.g. 8")
    task_id, options = _registered_id(spec.id), _options(spec)
    registered = gym.registry.get(task_id)
    if registered is not None and registered.vector_entry_point is None:
        raise TaskError(
            f"{spec.id} has no batched form (vector_entry_point): use a Kiln task such as "
            "kiln/FiringHold-v0, or register the task with kiln.envs.task_entry.register_task"
        )
    vector_env = _created(
        spec,
        lambda: gym.make_vec(task_id, num_envs=int(copies), vectorization_mode="vector_entry_point", **options),
    )
    single_observation_space, single_action_space = vector_env.single_observation_space, vector_env.single_action_space
    _close_unless_drivable(vector_env, single_observation_space, single_action_space, spec.id)
    return vector_env


def _options(spec: TaskSpec) -> dict[str, Any]:
    """Keyword arguments for Gymnasium's constructors: the task's options and, if set, its time limit."""
    options = dict(spec.kwargs)
    if spec.max_episode_steps is not None:
        options["max_episode_steps"] = spec.max_episode_steps
    return options


def _registered_id(task_id: str) -> str:
    """The id to look up in Gymnasium's registry, importing ``module`` first for a ``module:id``.

    Raises:
        TaskError: If the module cannot be imported.
    """
    module, separator, name = task_id.partition(":")
    if not separator:
        return task_id
    # The module is looked up on sys.path as the caller has it, which is not changed here: the commands
    # put the folder they run from on it (kiln.cli), a Python caller decides for its own process.
    try:
        importlib.import_module(module)
    except ModuleNotFoundError as err:
        if err.name is not None and (module == err.name or module.startswith(err.name + ".")):
            raise TaskError(
                f"cannot import module {module!r} named in the task id {task_id!r}: it must be importable "
                f"from the current directory ({os.getcwd()}) for a kiln command, on sys.path for a Python "
                "caller, or installed"
            ) from None
        raise TaskError(
            f"module {module!r} of task {task_id!r} failed to import ({err}): install what it needs"
        ) from None
    except Exception as err:  # any error in a user's module is reported in one line, not a traceback
        raise TaskError(
            f"module {module!r} of task {task_id!r} failed to import ({type(err).__name__}: {_first_line(err)}): "
            "fix it"
        ) from None
    return name


def _created(spec: TaskSpec, build: Callable[[], Built]) -> Built:
    """Run Gymnasium's constructor, turning its errors into one-line :class:`TaskError` messages."""
    module, separator, name = spec.id.partition(":")
    try:
        return build()
    except TaskError:
        raise  # a Kiln task's own message already names the problem and the fix
    except gym.error.Error as err:
        if separator and (isinstance(err, _NOT_FOUND) or name not in gym.registry):
            raise TaskError(
                f"module {module!r} was imported but registers no task {name!r}: call gymnasium.register("
                f"{name!r}, ...) when it is imported"
            ) from None
        if isinstance(err, _NOT_FOUND):
            raise TaskError(
                f"unknown env id {spec.id!r}: use a registered Gymnasium id such as Pendulum-v1 "
                f"(list them with gymnasium.pprint_registry()) or an env preset such as env=pendulum"
            ) from None
        raise TaskError(f"cannot create env {spec.id!r}: {_first_line(err)}") from None
    except (TypeError, ValueError) as err:
        raise TaskError(f"env {spec.id!r} rejected its arguments ({_first_line(err)}): fix env.kwargs") from None


def _first_line(err: Exception) -> str:
    """The first line of an error's message: Kiln reports every task problem in one line."""
    return (str(err).splitlines() or [""])[0]


def _close_unless_drivable(
    env: gym.Env | VectorEnv, observation_space: gym.Space, action_space: gym.Space, task_id: str
) -> None:
    """Close ``env`` and raise unless :func:`check_spaces` accepts its (single-copy) spaces."""
    try:
        check_spaces(observation_space, action_space, task_id)
    except TaskError:
        env.close()
        raise


def check_spaces(observation_space: gym.Space, action_space: gym.Space, task_id: str) -> None:
    """Check that Kiln can drive a task: a flat Box observation and a bounded Box action.

    Args:
        observation_space: One copy's observation space.
        action_space: One copy's action space.
        task_id: The task's id, for the message.

    Raises:
        TaskError: If either space is unusable (the message says how to adapt the task).
    """
    if not isinstance(action_space, gym.spaces.Box):
        raise TaskError(
            f"env {task_id!r} has a {type(action_space).__name__} action space: Kiln trains continuous "
            f"controllers and needs a Box action space"
        )
    if not (np.all(np.isfinite(action_space.low)) and np.all(np.isfinite(action_space.high))):
        raise TaskError(
            f"env {task_id!r} has an unbounded action space: wrap it with "
            f"gymnasium.wrappers.ClipAction/RescaleAction to finite bounds first"
        )
    if not isinstance(observation_space, gym.spaces.Box) or len(observation_space.shape) != 1:
        kind = (
            type(observation_space).__name__
            if not isinstance(observation_space, gym.spaces.Box)
            else f"Box{observation_space.shape}"
        )
        raise TaskError(
            f"env {task_id!r} has a {kind} observation space: Kiln needs a flat (1-D) Box; "
            f"flatten it with gymnasium.wrappers.FlattenObservation in a registered task"
        )
