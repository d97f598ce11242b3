"""Steps one environment with a given action and files the transition in the replay buffer."""

from __future__ import annotations

from dataclasses import dataclass

import gymnasium as gym
import numpy as np

from agents.action_scale import ActionScale
from agents.replay import ReplayBuffer


@dataclass(frozen=True)
class EpisodeEnd:
    """Undiscounted return and length of an episode that just ended."""

    return_: float  # "return" is a Python keyword
    length: int


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
        self.obs, _ = env.reset(seed=seed)
        self._return, self._length = 0.0, 0

    def step(self, action: np.ndarray) -> EpisodeEnd | None:
        """Apply ``action`` (agent units), store the transition, reset at episode end.

        The stored next observation is always the one the env returned for this step, also when a
        time limit cut the episode (never the reset observation), and only *termination* is stored
        as terminal: a truncated transition keeps bootstrapping in the critic target.

        Returns:
            The finished episode's statistics when the episode ended with this step, else ``None``.
        """
        next_obs, reward, terminated, truncated, _ = self.env.step(self.scale.to_env(action))
        self.replay.add(self.obs, action, float(reward), next_obs, bool(terminated))
        self._return += float(reward)
        self._length += 1
        if terminated or truncated:
            ended = EpisodeEnd(self._return, self._length)
            self._return, self._length = 0.0, 0
            self.obs, _ = self.env.reset()
            return ended
        self.obs = next_obs
        return None
