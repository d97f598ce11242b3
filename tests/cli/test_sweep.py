"""A real sweep through the command line: 2 entropy targets × 2 seeds in parallel jobs, resumed, compared."""

import csv
import json

import pytest
from scipy.stats import trim_mean

from tests.support.cli import TINY_RUN, run_script

TARGETS = ("-1.0", "-3.0")


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    work = tmp_path_factory.mktemp("sweep")
    sweep_dir = work / "sweep"
    args = ("sweep=target_entropy", f"agent.temperature.target_entropy={','.join(TARGETS)}", "seed=0,1",
            f"hydra.sweep.dir={sweep_dir}", *TINY_RUN)  # fmt: skip
    first = run_script("train", *args, cwd=work, timeout=600)
    assert first.returncode == 0, first.stderr
    return work, sweep_dir, args


def _runs(sweep_dir):
    return sorted(p for p in sweep_dir.iterdir() if (p / "result.json").exists())


def test_each_job_has_a_readable_run_folder(sweep):
    _, sweep_dir, _ = sweep
    names = [p.name for p in _runs(sweep_dir)]
    assert names == sorted(f"pendulum_target={t}_seed={s}" for t in TARGETS for s in (0, 1))
    for run in _runs(sweep_dir):
        result = json.loads((run / "result.json").read_text())
        assert f"target={result['target_entropy']}" in run.name
        assert f"seed={result['seed']}" in run.name


def test_rerun_skips_finished_runs(sweep):
    work, sweep_dir, args = sweep
    before = {p.name: (p / "result.json").stat().st_mtime_ns for p in _runs(sweep_dir)}
    again = run_script("train", *args, cwd=work, timeout=600)
    assert again.returncode == 0, again.stderr
    assert again.stdout.count("already holds a finished run") == 4
    assert {p.name: (p / "result.json").stat().st_mtime_ns for p in _runs(sweep_dir)} == before


def test_compare_reports_both_groups(sweep):
    work, sweep_dir, _ = sweep
    proc = run_script("compare", str(sweep_dir), "--resamples", "200", cwd=work, timeout=300)
    assert proc.returncode == 0, proc.stderr
    report = sweep_dir / "report"
    assert (report / "report.md").exists() and (report / "learning_curves.png").exists()
    with open(report / "groups.csv") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == 2
    finals = {}
    for run in _runs(sweep_dir):
        result = json.loads((run / "result.json").read_text())
        finals.setdefault(result["target_entropy"], []).append(result["final"]["return_eval"])
    # With two runs a group's IQM (25 % trimmed mean, Agarwal et al. 2021; scipy.stats.trim_mean keeps
    # both values) is their plain mean. Event files store float32, hence the tolerance.
    data = json.loads((report / "comparison.json").read_text())
    got = {g["target_entropy"]: g["iqm"] for g in data["groups"]}
    assert set(got) == set(finals)
    for target, values in finals.items():
        assert got[target] == pytest.approx(trim_mean(values, 0.25), rel=1e-5)
