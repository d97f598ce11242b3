"""Checking that runs can be compared, grouping them by a config key (the target entropy by its resolved
value), and choosing the step to compare at, on run folders laid out as the training loop writes them
(README.md, "Training"). Expected groups and steps are read off the invented runs written in each test."""

import math
from pathlib import Path

import numpy as np
import pytest

from kiln.comparison.events import ScalarSeries
from kiln.comparison.grouping import (
    check_metric,
    check_one_task,
    choose_step,
    format_value,
    group_runs,
    normalise_value,
    resolved_target_entropy,
)
from kiln.comparison.runs import Run, load_runs
from kiln.errors import CompareInputError
from tests.support.compare_fixtures import run_config, training_scalars, write_run

TARGET = "agent.temperature.target_entropy"


def finished(final: float, target: float, env_id: str = "Pendulum-v1") -> dict:
    return {"env_id": env_id, "steps": 1000, "final": {"return_eval": final, "entropy": -1.0, "alpha": 0.1},
            "target_entropy": target}


def test_target_entropy_is_grouped_by_resolved_value(tmp_path: Path) -> None:
    dirs = [
        write_run(tmp_path / "a", run_config(0, "minus_action_dims"), training_scalars(-1.0, -1.0, 0.1, -1.0),
                  finished(-1.0, -1.0)),  # minus_action_dims resolved by result.json
        write_run(tmp_path / "b", run_config(1, "minus_action_dims"), training_scalars(-2.0, -1.0, 0.1, -1.0)),  # by the scalar
        write_run(tmp_path / "c", run_config(2, -1.0), training_scalars(-3.0, -1.0, 0.1, -1.0)),  # a number
        write_run(tmp_path / "d", run_config(3, -0.3), training_scalars(-4.0, -1.0, 0.1, -0.3)),  # float32 scalar
        write_run(tmp_path / "e", run_config(4, -0.3), {}, finished(-5.0, -0.3)),  # float64 in result.json
    ]
    groups = group_runs(load_runs(dirs), TARGET)
    # Contract: minus_action_dims means -dim(A), so on a 1-D task it and -1.0 are one group; -0.3 read back
    # from float32 (-0.30000001) and from JSON (-0.3) are one group too.
    assert [(group.label, len(group.runs)) for group in groups] == [("-1", 3), ("-0.3", 2)]


def test_other_keys_group_by_config_value(tmp_path: Path) -> None:
    dirs = [write_run(tmp_path / f"job{job}", run_config(seed, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
            for job, seed in enumerate((2, 0, 1, 0))]
    groups = group_runs(load_runs(dirs), "seed")
    # Written above: seeds 2, 0, 1, 0 → groups 0 (two runs), 1, 2 in numeric order.
    assert [(group.label, len(group.runs)) for group in groups] == [("0", 2), ("1", 1), ("2", 1)]


def test_missing_key_mixed_tasks_and_missing_metric_are_refused(tmp_path: Path) -> None:
    pendulum = write_run(tmp_path / "p", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
    cheetah = write_run(tmp_path / "c", run_config(0, -6.0, env_id="HalfCheetah-v5"),
                        training_scalars(-1.0, -6.0, 0.1, -6.0))
    runs = load_runs([pendulum, cheetah])
    with pytest.raises(CompareInputError, match="different tasks"):
        check_one_task(runs)
    with pytest.raises(CompareInputError, match="agent.lr"):
        group_runs(runs, "agent.lr")
    with pytest.raises(CompareInputError, match="return/never"):
        check_metric(runs, "return/never")


def test_unresolvable_minus_action_dims_target_is_refused(tmp_path: Path) -> None:
    scalars = training_scalars(-1.0, -1.0, 0.1, -1.0)
    del scalars["temperature/target_entropy"]
    runs = load_runs([write_run(tmp_path / "r", run_config(0, "minus_action_dims"), scalars)])
    with pytest.raises(CompareInputError, match="cannot resolve the target entropy"):
        group_runs(runs, TARGET)


def test_default_step_is_the_last_step_all_runs_reached(tmp_path: Path) -> None:
    long = write_run(tmp_path / "long", run_config(0, -1.0),
                     training_scalars(-1.0, -1.0, 0.1, -1.0, steps=(0, 500, 1000, 1500)))
    short = write_run(tmp_path / "short", run_config(1, -1.0),
                      training_scalars(-1.0, -1.0, 0.1, -1.0, steps=(0, 500, 1000)))
    runs = load_runs([long, short])
    step, notes = choose_step(runs, "return/eval", None)
    # Written above: both runs logged 0, 500, 1000; only one reached 1500.
    assert step == 1000
    assert any("different steps" in note for note in notes)
    with pytest.raises(CompareInputError, match="--step 1000"):
        choose_step(runs, "return/eval", 1500)
    assert choose_step(runs, "return/eval", 700) == (700, [
        "2 run(s) logged no 'return/eval' exactly at step 700; their last value before it is used"])


def _run(tmp_path: Path, config: dict | None = None, result: dict | None = None,
         scalars: dict[str, ScalarSeries] | None = None) -> Run:  # fmt: skip
    return Run(path=tmp_path, config=config or {}, result=result, scalars=scalars or {})


def test_normalise_value_rounds_to_six_significant_digits_and_makes_lists_hashable():
    # float32(-0.3) = -0.30000001192092896 (IEEE single precision); six significant digits give -0.3.
    assert normalise_value(-0.30000001192092896) == -0.3 == normalise_value(-0.3)
    assert normalise_value(3) == 3.0 and isinstance(normalise_value(3), float)
    assert normalise_value([-1, -2.0]) == (-1.0, -2.0)
    assert normalise_value({"b": 1, "a": [2]}) == (("a", (2.0,)), ("b", 1.0))
    # bool stays bool (True is not the number 1 here), NaN becomes text so it equals itself.
    assert normalise_value(True) is True and normalise_value(math.nan) == "nan" and normalise_value(None) is None


def test_format_value_writes_values_as_a_config_file_would():
    assert [format_value(v) for v in (True, None, -1.0, 0.25, (-1.0, -2.0), "relu")] == [
        "true", "null", "-1", "0.25", "[-1, -2]", "relu"]  # fmt: skip


def test_target_entropy_comes_from_result_then_scalar_then_config(tmp_path: Path):
    series = {"temperature/target_entropy": ScalarSeries(np.array([0]), np.array([-2.0]))}
    config = run_config(0, -4.0)
    assert resolved_target_entropy(_run(tmp_path, config, {"target_entropy": -1.0}, series)) == -1.0
    assert resolved_target_entropy(_run(tmp_path, config, {"target_entropy": None}, series)) == -2.0
    assert resolved_target_entropy(_run(tmp_path, config)) == -4.0
    assert resolved_target_entropy(_run(tmp_path, run_config(0, [-1, -0.5]))) == (-1.0, -0.5)
    # minus_action_dims needs the task's action size: unresolved from the config alone.
    assert resolved_target_entropy(_run(tmp_path, run_config(0, "minus_action_dims"))) is None


def test_groups_are_ordered_numbers_first_then_text(tmp_path: Path):
    runs = [_run(tmp_path / str(i), {"variant": value}) for i, value in enumerate(["tanh", 2, "elu", -1])]
    groups = group_runs(runs, "variant")
    assert [group.label for group in groups] == ["-1", "2", "elu", "tanh"]
    assert [len(group.runs) for group in groups] == [1, 1, 1, 1]


def test_runs_without_a_task_id_do_not_count_as_another_task(tmp_path: Path):
    assert check_one_task([_run(tmp_path, run_config(0, -1.0)), _run(tmp_path, {})]) == "Pendulum-v1"
    assert check_one_task([_run(tmp_path, {})]) is None


def test_missing_metric_suggests_the_tags_every_run_has(tmp_path: Path):
    one = ScalarSeries(np.array([0]), np.array([1.0]))
    runs = [_run(tmp_path / "a", scalars={"return/eval": one, "x/y": one}), _run(tmp_path / "b", scalars={"return/eval": one})]
    with pytest.raises(CompareInputError) as info:
        check_metric(runs, "x/y")
    assert info.value.problem == f"1 of 2 runs have no 'x/y' scalar: {tmp_path / 'b'}"
    assert info.value.fix == "pass --metric with a tag every run logged (common tags: return/eval), or leave those runs out"
    check_metric(runs, "return/eval")  # every run has it: no refusal


def test_step_before_any_logging_and_non_finite_scores_are_refused(tmp_path: Path):
    late = _run(tmp_path / "late", scalars={"return/eval": ScalarSeries(np.array([500, 1000]), np.array([1.0, 2.0]))})
    early = _run(tmp_path / "early", scalars={"return/eval": ScalarSeries(np.array([0, 1000]), np.array([1.0, math.nan]))})
    with pytest.raises(CompareInputError, match="1 run\\(s\\) logged no 'return/eval' at or before step 100"):
        choose_step([late, early], "return/eval", 100)
    with pytest.raises(CompareInputError) as info:
        choose_step([late, early], "return/eval", None)  # the common last step, 1000, where early is NaN
    assert info.value.problem == f"'return/eval' is not a finite number at step 1,000 in 1 run(s): {tmp_path / 'early'}"
    assert info.value.fix == "leave the diverged runs out or pass an earlier --step"


def test_runs_that_never_share_a_step_are_compared_at_the_earliest_end(tmp_path: Path):
    a = _run(tmp_path / "a", scalars={"r": ScalarSeries(np.array([0, 300, 600]), np.array([1.0, 2.0, 3.0]))})
    b = _run(tmp_path / "b", scalars={"r": ScalarSeries(np.array([100, 400]), np.array([5.0, 6.0]))})
    step, notes = choose_step([a, b], "r", None)
    # Written above: no step is common, so the earliest last step (400) is used; a's value there is its
    # step-300 value, and the notes say both things.
    assert step == 400
    assert notes == ["runs end at different steps (400 to 600); compared at step 400, the last step all runs reached",
                     "1 run(s) logged no 'r' exactly at step 400; their last value before it is used"]  # fmt: skip
