"""A polite stop: SIGINT, SIGTERM, or the launching process going away, turn into a request that the
training loop honours at the end of its current step (it then checkpoints and exits).

Schedulers send SIGTERM some time before they kill; Ctrl-C sends SIGINT; a sweep's launcher that is
killed leaves its worker processes orphaned, which they notice by their parent changing.
"""

from __future__ import annotations

import os
import signal
import threading
from types import FrameType

# Conventional shell exit status of a process ended by a signal: 128 + the signal's number.
EXIT_CODES = {"SIGINT": 128 + signal.SIGINT, "SIGTERM": 128 + signal.SIGTERM, "parent gone": 128 + signal.SIGTERM}


class StopRequest:
    """Catches the stop signals while active (a context manager) and remembers the first one.

    Handlers are installed only in the main thread (Python allows no other); elsewhere the request
    can still be set by :meth:`request`.

    Args:
        watch_parent: Also stop when the parent process ends (checked once a second).
    """

    def __init__(self, watch_parent: bool = True) -> None:
        self.reason: str | None = None
        self._previous: dict[int, object] = {}
        self._watch_parent = watch_parent
        self._done = threading.Event()

    def request(self, reason: str) -> None:
        """Ask the loop to stop (the first reason is kept)."""
        if self.reason is None:
            self.reason = reason

    @property
    def requested(self) -> bool:
        return self.reason is not None

    @property
    def exit_code(self) -> int:
        return EXIT_CODES.get(self.reason or "", 1)

    def pass_on(self) -> None:
        """Give the stop signal to the handler that was there before (once the checkpoint is written).

        A scheduler's job runner (SLURM through submitit) installs its own SIGTERM handler, which
        requeues the job: it must still run, or a pre-empted member would never come back.
        """
        if self.reason not in ("SIGINT", "SIGTERM"):
            return
        signum = signal.Signals[self.reason]
        previous = self._previous.get(signum)
        # Python's Ctrl-C handler and Kiln's own command-line handler (marked ``kiln_own``) would only
        # turn the stop into an exception; the loop reports the stop itself.
        if callable(previous) and previous is not signal.default_int_handler and not getattr(previous, "kiln_own", False):
            previous(signum, None)

    def _handle(self, signum: int, frame: FrameType | None) -> None:
        self.request(signal.Signals(signum).name)

    def _watch(self, parent: int) -> None:
        while not self._done.wait(1.0):
            if os.getppid() != parent:
                self.request("parent gone")
                return

    def __enter__(self) -> StopRequest:
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                self._previous[sig] = signal.signal(sig, self._handle)
        parent = os.getppid()
        if self._watch_parent and parent > 1:
            threading.Thread(target=self._watch, args=(parent,), daemon=True, name="kiln-parent-watch").start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._done.set()
        for sig, handler in self._previous.items():
            signal.signal(sig, handler)  # type: ignore[arg-type]
        self._previous.clear()
