"""The training loop (kiln.training.trainer): what a short run leaves on disk and in TensorBoard, the
number of updates it takes, and how it treats a folder that already holds something.

Sources: Gymnasium's registry (``gymnasium.spec("Pendulum-v1").max_episode_steps`` is 200; Pendulum
never terminates), TensorBoard's own ``EventAccumulator`` for the log, hand arithmetic for the
update count (one gradient step per env step after warm-up, Table 1 of Haarnoja et al. 2018,
arXiv 1812.05905; fractional rates owed across steps) written beside each check, and the project's
rules for folders (DEVELOPERS.md, Errors: nothing already written is lost; a finished run is
skipped or refused).
"""

import errno
import json

import gymnasium as gym
import pytest
from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

from kiln.config.presets import compose_config
from kiln.config.streams import RunStreams
from kiln.envs.task_error import TaskError
from kiln.errors import ConfigError, RunFolderError
from kiln.storage.run_folder import RunFolder, RunResult
from kiln.training import trainer
from kiln.training.trainer import check_run, train

SHORT = (
    "env=pendulum", "steps=300", "collect.warmup_steps=100", "agent.layer_widths=[16,16]", "agent.batch_size=32",
    "evaluate.every=150", "evaluate.episodes=2", "evaluate.bias_episodes=1", "log.every=100", "log.progress=off",
    "checkpoint.every=100",
)  # fmt: skip


def _config(*overrides: str) -> dict:
    return compose_config("train", [*SHORT, *overrides])


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> tuple:
    run_dir = tmp_path_factory.mktemp("trainer") / "run"
    return run_dir, train(_config("seed=4"), run_dir)


def test_a_run_leaves_its_layout_and_its_result_last(finished):
    run_dir, result = finished
    names = sorted(p.name.split(".out.tfevents")[0] for p in run_dir.iterdir())
    assert names == [".lock", "checkpoints", "config.yaml", "events", "policy", "result.json"]
    assert RunResult.from_json(json.loads((run_dir / "result.json").read_text())) == result
    # result.json is written after everything it describes: no file of the run is newer.
    newest = max(p.stat().st_mtime_ns for p in run_dir.rglob("*") if p.is_file() and p.name != ".lock")
    assert (run_dir / "result.json").stat().st_mtime_ns == newest


def test_the_result_by_hand_and_by_gymnasiums_registry(finished):
    _, result = finished
    # Updates start once the step is past warm-up (100) and the replay holds a batch: steps 101..300,
    # one each (updates_per_env_step = 1): 200 updates.
    assert result.updates == 200 and result.steps == 300 and result.population == 1
    assert [step for step, _ in result.eval_curve] == [150, 300]  # evaluate.every=150, and at the end
    # Pendulum-v1 is cut at its registered 200 steps and never terminates.
    assert gym.spec("Pendulum-v1").max_episode_steps == 200
    assert result.evaluation["episodes"] == 2 and result.evaluation["length_min"] == result.evaluation["length_max"] == 200
    assert result.evaluation_seeds == RunStreams(4).evaluation_reset_seeds(2)
    assert result.target_entropy == -1.0 and result.target_entropy_groups == [-1.0]  # −dim(A), Pendulum's 1-D action
    assert set(result.time_split_s) == {"env_step", "update", "loop"}


def test_tensorboard_shows_the_runs_tags_at_their_steps(finished):
    run_dir, result = finished
    events = EventAccumulator(str(run_dir), size_guidance={"scalars": 0})
    events.Reload()
    tags = set(events.Tags()["scalars"])
    assert {"return/eval", "return/eval_std", "return/train", "length/train", "critic/td_mse", "temperature/value",
            "temperature/target_entropy", "bias/q_minus_return", "speed/env_steps_per_s", "final/return_eval"} <= tags  # fmt: skip
    assert [e.step for e in events.Scalars("return/eval")] == [150, 300]
    assert events.Scalars("return/eval")[-1].value == pytest.approx(result.final.return_eval)
    # Diagnostics are logged every log.every = 100 steps once updates have begun (step 101 on).
    assert [e.step for e in events.Scalars("critic/td_mse")] == [200, 300]
    assert [e.step for e in events.Scalars("length/train")] == [200]  # one 200-step training episode ended
    assert events.Scalars("temperature/target_entropy")[0].step == 0
    assert set(events.PluginTagToContent("hparams")) >= {"_hparams_/experiment", "_hparams_/session_start_info"}


def test_a_finished_folder_is_skipped_and_left_exactly_as_it_was(finished):
    run_dir, result = finished
    before = {p: p.read_bytes() for p in run_dir.rglob("*") if p.is_file()}
    again = train(_config("seed=4", "steps=300"), run_dir)
    assert again.skipped and again == result
    assert {p: p.read_bytes() for p in run_dir.rglob("*") if p.is_file()} == before


def test_a_finished_folder_of_another_config_is_refused_naming_the_difference(finished):
    run_dir, _ = finished
    with pytest.raises(RunFolderError) as caught:
        train(_config("seed=5"), run_dir)
    message = str(caught.value)
    assert "already holds a finished run with another config (seed: 4 there, 5 now)" in message and "\n" not in message
    assert message.endswith("launch into another folder to train this config")


@pytest.mark.parametrize("rate,updates", [(0.5, 100), (1.5, 300)])
def test_fractional_update_rates_are_owed_across_steps(tmp_path, rate, updates):
    # Hand arithmetic: 200 env steps after warm-up at 0.5 updates each = 100; at 1.5 = 300.
    result = train(
        _config(f"collect.updates_per_env_step={rate}", "evaluate.bias_episodes=0", "evaluate.episodes=1"), tmp_path / "run"
    )
    assert result.updates == updates


def test_a_folder_in_use_is_refused_before_anything_in_it_changes(tmp_path):
    holder = RunFolder(tmp_path / "run")
    holder.claim()
    try:
        (tmp_path / "run" / "notes.txt").write_text("mine")
        with pytest.raises(RunFolderError, match="in use by another Kiln process"):
            train(_config(), tmp_path / "run")
        assert sorted(p.name for p in (tmp_path / "run").iterdir()) == [".lock", "notes.txt"]
    finally:
        holder.release()


def test_resume_false_sets_the_unfinished_attempt_aside(tmp_path, monkeypatch):
    run_dir = tmp_path / "run"

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device", str(run_dir / "policy"))

    monkeypatch.setattr(trainer, "save_policy", no_space)  # the first attempt fails at its very end
    with pytest.raises(RunFolderError) as caught:
        train(_config(), run_dir)
    message = str(caught.value)
    assert f"cannot write {run_dir / 'policy'} (no space left on the device)" in message and "\n" not in message
    assert f"resume from {run_dir / 'checkpoints' / 'step-000000000300'} by running the same command again" in message
    monkeypatch.undo()
    first_checkpoints = sorted(p.name for p in (run_dir / "checkpoints").iterdir())
    result = train(_config("resume=false"), run_dir)
    assert result.steps == 300 and not result.skipped
    # Nothing of the first attempt is lost: it sits in unfinished-1/.
    aside = run_dir / "unfinished-1"
    assert sorted(p.name for p in (aside / "checkpoints").iterdir()) == first_checkpoints
    assert (aside / "config.yaml").is_file() and any(p.name.startswith("events.out.tfevents") for p in aside.iterdir())


def test_check_run_refuses_a_bad_config_or_task_before_any_folder_exists(tmp_path):
    with pytest.raises(ConfigError):
        check_run(_config("agent.batch_size=0"))
    with pytest.raises(TaskError):
        check_run(_config("env.id=KilnNoSuchTask-v0"))
    with pytest.raises(ConfigError, match="agent.replay_capacity"):
        check_run(_config("agent.replay_capacity=1000000000000"))  # 10¹² rows: beyond any machine
    check_run(_config())
    assert list(tmp_path.iterdir()) == []
