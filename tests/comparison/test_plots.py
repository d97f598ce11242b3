"""The comparison's figures: what each one draws (read back from matplotlib's own Figure and Axes
objects), the PNG they are saved as (read back with matplotlib.image), and that drawing leaves the
caller's matplotlib as it was: backend, rcParams, pyplot's figures (README.md, "Use from Python": a call
leaves your process as it found it)."""

from __future__ import annotations

from pathlib import Path

import matplotlib
import matplotlib.image
import numpy as np
import pytest
from matplotlib import pyplot

from kiln.comparison import plots
from kiln.comparison.events import ScalarSeries
from kiln.comparison.runs import Run
from kiln.comparison.summary import summarise


def _run(path: Path, seed: int, target: float, final: float, with_alpha: bool = True) -> Run:
    steps = np.array([0, 500, 1000])
    scalars = {
        "return/eval": ScalarSeries(steps, final - np.array([100.0, 50.0, 0.0])),
        "actor/entropy_nats": ScalarSeries(steps, np.array([0.5, -0.5, target])),
        "temperature/target_entropy": ScalarSeries(steps, np.full(3, target)),
    }
    if with_alpha:
        scalars["temperature/value"] = ScalarSeries(steps, np.array([1.0, 0.3, 0.05]))
    config = {"seed": seed, "env": {"id": "Pendulum-v1"}}
    return Run(path=path / f"{target}_{seed}", config=config, result={"env_id": "Pendulum-v1"}, scalars=scalars)


@pytest.fixture
def comparison(tmp_path: Path):
    runs = [_run(tmp_path, s, target, -150.0 - 10 * s - 40 * (target == -2.0)) for target in (-2.0, -0.5) for s in range(3)]
    return summarise(runs, n_resamples=100, seed=0)


def test_axis_labels_name_units_and_unknown_tags_stand_for_themselves():
    assert plots.axis_label("return/eval") == "evaluation return (sum of rewards per episode)"
    assert plots.axis_label("actor/entropy_nats") == "policy entropy (nats)"
    assert plots.axis_label("custom/tag") == "custom/tag"


def test_learning_curves_draw_one_iqm_line_per_group_and_the_compared_step(comparison):
    figure = plots.learning_curves(comparison)
    axes = figure.axes[0]
    lines = [line for line in axes.get_lines() if line.get_label().startswith("-")]
    assert [line.get_label() for line in lines] == ["-2  (n=3)", "-0.5  (n=3)"]
    # Each line is the group's IQM curve, as summarise computed it.
    curve = next(c for c in comparison.curves if c.group == "-2" and c.tag == "return/eval")
    np.testing.assert_array_equal(lines[0].get_ydata(), curve.center)
    assert any(line.get_label() == "step compared" and list(line.get_xdata()) == [1000, 1000] for line in axes.get_lines())
    assert axes.get_xlabel() == "env steps" and axes.get_ylabel() == plots.axis_label("return/eval")
    assert axes.get_title() == "Pendulum-v1: return/eval, IQM over runs with 95% CI"
    assert figure.legends[0].get_title().get_text() == "agent.temperature.target_entropy (resolved)"


def test_entropy_panel_marks_targets_and_alpha_panel_is_logarithmic(comparison):
    figure = plots.entropy_and_alpha(comparison)
    left, right = figure.axes[:2]
    dashed = sorted(line.get_ydata()[0] for line in left.get_lines() if line.get_linestyle() == "--" and len(line.get_ydata()))
    assert dashed == [-2.0, -0.5]  # one dashed target line per group at its target entropy
    assert right.get_yscale() == "log" and right.get_title() == "temperature α"


def test_alpha_panel_says_when_alpha_was_not_logged(tmp_path: Path):
    runs = [_run(tmp_path, s, -1.0, -100.0 - s, with_alpha=False) for s in range(2)]
    right = plots.entropy_and_alpha(summarise(runs, n_resamples=20)).axes[1]
    assert [text.get_text() for text in right.texts] == ["temperature/value was not logged by these runs"]
    assert right.get_yscale() == "linear"


def test_profiles_and_final_scores(comparison):
    axes = plots.performance_profiles(comparison).axes[0]
    assert axes.get_ylim() == (-0.02, 1.02) and axes.get_ylabel() == "fraction of runs scoring above τ"
    assert [line.get_label() for line in axes.get_lines()] == ["-2", "-0.5"]
    left, right = plots.final_scores(comparison).axes[:2]
    assert [tick.get_text() for tick in left.get_yticklabels()] == ["-2  (n=3)", "-0.5  (n=3)"]
    assert "best group (reference)" in [text.get_text() for text in right.texts]
    best = comparison.best.label
    assert right.get_xlabel() == f"P(a run of the group scores above a run of group {best})"


def test_saved_png_reads_back_and_matplotlib_is_left_as_it_was(comparison, tmp_path: Path):
    backend, params, open_figures = matplotlib.get_backend(), dict(matplotlib.rcParams), pyplot.get_fignums()
    path = tmp_path / "learning_curves.png"
    plots.save_png(plots.learning_curves(comparison), path)
    # Source: matplotlib.image.imread decodes the PNG; 8 × 5.2 inches at 120 dpi is 960 × 624 pixels.
    image = matplotlib.image.imread(path)
    assert image.shape[:2] == (624, 960)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG specification)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["learning_curves.png"]
    assert matplotlib.get_backend() == backend and pyplot.get_fignums() == open_figures
    assert dict(matplotlib.rcParams) == params
