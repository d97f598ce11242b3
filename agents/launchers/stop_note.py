"""Stop requests between the population launcher and its worker processes.

A worker's members must stop politely (finish the step, checkpoint, end) when:

* the worker itself gets SIGINT or SIGTERM (a terminal's Ctrl-C reaches every process of the group;
  a scheduler signals every process of its job);
* the launcher gets SIGINT or SIGTERM: it leaves a stop note (a file only it and its workers know)
  and waits for its workers to come back. It does not signal them: an idle pool worker dies of a
  signal (the default action) and the pool would report it as lost;
* the launcher is gone (killed with SIGKILL): its workers have a new parent.

Training polls one request object, :class:`PopulationStop`, for all of a population's members.
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from collections.abc import Iterator
from pathlib import Path
from types import FrameType

from kiln.training.stop import StopRequest

POLL_S = 0.5  # how often a worker looks for its launcher and the stop note


def launcher_gone(launcher_pid: int) -> bool:
    """Whether this worker has lost its launcher (joblib runs a single population in the launcher itself)."""
    return os.getpid() != launcher_pid and os.getppid() != launcher_pid


class PopulationStop(StopRequest):
    """One stop request for every member a worker trains, alive while :meth:`held`.

    Entering it as a context manager (as ``kiln.training.trainer.train`` does for each member) changes
    nothing: the handlers and the watch are installed once, by :meth:`held`, for the whole
    population, so a signal that arrives between two members is kept too.

    Args:
        launcher_pid: The launching process; when this process's parent is no longer it, the
            launcher is gone and the request's reason becomes ``parent gone``. (With one worker,
            joblib trains in the launching process itself: then there is nothing to watch.)
        note: The launcher's stop note; when it exists, its text (a signal name) is the reason.
    """

    def __init__(self, launcher_pid: int, note: Path) -> None:
        super().__init__(watch_parent=False)
        self.launcher_pid = launcher_pid
        self.note = Path(note)

    def __enter__(self) -> PopulationStop:
        return self

    def __exit__(self, *exc: object) -> None:
        return None

    def check_now(self) -> None:
        """Look for the launcher and its stop note once (the watch does this every ``POLL_S``)."""
        if launcher_gone(self.launcher_pid):
            self.request("parent gone")
            return
        try:
            reason = self.note.read_text().strip()
        except FileNotFoundError:
            return  # no note: nobody asked to stop
        except OSError:
            reason = ""  # a note that cannot be read still asks for a stop
        self.request(reason or "SIGTERM")

    @contextlib.contextmanager
    def held(self) -> Iterator[PopulationStop]:
        """Catch SIGINT and SIGTERM and watch the launcher until the block ends (main thread only)."""

        def on_signal(signum: int, frame: FrameType | None) -> None:
            self.request(signal.Signals(signum).name)
            # With one worker, joblib trains in the launcher itself: its populations still waiting
            # must learn of the stop too, from the launcher's note.
            if getattr(previous.get(signum), "writes_stop_note", False):
                previous[signum](signum, frame)  # type: ignore[operator]

        previous: dict[int, object] = {}
        previous.update({sig: signal.signal(sig, on_signal) for sig in (signal.SIGINT, signal.SIGTERM)})
        done = threading.Event()

        def watch() -> None:
            while not done.wait(POLL_S) and not self.requested:
                self.check_now()

        self.check_now()  # a population handed out after the stop never starts training
        thread = threading.Thread(target=watch, daemon=True, name="kiln-launcher-watch")
        thread.start()
        try:
            yield self
        finally:
            done.set()
            thread.join()
            for sig, handler in previous.items():
                signal.signal(sig, handler)


class StopNote:
    """The launcher's side: while :meth:`catching`, SIGINT and SIGTERM write the stop note.

    Args:
        note: Where the note goes (a private temporary folder of the launcher).
    """

    def __init__(self, note: Path) -> None:
        self.note = Path(note)
        self.reason: str | None = None

    @contextlib.contextmanager
    def catching(self) -> Iterator[StopNote]:
        """Turn SIGINT and SIGTERM into the note until the block ends (main thread only)."""

        def on_signal(signum: int, frame: FrameType | None) -> None:
            if self.reason is None:
                self.reason = signal.Signals(signum).name
                # Written whole under another name first: a worker never reads half a note.
                partial = self.note.with_name(self.note.name + ".partial")
                partial.write_text(self.reason)
                os.replace(partial, self.note)

        on_signal.writes_stop_note = True  # type: ignore[attr-defined]  # see PopulationStop.held
        previous = {sig: signal.signal(sig, on_signal) for sig in (signal.SIGINT, signal.SIGTERM)}
        try:
            yield self
        finally:
            for sig, handler in previous.items():
                signal.signal(sig, handler)
