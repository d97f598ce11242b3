"""Stop requests: a signal becomes a request the loop honours; after the checkpoint the signal is
handed to the handler that was installed before (a scheduler's requeue), never to Kiln's own.
Project requirement (no outside source); signal numbers and exit codes follow POSIX / the shell's
128 + signal convention."""

import os
import signal

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
