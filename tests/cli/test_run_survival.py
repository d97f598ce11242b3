"""Runs that survive, driven as a user would: stop signals, resuming, folder claims, refusals.

Project requirements (no outside source): SIGINT/SIGTERM finish the step, checkpoint, print one line
saying how to resume and exit 130/143 (the shell's convention for those signals); the same command
resumes; a folder in use is refused; a finished run is never touched; bad checkpoints are refused
with one line, exit 2, nothing on disk changed.
"""

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

from kiln.storage.run_folder import RunFolder
from tests.support.cli import REPO, TINY_RUN, assert_one_line_error, run_script
from tests.support.pickle_bomb import pickle_bomb, torch_bomb
from tests.support.restricted import NO_BYTECODE, restricted

LONG_RUN = (*TINY_RUN[:-1], "steps=20000", "agent.replay_capacity=20000", "evaluate.every=1000",
            "log.every=100", "checkpoint.every=500", "log.progress=off")  # fmt: skip
SHORT_RUN = (*TINY_RUN, "checkpoint.every=100", "log.progress=off")


def _snapshot(folder: Path) -> dict[str, tuple[int, bytes]]:
    return {
        str(p.relative_to(folder)): (p.stat().st_mtime_ns, p.read_bytes())
        for p in sorted(folder.rglob("*")) if p.is_file() and p.name != ".lock"
    }  # fmt: skip


def _start(run_dir: Path, cwd: Path, *extra: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, str(REPO / "scripts" / "train.py"), *LONG_RUN, *extra, f"hydra.run.dir={run_dir}"],
        cwd=cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        env=dict(os.environ, PYTHONUNBUFFERED="1"),
    )  # fmt: skip


def _wait_for_checkpoint(run_dir: Path, proc: subprocess.Popen, timeout: float = 180) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if any((run_dir / "checkpoints").glob("step-*")):
            return
        assert proc.poll() is None, proc.communicate()
        time.sleep(0.2)
    raise AssertionError("no checkpoint appeared")


@pytest.mark.parametrize("sig,code", [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
def test_stop_signal_checkpoints_says_how_to_resume_and_the_same_command_resumes(tmp_path, sig, code):
    run_dir = tmp_path / "run"
    proc = _start(run_dir, tmp_path)
    _wait_for_checkpoint(run_dir, proc)
    proc.send_signal(sig)
    _, stderr = proc.communicate(timeout=120)
    assert proc.returncode == code, stderr
    lines = [line for line in stderr.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in stderr, stderr
    assert lines[0].startswith(f"kiln: stopped: {sig.name} at env step ")
    assert "run the same command again to resume" in lines[0]
    stopped_at = int(lines[0].split("at env step ")[1].split()[0])
    assert (run_dir / "checkpoints" / f"step-{stopped_at:012d}").is_dir()
    assert not (run_dir / "result.json").exists()
    # The same command resumes from that checkpoint (fewer steps to keep the test short).
    again = run_script("train", *LONG_RUN, f"steps={stopped_at + 200}", f"hydra.run.dir={run_dir}",
                       cwd=tmp_path, timeout=300)  # fmt: skip
    assert again.returncode == 0, again.stderr
    result = json.loads((run_dir / "result.json").read_text())
    assert result["steps"] == stopped_at + 200
    events = EventAccumulator(str(run_dir), size_guidance={"scalars": 0})
    events.Reload()
    steps = [e.step for e in events.Scalars("speed/env_steps_per_s")]
    assert steps == sorted(set(steps)), "a step was logged twice"


def test_a_second_launch_into_a_live_run_is_refused(tmp_path):
    run_dir = tmp_path / "run"
    holder = RunFolder(run_dir)
    holder.claim()  # this test process plays the live run
    try:
        proc = run_script("train", *SHORT_RUN, f"hydra.run.dir={run_dir}", cwd=tmp_path, timeout=120)
        assert_one_line_error(proc, "is in use by another Kiln process", f"pid {os.getpid()}")
        assert sorted(p.name for p in run_dir.iterdir()) == [".lock"]
    finally:
        holder.release()


def test_finished_run_with_another_config_is_refused_and_left_untouched(tmp_path):
    run_dir = tmp_path / "run"
    first = run_script("train", *SHORT_RUN, f"hydra.run.dir={run_dir}", cwd=tmp_path, timeout=300)
    assert first.returncode == 0, first.stderr
    before = _snapshot(run_dir)
    proc = run_script("train", *SHORT_RUN, "agent.discount=0.9", f"hydra.run.dir={run_dir}", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "already holds a finished run with another config", "agent.discount")
    assert _snapshot(run_dir) == before
    # The same config is skipped quietly, still without touching anything.
    same = run_script("train", *SHORT_RUN, f"hydra.run.dir={run_dir}", cwd=tmp_path, timeout=120)
    assert same.returncode == 0 and "already holds a finished run" in same.stdout
    assert _snapshot(run_dir) == before


@pytest.fixture
def stopped_run(tmp_path):
    """A run stopped by SIGTERM with checkpoints written."""
    run_dir = tmp_path / "run"
    proc = _start(run_dir, tmp_path)
    _wait_for_checkpoint(run_dir, proc)
    proc.send_signal(signal.SIGTERM)
    proc.communicate(timeout=120)
    assert proc.returncode == 143
    return run_dir


def test_resume_false_sets_the_attempt_aside_and_starts_over(stopped_run, tmp_path):
    proc = run_script("train", *LONG_RUN, "steps=300", "resume=false", f"hydra.run.dir={stopped_run}",
                      cwd=tmp_path, timeout=300)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    aside = stopped_run / "unfinished-1"
    assert (aside / "checkpoints").is_dir() and (aside / "config.yaml").is_file()
    assert json.loads((stopped_run / "result.json").read_text())["steps"] == 300


def test_checkpoint_of_another_config_is_refused_and_nothing_changes(stopped_run, tmp_path):
    before = _snapshot(stopped_run)
    proc = run_script("train", *LONG_RUN, "agent.actor.lr=0.02", f"hydra.run.dir={stopped_run}", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "was written by a run with another config", "agent.actor.lr", "resume=false")
    assert _snapshot(stopped_run) == before


DAMAGES = [
    "zero-byte state", "truncated replay", "manifest not JSON", "manifest of another kind",
    "pickle as state", "torch pickle as state", "pickle as replay chunk", "pickle as manifest",
]  # fmt: skip


@pytest.mark.parametrize("damage", DAMAGES)
def test_damaged_checkpoint_is_refused_with_one_line(stopped_run, tmp_path, damage):
    newest = sorted((stopped_run / "checkpoints").glob("step-*"))[-1]
    chunk_name = next(iter(json.loads((newest / "manifest.json").read_text())["replay"]["chunks"].values()))
    marker = tmp_path / "unpickled"  # created only if something unpickles a crafted file
    if damage == "pickle as state":
        (newest / "state.safetensors").write_bytes(pickle_bomb(marker))
    elif damage == "torch pickle as state":
        (newest / "state.safetensors").write_bytes(torch_bomb(marker))
    elif damage == "pickle as replay chunk":
        (stopped_run / "checkpoints" / "replay" / chunk_name).write_bytes(pickle_bomb(marker))
    elif damage == "pickle as manifest":
        (newest / "manifest.json").write_bytes(pickle_bomb(marker))
    elif damage == "zero-byte state":
        (newest / "state.safetensors").write_bytes(b"")
    elif damage == "truncated replay":
        chunk = stopped_run / "checkpoints" / "replay" / chunk_name
        chunk.write_bytes(chunk.read_bytes()[:100])
    elif damage == "manifest not JSON":
        (newest / "manifest.json").write_bytes(b"\xff\xfe not json")
    else:
        (newest / "manifest.json").write_text("[]")
    before = _snapshot(stopped_run)
    proc = run_script("train", *LONG_RUN, f"hydra.run.dir={stopped_run}", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "resume=false")
    assert _snapshot(stopped_run) == before
    assert not marker.exists()


def test_divergence_from_the_command_line_exits_3_with_one_line_and_no_policy(tmp_path):
    run_dir = tmp_path / "run"
    proc = run_script("train", *SHORT_RUN, "agent.critic.lr=1e5", "agent.actor.lr=1e5", f"hydra.run.dir={run_dir}",
                      cwd=tmp_path, timeout=300)  # fmt: skip
    assert proc.returncode == 3, proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("kiln: error: training diverged at env step "), proc.stderr
    assert "(member 0)" in lines[0]
    assert not (run_dir / "policy").exists() and not (run_dir / "result.json").exists()


def test_two_runs_launched_together_get_their_own_folders(tmp_path):
    procs = [
        subprocess.Popen([sys.executable, str(REPO / "scripts" / "train.py"), *SHORT_RUN], cwd=tmp_path,
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        for _ in range(2)
    ]  # fmt: skip
    for proc in procs:
        _, err = proc.communicate(timeout=300)
        assert proc.returncode == 0, err
    runs = sorted((tmp_path / "runs" / "pendulum").iterdir())
    assert len(runs) == 2 and all((run / "result.json").is_file() for run in runs)


def test_file_size_limit_hit_while_training_gives_one_line_and_no_partial_files(tmp_path):
    # A small RLIMIT_FSIZE (setrlimit(2)) plays a full disk: the first replay chunk (300 rows × 9
    # float32 = 10.8 kB) is over 8 kB, so the first checkpoint fails with EFBIG mid-run.
    run_dir = tmp_path / "run"
    proc = run_script("train", *SHORT_RUN, f"hydra.run.dir={run_dir}", cwd=tmp_path, timeout=300,
                      env=NO_BYTECODE, preexec_fn=restricted(file_size=8_000))  # fmt: skip
    line = assert_one_line_error(proc, "cannot write", "free some space or raise the limit")
    assert "file-size limit" in line
    leftovers = [p.name for p in run_dir.rglob("*") if ".partial" in p.name or p.name.startswith(".policy-")]
    assert leftovers == []
    assert not (run_dir / "result.json").exists()


def test_run_folder_that_cannot_be_created_gives_one_line(tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o555)
    proc = run_script("train", *SHORT_RUN, f"hydra.run.dir={locked / 'run'}", cwd=tmp_path, timeout=120,
                      preexec_fn=restricted())  # fmt: skip
    assert_one_line_error(proc, f"cannot write to {locked / 'run'}", "permission denied", "hydra.run.dir")
    long_name = tmp_path / ("x" * 300)
    proc = run_script("train", *SHORT_RUN, f"hydra.run.dir={long_name}", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "file name too long", "hydra.run.dir")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["locked"]


def _children(pid: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                if int((entry / "stat").read_text().rsplit(")", 1)[1].split()[1]) == pid:
                    found.append(int(entry.name))
            except (OSError, IndexError, ValueError):
                continue
    return found


def _alive(pid: int) -> bool:
    try:
        state = (Path("/proc") / str(pid) / "stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def test_sweep_workers_checkpoint_and_end_when_their_launcher_is_killed(tmp_path):
    # What a hostile user found: killing a sweep's launcher left its workers training unattended.
    sweep = tmp_path / "sweep"
    launcher = subprocess.Popen(
        [sys.executable, str(REPO / "scripts" / "train.py"), "-m", "seed=0,1", *LONG_RUN,
         "hydra/launcher=joblib", "hydra.launcher.n_jobs=2", f"hydra.sweep.dir={sweep}"],
        cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True,
    )  # fmt: skip
    deadline = time.monotonic() + 240
    while len(list(sweep.glob("*/checkpoints/step-*"))) < 2:
        assert launcher.poll() is None and time.monotonic() < deadline
        time.sleep(0.5)
    workers = _children(launcher.pid)
    assert workers
    launcher.kill()
    launcher.wait()
    deadline = time.monotonic() + 60
    while any(_alive(pid) for pid in workers) and time.monotonic() < deadline:
        time.sleep(0.5)
    stragglers = [pid for pid in workers if _alive(pid)]
    for pid in stragglers:
        os.kill(pid, signal.SIGKILL)
    assert not stragglers, "workers outlived their launcher"
    for member in sorted(p for p in sweep.iterdir() if (p / "checkpoints").is_dir()):
        steps = [int(p.name.split("-")[1]) for p in (member / "checkpoints").glob("step-*")]
        # The stop checkpoint falls between the regular ones (every 500 steps).
        assert any(step % 500 for step in steps), (member.name, steps)


# Population sweeps (launcher=population): short enough that a finished sweep takes seconds, long
# enough (checkpoints every 200 of 1000 steps) to be stopped half-way.
# Diagnostics every 10 steps: where a stopped attempt got to shows in its events.
POPULATION_RUN = (*(a for a in TINY_RUN[:-1] if not a.startswith("log.every=")), "steps=1000", "agent.replay_capacity=1000",
                  "evaluate.every=500", "checkpoint.every=200", "log.every=10", "log.progress=off")  # fmt: skip


def _population_sweep(sweep: Path, seeds: str) -> list[str]:
    return [sys.executable, str(REPO / "scripts" / "train.py"), "-m", f"seed={seeds}", *POPULATION_RUN,
            "+launcher=population", "hydra.launcher.n_jobs=2", f"hydra.sweep.dir={sweep}", "hydra.sweep.subdir=s${seed}"]  # fmt: skip


@pytest.fixture(scope="module")
def finished_pair(tmp_path_factory):
    """Members s0 and s1 of a population sweep, finished."""
    work = tmp_path_factory.mktemp("finished")
    proc = subprocess.run(_population_sweep(work / "sweep", "0,1"), cwd=work, capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    return work / "sweep"


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM], ids=["SIGKILL", "SIGTERM"])
def test_population_workers_stop_with_their_launcher_and_the_same_command_resumes(tmp_path, finished_pair, sig):
    # s0 and s1 finished earlier; s2 and s3 are new. The launcher is killed (SIGKILL: its workers
    # find themselves orphaned) or asked to stop (SIGTERM: it tells its workers and waits for them).
    sweep = tmp_path / "sweep"
    shutil.copytree(finished_pair, sweep)
    finished = {name: (sweep / name / "result.json").read_bytes() for name in ("s0", "s1")}
    launcher = subprocess.Popen(_population_sweep(sweep, "0,1,2,3"), cwd=tmp_path, stdout=subprocess.DEVNULL,
                                stderr=subprocess.PIPE, text=True, start_new_session=True)  # fmt: skip
    deadline = time.monotonic() + 240
    while not list((sweep / "s2" / "checkpoints").glob("step-*")):
        assert launcher.poll() is None and time.monotonic() < deadline, launcher.communicate()
        time.sleep(0.1)
    workers = _children(launcher.pid)
    assert workers
    launcher.send_signal(sig)
    _, stderr = launcher.communicate(timeout=120)
    if sig == signal.SIGTERM:
        # One line, the shell's code for SIGTERM (README, exit codes), once every worker has checkpointed.
        lines = [line for line in stderr.splitlines() if line.strip()]
        assert launcher.returncode == 143 and len(lines) == 1, stderr
        assert lines[0].startswith("kiln: stopped: SIGTERM: the sweep stopped with ") and "run the same command again" in lines[0]
    deadline = time.monotonic() + 60
    while any(_alive(pid) for pid in workers) and time.monotonic() < deadline:
        time.sleep(0.5)
    stragglers = [pid for pid in workers if _alive(pid)]
    for pid in stragglers:
        os.kill(pid, signal.SIGKILL)
    assert not stragglers, "population workers outlived their launcher"
    steps = [int(p.name.split("-")[1]) for p in (sweep / "s2" / "checkpoints").glob("step-*")]
    # The stop wrote a checkpoint of the last whole step: nothing the stopped attempt logged lies beyond
    # its newest checkpoint. (Usually that checkpoint falls between the regular ones, every 200 steps;
    # a stop noticed on a step that writes a regular checkpoint anyway takes that one, so "between"
    # alone would fail now and then without anything being wrong.)
    stopped = EventAccumulator(str(sweep / "s2"), size_guidance={"scalars": 0})
    stopped.Reload()
    last_logged = max(e.step for e in stopped.Scalars("speed/env_steps_per_s"))
    assert steps and last_logged <= max(steps), (last_logged, steps)
    assert not (sweep / "s2" / "result.json").exists()
    events_before = sorted(p.name for p in (sweep / "s2").glob("events.out.tfevents.*"))
    folders = sorted(p.name for p in sweep.iterdir())
    # The same command: finished members are skipped, the stopped one resumes from its checkpoint.
    again = subprocess.run(_population_sweep(sweep, "0,1,2,3"), cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert again.returncode == 0, again.stderr
    assert again.stdout.count("already holds a finished run") == 2
    # The same folders: those of the first launch kept, plus any member it had not begun.
    after = sorted(p.name for p in sweep.iterdir())
    assert set(folders) <= set(after) and after == ["multirun.yaml", "s0", "s1", "s2", "s3"]
    assert {name: (sweep / name / "result.json").read_bytes() for name in ("s0", "s1")} == finished
    for name in ("s2", "s3"):
        assert json.loads((sweep / name / "result.json").read_text())["steps"] == 1000
    # Resumed, not started over: the first attempt's events stay in place (a fresh start would set
    # them aside in unfinished-<n>/) and no step is logged twice.
    assert not list((sweep / "s2").glob("unfinished-*"))
    assert set(events_before) <= {p.name for p in (sweep / "s2").glob("events.out.tfevents.*")}
    events = EventAccumulator(str(sweep / "s2"), size_guidance={"scalars": 0})
    events.Reload()
    logged = [e.step for e in events.Scalars("speed/env_steps_per_s")]
    assert logged == sorted(set(logged)), "a step was logged twice"


@pytest.mark.parametrize("slots", [1, 2], ids=["in-launcher", "worker-processes"])
def test_populations_not_yet_begun_stay_untouched_when_the_sweep_is_stopped(tmp_path, slots):
    # One more population than slots (agent.actor.lr is not a member key: each value is a population
    # of its own); with one slot joblib trains in the launcher process itself. Found by hand: a
    # population handed out after the stop began training (one step and a checkpoint) anyway.
    lrs = ["0.0003", "0.0004", "0.0005"][: slots + 1]
    sweep = tmp_path / "sweep"
    launcher = subprocess.Popen(
        [sys.executable, str(REPO / "scripts" / "train.py"), "-m", f"agent.actor.lr={','.join(lrs)}", *POPULATION_RUN,
         "+launcher=population", f"hydra.launcher.n_jobs={slots}", f"hydra.sweep.dir={sweep}",
         "hydra.sweep.subdir=lr${agent.actor.lr}"],
        cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, start_new_session=True,
    )  # fmt: skip
    deadline = time.monotonic() + 240
    while len(list(sweep.glob("*/checkpoints/step-*"))) < slots:
        assert launcher.poll() is None and time.monotonic() < deadline, launcher.communicate()
        time.sleep(0.1)
    launcher.send_signal(signal.SIGTERM)
    _, stderr = launcher.communicate(timeout=120)
    lines = [line for line in stderr.splitlines() if line.strip()]
    assert launcher.returncode == 143 and len(lines) == 1, stderr
    assert lines[0].startswith(f"kiln: stopped: SIGTERM: the sweep stopped with {slots + 1} of {slots + 1} members unfinished")
    begun = sorted(p.name for p in sweep.iterdir() if p.is_dir())
    assert begun == [f"lr{lr}" for lr in lrs[:slots]]


def test_members_stopped_elsewhere_resume_in_a_population_beside_members_not_begun(tmp_path):
    # Found by hand: the population loop resumes its members from one common checkpoint step, so a
    # member stopped earlier (here as a single run; alike for a joblib sweep stopped half-way) could
    # not share a population with one that had not begun: the re-run was refused.
    sweep = tmp_path / "sweep"
    single = subprocess.Popen(
        [sys.executable, str(REPO / "scripts" / "train.py"), "seed=0", *POPULATION_RUN, f"hydra.run.dir={sweep / 's0'}"],
        cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, text=True,
    )  # fmt: skip
    _wait_for_checkpoint(sweep / "s0", single)
    single.send_signal(signal.SIGTERM)
    assert single.wait(timeout=120) == 143
    proc = subprocess.run(_population_sweep(sweep, "0,1") + ["hydra.launcher.n_jobs=1"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=600)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    for name in ("s0", "s1"):
        assert json.loads((sweep / name / "result.json").read_text())["steps"] == 1000
    assert not list((sweep / "s0").glob("unfinished-*"))  # resumed, not started over


def test_a_population_worker_killed_outside_kiln_ends_the_sweep_with_one_line_and_the_same_command_resumes(tmp_path):
    # As the kernel's out-of-memory killer would: SIGKILL to one worker. The pool then ends the
    # others too; what was checkpointed stays, and the re-run trains the rest.
    sweep = tmp_path / "sweep"
    launcher = subprocess.Popen(_population_sweep(sweep, "0,1,2,3"), cwd=tmp_path, stdout=subprocess.DEVNULL,
                                stderr=subprocess.PIPE, text=True, start_new_session=True)  # fmt: skip
    deadline = time.monotonic() + 240
    while len(list(sweep.glob("*/checkpoints/step-*"))) < 2:
        assert launcher.poll() is None and time.monotonic() < deadline, launcher.communicate()
        time.sleep(0.1)
    workers = _children(launcher.pid)
    trainers = [pid for pid in workers if "popen_loky" in (Path("/proc") / str(pid) / "cmdline").read_text()]
    os.kill(trainers[0], signal.SIGKILL)
    _, stderr = launcher.communicate(timeout=120)
    lines = [line for line in stderr.splitlines() if line.strip()]
    assert launcher.returncode == 1 and len(lines) == 1 and "Traceback" not in stderr, stderr
    assert lines[0].startswith("kiln: error: a population worker ended without reporting")
    assert "run the same command again" in lines[0]
    again = subprocess.run(_population_sweep(sweep, "0,1,2,3"), cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert again.returncode == 0, again.stderr
    assert all((sweep / f"s{seed}" / "result.json").is_file() for seed in range(4))
