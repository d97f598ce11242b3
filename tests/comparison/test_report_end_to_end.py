"""The comparison report end to end, through scripts/compare.py in a subprocess: a fake sweep (2 groups ×
3 seeds, invented numbers) checked against SciPy, and every kind of bad input (exit status 2, one line on
stderr). The report's parts in process are tested in tests/comparison/test_report.py."""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from tests.support.compare_fixtures import run_config, training_scalars, write_run

SCRIPT = Path(__file__).resolve().parents[2] / "scripts" / "compare.py"
RESAMPLES = 500
SEED = 3

# Invented finals, exactly representable in float32 so that event files return them unchanged.
# target -3: three seeds; target -1: two minus_action_dims runs (resolved to -1 by result.json) and one -1.0.
FINALS = {"-3": [-150.5, -180.25, -162.0], "-1": [-240.0, -171.5, -205.75]}
ENTROPIES = {"-3": [-2.75, -3.25, -3.0], "-1": [-1.0, -0.875, -1.125]}
ALPHAS = {"-3": [0.0625, 0.125, 0.09375], "-1": [0.25, 0.1875, 0.3125]}


def run_compare(*args: str | Path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, str(SCRIPT), *map(str, args)], capture_output=True, text=True, timeout=120, check=False
    )


def assert_refused(result: subprocess.CompletedProcess, *words: str) -> None:
    """Exit status 2, exactly one line on stderr naming the problem and a fix, no traceback."""
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert "fix:" in lines[0]
    for word in words:
        assert word in lines[0]


def make_sweep(root: Path) -> Path:
    sweep = root / "sweep"
    job = 0
    for label, target_values in (("-3", [-3.0, -3.0, -3.0]), ("-1", ["minus_action_dims", "minus_action_dims", -1.0])):
        for seed, config_target in enumerate(target_values):
            resolved = float(label)
            result = None
            if config_target == "minus_action_dims":
                result = {"env_id": "Pendulum-v1", "steps": 1000, "target_entropy": resolved,
                          "final": {"return_eval": FINALS[label][seed], "entropy": ENTROPIES[label][seed],
                                    "alpha": ALPHAS[label][seed]}}
            run = write_run(
                sweep / str(job), run_config(seed, config_target),
                training_scalars(FINALS[label][seed], ENTROPIES[label][seed], ALPHAS[label][seed], resolved),
                result,
            )
            (run / ".hydra").mkdir()
            (run / ".hydra" / "config.yaml").write_text("seed: 0\n")
            job += 1
    (sweep / "multirun.yaml").write_text("hydra: {}\n")
    return sweep


@pytest.fixture(scope="module")
def sweep(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_sweep(tmp_path_factory.mktemp("fake"))


@pytest.fixture(scope="module")
def report(sweep: Path) -> tuple[subprocess.CompletedProcess, Path]:
    result = run_compare(sweep, "--resamples", RESAMPLES, "--resample-seed", SEED)
    return result, sweep / "report"


def test_report_files_exist(report: tuple[subprocess.CompletedProcess, Path]) -> None:
    result, folder = report
    assert result.returncode == 0, result.stderr
    for name in ("report.md", "groups.csv", "runs.csv", "curves.csv", "profiles.csv", "comparison.json",
                 "learning_curves.png", "entropy_alpha.png", "performance_profile.png", "final_scores.png"):
        assert (folder / name).is_file(), name
    assert not list(folder.glob(".*partial"))
    markdown = (folder / "report.md").read_text(encoding="utf-8")
    for image in ("learning_curves.png", "entropy_alpha.png", "performance_profile.png", "final_scores.png"):
        assert f"]({image})" in markdown
    assert "Traceback" not in result.stderr


def test_group_numbers_equal_scipy_on_the_known_finals(report: tuple[subprocess.CompletedProcess, Path]) -> None:
    _, folder = report
    with open(folder / "groups.csv", newline="", encoding="utf-8") as file:
        rows = {row["group"]: row for row in csv.DictReader(file)}
    numbers = json.loads((folder / "comparison.json").read_text(encoding="utf-8"))
    by_json = {group["group"]: group for group in numbers["groups"]}
    assert set(rows) == set(FINALS) == set(by_json)
    best = FINALS["-3"]  # highest IQM by hand: mean -164.25 against -205.75
    for label, finals in FINALS.items():
        row, entry = rows[label], by_json[label]
        x = np.array(finals)
        assert int(row["runs"]) == 3
        # Source: scipy.stats.trim_mean(x, 0.25); numpy median and mean.
        assert float(row["iqm"]) == pytest.approx(stats.trim_mean(x, 0.25), rel=1e-12)
        assert float(row["median"]) == np.median(x)
        assert float(row["mean"]) == pytest.approx(np.mean(x), rel=1e-12)
        assert float(row["entropy_iqm_nats"]) == pytest.approx(stats.trim_mean(ENTROPIES[label], 0.25), rel=1e-12)
        assert float(row["alpha_iqm"]) == pytest.approx(stats.trim_mean(ALPHAS[label], 0.25), rel=1e-6)
        # Source: scipy.stats.bootstrap(method="percentile"), same seed and resample count.
        ci = stats.bootstrap(
            (x,), lambda s, axis: stats.trim_mean(s, 0.25, axis=axis), method="percentile",
            n_resamples=RESAMPLES, vectorized=True, rng=np.random.default_rng(SEED),
        ).confidence_interval
        assert float(row["iqm_ci_low"]) == pytest.approx(ci.low, rel=1e-12)
        assert float(row["iqm_ci_high"]) == pytest.approx(ci.high, rel=1e-12)
        assert entry["iqm_ci"] == [float(row["iqm_ci_low"]), float(row["iqm_ci_high"])]
        # Source: scipy.stats.mannwhitneyu(x, best).statistic / (n·m).
        improvement = stats.mannwhitneyu(x, best).statistic / (len(x) * len(best))
        assert float(row["p_above_best"]) == pytest.approx(improvement, rel=1e-12)
        assert entry["p_above_best"] == float(row["p_above_best"])
    # Hand arithmetic: of the 9 pairs, only -171.5 > -180.25 wins → 1/9.
    assert float(rows["-1"]["p_above_best"]) == pytest.approx(1 / 9)
    assert rows["-3"]["best"] == "True" and rows["-3"]["p_above_best_ci_low"] == ""
    # Source: scipy.stats.bootstrap over the two independent samples, same seed.
    x, y = np.array(FINALS["-1"]), np.array(best)
    ci = stats.bootstrap(
        (x, y), lambda a, b, axis: stats.mannwhitneyu(a, b, axis=axis).statistic / (a.shape[axis] * b.shape[axis]),
        method="percentile", n_resamples=RESAMPLES, vectorized=True, rng=np.random.default_rng(SEED),
    ).confidence_interval
    assert float(rows["-1"]["p_above_best_ci_low"]) == pytest.approx(ci.low, abs=1e-12)
    assert float(rows["-1"]["p_above_best_ci_high"]) == pytest.approx(ci.high, abs=1e-12)


def test_runs_profile_and_settings_in_the_files(report: tuple[subprocess.CompletedProcess, Path]) -> None:
    _, folder = report
    numbers = json.loads((folder / "comparison.json").read_text(encoding="utf-8"))
    # Written by make_sweep: six runs, compared at their common last step 1000.
    assert numbers["settings"]["step"] == 1000
    assert numbers["settings"]["env_id"] == "Pendulum-v1"
    assert sorted(run["score"] for run in numbers["runs"]) == sorted(FINALS["-3"] + FINALS["-1"])
    profile = next(p for p in numbers["profiles"] if p["group"] == "-1")
    levels, fraction = np.array(profile["levels"]), np.array(profile["fraction_above"])
    # Hand count of the -1 group's finals (-240, -205.75, -171.5) strictly above τ.
    for level, expected in ((-240.0, 2 / 3), (-205.75, 1 / 3), (-171.5, 0.0)):
        assert fraction[np.flatnonzero(levels == level)[0]] == pytest.approx(expected)
    assert fraction[0] == 1.0 and fraction[-1] == 0.0  # the levels span all six finals with a margin
    curve = next(c for c in numbers["curves"] if c["group"] == "-3" and c["tag"] == "return/eval")
    # Source: scipy.stats.trim_mean over the three runs at step 1000 (the last point of the curve).
    assert curve["steps"][-1] == 1000
    assert curve["iqm"][-1] == pytest.approx(stats.trim_mean(FINALS["-3"], 0.25), rel=1e-12)
    # Source: scipy.stats.bootstrap(method="percentile") of the finals, same seed: the curve resamples
    # whole runs, so its last column sees the same draws.
    band = stats.bootstrap(
        (np.array(FINALS["-3"]),), lambda s, axis: stats.trim_mean(s, 0.25, axis=axis), method="percentile",
        n_resamples=RESAMPLES, vectorized=True, rng=np.random.default_rng(SEED),
    ).confidence_interval
    assert (curve["ci_low"][-1], curve["ci_high"][-1]) == pytest.approx((band.low, band.high), rel=1e-12)


def test_terminal_table(report: tuple[subprocess.CompletedProcess, Path]) -> None:
    result, folder = report
    lines = result.stdout.splitlines()
    assert any(line.startswith("target entropy") and "IQM [95% CI]" in line for line in lines)
    # The best group's IQM by hand: (-150.5 - 180.25 - 162) / 3 = -164.25 → shown with one decimal.
    assert any(line.startswith("-3 ") and "-164.2" in line and "reference" in line for line in lines)
    assert str(folder / "report.md") in result.stdout


def test_single_run_group_is_marked_not_refused(tmp_path: Path) -> None:
    for seed, target in enumerate([-3.0, -3.0, -1.0]):
        write_run(tmp_path / "sweep" / str(seed), run_config(seed, target),
                  training_scalars(-100.0 - seed, -1.0, 0.1, target))
    result = run_compare(tmp_path / "sweep", "--resamples", 200)
    assert result.returncode == 0, result.stderr
    assert "n=1, no CI" in next(line for line in result.stdout.splitlines() if line.startswith("-1 "))
    with open(tmp_path / "sweep" / "report" / "groups.csv", newline="", encoding="utf-8") as file:
        single = next(row for row in csv.DictReader(file) if row["group"] == "-1")
    assert single["iqm_ci_low"] == "" and "n=1, no CI" in single["note"]


def test_existing_files_in_the_report_folder_are_kept(sweep: Path, tmp_path: Path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    (out / "my_notes.md").write_text("keep me")
    (out / "groups.csv").write_text("stale")
    result = run_compare(sweep, "--out", out, "--resamples", 100)
    assert result.returncode == 0, result.stderr
    assert (out / "my_notes.md").read_text() == "keep me"
    assert (out / "groups.csv").read_text().startswith("grouped_by,group,runs,iqm")
    assert not list(out.glob(".*partial"))


def test_empty_directory(tmp_path: Path) -> None:
    assert_refused(run_compare(tmp_path), "no runs found")


def test_foreign_directory(tmp_path: Path) -> None:
    (tmp_path / "photos").mkdir()
    (tmp_path / "photos" / "cat.png").write_bytes(b"\x89PNG")
    (tmp_path / "readme.txt").write_text("hello")
    assert_refused(run_compare(tmp_path), "no runs found")


def test_missing_path(tmp_path: Path) -> None:
    assert_refused(run_compare(tmp_path / "nowhere"), "does not exist")


def test_runs_without_the_grouping_key(sweep: Path, tmp_path: Path) -> None:
    result = run_compare(sweep, "--group-by", "agent.critic_lr", "--out", tmp_path)
    assert_refused(result, "agent.critic_lr", "--group-by")


def test_runs_without_the_metric(sweep: Path, tmp_path: Path) -> None:
    assert_refused(run_compare(sweep, "--metric", "return/best", "--out", tmp_path), "return/best", "--metric")


def test_runs_of_different_tasks(sweep: Path, tmp_path: Path) -> None:
    other = write_run(tmp_path / "cheetah", run_config(0, -6.0, env_id="HalfCheetah-v5"),
                      training_scalars(-1.0, -6.0, 0.1, -6.0))
    assert_refused(run_compare(sweep, other, "--out", tmp_path / "out"), "HalfCheetah-v5", "Pendulum-v1")


def test_step_no_run_reached(sweep: Path, tmp_path: Path) -> None:
    assert_refused(run_compare(sweep, "--step", 5000, "--out", tmp_path), "--step 1000")


def test_minus_action_dims_target_that_cannot_be_resolved(tmp_path: Path) -> None:
    scalars = training_scalars(-1.0, -1.0, 0.1, -1.0)
    del scalars["temperature/target_entropy"]
    write_run(tmp_path / "run", run_config(0, "minus_action_dims"), scalars)
    assert_refused(run_compare(tmp_path / "run", "--out", tmp_path / "out"), "target entropy")


def test_broken_config_file(tmp_path: Path) -> None:
    run = write_run(tmp_path / "run", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
    (run / "config.yaml").write_text("seed: [unclosed\n")
    assert_refused(run_compare(run, "--out", tmp_path / "out"), "config.yaml")


def test_out_is_a_file(sweep: Path, tmp_path: Path) -> None:
    target = tmp_path / "report.txt"
    target.write_text("mine")
    assert_refused(run_compare(sweep, "--out", target, "--resamples", 10), "not a directory")
    assert target.read_text() == "mine"
