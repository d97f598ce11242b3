"""Map actions between the agent's (−1, 1) units and the task's Box bounds."""

from __future__ import annotations

import numpy as np

# Actions of at most this many numbers are mapped in Python floats (common practice, no source: a few
# numbers cost less in a Python loop than in NumPy's per-call overhead).
_FLOAT_PATH_MAX = 4


class ActionScale:
    """Affine map between ``[-1, 1]`` and ``[low, high]`` per dimension.

    Args:
        low: The task's lower action bounds.
        high: The task's upper action bounds.
    """

    def __init__(self, low: np.ndarray, high: np.ndarray) -> None:
        self.low = np.asarray(low, dtype=np.float64)
        self.high = np.asarray(high, dtype=np.float64)
        self._centre = (self.high + self.low) / 2.0
        self._half = (self.high - self.low) / 2.0
        self._floats = tuple(v.tolist() for v in (self._half, self._centre, self.low, self.high))

    def to_env(self, action: np.ndarray) -> np.ndarray:
        """Agent units (−1, 1) → task units, clipped to the bounds against round-off."""
        action = np.asarray(action)
        if action.size <= _FLOAT_PATH_MAX and action.shape[-1:] == self._half.shape:
            # The same float64 arithmetic in Python floats (IEEE doubles, so the same bits): a training
            # step maps one agent's action, where six NumPy calls cost more than the arithmetic.
            half, centre, low, high = self._floats
            mapped = [
                [min(max(h * a + c, lo), hi) for a, h, c, lo, hi in zip(row, half, centre, low, high)]
                for row in action.reshape(-1, action.shape[-1]).tolist()
            ]
            return np.array(mapped, dtype=np.float32).reshape(action.shape)
        out = self._half * np.asarray(action, dtype=np.float64)
        out += self._centre
        # np.clip's Python wrappers cost more than the two ufuncs it amounts to (called every env step).
        np.maximum(out, self.low, out=out)
        return np.minimum(out, self.high, out=out).astype(np.float32)

    def to_agent(self, action: np.ndarray) -> np.ndarray:
        """Task units → agent units (−1, 1)."""
        return ((np.asarray(action, dtype=np.float64) - self._centre) / self._half).astype(np.float32)
