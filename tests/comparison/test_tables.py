"""The per-group table as terminal text and as markdown, on a comparison of invented runs; every cell
is written out by hand from the numbers of the runs (IQM as the 25 % trimmed mean of Agarwal et al.
2021, checked against scipy.stats.trim_mean)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from kiln.comparison.events import ScalarSeries
from kiln.comparison.runs import Run
from kiln.comparison.summary import summarise
from kiln.comparison.tables import NO_CI, format_number, format_probability, group_header, markdown_table, text_table


def _run(path: Path, seed: int, target: float, final: float) -> Run:
    steps = np.array([0, 1000])
    scalars = {
        "return/eval": ScalarSeries(steps, np.array([final - 50.0, final])),
        "actor/entropy_nats": ScalarSeries(steps, np.array([0.0, -1.5])),
        "temperature/value": ScalarSeries(steps, np.array([1.0, 0.05])),
        "temperature/target_entropy": ScalarSeries(steps, np.array([target, target])),
    }
    config = {"seed": seed, "env": {"id": "Pendulum-v1"}}
    return Run(path=path / f"{target}_{seed}", config=config, result={"env_id": "Pendulum-v1"}, scalars=scalars)


@pytest.fixture
def comparison(tmp_path: Path):
    runs = [_run(tmp_path, s, -1.0, final) for s, final in enumerate([-150.0, -170.0, -160.0])]
    runs.append(_run(tmp_path, 0, -3.0, -300.0))  # a group of one run
    return summarise(runs, n_resamples=200, seed=0)


@pytest.mark.parametrize(
    "value,text",
    [(-164.25, "-164.2"), (1234.5, "1234.5"), (-1.5, "-1.50"), (0.05, "0.05"), (0.000123456, "0.000123"),
     (0.0, "0"), (math.nan, "-"), (math.inf, "-")],
)
def test_number_cells(value, text):
    # By hand: ≥ 100 one decimal, ≥ 1 two decimals, below 1 three significant digits, not finite a dash.
    # (-164.25 rounds half to even in Python's format: -164.2.)
    assert format_number(value) == text


def test_probability_and_header_cells():
    assert format_probability(1 / 3) == "0.33" and format_probability(1.0) == "1.00"
    assert group_header("agent.temperature.target_entropy") == "target entropy"


def test_text_table_by_hand(comparison):
    lines = text_table(comparison).splitlines()
    header = lines[0].split("  ")
    assert [cell.strip() for cell in header if cell.strip()] == [
        "target entropy", "runs", "IQM [95% CI]", "median", "mean", "entropy (nats)", "alpha", "P(> best) [95% CI]"]  # fmt: skip
    assert set(lines[1]) <= {"-", " "}  # the rule under the header
    # Hand arithmetic: the -3 group is one run at -300 (no CI, P(> best) = 0: -300 is below all three);
    # the -1 group's IQM of 3 runs is their mean (nothing is cut from 3), -160.
    assert stats.trim_mean([-150.0, -170.0, -160.0], 0.25) == -160.0
    single = next(line for line in lines if line.startswith("-3 "))
    assert f"-300.0 ({NO_CI})" in single and f"0.00 ({NO_CI})" in single
    best = next(line for line in lines if line.startswith("-1 "))
    assert "-160.0 [" in best and "reference (best IQM)" in best and "-1.50" in best and "0.05" in best
    assert all(line == line.rstrip() and line.isascii() for line in lines)  # ASCII for any terminal
    # Columns line up: every cell starts at the header's column.
    start = lines[0].index("runs")
    assert all(line[start] != " " for line in lines[2:])


def test_markdown_table_by_hand(comparison):
    lines = markdown_table(comparison).splitlines()
    assert lines[0] == "| target entropy | runs | IQM [95% CI] | median | mean | entropy (nats) | α | P(> best) [95% CI] |"
    assert lines[1] == "|---|---|---|---|---|---|---|---|"
    assert lines[2].startswith("| -3 | 1 | -300.0 (n=1, no CI) | -300.0 | -300.0 | -1.50 | 0.05 | 0.00 (n=1, no CI) |")
    assert len(lines) == 4


def test_best_group_of_one_run_marks_the_others_interval_missing(tmp_path: Path):
    runs = [_run(tmp_path, s, -3.0, final) for s, final in enumerate([-300.0, -310.0])] + [_run(tmp_path, 0, -1.0, -100.0)]
    lines = text_table(summarise(runs, n_resamples=50)).splitlines()
    # The -3 group has two runs but the best (-1) has one, so P(> best) has no interval either.
    assert f"0.00 (best group {NO_CI})" in next(line for line in lines if line.startswith("-3 "))
