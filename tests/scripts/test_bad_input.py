"""Bad input gets one line naming the problem and the fix, exit code 2, no traceback, and nothing
already written is lost (requirement of the project; no outside source)."""

import json

import pytest

from tests.scripts.cli import TINY_RUN, assert_one_line_error, run_script


@pytest.mark.parametrize(
    "override,phrases",
    [
        ("env.id=NoSuchTask-v0", ["unknown env id"]),
        ("env=no_such_preset", ["env/no_such_preset"]),
        ("env.id=CartPole-v1", ["Discrete action space"]),
        ("agent.critic_lr=0", ["agent.critic_lr", "positive"]),
        ("agent.actor_lr=-1e-3", ["agent.actor_lr"]),
        ("agent.temperature.lr=0", ["agent.temperature.lr"]),
        ("agent.batch_size=0", ["agent.batch_size"]),
        ("steps=0", ["steps must be"]),
        ("steps=-5", ["steps must be"]),
        ("agent.batch_size=512", ["larger than agent.replay_capacity"]),
        ("no_such_key=1", ["unknown config key", "no_such_key"]),
        ("agent.no_such_key=1", ["unknown config key"]),
        ("+agent.extra=1", ["unknown agent key"]),
        ("agent.temperature.target_entropy=[1,2,3]", ["3 entries", "1 dimensions"]),
    ],
)
def test_train_rejects_bad_input_before_writing(tmp_path, override, phrases):
    extra = ["agent.replay_capacity=300"] if "batch_size=512" in override else []
    proc = run_script("train", override, *extra, cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, *phrases)
    assert list(tmp_path.iterdir()) == []  # no run folder was created


def test_bad_value_inside_a_sweep_is_caught_before_any_job(tmp_path):
    proc = run_script("train", "-m", "seed=0,1", "agent.actor_lr=3e-4,-1", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "agent.actor_lr")
    assert list(tmp_path.iterdir()) == []


def test_finished_run_is_left_untouched(tmp_path):
    run_dir = tmp_path / "run"
    run_dir.mkdir()
    marker = {"env_id": "Pendulum-v1", "final": {"return_eval": -1.0}, "steps": 1}
    (run_dir / "result.json").write_text(json.dumps(marker))
    proc = run_script("train", *TINY_RUN, f"hydra.run.dir={run_dir}", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert "already holds a finished run" in proc.stdout
    assert json.loads((run_dir / "result.json").read_text()) == marker
    assert not any(p.name.startswith("events.out") for p in run_dir.iterdir())


@pytest.mark.parametrize(
    "args,phrases",
    [
        (["policy=does/not/exist"], ["no such folder"]),
        ([], ["no policy given"]),
        (["episodes=0", "policy=."], ["episodes must be a positive integer"]),
    ],
)
def test_evaluate_rejects_bad_input(tmp_path, args, phrases):
    assert_one_line_error(run_script("evaluate", *args, cwd=tmp_path, timeout=120), *phrases)


def test_evaluate_rejects_incomplete_policy_folder(tmp_path):
    folder = tmp_path / "policy"
    folder.mkdir()
    (folder / "spec.json").write_text("{}")
    proc = run_script("evaluate", f"policy={folder}", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "weights.safetensors is missing")
    assert (folder / "spec.json").read_text() == "{}"
