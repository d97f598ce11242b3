"""Writing a comparison to its report folder and summarising it for the terminal, in process: which
files are written (and that nothing else there is touched), run paths relative to the compared folder,
the report folder's checks, and a failed write that leaves no half-made folder (DEVELOPERS.md, "Errors":
nothing already written is deleted). The whole command is tested end to end in
tests/comparison/test_report_end_to_end.py; here every expected line is written out by hand from the
invented runs."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest

from kiln.comparison import plots, report
from kiln.comparison.events import ScalarSeries
from kiln.comparison.runs import Run
from kiln.comparison.summary import summarise
from kiln.errors import CompareInputError, KilnError

FILES = ["groups.csv", "runs.csv", "curves.csv", "profiles.csv", "comparison.json", "learning_curves.png",
         "entropy_alpha.png", "performance_profile.png", "final_scores.png", "report.md"]  # fmt: skip


def _run(sweep: Path, seed: int, target: float, final: float, finished: bool = True) -> Run:
    steps = np.array([0, 1000])
    scalars = {
        "return/eval": ScalarSeries(steps, np.array([final - 100.0, final])),
        "actor/entropy_nats": ScalarSeries(steps, np.array([0.0, -1.0])),
        "temperature/value": ScalarSeries(steps, np.array([1.0, 0.1])),
        "temperature/target_entropy": ScalarSeries(steps, np.array([target, target])),
    }
    config = {"seed": seed, "env": {"id": "Pendulum-v1"}}
    result = {"env_id": "Pendulum-v1"} if finished else None
    return Run(path=sweep / f"target={target}_seed={seed}", config=config, result=result, scalars=scalars)


@pytest.fixture
def sweep(tmp_path: Path) -> Path:
    return tmp_path / "sweeps" / "pendulum_target_entropy"


@pytest.fixture
def comparison(sweep: Path):
    runs = [_run(sweep, s, -1.0, f) for s, f in enumerate([-150.0, -170.0])]
    runs += [_run(sweep, s, -3.0, f, finished=s == 0) for s, f in enumerate([-250.0, -260.0])]
    return summarise(runs, n_resamples=100, seed=2, notes=["included 1 unfinished run(s)"])


def test_every_file_is_written_markdown_last_and_other_files_are_kept(comparison, sweep: Path):
    out = sweep / "report"
    out.mkdir(parents=True)
    (out / "my_notes.md").write_text("keep me")
    written = report.write_report(comparison, out, runs_root=sweep)
    assert [path.name for path in written] == FILES  # report.md last: it never points at a missing figure
    assert (out / "my_notes.md").read_text() == "keep me"
    assert sorted(p.name for p in out.iterdir()) == sorted([*FILES, "my_notes.md"])


def test_run_paths_are_relative_to_the_compared_folder(comparison, sweep: Path):
    out = sweep / "report"
    report.write_report(comparison, out, runs_root=sweep)
    with open(out / "runs.csv", newline="", encoding="utf-8") as file:
        rows = list(csv.DictReader(file))
    names = sorted(row["run"] for row in rows)
    assert names == ["target=-1.0_seed=0", "target=-1.0_seed=1", "target=-3.0_seed=0", "target=-3.0_seed=1"]
    assert {row["run"]: row["finished"] for row in rows}["target=-3.0_seed=1"] == "False"
    numbers = json.loads((out / "comparison.json").read_text(encoding="utf-8"))
    assert sorted(run["run"] for run in numbers["runs"]) == names
    assert numbers["settings"] == {"grouped_by": "agent.temperature.target_entropy", "metric": "return/eval",
                                   "step": 1000, "env_id": "Pendulum-v1", "confidence": 0.95,
                                   "resamples": 100, "resample_seed": 2}  # fmt: skip
    markdown = (out / "report.md").read_text(encoding="utf-8")
    assert "Run folders relative to the compared folder `pendulum_target_entropy/`." in markdown
    assert "| target=-3.0_seed=1 (unfinished) | -3 | 1 | 1,000 | -260 | -1 | 0.1 |" in markdown
    assert str(sweep) not in markdown


def test_markdown_headline_and_notes(comparison, sweep: Path):
    out = sweep / "report"
    report.write_report(comparison, out)
    lines = (out / "report.md").read_text(encoding="utf-8").splitlines()
    assert lines[0] == "# Comparison: Pendulum-v1"
    assert "- 4 runs of Pendulum-v1 in 2 groups, return/eval at step 1,000" in lines
    assert "- 95% percentile bootstrap CIs over runs, 100 resamples, seed 2; higher return/eval is better" in lines
    assert "- best group by IQM: **-1**" in lines
    assert "- included 1 unfinished run(s)" in lines
    # Without runs_root the paths are shown as loaded (absolute here).
    assert any(line.startswith(f"| {sweep / 'target=-1.0_seed=0'} |") for line in lines)


def test_grouping_line_names_the_current_target_entropy_word(comparison):
    # The target entropy's config word is minus_action_dims (README.md, "Training"; "auto" is an old
    # name that the config refuses), so the report must not tell a reader that "auto" is resolved.
    text = report.terminal_summary(comparison)
    assert "grouped by agent.temperature.target_entropy, resolved (minus_action_dims counts as -dim(A))" in text
    assert "auto" not in text


def test_terminal_summary_by_hand(comparison, sweep: Path):
    text = report.terminal_summary(comparison, sweep / "report")
    lines = text.splitlines()
    assert lines[0] == "Comparison: 4 runs of Pendulum-v1 in 2 groups, return/eval at step 1,000"
    assert lines[3] == "" and lines[4].startswith("target entropy")
    assert "note: included 1 unfinished run(s)" in lines
    assert lines[-1] == f"report: {sweep / 'report' / 'report.md'}"
    assert text.isascii()  # a terminal with a narrow encoding shows it
    assert "report:" not in report.terminal_summary(comparison)


def test_other_grouping_keys_are_named_plainly(sweep: Path):
    runs = [_run(sweep, s, -1.0, -100.0 - s) for s in range(2)]
    comparison = summarise(runs, group_by="seed", n_resamples=10)
    assert report.terminal_summary(comparison).splitlines()[1] == "grouped by seed"


def test_default_folder_is_report_inside_the_common_input_folder(tmp_path: Path):
    a, b = tmp_path / "sweeps" / "a", tmp_path / "sweeps" / "b" / "run"
    assert report.default_out_dir([a]) == a.resolve() / "report"
    # Source: os.path.commonpath of the inputs.
    assert report.default_out_dir([a, b]) == (tmp_path / "sweeps").resolve() / "report"
    assert report.input_root([b]) == b.resolve()


def test_report_folder_that_is_a_file_is_refused(tmp_path: Path, comparison):
    target = tmp_path / "report.txt"
    target.write_text("mine")
    with pytest.raises(CompareInputError) as info:
        report.check_out_dir(target)
    assert str(info.value) == f"{target} exists and is not a directory; fix: pass --out with a folder path"
    with pytest.raises(CompareInputError):
        report.write_report(comparison, target)
    assert target.read_text() == "mine"


def test_a_failed_write_removes_the_folder_it_created(tmp_path: Path, comparison, monkeypatch):
    def disk_full(figure, path):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(plots, "save_png", disk_full)
    out = tmp_path / "new" / "report"
    with pytest.raises(KilnError) as info:
        report.write_report(comparison, out)
    assert f"cannot write the report to {out}" in str(info.value) and str(info.value).endswith(
        "pass --out with a folder you can write to")
    assert "\n" not in str(info.value)
    assert not (tmp_path / "new").exists()  # the folders this call made are gone, CSVs and all
