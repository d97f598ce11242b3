"""How far an exported controller is from Kiln's own: onnxruntime against the loaded actor."""

from __future__ import annotations

import numpy as np
import onnxruntime
import torch

from kiln.onnx_export.graph import ACTION, NOISE, OBSERVATION
from kiln.storage.policy_io import Policy


def sample_observations(low: np.ndarray, high: np.ndarray, count: int, rng: np.random.Generator) -> np.ndarray:
    """Observations within a Box's bounds: uniform where both bounds are finite, else Gaussian-based.

    Args:
        low: Lower bounds (``-inf`` allowed).
        high: Upper bounds (``inf`` allowed).
        count: Number of observations.
        rng: The source of the draws.

    Returns:
        ``[count, n]`` float32 observations, each within ``[low, high]``.
    """
    low, high = np.asarray(low, np.float64), np.asarray(high, np.float64)
    has_low, has_high = np.isfinite(low), np.isfinite(high)
    shape = (count, low.size)
    normal, uniform = rng.standard_normal(shape), rng.random(shape)
    # Zeros stand in for infinite bounds so that no inf·0 is formed in the branches not taken.
    low_0, high_0 = np.where(has_low, low, 0.0), np.where(has_high, high, 0.0)
    out = np.select(
        [has_low & has_high, has_low, has_high],
        # Both bounds: uniform over the box; one bound: a half-normal step inward from it.
        [low_0 + uniform * (high_0 - low_0), low_0 + np.abs(normal), high_0 - np.abs(normal)],
        default=normal,
    )
    # float32 rounding may step just outside a bound; keep every observation inside.
    return np.clip(out.astype(np.float32), low.astype(np.float32), high.astype(np.float32))


def kiln_actions(
    policy: Policy, observations: np.ndarray, noise_seed: int | None
) -> tuple[np.ndarray, np.ndarray | None]:
    """Kiln's actions in task units for a batch, and the noise a stochastic draw used.

    The actions come from the way Kiln evaluates (``Policy.act_batch``); a stochastic one draws its
    noise ``torch.randn((batch, m))`` from a generator seeded ``noise_seed``, so the same seed's first
    draw of that shape is exactly the noise the exported graph must be fed to reproduce it.

    Args:
        policy: A loaded policy.
        observations: ``[batch, n]`` float32.
        noise_seed: ``None`` for the deterministic controller, else the seed of the draw.

    Returns:
        ``(actions [batch, m], noise [batch, m] or None)``.
    """
    if noise_seed is None:
        return policy.act_batch(observations, deterministic=True), None
    actions = policy.act_batch(observations, False, torch.Generator().manual_seed(noise_seed))
    noise = torch.randn(actions.shape, generator=torch.Generator().manual_seed(noise_seed))
    return actions, noise.numpy()


def exported_actions(
    session: onnxruntime.InferenceSession, observations: np.ndarray, noise: np.ndarray | None
) -> np.ndarray:
    """The exported controller's actions for a batch (``noise`` only for a stochastic one)."""
    feeds = {OBSERVATION: np.asarray(observations, np.float32)}
    if noise is not None:
        feeds[NOISE] = np.asarray(noise, np.float32)
    return session.run([ACTION], feeds)[0]


def max_difference(model_bytes: bytes, policy: Policy, stochastic: bool, count: int, seed: int) -> float:
    """Largest |onnxruntime − Kiln| over every element of ``count`` observations within the bounds.

    Args:
        model_bytes: The serialised ONNX model.
        policy: The policy it was exported from.
        stochastic: Whether the model takes noise (then Kiln's draw is fed to it).
        count: Number of observations.
        seed: Seed of the observations and of the noise.

    Returns:
        The maximum absolute difference, in the task's action units.
    """
    space = policy.spec["observation_space"]
    low, high = (np.array([float(v) for v in space[k]]) for k in ("low", "high"))
    observations = sample_observations(low, high, count, np.random.default_rng(seed))
    expected, noise = kiln_actions(policy, observations, seed if stochastic else None)
    session = onnxruntime.InferenceSession(model_bytes, providers=["CPUExecutionProvider"])
    return float(np.max(np.abs(exported_actions(session, observations, noise) - expected)))
