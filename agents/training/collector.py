"""Steps one environment with a given action and files the transition in the replay buffer."""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Any

import gymnasium as gym
import numpy as np

from kiln.errors import DivergenceError
from kiln.learner.action_scale import ActionScale
from kiln.training.replay import ReplayBuffer


@dataclass(frozen=True)
class EpisodeEnd:
    """Undiscounted return and length of an episode that just ended."""

    return_: float  # "return" is a Python keyword
    length: int


@dataclass
class EpisodeInProgress:
    """What it takes to rebuild the running episode exactly: how its reset was seeded, and every
    action (in task units) applied since, so that a resumed run can replay them into a fresh env."""

    start: dict[str, Any]  # {"seed": int} for the first episode, else {"rng": <env generator state>}
    actions: list[np.ndarray] = field(default_factory=list)
    return_: float = 0.0
    length: int = 0


def _rng_state(env: gym.Env) -> dict[str, Any]:
    return env.np_random.bit_generator.state


class Collector:
    """Owns the training env's current observation and the running episode's statistics.

    Args:
        env: The training environment.
        replay: Where transitions go.
        scale: Maps the agent's (−1, 1) actions to the env's bounds.
        seed: Reset seed of the first episode (later resets continue the env's own RNG).
    """

    def __init__(self, env: gym.Env, replay: ReplayBuffer, scale: ActionScale, seed: int) -> None:
        self.env, self.replay, self.scale = env, replay, scale
        self.episode = EpisodeInProgress({"seed": int(seed)})
        self.obs = self._reset()
        self.env_step_time = 0.0  # seconds inside env.step, for the run's time split

    def _reset(self) -> np.ndarray:
        start = self.episode.start
        if "seed" in start:
            obs, _ = self.env.reset(seed=start["seed"])
        else:
            self.env.np_random.bit_generator.state = start["rng"]
            obs, _ = self.env.reset()
        _check_finite(obs, "observation", None)
        return obs

    def step(self, action: np.ndarray, step: int | None = None, env_action: np.ndarray | None = None) -> EpisodeEnd | None:
        """Apply ``action`` (agent units), store the transition, reset at episode end.

        The stored next observation is always the one the env returned for this step, also when a
        time limit cut the episode (never the reset observation), and only *termination* is stored
        as terminal: a truncated transition keeps bootstrapping in the critic target.

        Args:
            action: The action in the agent's (−1, 1) units.
            step: The env step, for error messages.
            env_action: ``action`` already mapped to the task's units (a population maps all its
                members' actions in one call); mapped here when ``None``.

        Returns:
            The finished episode's statistics when the episode ended with this step, else ``None``.

        Raises:
            DivergenceError: If the env returned a non-finite observation or reward.
        """
        if env_action is None:
            env_action = self.scale.to_env(action)
        t0 = time.perf_counter()
        next_obs, reward, terminated, truncated, _ = self.env.step(env_action)
        self.env_step_time += time.perf_counter() - t0
        row = self.replay.add(self.obs, action, reward, next_obs, terminated)
        if not np.isfinite(row).all():
            # The row holds every field in float32: name the first non-finite one as the env gave it.
            _check_finite(next_obs, "observation", step)
            _check_finite(np.asarray(reward), "reward", step)
            _check_finite(row, "transition (beyond float32's range)", step)
        self.episode.actions.append(env_action)
        self.episode.return_ += float(reward)
        self.episode.length += 1
        if terminated or truncated:
            ended = EpisodeEnd(self.episode.return_, self.episode.length)
            # The generator's state just before the reset is all a resumed run needs to redo it.
            self.episode = EpisodeInProgress({"rng": _rng_state(self.env)})
            self.obs = self._reset()
            return ended
        self.obs = next_obs
        return None

    def state(self) -> tuple[dict[str, Any], np.ndarray]:
        """The running episode as JSON-able data and its actions as one array (for a checkpoint)."""
        record = {
            "start": self.episode.start,
            "return": self.episode.return_,
            "length": self.episode.length,
            "action_space_rng": self.env.action_space.np_random.bit_generator.state,
        }
        actions = np.asarray(self.episode.actions, dtype=np.float32).reshape(-1, *self.env.action_space.shape)
        return record, actions

    def restore(self, record: dict[str, Any], actions: np.ndarray, expected_obs: np.ndarray) -> None:
        """Rebuild the running episode by redoing its reset and replaying its actions.

        Raises:
            CheckpointError: If the replayed episode does not arrive at the checkpoint's observation
                (the task is not deterministic given its generator).
        """
        from kiln.errors import CheckpointError

        self.episode = EpisodeInProgress(record["start"])
        self.obs = self._reset()
        for env_action in actions:
            self.obs, *_ = self.env.step(env_action)
            self.episode.actions.append(np.asarray(env_action, dtype=np.float32))
        self.episode.return_, self.episode.length = float(record["return"]), int(record["length"])
        self.env.action_space.np_random.bit_generator.state = record["action_space_rng"]
        if not np.array_equal(np.asarray(self.obs, dtype=np.float32), np.asarray(expected_obs, dtype=np.float32)):
            raise CheckpointError(
                f"replaying the episode in progress did not reproduce the checkpoint's state of {self.env.spec.id}: "
                "the task is not deterministic given its seed; pass resume=false to start over"
            )


def _check_finite(values: Any, quantity: str, step: int | None) -> None:
    if np.isfinite(values).all():
        return
    array = np.asarray(values, dtype=np.float64)
    if not np.all(np.isfinite(array)):
        bad = array[~np.isfinite(array)].ravel()[0]
        where = "at reset" if step is None else f"at env step {step}"
        raise DivergenceError(quantity, float(bad) if not math.isnan(bad) else math.nan, where)
