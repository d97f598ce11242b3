"""Kiln's error family (kiln.errors): exit codes, one-line messages, and which errors the commands
print as one line.

Sources: the exit codes 130 and 143 are the POSIX shell's status of a process ended by a signal,
128 + the signal's number (signal numbers from Python's ``signal`` module: SIGINT 2, SIGTERM 15);
2 for bad input and 3 for a failed optimisation are the project's rules (DEVELOPERS.md, Errors).
"""

import math
import signal

import pytest

from kiln.cli.common import guarded
from kiln.envs.task_error import TaskError
from kiln.errors import (
    USER_ERRORS,
    CheckpointError,
    CompareInputError,
    ConfigError,
    DivergenceError,
    KilnError,
    PolicyFolderError,
    RunFolderError,
    RunStopped,
    SweepError,
    TaskSetupError,
)

BAD_INPUT = (KilnError, ConfigError, PolicyFolderError, RunFolderError, CheckpointError)


@pytest.mark.parametrize("kind", BAD_INPUT)
def test_bad_input_exits_2_with_the_error_prefix(kind):
    # DEVELOPERS.md, Errors: 2 for bad input.
    err = kind("seed=-1 is below 0: pass a seed of 0 or more")
    assert isinstance(err, KilnError)
    assert err.exit_code == 2 and err.prefix == "error"
    assert str(err) == "seed=-1 is below 0: pass a seed of 0 or more"


@pytest.mark.parametrize("signum,code", [(signal.SIGINT, 130), (signal.SIGTERM, 143)])
def test_run_stopped_carries_the_shells_code_for_the_signal(signum, code):
    # POSIX shell convention: 128 + signal number; SIGINT = 2 and SIGTERM = 15 (signal module, from memory).
    assert 128 + int(signum) == code
    err = RunStopped("SIGTERM at env step 5 of 10; run the same command again to resume", 128 + int(signum))
    assert err.exit_code == code and err.prefix == "stopped" and err.orphaned is False
    assert RunStopped("parent gone", 143, orphaned=True).orphaned is True


def test_divergence_exits_3_with_one_line_naming_quantity_step_member_and_fix():
    err = DivergenceError("reward", math.nan, "at env step 250")
    assert err.exit_code == 3 and err.prefix == "error"
    err.member = 2
    line = str(err)
    assert "\n" not in line
    assert line.startswith("training diverged at env step 250 (member 2): reward is nan;")
    assert "no checkpoint had been written yet" in line
    assert line.endswith("then start over with resume=false")
    err.last_checkpoint = "run/checkpoints/step-000000000200"
    assert "the last good checkpoint run/checkpoints/step-000000000200 is kept" in str(err)
    # format(x, "g") of infinity is "inf" (Python's format spec mini-language).
    assert "critic/td_mse is inf" in str(DivergenceError("critic/td_mse", math.inf, "at env step 9"))
    assert (err.quantity, err.where) == ("reward", "at env step 250") and math.isnan(err.value)


def test_compare_input_error_reads_problem_then_fix():
    err = CompareInputError("no run folder under results/ holds result.json", "pass folders of finished runs")
    assert str(err) == "no run folder under results/ holds result.json; fix: pass folders of finished runs"
    assert (err.problem, err.fix) == ("no run folder under results/ holds result.json", "pass folders of finished runs")
    assert err.exit_code == 2 and isinstance(err, KilnError)


def test_sweep_error_keeps_the_runs_own_code_and_prefix():
    assert (SweepError("job 12_3 was lost").exit_code, SweepError("x").prefix) == (2, "error")
    stopped = SweepError("seed=1: SIGTERM at env step 40", exit_code=143, prefix="stopped")
    assert (stopped.exit_code, stopped.prefix, str(stopped)) == (143, "stopped", "seed=1: SIGTERM at env step 40")
    assert SweepError("diverged", exit_code=3).exit_code == 3


def test_user_errors_are_kilns_and_the_tasks():
    # envs/ imports nothing of the rest of Kiln, so TaskError is no KilnError; the commands print both.
    assert not issubclass(TaskError, KilnError)
    assert set(USER_ERRORS) == {KilnError, TaskError}
    for kind in (*BAD_INPUT, CompareInputError, SweepError, DivergenceError, RunStopped):
        assert issubclass(kind, USER_ERRORS)


def test_a_task_error_raised_by_the_api_is_both_a_kiln_error_and_a_task_error():
    # The Python API re-raises the tasks' own error inside Kiln's family: `except KilnError` and
    # `except TaskError` both catch it, and a command prints it with code 2 like any bad input.
    err = TaskSetupError("unknown env id 'Nope-v0': see gymnasium.pprint_registry()")
    assert isinstance(err, KilnError) and isinstance(err, TaskError)
    assert err.exit_code == 2 and err.prefix == "error" and str(err).startswith("unknown env id")


@pytest.mark.parametrize(
    "err,code,line",
    [
        (
            ConfigError("agent.batch_size=0 is below 1: pass 1 or more"),
            2,
            "kiln: error: agent.batch_size=0 is below 1: pass 1 or more",
        ),
        (TaskError("unknown task kiln/Nope-v0: see kiln/ ids"), 2, "kiln: error: unknown task kiln/Nope-v0: see kiln/ ids"),
        (RunStopped("SIGINT at env step 3 of 9", 130), 130, "kiln: stopped: SIGINT at env step 3 of 9"),
        (SweepError("job lost", 1), 1, "kiln: error: job lost"),
    ],
)
def test_a_command_prints_each_error_as_one_line_with_its_code(capsys, err, code, line):
    def fails():
        raise err

    with pytest.raises(SystemExit) as caught:
        guarded(fails)
    assert caught.value.code == code
    assert capsys.readouterr().err.splitlines() == [line]
