"""scripts/common.py (kiln.cli.common): one-line errors and their exit codes, the stop signals outside
training, argparse's errors in one line, and the overrides checked before Hydra starts.

References: the exit status a POSIX shell reports for a process ended by signal N is 128 + N (the
shell's "Exit Status" rules; measured here from /bin/sh itself); argparse's own error messages; Hydra's
override grammar and its basic sweeper (the jobs a sweep expands into); PyYAML reading the sweep preset.
Kiln's rule for bad input (one ``kiln: error:`` line, exit 2) is the project's (README, "Bad input").
"""

from __future__ import annotations

import argparse
import signal
import subprocess
import sys
from itertools import chain
from pathlib import Path

import pytest
import yaml
from hydra._internal.core_plugins.basic_sweeper import BasicSweeper
from hydra.core.override_parser.overrides_parser import OverridesParser

from kiln.cli import common
from kiln.cli.common import (
    EXIT_INTERRUPTED,
    EXIT_TERMINATED,
    OneLineParser,
    Terminated,
    check_overrides,
    expand_overrides,
    fail,
    guarded,
    plural,
    preset_sweep_params,
)
from kiln.config.presets import CONFIG_DIR
from kiln.envs.task_error import TaskError
from kiln.errors import ConfigError, DivergenceError, KilnError, RunStopped


def shell_status_after(sig: signal.Signals) -> int:
    """The status /bin/sh reports for a child process that ``sig`` ended."""
    script = f'sh -c "kill -{sig.name[3:]} \\$\\$"; echo $?'
    proc = subprocess.run(["sh", "-c", script], capture_output=True, text=True, timeout=60, check=True)
    return int(proc.stdout.strip())


def one_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    return lines[0]


def test_stop_exit_codes_are_the_shells() -> None:
    # 128 + signal number: SIGINT is 2, SIGTERM is 15 (signal(7)); the shell says the same.
    assert EXIT_INTERRUPTED == 128 + signal.SIGINT == shell_status_after(signal.SIGINT) == 130
    assert EXIT_TERMINATED == 128 + signal.SIGTERM == shell_status_after(signal.SIGTERM) == 143


def test_fail_prints_one_line_and_exits_with_the_code(capsys: pytest.CaptureFixture) -> None:
    with pytest.raises(SystemExit) as stop:
        fail("steps must be from 1")
    assert stop.value.code == 2
    assert capsys.readouterr().err == "kiln: error: steps must be from 1\n"
    with pytest.raises(SystemExit) as stop:
        fail("asked to stop", 143, "stopped")
    assert stop.value.code == 143
    assert capsys.readouterr().err == "kiln: stopped: asked to stop\n"


def test_guarded_returns_the_result_when_nothing_goes_wrong(capsys: pytest.CaptureFixture) -> None:
    assert guarded(lambda: 41 + 1) == 42
    assert capsys.readouterr().err == ""


@pytest.mark.parametrize(
    "error,code,line",
    [
        (ConfigError("agent.batch_size must be from 1"), 2, "kiln: error: agent.batch_size must be from 1"),
        (TaskError("dock: mass must be above 0"), 2, "kiln: error: dock: mass must be above 0"),
        (RunStopped("SIGTERM at step 300; run the same command to resume", 143), 143,
         "kiln: stopped: SIGTERM at step 300; run the same command to resume"),
    ],
)  # fmt: skip
def test_guarded_turns_kilns_errors_into_their_line_and_code(capsys, error: Exception, code: int, line: str) -> None:
    def raise_it() -> None:
        raise error

    with pytest.raises(SystemExit) as stop:
        guarded(raise_it)
    assert stop.value.code == code
    assert one_line(capsys.readouterr().err) == line


def test_divergence_exits_3(capsys: pytest.CaptureFixture) -> None:
    def diverge() -> None:
        raise DivergenceError("reward", float("nan"), "at env step 150")

    with pytest.raises(SystemExit) as stop:
        guarded(diverge)
    assert stop.value.code == 3
    line = one_line(capsys.readouterr().err)
    assert line.startswith("kiln: error: training diverged at env step 150 (member 0): reward is nan")


@pytest.mark.parametrize("raised,code,signal_name", [(KeyboardInterrupt, 130, "SIGINT"), (Terminated, 143, "SIGTERM")])
def test_a_stop_outside_training_is_one_line(capsys, raised: type[BaseException], code: int, signal_name: str) -> None:
    def stopped() -> None:
        raise raised()

    with pytest.raises(SystemExit) as stop:
        guarded(stopped)
    assert stop.value.code == code == 128 + signal.Signals[signal_name]  # POSIX shell convention
    line = one_line(capsys.readouterr().err)
    assert line.startswith("kiln: stopped: ") and f"({signal_name})" in line


def test_an_unexpected_error_is_not_hidden() -> None:
    # Only Kiln's and the tasks' errors become one line: a bug keeps its traceback.
    def bug() -> None:
        raise ZeroDivisionError("a bug")

    with pytest.raises(ZeroDivisionError):
        guarded(bug)


def _python(code: str, tmp_path: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", code], cwd=tmp_path, check=False, capture_output=True, text=True, timeout=120)


def test_sigterm_outside_training_ends_with_one_line_and_the_shells_status(tmp_path: Path) -> None:
    # A process that installed the handler and then gets SIGTERM (kill's default signal) while it works.
    proc = _python(
        "import os, signal, time\n"
        "from kiln.cli.common import guarded, stop_politely_on_sigterm\n"
        "stop_politely_on_sigterm()\n"
        "guarded(lambda: (os.kill(os.getpid(), signal.SIGTERM), time.sleep(60)))\n",
        tmp_path,
    )
    assert proc.returncode == shell_status_after(signal.SIGTERM)
    assert one_line(proc.stderr) == "kiln: stopped: terminated (SIGTERM) outside training; nothing was left half-written"


def test_sigterm_handler_is_marked_as_kilns_own() -> None:
    # The training loop passes a stop on to the handler that was there before it, except Kiln's own
    # (kiln.training.stop.StopRequest.pass_on): this handler would only raise again.
    previous = signal.getsignal(signal.SIGTERM)
    try:
        common.stop_politely_on_sigterm()
        handler = signal.getsignal(signal.SIGTERM)
        assert callable(handler) and getattr(handler, "kiln_own", False) is True
        with pytest.raises(Terminated):
            handler(signal.SIGTERM, None)  # type: ignore[operator]
    finally:
        signal.signal(signal.SIGTERM, previous)


def test_an_orphaned_stop_ends_the_whole_process(tmp_path: Path) -> None:
    # A pool worker whose launcher is gone: no one would catch SystemExit, so the process ends itself.
    proc = _python(
        "from kiln.cli.common import guarded\n"
        "from kiln.errors import RunStopped\n"
        "def stop():\n"
        "    raise RunStopped('the launcher is gone; a checkpoint was written', 143, orphaned=True)\n"
        "try:\n"
        "    guarded(stop)\n"
        "except SystemExit:\n"
        "    print('caught')\n",
        tmp_path,
    )
    assert proc.returncode == 143 and proc.stdout == ""
    assert one_line(proc.stderr) == "kiln: stopped: the launcher is gone; a checkpoint was written"


class _Recording(argparse.ArgumentParser):
    """Plain argparse, recording the message it would print: the reference for the wording."""

    def error(self, message: str):  # type: ignore[override]
        raise LookupError(message)


@pytest.mark.parametrize("argv", [["--bogus"], ["--count", "x"], []])
def test_one_line_parser_keeps_argparses_message_and_names_the_help(capsys, argv: list[str]) -> None:
    def build(cls: type[argparse.ArgumentParser]) -> argparse.ArgumentParser:
        parser = cls(prog="kiln demo")
        parser.add_argument("path")
        parser.add_argument("--count", type=int)
        return parser

    with pytest.raises(LookupError) as reference:
        build(_Recording).parse_args(argv)
    with pytest.raises(SystemExit) as stop:
        build(OneLineParser).parse_args(argv)
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert one_line(err) == f"kiln: error: {reference.value.args[0]}; fix: see `kiln demo --help`"
    assert "usage:" not in err


@pytest.mark.parametrize("count,text", [(0, "0 runs"), (1, "1 run"), (2, "2 runs")])
def test_plural(count: int, text: str) -> None:
    assert plural(count, "run") == text  # English: the singular for one only


def _hydra_jobs(args: list[str]) -> list[list[str]]:
    """The jobs Hydra's basic sweeper makes of these overrides (its full product)."""
    parsed = OverridesParser.create().parse_overrides(args)
    return list(chain.from_iterable(BasicSweeper.split_arguments(parsed, None)))


@pytest.mark.parametrize(
    "args",
    [["a=1,2", "b=3", "c=x,y,z"], ["seed=range(3)"], ["seed=0", "agent.actor.lr=1e-3,3e-4"], ["steps=10"]],
)
def test_expand_overrides_checks_every_value_in_a_few_of_hydras_jobs(args: list[str]) -> None:
    variants = expand_overrides(args)
    jobs = _hydra_jobs(args)
    # Every variant is one of the sweep's jobs; every value of every sweep is in some variant; and
    # there are 1 + sum(values - 1) of them instead of the product (hand arithmetic: 1 + 1 + 2 = 4
    # instead of 2 * 3 = 6 for the first case).
    assert all(v in jobs for v in variants)
    assert set(chain.from_iterable(variants)) == set(chain.from_iterable(jobs))
    sizes = [len({job[i] for job in jobs}) for i in range(len(args))]
    assert len(variants) == 1 + sum(s - 1 for s in sizes)
    assert variants[0] == jobs[0]  # the first value of every sweep first


def test_expand_overrides_leaves_hydras_own_options_out() -> None:
    args = ["-m", "--multirun", "seed=1", "hydra.run.dir=x", "hydra/launcher=joblib", "+hydra.job.chdir=true"]
    assert expand_overrides(args) == [["seed=1"]]


def test_expand_overrides_refuses_what_hydra_cannot_parse() -> None:
    with pytest.raises(KilnError, match="cannot parse the overrides"):
        expand_overrides(["seed=[1,"])


def test_preset_sweep_params_are_the_presets_own() -> None:
    # The sweep presets' parameters as written in their files, read with PyYAML (no Hydra).
    for name in ("seeds", "target_entropy"):
        written = yaml.safe_load((CONFIG_DIR / "sweep" / f"{name}.yaml").read_text())["hydra"]["sweeper"]["params"]
        expected = [f"{key}={value}" for key, value in written.items()]
        assert preset_sweep_params("train", [f"sweep={name}"]) == expected
    # A key the command line sets is the command line's.
    assert preset_sweep_params("train", ["sweep=seeds", "seed=1,2"]) == []
    assert preset_sweep_params("train", ["seed=1"]) == []  # no sweep preset, no parameters


def test_check_overrides_checks_every_composed_variant(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("KILN_PRESETS", raising=False)
    seen: list[tuple[int, float]] = []
    check_overrides("train", ["-m", "seed=0,1", "agent.actor.lr=1e-3,3e-4"],
                    lambda cfg: seen.append((cfg["seed"], cfg["agent"]["actor"]["lr"])))  # fmt: skip
    # Hand-worked: (0, 1e-3) first, then seed 1, then lr 3e-4 with seed 0.
    assert seen == [(0, 1e-3), (1, 1e-3), (0, 3e-4)]
    # The preset's own sweep is expanded too: seeds.yaml sweeps range(5), i.e. 0..4 (Python's range).
    seeds: list[int] = []
    check_overrides("train", ["sweep=seeds"], lambda cfg: seeds.append(cfg["seed"]))
    assert seeds == list(range(5))


def test_check_overrides_stops_at_the_first_bad_variant_with_one_line(capsys, monkeypatch) -> None:
    monkeypatch.delenv("KILN_PRESETS", raising=False)

    def check(cfg: dict) -> None:
        if cfg["seed"] == 1:
            raise ConfigError("seed 1 refused by this test")

    with pytest.raises(SystemExit) as stop:
        check_overrides("train", ["-m", "seed=0,1,2"], check)
    assert stop.value.code == 2
    assert one_line(capsys.readouterr().err) == "kiln: error: seed 1 refused by this test"


@pytest.mark.parametrize("flag", ["--help", "-h", "--hydra-help", "--info", "--cfg", "-c"])
def test_check_overrides_lets_hydra_answer_its_informational_options(monkeypatch, flag: str) -> None:
    monkeypatch.delenv("KILN_PRESETS", raising=False)
    called: list[dict] = []
    check_overrides("train", [flag, "seed=1"], called.append)
    assert called == []


def test_check_overrides_refuses_a_preset_folder_that_is_not_there(capsys, monkeypatch, tmp_path: Path) -> None:
    monkeypatch.setenv("KILN_PRESETS", str(tmp_path / "missing"))
    with pytest.raises(SystemExit) as stop:
        check_overrides("train", ["--help"], lambda cfg: None)  # before Hydra's help, which lists presets
    assert stop.value.code == 2
    assert "is not a folder" in one_line(capsys.readouterr().err)


def test_user_folder_becomes_importable_last_and_once(tmp_path: Path) -> None:
    # `python -P` keeps the working folder off sys.path (Python 3.11's -P option), as running a script
    # by its path does; a module there named like an installed package must not replace it.
    (tmp_path / "my_task.py").write_text("NAME = 'the user task'\n")
    (tmp_path / "yaml.py").write_text("raise ImportError('the user folder shadowed an installed package')\n")
    code = (
        "import os, sys\n"
        "from kiln.cli.common import user_folder_importable\n"
        "try:\n"
        "    import my_task\n"
        "    print('importable before')\n"
        "except ImportError:\n"
        "    pass\n"
        "user_folder_importable(); user_folder_importable()\n"
        "import my_task, yaml\n"
        "print(my_task.NAME, sys.path[-1] == os.getcwd(), sys.path.count(os.getcwd()), 'site-packages' in yaml.__file__)\n"
    )
    proc = subprocess.run([sys.executable, "-P", "-c", code], cwd=tmp_path, check=False, capture_output=True, text=True,
                          timeout=120)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout == "the user task True 1 True\n"
