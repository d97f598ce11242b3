"""Where a whole training loop's time goes: the env's step, the update, and everything else.

A run trains through the library (:func:`kiln.training.trainer.train`), exactly as ``kiln train`` would.
Its ``RunResult.time_split_s`` gives the env-step, update and whole-loop seconds; the rest is the
loop's overhead. To say what the overhead is, the run's evaluations, checkpoints and acting calls
are timed by wrapping those methods for the run's duration (the trainer itself is not changed);
a second run that evaluates and checkpoints only at its end shows the same thing by configuration.
"""

from __future__ import annotations

import importlib
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass
from pathlib import Path

from kiln.config.presets import compose_config
from kiln.training.trainer import train

# The loop's parts timed by wrapping, as (module, class, method, bucket): evaluations (their
# episodes, the Q-bias diagnostic, the one-agent copy they act with), checkpoints, and the training
# policy's actions (act_all: every agent's action for one env step).
_TIMED = (
    ("kiln.training.trainer", "TrainingLoop", "_evaluate", "evaluate"),
    ("kiln.training.trainer", "TrainingLoop", "_checkpoint", "checkpoint"),
    ("kiln.learner.sac", "SoftActorCritic", "act_all", "act"),
)


@dataclass(frozen=True)
class LoopSplit:
    """Seconds of one training run, split by what the loop was doing.

    ``evaluate_s``, ``checkpoint_s`` and ``act_s`` are None when the method they time was not found.
    """

    steps: int
    loop_s: float
    env_step_s: float
    update_s: float
    evaluate_s: float | None
    checkpoint_s: float | None
    act_s: float | None

    @property
    def env_steps_per_s(self) -> float:
        """Env steps per second of the whole loop."""
        return self.steps / self.loop_s

    @property
    def overhead_fraction(self) -> float:
        """Share of the loop that is neither the training env's step nor the update."""
        return 1.0 - (self.env_step_s + self.update_s) / self.loop_s

    @property
    def other_s(self) -> float | None:
        """Overhead not in evaluations, checkpoints or acting (replay writes, logging, checks, Python)."""
        parts = (self.evaluate_s, self.checkpoint_s, self.act_s)
        if any(p is None for p in parts):
            return None
        return self.loop_s - self.env_step_s - self.update_s - sum(parts)  # type: ignore[arg-type]

    def shares(self) -> dict[str, float | None]:
        """Each part as a fraction of the loop."""
        def share(x: float | None) -> float | None:
            return None if x is None else x / self.loop_s

        return {
            "env_step": share(self.env_step_s), "update": share(self.update_s), "evaluate": share(self.evaluate_s),
            "checkpoint": share(self.checkpoint_s), "act": share(self.act_s), "other": share(self.other_s),
        }  # fmt: skip


@contextmanager
def _timed_method(cls: type, name: str, bucket: str, seconds: dict[str, float], inside: list[str]) -> Iterator[None]:
    original: Callable = getattr(cls, name)

    def timed(*args, **kwargs):  # type: ignore[no-untyped-def]
        if inside:  # already inside a timed part (acting during an evaluation): counted there
            return original(*args, **kwargs)
        inside.append(bucket)
        t0 = time.perf_counter()
        try:
            return original(*args, **kwargs)
        finally:
            seconds[bucket] += time.perf_counter() - t0
            inside.pop()

    setattr(cls, name, timed)
    try:
        yield
    finally:
        setattr(cls, name, original)


def pendulum_overrides(steps: int | None, periodic: bool = True) -> list[str]:
    """Overrides of the Pendulum-v1 preset run: its own budget unless ``steps`` is given; with
    ``periodic`` false, evaluations and checkpoints only at the end (every = the run length)."""
    overrides = ["env=pendulum", "log.progress=off"]
    if steps is not None:
        overrides.append(f"steps={steps}")
    if not periodic:
        length = steps if steps is not None else compose_config("train", overrides)["steps"]
        overrides += [f"evaluate.every={length}", f"checkpoint.every={length}"]
    return overrides


def measure_loop(overrides: list[str]) -> LoopSplit:
    """Train one run of the composed config in a temporary folder and split its loop time."""
    raw = compose_config("train", overrides)
    seconds = {bucket: 0.0 for *_, bucket in _TIMED}
    found: set[str] = set()
    inside: list[str] = []
    with ExitStack() as stack, tempfile.TemporaryDirectory(prefix="kiln-bench-loop-") as tmp:
        for module, cls_name, method, bucket in _TIMED:
            cls = getattr(importlib.import_module(module), cls_name, None)
            if cls is not None and callable(getattr(cls, method, None)):
                stack.enter_context(_timed_method(cls, method, bucket, seconds, inside))
                found.add(bucket)
        result = train(raw, Path(tmp) / "run")
    split = result.time_split_s or {}
    return LoopSplit(
        steps=result.steps,
        loop_s=split["loop"],
        env_step_s=split["env_step"],
        update_s=split["update"],
        **{f"{b}_s": (seconds[b] if b in found else None) for b in ("evaluate", "checkpoint", "act")},
    )
