"""A pickle that creates a marker file when it is unpickled.

A loader that never unpickles leaves the marker absent; one that calls ``pickle.load``,
``torch.load(weights_only=False)`` or anything built on them creates it. Tests place these bytes
under every file name a loader reads and then assert that the marker does not exist.
"""

from __future__ import annotations

import io
import pickle
from pathlib import Path

import torch


class _TouchOnLoad:
    """Unpickles into a call of ``exec`` that creates ``marker`` (what an attacker's file would do)."""

    def __init__(self, marker: Path) -> None:
        self.marker = str(marker)

    def __reduce__(self) -> tuple[object, tuple[str]]:
        return exec, (f"open({self.marker!r}, 'w').close()",)


def pickle_bomb(marker: Path) -> bytes:
    """Plain pickle bytes that create ``marker`` when loaded with ``pickle.loads``."""
    return pickle.dumps(_TouchOnLoad(marker))


def torch_bomb(marker: Path) -> bytes:
    """``torch.save`` bytes (a zip holding a pickle) that create ``marker`` when loaded with
    ``torch.load(..., weights_only=False)``."""
    buffer = io.BytesIO()
    torch.save({"weights": _TouchOnLoad(marker)}, buffer)
    return buffer.getvalue()
