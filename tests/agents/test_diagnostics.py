"""The Q-bias diagnostic against hand arithmetic of the soft return (definition in DESIGN.md)."""

from types import SimpleNamespace

import gymnasium as gym
import numpy as np
import pytest
import torch

from agents.action_scale import ActionScale
from agents.diagnostics import q_minus_return


class _UnitReward(gym.Env):
    observation_space = gym.spaces.Box(-np.inf, np.inf, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return np.zeros(1, np.float32), {}

    def step(self, action):
        return np.zeros(1, np.float32), 1.0, False, False, {}


def test_q_minus_return_by_hand():
    # Stub agent: Q(s₀, a₀) = 5, α·log π(a|s) = 0.2 at every state, γ = 0.9; reward 1 per step,
    # episode cut at 3 steps. Realised soft return from the first state-action:
    #   Ĝ₀ = r₀ + γ(r₁ − 0.2) + γ²(r₂ − 0.2) = 1 + 0.9·0.8 + 0.81·0.8 = 2.368
    # so the bias is 5 − 2.368 = 2.632 (the entropy term of a₀ is not part of Q(s₀, a₀)).
    agent = SimpleNamespace(
        settings=SimpleNamespace(discount=0.9),
        act_with_bonus=lambda obs, generator: (np.zeros(1, np.float32), 0.2),
        soft_q=lambda obs, action: 5.0,
    )
    env = gym.wrappers.TimeLimit(_UnitReward(), max_episode_steps=3)
    scale = ActionScale(np.array([-1.0]), np.array([1.0]))
    assert q_minus_return(agent, env, scale, [0, 1], torch.Generator()) == pytest.approx(2.632)
