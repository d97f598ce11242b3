"""Q-bias diagnostic: the critic's soft-Q estimate against the soft return actually obtained."""

from __future__ import annotations

import gymnasium as gym
import numpy as np
import torch

from agents.action_scale import ActionScale
from agents.sac import SoftActorCritic


def q_minus_return(
    agent: SoftActorCritic, env: gym.Env, scale: ActionScale, seeds: list[int], generator: torch.Generator
) -> float:
    """Mean over episodes of Q(s₀, a₀) − Ĝ₀, with episodes run by the *stochastic* policy.

    Policy samples come from ``generator`` (not the training one), so the diagnostic never changes
    the course of training. Ĝ₀ = r₀ + Σ_{t≥1} γᵗ (r_t − α log π(a_t|s_t)) is the realised soft return from the first
    state-action; it matches what the soft Q estimates (the entropy of a₀ itself is not part of
    Q(s₀, a₀)). The critic estimates the stochastic policy, so deterministic episodes would not do.
    A positive value means over-estimation. On a task cut by a time limit Ĝ₀ misses the reward
    beyond the limit, which biases the figure upward by at most γ^T times the soft value there.
    """
    gamma = agent.settings.discount
    gaps = []
    for seed in seeds:
        obs, _ = env.reset(seed=seed)
        action, _ = agent.act_with_bonus(obs, generator)
        q0 = agent.soft_q(obs, action)
        realised, weight = 0.0, 1.0
        while True:
            obs, reward, terminated, truncated, _ = env.step(scale.to_env(action))
            realised += weight * float(reward)
            weight *= gamma
            if terminated or truncated:
                break
            action, bonus = agent.act_with_bonus(obs, generator)
            realised -= weight * bonus
        gaps.append(q0 - realised)
    return float(np.mean(gaps))
