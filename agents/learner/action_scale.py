"""Map actions between the agent's (−1, 1) units and the task's Box bounds."""

from __future__ import annotations

import numpy as np


class ActionScale:
    """Affine map between ``[-1, 1]`` and ``[low, high]`` per dimension.

    ``to_env(a) = clip(centre + half_width · a, low, high)`` in float64, with ``centre = (high + low) / 2``
    and ``half_width = (high − low) / 2``; the exported ONNX controller takes these same attributes
    (:mod:`kiln.onnx_export.graph`).

    Args:
        low: The task's lower action bounds.
        high: The task's upper action bounds.
    """

    def __init__(self, low: np.ndarray, high: np.ndarray) -> None:
        self.low = np.asarray(low, dtype=np.float64)
        self.high = np.asarray(high, dtype=np.float64)
        self.centre = (self.high + self.low) / 2.0
        self.half_width = (self.high - self.low) / 2.0

    def to_env(self, action: np.ndarray) -> np.ndarray:
        """Agent units (−1, 1) → task units, clipped to the bounds against round-off."""
        out = self.half_width * np.asarray(action, dtype=np.float64)
        out += self.centre
        # np.clip's Python wrappers cost more than the two ufuncs it amounts to (called every env step).
        np.maximum(out, self.low, out=out)
        return np.minimum(out, self.high, out=out).astype(np.float32)

    def to_agent(self, action: np.ndarray) -> np.ndarray:
        """Task units → agent units (−1, 1)."""
        return ((np.asarray(action, dtype=np.float64) - self.centre) / self.half_width).astype(np.float32)
