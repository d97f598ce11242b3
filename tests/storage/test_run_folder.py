"""The run folder (kiln.storage.run_folder): atomic writes, the folder's OS lock, setting aside an
unfinished attempt, and the result record.

Sources: Python's ``os`` docs (``os.replace``: "If successful, the renaming will be an atomic
operation (this is a POSIX requirement)"; ``os.fsync``), the Linux fsync(2) page (a file's directory
entry is durable only after an fsync of the directory too), flock(2) (descriptors from separate
``open`` calls are locked independently; a lock ends when its last descriptor closes, also when the
process dies), Python's ``json`` docs (``allow_nan=False`` raises ValueError for NaN), and
``tempfile.mkstemp``'s docs (its files are readable and writable only by their owner).
"""

import errno
import json
import math
import os
import socket
import stat
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
import yaml

from kiln.errors import RunFolderError
from kiln.storage.run_folder import (
    FinalNumbers,
    RunFolder,
    RunResult,
    replace_folder_atomic,
    where_this_runs,
    write_bytes_atomic,
    write_json_atomic,
)

REPO = Path(__file__).resolve().parents[2]


def _result(**changes) -> RunResult:
    values = dict(
        env_id="Pendulum-v1", env_name="pendulum", seed=3, steps=600, target_entropy=-1.0, target_entropy_groups=[-1.0],
        temperature_mode="tuned", final=FinalNumbers(-150.0, 12.5, 0.4, 0.05),
        evaluation={"episodes": 2, "return_mean": -150.0}, evaluation_seeds=[10, 11], eval_deterministic=True,
        eval_curve=[[300, -900.0], [600, -150.0]], updates=400, updates_per_s=120.0, wall_time_s=9.5,
    )  # fmt: skip
    values.update(changes)
    return RunResult(**values)


# ----- atomic writes ---------------------------------------------------------------------------


def test_atomic_write_replaces_the_file_whole_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "result.json"
    target.write_bytes(b"old")
    write_bytes_atomic(target, b"new contents")
    assert target.read_bytes() == b"new contents"
    assert os.listdir(tmp_path) == ["result.json"]


def test_atomic_write_fsyncs_the_file_before_the_rename_and_the_folder_after(tmp_path, monkeypatch):
    # fsync(2): the file's data, then (after the rename) the folder's entry, each needs its own fsync.
    events = []
    real_fsync, real_replace = os.fsync, os.replace

    def fsync(fd):
        events.append("fsync folder" if stat.S_ISDIR(os.fstat(fd).st_mode) else "fsync file")
        real_fsync(fd)

    def replace(source, destination):
        events.append("replace")
        real_replace(source, destination)

    monkeypatch.setattr(os, "fsync", fsync)
    monkeypatch.setattr(os, "replace", replace)
    write_bytes_atomic(tmp_path / "config.yaml", b"seed: 1\n")
    assert events == ["fsync file", "replace", "fsync folder"]


def test_a_failed_write_keeps_the_old_file_and_removes_its_temporary(tmp_path, monkeypatch):
    target = tmp_path / "config.yaml"
    target.write_bytes(b"seed: 1\n")

    def disk_full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "fsync", disk_full)
    with pytest.raises(OSError) as caught:
        write_bytes_atomic(target, b"seed: 2\n")
    assert caught.value.errno == errno.ENOSPC
    assert target.read_bytes() == b"seed: 1\n"  # os.replace never ran: the old file is whole
    assert os.listdir(tmp_path) == ["config.yaml"]


def test_atomic_files_get_the_users_usual_permissions(tmp_path):
    # open() creates files with mode 0o666 less the umask (Python's os.open / open docs); mkstemp's
    # would be 0o600, unreadable by the group that shares a results folder.
    umask = os.umask(0o022)
    os.umask(umask)
    write_bytes_atomic(tmp_path / "a", b"x")
    assert stat.S_IMODE((tmp_path / "a").stat().st_mode) == 0o666 & ~umask


def test_json_is_strict_and_a_refused_record_changes_nothing(tmp_path):
    target = tmp_path / "result.json"
    write_json_atomic(target, {"return": -1.5, "task": "Pendel ä"})
    assert json.loads(target.read_text(encoding="utf-8")) == {"return": -1.5, "task": "Pendel ä"}
    before = target.read_bytes()
    # json docs: with allow_nan=False, NaN / infinity raise ValueError (other JSON readers reject them).
    with pytest.raises(ValueError):
        write_json_atomic(target, {"return": math.nan})
    assert target.read_bytes() == before and os.listdir(tmp_path) == ["result.json"]


def test_a_folder_is_replaced_whole(tmp_path):
    folder, staged = tmp_path / "policy", tmp_path / ".policy-staged"
    folder.mkdir()
    (folder / "weights.safetensors").write_bytes(b"old")
    (folder / "stale.txt").write_bytes(b"from the old policy")
    staged.mkdir()
    (staged / "weights.safetensors").write_bytes(b"new")
    replace_folder_atomic(staged, folder)
    assert sorted(os.listdir(folder)) == ["weights.safetensors"] and (folder / "weights.safetensors").read_bytes() == b"new"
    assert sorted(os.listdir(tmp_path)) == ["policy"]  # neither the staged nor the set-aside old folder is left
    # Into an empty place it is a plain move.
    other = tmp_path / ".other"
    other.mkdir()
    replace_folder_atomic(other, tmp_path / "second")
    assert (tmp_path / "second").is_dir() and not other.exists()


# ----- where a run ran -------------------------------------------------------------------------


@pytest.mark.parametrize(
    "env,job",
    [
        ({}, None),
        ({"SLURM_JOB_ID": "812"}, "812"),
        # An array member as squeue shows it, <array job>_<task> (from memory, squeue's JOBID column).
        ({"SLURM_JOB_ID": "815", "SLURM_ARRAY_JOB_ID": "812", "SLURM_ARRAY_TASK_ID": "3"}, "812_3"),
    ],
)
def test_where_this_runs_names_the_host_and_the_slurm_job(monkeypatch, env, job):
    for name in ("SLURM_JOB_ID", "SLURM_ARRAY_JOB_ID", "SLURM_ARRAY_TASK_ID"):
        monkeypatch.delenv(name, raising=False)
    for name, value in env.items():
        monkeypatch.setenv(name, value)
    assert where_this_runs() == {"host": socket.gethostname(), "slurm_job": job}


# ----- the result record -----------------------------------------------------------------------


def test_result_record_round_trips_without_the_in_memory_flag(tmp_path):
    result = _result(ran_on={"host": "a", "slurm_job": None}, time_split_s={"env_step": 1.0, "update": 6.0, "loop": 9.5})
    data = result.to_json()
    assert "skipped" not in data and data["final"] == {
        "return_eval": -150.0,
        "return_eval_std": 12.5,
        "entropy": 0.4,
        "alpha": 0.05,
    }
    assert RunResult.from_json(json.loads(json.dumps(data))) == result
    folder = RunFolder(tmp_path)
    assert not folder.is_finished()
    folder.write_result(result)
    assert folder.is_finished() and folder.result_path == tmp_path / "result.json"
    read = folder.read_result()
    assert read == result and read.skipped is True  # the caller did not run it again


def test_an_older_record_without_some_fields_is_still_a_finished_run():
    old = _result().to_json()
    for name in ("time_split_s", "population", "ran_on", "final"):
        old.pop(name)
    read = RunResult.from_json(old)
    assert read.population is None and read.time_split_s is None and read.ran_on is None
    assert read.final == FinalNumbers(None, None, None, None) and read.seed == 3


# ----- names in the folder ---------------------------------------------------------------------


def test_file_names_of_the_layout(tmp_path):
    folder = RunFolder(tmp_path / "run")
    assert folder.config_path == tmp_path / "run" / "config.yaml"
    assert folder.policy_path == tmp_path / "run" / "policy"
    assert folder.checkpoints_path == tmp_path / "run" / "checkpoints"
    # Named by mode, first reset seed and episode count: seeds 5, 6, 7 → 3 episodes from seed 5.
    assert folder.evaluation_path("deterministic", [5, 6, 7]) == tmp_path / "run" / "evaluations" / "deterministic_seed5_3ep.json"


def test_saved_config_reads_what_prepare_wrote_and_treats_damage_as_absent(tmp_path):
    folder = RunFolder(tmp_path / "run")
    assert folder.saved_config() is None
    folder.prepare({"seed": 4, "env": {"id": "Pendulum-v1", "kwargs": {}}})
    assert yaml.safe_load(folder.config_path.read_text()) == {"seed": 4, "env": {"id": "Pendulum-v1", "kwargs": {}}}
    assert folder.saved_config() == {"seed": 4, "env": {"id": "Pendulum-v1", "kwargs": {}}}
    folder.config_path.write_text("seed: [unclosed\n")
    assert folder.saved_config() is None


def test_prepare_sets_an_unfinished_attempt_aside_and_loses_nothing(tmp_path):
    run = tmp_path / "run"
    folder = RunFolder(run)
    folder.prepare({"seed": 1})
    (run / "events.out.tfevents.1.host").write_bytes(b"first attempt's log")
    (run / "policy").mkdir()
    (run / "policy" / "spec.json").write_text("{}")
    (run / "checkpoints").mkdir()
    (run / "notes.txt").write_text("the user's own file")
    folder.prepare({"seed": 2})
    first = run / "unfinished-1"
    assert sorted(os.listdir(first)) == ["checkpoints", "config.yaml", "events.out.tfevents.1.host", "policy"]
    assert (first / "events.out.tfevents.1.host").read_bytes() == b"first attempt's log"
    assert (first / "policy" / "spec.json").read_text() == "{}"
    assert yaml.safe_load((first / "config.yaml").read_text()) == {"seed": 1}
    assert (run / "notes.txt").read_text() == "the user's own file"  # not Kiln's: left where it is
    assert yaml.safe_load((run / "config.yaml").read_text()) == {"seed": 2}
    folder.prepare({"seed": 3})  # the next attempt goes to the next free number
    assert yaml.safe_load((run / "unfinished-2" / "config.yaml").read_text()) == {"seed": 2}
    assert (first / "events.out.tfevents.1.host").exists()


# ----- the folder's lock -----------------------------------------------------------------------

_HOLDER = textwrap.dedent(
    """
    import sys, time
    from kiln.storage.run_folder import RunFolder
    RunFolder(sys.argv[1]).claim()
    print("claimed", flush=True)
    time.sleep(600)
    """
)


def test_a_folder_held_by_a_live_process_is_refused_and_free_once_it_dies(tmp_path):
    run = tmp_path / "run"
    holder = subprocess.Popen([sys.executable, "-c", _HOLDER, str(run)], stdout=subprocess.PIPE, text=True, cwd=REPO)
    try:
        assert holder.stdout.readline().strip() == "claimed"
        with pytest.raises(RunFolderError) as caught:
            RunFolder(run).claim()
        message = str(caught.value)
        assert f"in use by another Kiln process (pid {holder.pid})" in message and "\n" not in message
        assert message.endswith("or launch into another folder")
    finally:
        holder.kill()  # SIGKILL: nothing of Kiln runs, the kernel drops the lock (flock(2))
        holder.wait(timeout=60)
        holder.stdout.close()
    mine = RunFolder(run)
    mine.claim()
    assert (run / ".lock").read_text() == f"{os.getpid()}\n"
    mine.release()


def test_two_claims_in_one_process_conflict_until_the_first_is_released(tmp_path):
    # flock(2): descriptors from separate open() calls are locked independently, even in one process.
    first, second = RunFolder(tmp_path / "run"), RunFolder(tmp_path / "run")
    first.claim()
    try:
        with pytest.raises(RunFolderError, match=rf"pid {os.getpid()}"):
            second.claim()
    finally:
        first.release()
    second.claim()
    second.release()
    second.release()  # releasing twice is harmless


def test_an_unusable_place_is_refused_in_one_line(tmp_path):
    (tmp_path / "a_file").write_text("")
    with pytest.raises(RunFolderError) as caught:
        RunFolder(tmp_path / "a_file" / "run").claim()
    message = str(caught.value)
    # mkdir under a regular file fails with ENOTDIR, whose strerror is "Not a directory" (os docs, errno).
    assert f"cannot use run folder {tmp_path / 'a_file' / 'run'} (Not a directory)" in message
    assert message.endswith("choose a writable place, e.g. hydra.run.dir=<folder>") and "\n" not in message
