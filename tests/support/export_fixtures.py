"""Saved policies for the export tests, and the exported file run by onnxruntime."""

from pathlib import Path

import gymnasium as gym
import numpy as np
import onnxruntime
import torch

from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import build_spec, save_policy

# An observation space with every kind of bound: both finite, one side only, and none.
OBS_LOW = np.array([-1.0, -1.0, -8.0, 0.0, 0.0] + [-np.inf] * 12, np.float32)
OBS_HIGH = np.array([1.0, 1.0, 8.0, np.inf, np.inf, 5.0, 5.0] + [np.inf] * 10, np.float32)
# Asymmetric action bounds, so the affine rescaling is exercised beyond a plain ±1 → ±k.
ACT_LOW = np.array([-2.0, 0.0, -1.0, -0.5, -3.0, 1.0], np.float32)
ACT_HIGH = np.array([2.0, 1.0, 1.0, 0.5, 0.0, 4.0], np.float32)


def save_test_policy(
    folder: Path, nonlinearity: str = "relu", widths: tuple[int, ...] = (256, 256), last_bias: np.ndarray | None = None
) -> Path:
    """A freshly initialised actor of the default shape (as HalfCheetah-v5: obs 17, act 6), saved.

    ``last_bias`` replaces the output layer's bias (12 numbers: 6 for the mean, 6 for the raw log-std).
    """
    actor = SquashedGaussianActor(17, 6, widths, nonlinearity, (-20.0, 2.0), torch.Generator().manual_seed(0))
    if last_bias is not None:
        with torch.no_grad():
            actor.body.layers[-1].bias.copy_(torch.as_tensor(last_bias, dtype=torch.float32).reshape(1, 1, -1))
    spec = build_spec(
        actor, gym.spaces.Box(OBS_LOW, OBS_HIGH), gym.spaces.Box(ACT_LOW, ACT_HIGH),
        {"id": "HalfCheetah-v5", "kwargs": {}, "max_episode_steps": None}, {},
    )  # fmt: skip
    return save_policy(folder, actor, spec)


def onnx_session(model: Path) -> onnxruntime.InferenceSession:
    """onnxruntime's CPU session for an exported file."""
    return onnxruntime.InferenceSession(str(model), providers=["CPUExecutionProvider"])


def onnx_actions(model: Path, observations: np.ndarray, noise: np.ndarray | None = None) -> np.ndarray:
    """The exported file run by onnxruntime on a batch."""
    feeds = {"observation": observations.astype(np.float32)}
    if noise is not None:
        feeds["noise"] = noise.astype(np.float32)
    return onnx_session(model).run(["action"], feeds)[0]
