"""Stop requests (kiln.training.stop): a signal becomes a request the loop honours; after the
checkpoint the signal is handed to the handler that was installed before (a scheduler's requeue),
never to Kiln's own; a worker whose launching process is gone asks to stop too.

Sources: Python's ``signal`` docs (handlers only in the main thread; the default SIGINT handler
raises KeyboardInterrupt; ``signal.signal`` returns the previous handler), POSIX (an orphaned
process is re-parented, so ``os.getppid()`` changes) and the shell's exit status 128 + the signal's
number. That the stop is passed on after the checkpoint is the project's rule (DEVELOPERS.md, Errors).
"""

import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

from kiln.training.stop import StopRequest


def test_sigterm_sets_the_request_and_is_passed_on_to_the_earlier_handler():
    seen = []
    earlier = signal.signal(signal.SIGTERM, lambda signum, frame: seen.append(signum))
    try:
        with StopRequest(watch_parent=False) as stop:
            os.kill(os.getpid(), signal.SIGTERM)
            assert stop.requested and stop.reason == "SIGTERM" and stop.exit_code == 143
            assert seen == []  # nothing passed on before the loop has checkpointed
            stop.pass_on()
        assert seen == [signal.SIGTERM]
    finally:
        signal.signal(signal.SIGTERM, earlier)


def test_kilns_own_handler_is_not_passed_the_stop():
    calls = []

    def own(signum, frame):
        calls.append(signum)

    own.kiln_own = True
    earlier = signal.signal(signal.SIGTERM, own)
    try:
        with StopRequest(watch_parent=False) as stop:
            os.kill(os.getpid(), signal.SIGTERM)
            stop.pass_on()
        assert calls == [] and stop.reason == "SIGTERM"
        assert signal.getsignal(signal.SIGTERM) is own  # restored on leaving
    finally:
        signal.signal(signal.SIGTERM, earlier)


def test_sigint_exit_code_is_130():
    with StopRequest(watch_parent=False) as stop:
        os.kill(os.getpid(), signal.SIGINT)
    assert stop.reason == "SIGINT" and stop.exit_code == 130


def test_the_first_reason_is_kept_and_codes_follow_the_shell():
    stop = StopRequest(watch_parent=False)
    assert not stop.requested and stop.exit_code == 1  # nothing asked: no signal's code
    stop.request("parent gone")
    stop.request("SIGINT")
    assert stop.reason == "parent gone" and stop.exit_code == 128 + 15  # stopped as by SIGTERM
    # 128 + signal number, with SIGINT = 2 and SIGTERM = 15 (signal module docs / signal(7), from memory).
    assert (128 + signal.SIGINT, 128 + signal.SIGTERM) == (130, 143)


def test_handlers_are_the_callers_again_on_leaving():
    before = {sig: signal.getsignal(sig) for sig in (signal.SIGINT, signal.SIGTERM)}
    with StopRequest(watch_parent=False) as stop:
        assert signal.getsignal(signal.SIGINT) == stop._handle and signal.getsignal(signal.SIGTERM) == stop._handle
    assert {sig: signal.getsignal(sig) for sig in before} == before


def test_outside_the_main_thread_no_handler_is_installed_but_a_request_still_works():
    # signal docs: only the main thread may set a handler (signal.signal raises ValueError elsewhere).
    before = signal.getsignal(signal.SIGTERM)
    seen = {}

    def worker():
        with StopRequest(watch_parent=False) as stop:
            seen["handler"] = signal.getsignal(signal.SIGTERM)
            stop.request("SIGTERM")
            seen["code"] = stop.exit_code

    thread = threading.Thread(target=worker)
    thread.start()
    thread.join(timeout=60)
    assert seen == {"handler": before, "code": 143}


def test_pythons_own_ctrl_c_handler_is_not_passed_the_stop():
    # Python's default SIGINT handler raises KeyboardInterrupt (signal docs): the loop reports the stop itself.
    earlier = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        with StopRequest(watch_parent=False) as stop:
            os.kill(os.getpid(), signal.SIGINT)
            stop.pass_on()  # would raise KeyboardInterrupt if it called the default handler
        assert stop.reason == "SIGINT"
    finally:
        signal.signal(signal.SIGINT, earlier)


_ORPHAN = """
import os, subprocess, sys, time
# The middle process starts the watcher, waits until its watch runs, then ends: the watcher's parent is gone.
ready = sys.argv[2] + ".watching"
child = subprocess.Popen([sys.executable, "-c", sys.argv[1], sys.argv[2]])
print(child.pid, flush=True)
for _ in range(1200):
    if os.path.exists(ready):
        break
    time.sleep(0.1)
"""
_WATCHER = """
import sys, time
from kiln.training.stop import StopRequest
with StopRequest() as stop:
    open(sys.argv[1] + ".watching", "w").close()
    for _ in range(600):  # at most a minute: the watch looks once a second
        if stop.requested:
            break
        time.sleep(0.1)
open(sys.argv[1], "w").write(f"{stop.reason} {stop.exit_code}")
"""


def test_a_worker_whose_launcher_is_gone_asks_to_stop(tmp_path):
    # POSIX: a process whose parent ends is re-parented (getppid changes); the watch notices that.
    out = tmp_path / "reason"
    middle = subprocess.run(
        [sys.executable, "-c", _ORPHAN, _WATCHER, str(out)],
        capture_output=True, text=True, timeout=120, check=False, cwd=Path(__file__).resolve().parents[2],
    )  # fmt: skip
    assert middle.returncode == 0, middle.stderr
    watcher = int(middle.stdout.strip())
    for _ in range(1200):  # wait for the orphan's answer (up to two minutes; no speed asserted)
        if out.exists() and out.read_text():
            break
        time.sleep(0.1)
    else:
        os.kill(watcher, signal.SIGKILL)  # the process this test started, by its pid
        raise AssertionError("the orphaned watcher never asked to stop")
    assert out.read_text() == "parent gone 143"
