"""Reading scalar series from a run's TensorBoard event files with TensorBoard's own reader."""

from __future__ import annotations

import logging
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from tensorboard.backend.event_processing import event_accumulator

# 0 keeps every scalar (the default keeps a reservoir sample, which would drop evaluations);
# the rest are never read here, so keep one of each to save memory.
_SIZE_GUIDANCE = {
    event_accumulator.SCALARS: 0,
    event_accumulator.TENSORS: 1,
    event_accumulator.HISTOGRAMS: 1,
    event_accumulator.COMPRESSED_HISTOGRAMS: 1,
    event_accumulator.IMAGES: 1,
    event_accumulator.AUDIO: 1,
}


@dataclass(frozen=True)
class ScalarSeries:
    """One scalar tag of one run.

    Attributes:
        steps: Environment steps, strictly increasing (int64).
        values: The scalar at each step (float64).
    """

    steps: np.ndarray
    values: np.ndarray

    @property
    def last_step(self) -> int:
        """The last step logged."""
        return int(self.steps[-1])

    def value_at(self, step: int) -> tuple[int, float] | None:
        """The last value logged at or before ``step``.

        Args:
            step: Environment step.

        Returns:
            ``(logged_step, value)``, or None if nothing was logged at or before ``step``.
        """
        position = int(np.searchsorted(self.steps, step, side="right")) - 1
        if position < 0:
            return None
        return int(self.steps[position]), float(self.values[position])


@contextmanager
def _tensorboard_quiet() -> Iterator[None]:
    """TensorBoard's logger at ERROR while the block reads, then back at the caller's level.

    TensorBoard reports odd records through Python logging, which would print to stderr in the middle
    of the report; the comparison says what matters itself. The level is the caller's setting, so it
    is changed only while Kiln reads.
    """
    logger = logging.getLogger("tensorboard")
    level = logger.level
    logger.setLevel(logging.ERROR)
    try:
        yield
    finally:
        logger.setLevel(level)


def has_event_files(directory: Path) -> bool:
    """Whether ``directory`` directly holds TensorBoard event files.

    Args:
        directory: Folder to look in (not searched recursively).

    Returns:
        True if at least one ``events.out.tfevents.*`` file is there.
    """
    return any(path.is_file() for path in directory.glob("events.out.tfevents.*"))


def read_scalars(run_dir: Path) -> dict[str, ScalarSeries]:
    """Every scalar tag in the event files directly inside ``run_dir``.

    A resumed run writes a second event file that repeats some steps; for each step the value with
    the latest wall time is kept (file names alone do not order files made in the same second).

    Args:
        run_dir: The run directory.

    Returns:
        Tag → series; empty if there are no event files or no scalars.
    """
    with _tensorboard_quiet():
        accumulator = event_accumulator.EventAccumulator(str(run_dir), size_guidance=_SIZE_GUIDANCE)
        accumulator.Reload()
        tags = {tag: accumulator.Scalars(tag) for tag in accumulator.Tags()[event_accumulator.SCALARS]}
    series = {}
    for tag, events in tags.items():
        latest: dict[int, tuple[float, float]] = {}
        for event in events:
            step = int(event.step)
            # ">=": of two writes with the same wall time, the one read later is the later write.
            if step not in latest or event.wall_time >= latest[step][0]:
                latest[step] = (float(event.wall_time), float(event.value))
        steps = np.array(sorted(latest), dtype=np.int64)
        values = np.array([latest[int(step)][1] for step in steps], dtype=np.float64)
        series[tag] = ScalarSeries(steps, values)
    return series
