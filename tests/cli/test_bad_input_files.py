"""Bad files and file-system failures end with one line, exit code 2, nothing changed on disk and no
folder created (requirements of the project; no outside source). The full table of damaged policy
files is in tests/storage/test_policy_spec.py; here each kind goes through the command itself."""

from __future__ import annotations

import json
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch

from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import SPEC, WEIGHTS, build_spec, save_policy
from tests.support.cli import REPO, assert_one_line_error, run_script
from tests.support.pickle_bomb import pickle_bomb
from tests.support.restricted import NO_BYTECODE, restricted, tree

# The scripts import this worktree's packages, not another checkout's installed ones.
ENV = {"PYTHONPATH": str(REPO), **NO_BYTECODE}


def _run(root: Path, task_id: str = "Pendulum-v1") -> Path:
    """A run folder holding a small Pendulum policy whose run evaluated one episode."""
    actor = SquashedGaussianActor(3, 1, (8,), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    obs_space = gym.spaces.Box(-np.inf, np.inf, (3,), np.float32)
    act_space = gym.spaces.Box(-2.0, 2.0, (1,), np.float32)
    env = {"id": task_id, "kwargs": {}, "max_episode_steps": 20}  # 20 steps: seconds per evaluation
    spec = build_spec(actor, obs_space, act_space, env, {"seed": 0, "steps": 1, "evaluate": {"episodes": 1}})
    save_policy(root / "run" / "policy", actor, spec)
    return root / "run"


def _evaluate(cwd: Path, *args: str, file_size: int | None = None) -> object:
    return run_script("evaluate", *args, cwd=cwd, timeout=180, env=ENV, preexec_fn=restricted(file_size))


@pytest.mark.parametrize("name", [WEIGHTS, SPEC])
def test_pickle_under_a_policy_file_name_is_refused_and_never_run(tmp_path: Path, name: str) -> None:
    run = _run(tmp_path)
    marker = tmp_path / "marker"
    (run / "policy" / name).write_bytes(pickle_bomb(marker))
    before = tree(tmp_path)
    assert_one_line_error(_evaluate(tmp_path, f"policy={run}"), name)
    assert not marker.exists()
    assert tree(tmp_path) == before


@pytest.mark.parametrize(
    "field,value,phrase",
    [
        ("layer_widths", [10**9], "actor.layer_widths[0] must be an integer from 1 to 65536"),
        ("observation_size", 10**40, "actor.observation_size must be an integer from 1 to 65536"),
        ("log_std_soft_limits", [2.0, -20.0], "low below high"),
    ],
)
def test_absurd_actor_numbers_are_one_line(tmp_path: Path, field: str, value: object, phrase: str) -> None:
    run = _run(tmp_path)
    spec = json.loads((run / "policy" / SPEC).read_text())
    spec["actor"][field] = value
    (run / "policy" / SPEC).write_text(json.dumps(spec))
    before = tree(tmp_path)
    assert_one_line_error(_evaluate(tmp_path, f"policy={run}"), phrase)
    assert tree(tmp_path) == before


def test_invalid_utf8_spec_is_one_line(tmp_path: Path) -> None:
    run = _run(tmp_path)
    (run / "policy" / SPEC).write_bytes(b"\xff\xfe\x00{}")
    assert_one_line_error(_evaluate(tmp_path, f"policy={run}"), "not UTF-8 text")


_MODULE = "kiln_test_marker_task"


def _marker_module(folder: Path) -> Path:
    """A module in the working folder that leaves a marker file when it is imported."""
    marker = folder / "imported"
    (folder / f"{_MODULE}.py").write_text(f"open({str(marker)!r}, 'w').close()\n")
    return marker


def test_task_module_named_by_the_policy_is_not_imported(tmp_path: Path) -> None:
    run = _run(tmp_path, f"{_MODULE}:Pendulum-v1")
    marker = _marker_module(tmp_path)
    before = tree(tmp_path)
    assert_one_line_error(_evaluate(tmp_path, f"policy={run}"), f"add task_module={_MODULE} to the command line")
    assert not marker.exists()
    assert tree(tmp_path) == before
    # Named by the user, the module is imported (it registers nothing; Pendulum-v1 is Gymnasium's own).
    proc = _evaluate(tmp_path, f"policy={run}", f"task_module={_MODULE}")
    assert proc.returncode == 0, proc.stderr
    assert marker.exists()


@pytest.mark.parametrize(
    "task_id,given,phrase",
    [
        (f"{_MODULE}:Pendulum-v1", "other_module", f"add task_module={_MODULE}"),
        ("Pendulum-v1", _MODULE, "names no module"),
    ],
)
def test_task_module_must_match(tmp_path: Path, task_id: str, given: str, phrase: str) -> None:
    run = _run(tmp_path, task_id)
    marker = _marker_module(tmp_path)
    assert_one_line_error(_evaluate(tmp_path, f"policy={run}", f"task_module={given}"), phrase)
    assert not marker.exists()


@pytest.mark.parametrize("task_id", ["../../etc/passwd", "Pendulum v1", "os.path/..:Pendulum-v1", "a:b:c"])
def test_odd_task_ids_are_refused(tmp_path: Path, task_id: str) -> None:
    run = _run(tmp_path)
    spec = json.loads((run / "policy" / SPEC).read_text())
    spec["env"]["id"] = task_id
    (run / "policy" / SPEC).write_text(json.dumps(spec))
    assert_one_line_error(_evaluate(tmp_path, f"policy={run}"), "is not a task id")


def _read_only(folder: Path) -> None:
    folder.mkdir(exist_ok=True)
    folder.chmod(0o555)


def test_evaluate_into_a_read_only_run_folder_is_refused_before_running(tmp_path: Path) -> None:
    run = _run(tmp_path)
    run.chmod(0o555)  # evaluations/ cannot be created
    before = tree(tmp_path)
    try:
        proc = _evaluate(tmp_path, f"policy={run}")
    finally:
        run.chmod(0o755)
    assert_one_line_error(proc, f"cannot write to {run / 'evaluations'}", "permission denied", "out=<path>")
    assert tree(tmp_path) == before


def test_evaluate_out_in_a_read_only_folder(tmp_path: Path) -> None:
    run = _run(tmp_path)
    _read_only(tmp_path / "locked")
    before = tree(tmp_path)
    try:
        proc = _evaluate(tmp_path, f"policy={run}", f"out={tmp_path / 'locked' / 'sub' / 'e.json'}")
    finally:
        (tmp_path / "locked").chmod(0o755)
    assert_one_line_error(proc, str(tmp_path / "locked" / "sub"), "permission denied")
    assert tree(tmp_path) == before


def test_evaluate_video_into_a_read_only_folder(tmp_path: Path) -> None:
    run = _run(tmp_path)
    (run / "evaluations").mkdir()
    video_dir = run / "evaluations" / "deterministic_seed5_1ep"  # beside the record of seed=5, named like it
    _read_only(video_dir)
    before = tree(tmp_path)
    try:
        proc = _evaluate(tmp_path, f"policy={run}", "video=true", "seed=5", "episodes=1")
    finally:
        video_dir.chmod(0o755)
    assert_one_line_error(proc, f"cannot write to {video_dir}", "drop video")
    assert tree(tmp_path) == before


def test_file_size_limit_while_writing_the_record_is_one_line_and_keeps_the_earlier_record(tmp_path: Path) -> None:
    run = _run(tmp_path)
    out = tmp_path / "results" / "e.json"
    assert _evaluate(tmp_path, f"policy={run}", f"out={out}").returncode == 0
    before = tree(tmp_path)
    # The record of one episode is several hundred bytes; 100 lets the write begin and stops it midway.
    proc = _evaluate(tmp_path, f"policy={run}", f"out={out}", "seed=7", file_size=100)
    assert_one_line_error(proc, f"cannot write the evaluation record e.json to {out.parent}", "file-size limit")
    assert tree(tmp_path) == before  # the earlier record whole, no .partial file


def test_file_size_limit_in_a_new_folder_removes_the_folder(tmp_path: Path) -> None:
    run = _run(tmp_path)
    before = tree(tmp_path)
    proc = _evaluate(tmp_path, f"policy={run}", f"out={tmp_path / 'new' / 'deeper' / 'e.json'}", file_size=100)
    assert_one_line_error(proc, "file-size limit")
    assert tree(tmp_path) == before



def _verify(cwd: Path, *args: str, file_size: int | None = None) -> object:
    return run_script("verify", "--quick", *args, cwd=cwd, timeout=180, env=ENV, preexec_fn=restricted(file_size))


def test_verify_out_in_a_read_only_folder_is_refused_before_any_check(tmp_path: Path) -> None:
    _read_only(tmp_path / "locked")
    try:
        proc = _verify(tmp_path, "--out", str(tmp_path / "locked" / "v.json"))
    finally:
        (tmp_path / "locked").chmod(0o755)
    assert_one_line_error(proc, f"cannot write to {tmp_path / 'locked'}", "permission denied")
    assert proc.stdout == ""  # refused before the first check ran
    assert tree(tmp_path) == {"locked": None}


def test_verify_out_past_the_file_size_limit_is_one_line_exit_2_and_keeps_the_earlier_table(tmp_path: Path) -> None:
    out = tmp_path / "v.json"
    out.write_text("earlier table")
    proc = _verify(tmp_path, "--out", str(out), file_size=200)  # the JSON table is several kB
    assert_one_line_error(proc, f"cannot write {out}", "file-size limit")
    assert "4 of 4 checks passed" in proc.stdout
    assert tree(tmp_path) == {"v.json": b"earlier table"}


def _sweep(root: Path, unfinished: int = 1) -> Path:
    """Two finished runs per group and ``unfinished`` runs without result.json (invented numbers)."""
    from tests.support.compare_fixtures import run_config, training_scalars, write_run

    sweep = root / "sweep"
    for seed, target in enumerate([-3.0, -3.0, -1.0, -1.0]):
        write_run(sweep / f"run{seed}", run_config(seed, target), training_scalars(-100.0 - seed, target, 0.1, target))
    for seed in range(4, 4 + unfinished):
        # Still training: event files up to step 500 of 1000, no result.json.
        write_run(sweep / f"run{seed}", run_config(seed, -1.0),
                  training_scalars(-900.0, -1.0, 0.1, -1.0, steps=(0, 250, 500)), finished=False)  # fmt: skip
    return sweep


def _compare(cwd: Path, *args: str, file_size: int | None = None) -> object:
    return run_script("compare", *args, "--resamples", "50", cwd=cwd, timeout=180, env=ENV,
                      preexec_fn=restricted(file_size))  # fmt: skip


def test_compare_leaves_unfinished_runs_out_with_a_note(tmp_path: Path) -> None:
    sweep = _sweep(tmp_path)
    proc = _compare(tmp_path, str(sweep))
    assert proc.returncode == 0, proc.stderr
    assert "left out 1 unfinished run(s) (no result.json yet)" in proc.stdout and "run4" in proc.stdout
    numbers = json.loads((sweep / "report" / "comparison.json").read_text())
    assert sorted(run["run"] for run in numbers["runs"]) == ["run0", "run1", "run2", "run3"]
    # Compared at the last step every finished run reached (1000), not the unfinished run's 500.
    assert numbers["settings"]["step"] == 1000


def test_compare_includes_unfinished_runs_marked_on_request(tmp_path: Path) -> None:
    sweep = _sweep(tmp_path)
    proc = _compare(tmp_path, str(sweep), "--include-unfinished")
    assert proc.returncode == 0, proc.stderr
    assert "included 1 unfinished run(s)" in proc.stdout
    numbers = json.loads((sweep / "report" / "comparison.json").read_text())
    assert {run["run"]: run["finished"] for run in numbers["runs"]} == {
        "run0": True, "run1": True, "run2": True, "run3": True, "run4": False}
    assert "| run4 (unfinished) |" in (sweep / "report" / "report.md").read_text()


def test_compare_of_only_unfinished_runs_says_how_to_include_them(tmp_path: Path) -> None:
    from tests.support.compare_fixtures import run_config, training_scalars, write_run

    run = write_run(tmp_path / "run", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0), finished=False)
    before = tree(tmp_path)
    assert_one_line_error(_compare(tmp_path, str(run)), "every run found is unfinished", "--include-unfinished")
    assert tree(tmp_path) == before


def test_compare_resamples_are_capped(tmp_path: Path) -> None:
    sweep = _sweep(tmp_path, unfinished=0)
    before = tree(tmp_path)
    proc = run_script("compare", str(sweep), "--resamples", str(10**12), cwd=tmp_path, timeout=120, env=ENV)
    assert_one_line_error(proc, f"--resamples {10**12} is above the cap of 100000", "in memory")
    assert tree(tmp_path) == before


def test_compare_out_in_a_read_only_folder_is_refused_before_loading(tmp_path: Path) -> None:
    sweep = _sweep(tmp_path, unfinished=0)
    _read_only(tmp_path / "locked")
    before = tree(tmp_path)
    try:
        proc = _compare(tmp_path, str(sweep), "--out", str(tmp_path / "locked" / "report"))
    finally:
        (tmp_path / "locked").chmod(0o755)
    assert_one_line_error(proc, f"cannot write to {tmp_path / 'locked' / 'report'}", "permission denied", "--out")
    assert tree(tmp_path) == before


def test_compare_past_the_file_size_limit_removes_the_new_report_folder(tmp_path: Path) -> None:
    sweep = _sweep(tmp_path, unfinished=0)
    before = tree(tmp_path)
    # groups.csv fits in 400 bytes; the curves and figures do not.
    proc = _compare(tmp_path, str(sweep), file_size=400)
    assert_one_line_error(proc, f"cannot write the report to {sweep / 'report'}", "file-size limit")
    assert tree(tmp_path) == before


def test_compare_past_the_file_size_limit_keeps_an_earlier_report_whole(tmp_path: Path) -> None:
    sweep = _sweep(tmp_path, unfinished=0)
    assert _compare(tmp_path, str(sweep)).returncode == 0
    earlier = tree(sweep / "report")
    proc = _compare(tmp_path, str(sweep), file_size=400)
    assert_one_line_error(proc, "file-size limit")
    # Every file is the earlier one or a complete new one (same inputs, same seed: the same bytes),
    # and no temporary is left.
    assert tree(sweep / "report") == earlier
