"""Console progress: a live bar on a terminal, one line per evaluation otherwise (CI, log files)."""

from __future__ import annotations

import sys
import time
from collections.abc import Mapping

from tqdm import tqdm


def _fmt(value: float | None, spec: str) -> str:
    return "–" if value is None else format(value, spec)


class Progress:
    """Shows env steps/s, updates/s, latest train and eval return, α and time left.

    Args:
        total: Env steps the run will take.
        mode: ``bar``, ``lines``, ``off``, or ``auto`` (a bar when stderr is a terminal).
    """

    def __init__(self, total: int, mode: str = "auto") -> None:
        if mode == "auto":
            mode = "bar" if sys.stderr.isatty() else "lines"
        self.mode, self.total = mode, total
        self.start = time.perf_counter()
        self.step = 0
        self.info: dict[str, float | None] = {"env/s": None, "upd/s": None, "train": None, "eval": None, "alpha": None}
        self.bar = tqdm(total=total, unit="step", dynamic_ncols=True, file=sys.stderr) if mode == "bar" else None

    def advance(self, step: int) -> None:
        """Move to env step ``step``."""
        if self.bar is not None:
            self.bar.update(step - self.step)
        self.step = step

    def set(self, values: Mapping[str, float | None]) -> None:
        """Update the shown figures (keys: env/s, upd/s, train, eval, alpha)."""
        self.info.update(values)
        if self.bar is not None:
            i = self.info
            self.bar.set_postfix_str(
                f"{_fmt(i['env/s'], '.0f')} env/s {_fmt(i['upd/s'], '.0f')} upd/s | return train "
                f"{_fmt(i['train'], '.1f')} eval {_fmt(i['eval'], '.1f')} | α {_fmt(i['alpha'], '.3g')}",
                refresh=False,
            )

    def line(self) -> None:
        """Print one status line (lines mode only)."""
        if self.mode != "lines":
            return
        elapsed = time.perf_counter() - self.start
        left = elapsed / self.step * (self.total - self.step) if self.step else 0.0
        i = self.info
        print(
            f"step {self.step}/{self.total} | {_fmt(i['env/s'], '.0f')} env steps/s, {_fmt(i['upd/s'], '.0f')} "
            f"updates/s | return train {_fmt(i['train'], '.1f')}, eval {_fmt(i['eval'], '.1f')} | "
            f"α {_fmt(i['alpha'], '.3g')} | {elapsed:.0f}s elapsed, ~{left:.0f}s left",
            file=sys.stderr,
            flush=True,
        )

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
