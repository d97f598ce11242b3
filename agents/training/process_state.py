"""Torch's process-wide switches that a run sets, put back as the caller had them afterwards.

A run trains on ``threads`` torch threads and, with ``deterministic: true``, with torch's deterministic
kernels. Both are settings of the whole process, not of the run: a library that changed them and
left them changed would slow down, or break, the caller's own torch code after ``kiln.train``
returned. Everything in Kiln that sets them does so through :func:`torch_settings`.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import torch


@dataclass(frozen=True)
class TorchSettings:
    """Torch's process-wide settings that Kiln may change.

    Attributes:
        threads: ``torch.get_num_threads()``, the intra-op thread count.
        deterministic: ``torch.are_deterministic_algorithms_enabled()``.
        warn_only: ``torch.is_deterministic_algorithms_warn_only_enabled()`` (warn instead of raise
            on an operation that has no deterministic kernel).
    """

    threads: int
    deterministic: bool
    warn_only: bool

    @classmethod
    def current(cls) -> TorchSettings:
        """The settings as they are now in this process."""
        return cls(
            torch.get_num_threads(),
            torch.are_deterministic_algorithms_enabled(),
            torch.is_deterministic_algorithms_warn_only_enabled(),
        )

    def apply(self) -> None:
        """Make these the process's settings."""
        if torch.get_num_threads() != self.threads:
            torch.set_num_threads(self.threads)
        torch.use_deterministic_algorithms(self.deterministic, warn_only=self.warn_only)


@contextmanager
def torch_settings(threads: int | None = None, deterministic: bool = False) -> Iterator[TorchSettings]:
    """Set torch's thread count and determinism for the block; on the way out, however the block
    ends, put back what was there on the way in.

    Args:
        threads: Torch threads inside the block; None keeps the caller's count.
        deterministic: Force torch's deterministic kernels inside the block (raising on an operation
            that has none, as ``deterministic: true`` promises bit-identical runs). False keeps the
            caller's setting, whatever it is: a run that does not ask for determinism does not
            switch off a caller's.

    Yields:
        The caller's settings, as they will be restored.

    Raises:
        ValueError: If ``threads`` is below 1 (torch's own refusal, raised before anything changes).
    """
    if threads is not None and threads < 1:
        raise ValueError(f"threads must be at least 1, got {threads}")
    before = TorchSettings.current()
    try:
        if threads is not None:
            torch.set_num_threads(threads)
        if deterministic:
            torch.use_deterministic_algorithms(True)
        yield before
    finally:
        before.apply()
