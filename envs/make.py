"""Build a Gymnasium task from Kiln's ``env:`` config and check that Kiln can drive it."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import gymnasium as gym
import numpy as np

from agents.errors import ConfigError


def make_env(
    env_id: str,
    kwargs: Mapping[str, Any] | None = None,
    max_episode_steps: int | None = None,
    render_mode: str | None = None,
) -> gym.Env:
    """Create a task by Gymnasium id and validate its spaces.

    Args:
        env_id: A registered Gymnasium id, e.g. ``Pendulum-v1`` or ``kiln/...``.
        kwargs: Keyword arguments for the task's constructor.
        max_episode_steps: Override of the registered time limit (``None`` keeps it).
        render_mode: Passed to Gymnasium (``"rgb_array"`` for video).

    Returns:
        The environment, with Gymnasium's own time-limit wrapper.

    Raises:
        ConfigError: If the id is unknown or the spaces are not a flat Box observation and a
            bounded Box action.
    """
    import envs  # noqa: F401  (registers Kiln's own tasks)

    options: dict[str, Any] = dict(kwargs or {})
    if max_episode_steps is not None:
        if int(max_episode_steps) <= 0:
            raise ConfigError(f"env.max_episode_steps must be > 0, got {max_episode_steps}: use a positive step count or null")
        options["max_episode_steps"] = int(max_episode_steps)
    if render_mode is not None:
        options["render_mode"] = render_mode
    try:
        env = gym.make(env_id, **options)
    except gym.error.Error as err:
        if isinstance(err, (gym.error.NameNotFound, gym.error.NamespaceNotFound, gym.error.VersionNotFound)):
            raise ConfigError(
                f"unknown env id {env_id!r}: use a registered Gymnasium id such as Pendulum-v1 "
                f"(list them with gymnasium.pprint_registry()) or an env preset such as env=pendulum"
            ) from None
        raise ConfigError(f"cannot create env {env_id!r}: {err}") from None
    except (TypeError, ValueError) as err:
        raise ConfigError(f"env {env_id!r} rejected its arguments ({err}): fix env.kwargs") from None
    check_spaces(env, env_id)
    return env


def check_spaces(env: gym.Env, env_id: str) -> None:
    """Raise :class:`ConfigError` unless the task has a flat Box observation and a bounded Box action."""
    obs_space, act_space = env.observation_space, env.action_space
    if not isinstance(act_space, gym.spaces.Box):
        env.close()
        raise ConfigError(
            f"env {env_id!r} has a {type(act_space).__name__} action space: Kiln trains continuous "
            f"controllers and needs a Box action space"
        )
    if not (np.all(np.isfinite(act_space.low)) and np.all(np.isfinite(act_space.high))):
        env.close()
        raise ConfigError(
            f"env {env_id!r} has an unbounded action space: wrap it with "
            f"gymnasium.wrappers.ClipAction/RescaleAction to finite bounds first"
        )
    if not isinstance(obs_space, gym.spaces.Box) or len(obs_space.shape) != 1:
        env.close()
        kind = type(obs_space).__name__ if not isinstance(obs_space, gym.spaces.Box) else f"Box{obs_space.shape}"
        raise ConfigError(
            f"env {env_id!r} has a {kind} observation space: Kiln needs a flat (1-D) Box; "
            f"flatten it with gymnasium.wrappers.FlattenObservation in a registered task"
        )
