"""Evaluation rollouts: run whole episodes with a fixed policy and summarise them."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import gymnasium as gym
import numpy as np


@dataclass(frozen=True)
class EpisodeSummary:
    """Undiscounted return and length of one episode, and whether it ended by termination."""

    seed: int
    ret: float
    length: int
    terminated: bool


def run_episodes(
    env: gym.Env, policy: Callable[[np.ndarray], np.ndarray], seeds: list[int]
) -> list[EpisodeSummary]:
    """Run one episode per seed; ``policy`` maps an observation to an action in the task's units."""
    out = []
    for seed in seeds:
        obs, _ = env.reset(seed=seed)
        total, steps, terminated, truncated = 0.0, 0, False, False
        while not (terminated or truncated):
            obs, reward, terminated, truncated, _ = env.step(policy(obs))
            total += float(reward)
            steps += 1
        out.append(EpisodeSummary(seed=seed, ret=total, length=steps, terminated=bool(terminated)))
    return out


def summarise(episodes: list[EpisodeSummary]) -> dict[str, float]:
    """Mean, std (population), min and max of return and length."""
    returns = np.array([e.ret for e in episodes])
    lengths = np.array([e.length for e in episodes])
    return {
        "episodes": len(episodes),
        "return_mean": float(returns.mean()),
        "return_std": float(returns.std()),
        "return_min": float(returns.min()),
        "return_max": float(returns.max()),
        "length_mean": float(lengths.mean()),
        "length_std": float(lengths.std()),
        "length_min": int(lengths.min()),
        "length_max": int(lengths.max()),
    }


def evaluation_seeds(run_seed: int, episodes: int) -> list[int]:
    """Reset seeds for evaluation: the same start states at every evaluation of a run, and disjoint
    from the training env's seed so evaluation never replays a training episode's start."""
    base = 1_000_003 * (run_seed + 1)
    return [base + i for i in range(episodes)]
