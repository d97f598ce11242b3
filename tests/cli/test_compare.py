"""scripts/compare.py as a first user meets it: run paths in the report relative to the sweep folder,
a help example naming the folder the sweep preset makes, and errors in Kiln's one-line family
(requirements of the project; no outside source). The statistics are tested in
tests/comparison/test_report_end_to_end.py."""

import csv
import json
from pathlib import Path

import pytest

from kiln.cli import compare
from kiln.config.presets import compose_node
from kiln.errors import CompareInputError, KilnError
from tests.support.cli import assert_one_line_error, run_kiln
from tests.support.compare_fixtures import run_config, training_scalars, write_run


def _sweep(root: Path) -> Path:
    sweep = root / "sweeps" / "pendulum_target_entropy"
    for seed, target in enumerate([-3.0, -3.0, -1.0, -1.0]):
        write_run(sweep / f"pendulum_target={target}_seed={seed}", run_config(seed, target),
                  training_scalars(-100.0 - seed, target, 0.1, target))  # fmt: skip
    return sweep


def test_report_names_runs_relative_to_the_sweep_folder(tmp_path: Path) -> None:
    sweep = _sweep(tmp_path)
    assert compare.main([str(sweep), "--resamples", "50"]) == 0
    report = sweep / "report"
    names = sorted(p.name for p in sweep.iterdir() if p.name != "report")
    markdown = (report / "report.md").read_text(encoding="utf-8")
    rows = [line.split("|")[1].strip() for line in markdown.splitlines() if line.startswith("| pendulum_")]
    assert sorted(rows) == names
    with open(report / "runs.csv", newline="", encoding="utf-8") as file:
        assert sorted(row["run"] for row in csv.DictReader(file)) == names
    numbers = json.loads((report / "comparison.json").read_text(encoding="utf-8"))
    assert sorted(run["run"] for run in numbers["runs"]) == names
    for name in ("report.md", "runs.csv", "comparison.json"):
        assert str(tmp_path) not in (report / name).read_text(encoding="utf-8"), name


def test_help_example_is_the_folder_the_sweep_preset_makes(tmp_path: Path) -> None:
    # Where `train sweep=target_entropy` writes on the default task, as Hydra composes it.
    made = compose_node("train", ["sweep=target_entropy"], with_hydra=True).hydra.sweep.dir
    assert made == "sweeps/pendulum_target_entropy"
    proc = run_kiln("compare", "--help", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert f"kiln compare {made}" in proc.stdout
    assert f"kiln compare {made}" in compare.__doc__
    assert "sweeps/entropy" not in proc.stdout + compare.__doc__


def test_compare_input_error_is_a_kiln_error_with_its_wording() -> None:
    error = CompareInputError("no runs found under x", "pass a sweep directory")
    assert isinstance(error, KilnError)
    assert str(error) == "no runs found under x; fix: pass a sweep directory"


def test_bad_input_goes_through_the_shared_one_line_exit(tmp_path: Path, capsys: pytest.CaptureFixture) -> None:
    with pytest.raises(SystemExit) as stop:
        compare.main([str(tmp_path / "nowhere")])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert err == f"kiln: error: {tmp_path / 'nowhere'} does not exist; fix: pass a sweep directory or run directories\n"


@pytest.mark.parametrize(
    "args,phrase",
    [(["--resamples", "0", "x"], "--resamples must be at least 1"), (["--bogus", "x"], "unrecognized arguments")],
)
def test_bad_option_is_one_line(tmp_path: Path, args: list[str], phrase: str) -> None:
    assert_one_line_error(run_kiln("compare", *args, cwd=tmp_path, timeout=120), phrase, "fix: see `kiln compare --help`")
