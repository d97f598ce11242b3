"""kiln.launchers.stop_note: stop requests between the population launcher and its workers.

References: the ``signal`` module's semantics (``signal.signal`` returns the handler it replaces, and
``signal.raise_signal`` runs the Python handler in the main thread before the next statement);
POSIX process parentage (a process whose parent exits is given a new parent, so ``getppid`` changes:
getppid(2)); the exit status a shell reports for a process ended by signal N, 128 + N. Which signal or
event stops whom is the project's requirement (README, "Crashes, interrupts and resuming").
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from kiln.launchers.stop_note import PopulationStop, StopNote, launcher_gone

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


@pytest.fixture(autouse=True)
def handlers_kept() -> Iterator[None]:
    """Every test leaves this process's SIGINT and SIGTERM handlers as it found them, and checks so."""
    before = {sig: signal.getsignal(sig) for sig in STOP_SIGNALS}
    yield
    after = {sig: signal.getsignal(sig) for sig in STOP_SIGNALS}
    for sig, handler in before.items():
        signal.signal(sig, handler)
    assert after == before


def test_a_worker_knows_its_launcher() -> None:
    # joblib trains a single population in the launching process itself: that is not "gone".
    assert not launcher_gone(os.getpid())
    assert not launcher_gone(os.getppid())  # a pool worker's parent is its launcher
    assert launcher_gone(1) or os.getppid() == 1  # pid 1 (init) is neither this process nor, normally, its parent


def test_a_worker_whose_launcher_ended_sees_it_gone(tmp_path: Path) -> None:
    # A launcher process starts a worker and exits; the worker is re-parented (POSIX) and must notice.
    report = tmp_path / "report"
    code = (
        "import os, sys, time\n"
        "from kiln.launchers.stop_note import launcher_gone\n"
        "launcher = os.getpid()\n"
        "if os.fork() == 0:\n"
        "    before = launcher_gone(launcher)\n"
        "    while os.getppid() == launcher:\n"
        "        time.sleep(0.01)\n"
        f"    open({str(report)!r}, 'w').write(f'{{before}} {{launcher_gone(launcher)}}')\n"
        "    os._exit(0)\n"
        "time.sleep(0.2)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], check=False, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    deadline = time.monotonic() + 60  # a generous wait for the orphan to write, not a speed check
    while not report.exists() or not report.read_text():
        assert time.monotonic() < deadline, "the orphaned worker never wrote its report"
        time.sleep(0.05)
    assert report.read_text() == "False True"


def test_check_now_reads_the_note(tmp_path: Path) -> None:
    note = tmp_path / "stop"
    stop = PopulationStop(os.getpid(), note)
    stop.check_now()
    assert not stop.requested and stop.reason is None  # no note: nobody asked
    note.write_text("SIGINT\n")
    stop.check_now()
    assert stop.reason == "SIGINT" and stop.exit_code == 128 + signal.SIGINT == 130


@pytest.mark.parametrize("make_note", [lambda p: p.write_text(""), lambda p: p.mkdir()])
def test_a_note_without_a_readable_reason_still_stops_as_sigterm(tmp_path: Path, make_note) -> None:
    note = tmp_path / "stop"
    make_note(note)  # empty, or a folder where the file should be (reading it fails with an OSError)
    stop = PopulationStop(os.getpid(), note)
    stop.check_now()
    assert stop.reason == "SIGTERM" and stop.exit_code == 128 + signal.SIGTERM


def test_a_gone_launcher_stops_the_population(tmp_path: Path) -> None:
    stop = PopulationStop(1, tmp_path / "stop")  # pid 1 is not this process's launcher
    stop.check_now()
    assert stop.reason == "parent gone" and stop.exit_code == 143  # as a scheduler's SIGTERM would end it


def test_entering_the_request_changes_no_handler(tmp_path: Path) -> None:
    before = {sig: signal.getsignal(sig) for sig in STOP_SIGNALS}
    with PopulationStop(os.getpid(), tmp_path / "stop") as stop:
        assert {sig: signal.getsignal(sig) for sig in STOP_SIGNALS} == before
    assert not stop.requested


@pytest.mark.parametrize("sig", STOP_SIGNALS)
def test_held_catches_a_signal_and_restores_the_handlers(tmp_path: Path, sig: signal.Signals) -> None:
    before = {s: signal.getsignal(s) for s in STOP_SIGNALS}
    stop = PopulationStop(os.getpid(), tmp_path / "stop")
    with stop.held():
        assert all(signal.getsignal(s) is not before[s] for s in STOP_SIGNALS)
        signal.raise_signal(sig)  # the handler has run when this returns (main thread)
        assert stop.reason == sig.name and stop.exit_code == 128 + sig
    assert {s: signal.getsignal(s) for s in STOP_SIGNALS} == before
    assert not (tmp_path / "stop").exists()  # a worker's stop writes no note


def test_held_sees_a_note_left_before_it_began(tmp_path: Path) -> None:
    (tmp_path / "stop").write_text("SIGTERM")
    stop = PopulationStop(os.getpid(), tmp_path / "stop")
    with stop.held():
        assert stop.reason == "SIGTERM"  # a population handed out after the stop never starts


def test_held_watches_for_a_note_written_meanwhile(tmp_path: Path) -> None:
    stop = PopulationStop(os.getpid(), tmp_path / "stop")
    with stop.held():
        assert not stop.requested
        (tmp_path / "stop").write_text("SIGINT")
        deadline = time.monotonic() + 60  # generous: the watch looks every POLL_S; no speed is checked
        while not stop.requested and time.monotonic() < deadline:
            time.sleep(0.05)
        assert stop.reason == "SIGINT"


def test_the_launchers_note_holds_the_first_signals_name(tmp_path: Path) -> None:
    stop_note = StopNote(tmp_path / "stop")
    with stop_note.catching():
        assert not (tmp_path / "stop").exists()
        signal.raise_signal(signal.SIGTERM)
        signal.raise_signal(signal.SIGINT)  # a second signal changes nothing: the first reason stays
    assert stop_note.reason == "SIGTERM"
    assert (tmp_path / "stop").read_text() == "SIGTERM"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["stop"]  # written whole: no partial file left


def test_no_signal_no_note(tmp_path: Path) -> None:
    with StopNote(tmp_path / "stop").catching() as stop_note:
        pass
    assert stop_note.reason is None and list(tmp_path.iterdir()) == []


def test_a_population_trained_in_the_launcher_itself_also_leaves_the_note(tmp_path: Path) -> None:
    # With one worker joblib trains in the launching process: the worker's handler then sits on the
    # launcher's, and a signal must both stop this population and tell the populations still waiting.
    note = tmp_path / "stop"
    stop_note = StopNote(note)
    with stop_note.catching():
        stop = PopulationStop(os.getpid(), note)
        with stop.held():
            signal.raise_signal(signal.SIGINT)
            assert stop.reason == "SIGINT"
        assert note.read_text() == "SIGINT"
        waiting = PopulationStop(os.getpid(), note)
        waiting.check_now()
        assert waiting.reason == "SIGINT" and waiting.exit_code == 130
