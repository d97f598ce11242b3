"""Finding, loading and grouping runs, on directories laid out as the training-loop contract says
(config.yaml + events.out.tfevents.* + result.json per run; Hydra files beside them)."""

from pathlib import Path

import pytest

from kiln.comparison.grouping import check_metric, check_one_task, choose_step, group_runs
from kiln.comparison.runs import find_run_dirs, load_run, load_runs
from kiln.errors import CompareInputError
from tests.support.compare_fixtures import run_config, training_scalars, write_run

TARGET = "agent.temperature.target_entropy"


def finished(final: float, target: float, env_id: str = "Pendulum-v1") -> dict:
    return {"env_id": env_id, "steps": 1000, "final": {"return_eval": final, "entropy": -1.0, "alpha": 0.1},
            "target_entropy": target}


def test_finds_runs_and_ignores_hydra_and_other_folders(tmp_path: Path) -> None:
    sweep = tmp_path / "sweep"
    first = write_run(sweep / "0", run_config(0, -1.0), training_scalars(-200.0, -1.0, 0.1, -1.0))
    second = write_run(sweep / "1", run_config(1, -1.0), {}, finished(-250.0, -1.0))  # result.json only
    nested = write_run(sweep / "more" / "0", run_config(2, -1.0), training_scalars(-210.0, -1.0, 0.1, -1.0))
    (sweep / "multirun.yaml").write_text("hydra: {}\n")
    for hydra in (sweep / ".hydra", first / ".hydra"):  # Hydra's own config copies are not runs
        hydra.mkdir()
        (hydra / "config.yaml").write_text("seed: 0\n")
    (first / "checkpoints" / "1000").mkdir(parents=True)
    (sweep / "notes").mkdir()
    (sweep / "notes" / "config.yaml").write_text("seed: 9\n")  # config alone, no events: not a run

    # Contract: a run is a folder with config.yaml and an event file or result.json.
    skipped: list[Path] = []
    assert find_run_dirs([sweep], skipped) == sorted(p.resolve() for p in (first, second, nested))
    assert skipped == [(sweep / "notes").resolve()]  # reported as "not logging yet", not silently dropped


def test_run_directory_given_directly_and_twice_counts_once(tmp_path: Path) -> None:
    run = write_run(tmp_path / "r", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
    assert find_run_dirs([run, tmp_path, run]) == [run.resolve()]


def test_result_json_stands_in_for_missing_event_files(tmp_path: Path) -> None:
    run = load_run(write_run(tmp_path / "r", run_config(0, "auto"), {}, finished(-123.5, -1.0)))
    # Contract: result.json "final" holds return_eval, entropy and alpha at "steps".
    assert run.scalars["return/eval"].value_at(1000) == (1000, -123.5)
    assert run.scalars["temperature/value"].value_at(1000) == (1000, 0.1)
    assert run.env_id == "Pendulum-v1"


def test_result_json_evaluation_curve_is_used_when_present(tmp_path: Path) -> None:
    result = finished(-100.0, -1.0) | {"eval_curve": [[1000, -100.0], [500, -300.0]]}
    run = load_run(write_run(tmp_path / "r", run_config(0, "auto"), {}, result))
    # Written above: the curve's two points, put in step order.
    assert run.scalars["return/eval"].steps.tolist() == [500, 1000]
    assert run.scalars["return/eval"].values.tolist() == [-300.0, -100.0]


def test_target_entropy_is_grouped_by_resolved_value(tmp_path: Path) -> None:
    dirs = [
        write_run(tmp_path / "a", run_config(0, "auto"), training_scalars(-1.0, -1.0, 0.1, -1.0),
                  finished(-1.0, -1.0)),  # "auto" resolved by result.json
        write_run(tmp_path / "b", run_config(1, "auto"), training_scalars(-2.0, -1.0, 0.1, -1.0)),  # by the scalar
        write_run(tmp_path / "c", run_config(2, -1.0), training_scalars(-3.0, -1.0, 0.1, -1.0)),  # a number
        write_run(tmp_path / "d", run_config(3, -0.3), training_scalars(-4.0, -1.0, 0.1, -0.3)),  # float32 scalar
        write_run(tmp_path / "e", run_config(4, -0.3), {}, finished(-5.0, -0.3)),  # float64 in result.json
    ]
    groups = group_runs(load_runs(dirs), TARGET)
    # Contract: "auto" means -dim(A), so on a 1-D task "auto" and -1.0 are one group; -0.3 read back
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


def test_unresolvable_auto_target_is_refused(tmp_path: Path) -> None:
    scalars = training_scalars(-1.0, -1.0, 0.1, -1.0)
    del scalars["temperature/target_entropy"]
    runs = load_runs([write_run(tmp_path / "r", run_config(0, "auto"), scalars)])
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
