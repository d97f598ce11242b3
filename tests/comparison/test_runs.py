"""Finding and loading run folders as the training loop lays them out (README.md, "Training": config.yaml,
events.out.tfevents.*, result.json written last; Hydra files beside them), and the refusals of what
cannot be read. Grouping the loaded runs is tested in tests/comparison/test_grouping.py."""

import json
from pathlib import Path

import pytest

from kiln.comparison.runs import (
    Run,
    config_lookup,
    find_run_dirs,
    is_run_dir,
    listed,
    load_run,
    load_runs,
    select_finished,
)
from kiln.errors import CompareInputError
from tests.support.compare_fixtures import run_config, training_scalars, write_run


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
    run = load_run(write_run(tmp_path / "r", run_config(0, "minus_action_dims"), {}, finished(-123.5, -1.0)))
    # Contract: result.json "final" holds return_eval, entropy and alpha at "steps".
    assert run.scalars["return/eval"].value_at(1000) == (1000, -123.5)
    assert run.scalars["temperature/value"].value_at(1000) == (1000, 0.1)
    assert run.env_id == "Pendulum-v1"


def test_result_json_evaluation_curve_is_used_when_present(tmp_path: Path) -> None:
    result = finished(-100.0, -1.0) | {"eval_curve": [[1000, -100.0], [500, -300.0]]}
    run = load_run(write_run(tmp_path / "r", run_config(0, "minus_action_dims"), {}, result))
    # Written above: the curve's two points, put in step order.
    assert run.scalars["return/eval"].steps.tolist() == [500, 1000]
    assert run.scalars["return/eval"].values.tolist() == [-300.0, -100.0]



def _refusal(call, *args) -> CompareInputError:
    with pytest.raises(CompareInputError) as info:
        call(*args)
    assert "\n" not in str(info.value) and "; fix: " in str(info.value)
    return info.value


def test_paths_that_are_missing_files_or_hold_no_runs_are_refused(tmp_path: Path) -> None:
    missing = _refusal(find_run_dirs, [tmp_path / "nowhere"])
    assert missing.problem == f"{tmp_path / 'nowhere'} does not exist"
    (tmp_path / "notes.txt").write_text("hello")
    assert _refusal(find_run_dirs, [tmp_path / "notes.txt"]).problem == f"{tmp_path / 'notes.txt'} is not a directory"
    (tmp_path / "empty").mkdir()
    assert _refusal(find_run_dirs, [tmp_path / "empty"]).problem == f"no runs found under {tmp_path / 'empty'}"
    # A folder with config.yaml but nothing logged yet: named, with the advice to wait.
    write_run(tmp_path / "young" / "0", run_config(0, -1.0), {}, finished=False)
    error = _refusal(find_run_dirs, [tmp_path / "young"])
    assert error.problem.startswith(f"no finished or logging runs under {tmp_path / 'young'}: ")
    assert error.fix == "wait until the runs have logged, or pass the directories of runs that did"


def test_a_run_folder_is_config_plus_events_or_result(tmp_path: Path) -> None:
    run = write_run(tmp_path / "r", run_config(0, -1.0), {}, finished=False)
    assert not is_run_dir(run)  # config.yaml alone: not logging yet
    (run / "result.json").write_text("{}")
    assert is_run_dir(run)
    assert not is_run_dir(tmp_path)


def test_folders_deeper_than_the_sweep_layouts_are_not_searched(tmp_path: Path) -> None:
    # Hydra's layouts nest runs one level (sweep/<job>/) or two (multirun/<date>/<time>/<job>/, three
    # below the folder given); the search stops four levels down.
    shallow = write_run(tmp_path / "a" / "b" / "c" / "d", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
    write_run(tmp_path / "a" / "b" / "c" / "d" / "e" / "f", run_config(1, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
    assert find_run_dirs([tmp_path]) == [shallow.resolve()]


@pytest.mark.parametrize(
    "config_text,problem",
    [("seed: [unclosed\n", "cannot read"), ("- just\n- a list\n", "is not a mapping of config keys")],
)
def test_a_config_that_cannot_be_read_is_refused_naming_the_file(tmp_path: Path, config_text: str, problem: str) -> None:
    run = write_run(tmp_path / "r", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
    (run / "config.yaml").write_text(config_text)
    error = _refusal(load_run, run)
    assert str(run / "config.yaml") in error.problem and problem in error.problem
    assert error.fix == "repair the file or leave that run out"


@pytest.mark.parametrize("result_text,problem", [("{not json", "cannot read"), ("[1, 2]", "is not a JSON object")])
def test_a_result_that_cannot_be_read_is_refused_naming_the_file(tmp_path: Path, result_text: str, problem: str) -> None:
    run = write_run(tmp_path / "r", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0))
    (run / "result.json").write_text(result_text)
    error = _refusal(load_run, run)
    assert str(run / "result.json") in error.problem and problem in error.problem


def test_a_result_without_usable_numbers_gives_no_series(tmp_path: Path) -> None:
    # No "steps" number: nothing to place the final values at. A broken curve is ignored, the finals kept.
    bare = load_run(write_run(tmp_path / "a", run_config(0, -1.0), {}, {"final": {"return_eval": 1.0}}))
    assert bare.scalars == {} and bare.finished
    result = finished(-5.0, -1.0) | {"eval_curve": [[100, "x"], None]}
    kept = load_run(write_run(tmp_path / "b", run_config(0, -1.0), {}, result))
    assert kept.scalars["return/eval"].steps.tolist() == [1000] and kept.scalars["return/eval"].values.tolist() == [-5.0]


def test_run_properties_read_config_then_result(tmp_path: Path) -> None:
    no_task = {"seed": 3, "agent": {}}
    run = Run(path=tmp_path, config=no_task, result={"env_id": "kiln/DamperTrim-v0"}, scalars={})
    # The task id from config.yaml first, else from result.json, else unknown.
    assert run.env_id == "kiln/DamperTrim-v0" and run.seed == 3 and run.finished
    assert Run(path=tmp_path, config={}, result=None, scalars={}).env_id is None
    assert Run(path=tmp_path, config=run_config(0, -1.0), result=None, scalars={}).env_id == "Pendulum-v1"
    # Runs are never equal to each other (identity): two folders with the same numbers are two runs.
    assert Run(tmp_path, {}, None, {}) != Run(tmp_path, {}, None, {})


def test_config_lookup_follows_dotted_keys():
    config = {"agent": {"temperature": {"target_entropy": None}}, "seed": 0}
    assert config_lookup(config, "agent.temperature.target_entropy") == (True, None)  # present, null
    assert config_lookup(config, "agent.temperature.mode") == (False, None)
    assert config_lookup(config, "seed.value") == (False, None)  # not a mapping below seed


def test_unfinished_runs_are_left_out_unless_asked_for(tmp_path: Path) -> None:
    done = load_run(write_run(tmp_path / "done", run_config(0, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0)))
    going = load_run(write_run(tmp_path / "going", run_config(1, -1.0), training_scalars(-1.0, -1.0, 0.1, -1.0),
                               finished=False))  # fmt: skip
    assert select_finished([done], include_unfinished=False) == ([done], [])
    kept, notes = select_finished([done, going], include_unfinished=False)
    assert kept == [done]
    assert notes == [
        f"left out 1 unfinished run(s) (no result.json yet): {going.path}; pass --include-unfinished to include them"
    ]
    kept, notes = select_finished([done, going], include_unfinished=True)
    assert kept == [done, going] and notes[0].startswith("included 1 unfinished run(s)")
    error = _refusal(select_finished, [going], False)
    assert error.fix == "wait until they finish, or pass --include-unfinished to compare them as they stand"


def test_listed_names_three_paths_and_counts_the_rest():
    paths = [Path(f"run{i}") for i in range(5)]
    assert listed(paths) == "run0, run1, run2 and 2 more"
    assert listed(paths[:3]) == "run0, run1, run2"


def test_load_runs_reads_every_run_in_path_order(tmp_path: Path) -> None:
    for name, seed in (("b", 1), ("a", 0)):
        write_run(tmp_path / name, run_config(seed, -1.0), {}, finished(-float(seed), -1.0))
    runs = load_runs([tmp_path])
    assert [run.path.name for run in runs] == ["a", "b"] and [run.seed for run in runs] == [0, 1]
    assert json.loads((tmp_path / "a" / "result.json").read_text())["steps"] == runs[0].scalars["return/eval"].last_step
