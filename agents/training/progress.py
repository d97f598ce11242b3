"""Console progress: a live bar on a terminal, one line per evaluation otherwise (CI, log files).

One speed is shown: Kiln's own, measured over the last log window (``log.every`` env steps) and
labelled with that window; the bar library's rate is switched off. A figure is shown only while it
is current: a line shows the training return only if an episode ended since the previous line, and
the window speeds and α only if a window closed since then.
"""

from __future__ import annotations

import sys
import time

from tqdm import tqdm


def _fmt(value: float | None, spec: str) -> str:
    return "–" if value is None else format(value, spec)


class Progress:
    """Shows env steps/s and updates/s over the last window, the latest returns, α and time left.

    Args:
        total: Env steps the run will take.
        mode: ``bar``, ``lines``, ``off``, or ``auto`` (a bar when stderr is a terminal).
        window: Env steps per log window (the span the speeds are measured over).
    """

    def __init__(self, total: int, mode: str = "auto", window: int = 1000) -> None:
        if mode == "auto":
            mode = "bar" if sys.stderr.isatty() else "lines"
        self.mode, self.total, self.window = mode, total, window
        self.start = time.perf_counter()
        self.step = 0
        self._fresh: dict[str, float | None] = {}
        self._latest: dict[str, float | None] = {}
        # No {rate_fmt}: the bar's own speed would be a second, differently measured figure.
        bar_format = "{l_bar}{bar}| {n_fmt}/{total_fmt} [{elapsed}<{remaining}] {postfix}"
        self.bar = (
            tqdm(total=total, unit="step", dynamic_ncols=True, file=sys.stderr, bar_format=bar_format)
            if mode == "bar"
            else None
        )

    def _set(self, values: dict[str, float | None]) -> None:
        self._fresh.update(values)
        self._latest.update(values)
        if self.bar is not None:
            self.bar.set_postfix_str(self._describe(self._latest), refresh=False)

    def set_window(self, step: int, env_steps_per_s: float, updates_per_s: float | None, alpha: float | None) -> None:
        """A log window closed at ``step``: its speeds and mean α (``None`` when it had no updates)."""
        self._set({"env/s": env_steps_per_s, "upd/s": updates_per_s, "alpha": alpha})

    def set_train(self, step: int, ret: float) -> None:
        """A training episode ended with return ``ret``."""
        self._set({"train": ret})

    def set_eval(self, step: int, ret: float) -> None:
        """An evaluation at ``step`` gave mean return ``ret``; in lines mode this prints a line."""
        self._set({"eval": ret})
        self.advance(step)
        if self.mode == "lines":
            self._line()

    def advance(self, step: int) -> None:
        """Move to env step ``step``."""
        if self.bar is not None and step > self.step:
            self.bar.update(step - self.step)
        self.step = max(self.step, step)

    def _describe(self, info: dict[str, float | None]) -> str:
        parts = []
        if "env/s" in info:
            speed = f"{_fmt(info['env/s'], '.0f')} env steps/s"
            if info.get("upd/s") is not None:
                speed += f", {info['upd/s']:.0f} updates/s"
            parts.append(f"{speed} (last {self.window} steps)")
        returns = [f"{name} {info[name]:.1f}" for name in ("train", "eval") if info.get(name) is not None]
        if returns:
            parts.append("return " + ", ".join(returns))
        if info.get("alpha") is not None:
            parts.append(f"α {info['alpha']:.3g}")
        return " | ".join(parts)

    def _line(self) -> None:
        elapsed = time.perf_counter() - self.start
        left = elapsed / self.step * (self.total - self.step) if self.step else 0.0
        described = self._describe(self._fresh)
        self._fresh = {}
        print(
            f"step {self.step}/{self.total} | " + (f"{described} | " if described else "")
            + f"{elapsed:.0f}s elapsed, ~{left:.0f}s left",
            file=sys.stderr,
            flush=True,
        )

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
