"""Bad input gets one line naming the problem and the fix, exit code 2, no traceback, and nothing
already written is lost (requirement of the project; no outside source)."""

import json

import pytest

from tests.support.cli import TINY_RUN, assert_one_line_error, run_script


@pytest.mark.parametrize(
    "override,phrases",
    [
        ("env.id=NoSuchTask-v0", ["unknown env id"]),
        ("env=no_such_preset", ["env/no_such_preset"]),
        ("env.id=CartPole-v1", ["Discrete action space"]),
        ("agent.critic.lr=0", ["agent.critic.lr must be in (0,"]),
        ("agent.actor.lr=-1e-3", ["agent.actor.lr"]),
        ("agent.temperature.lr=0", ["agent.temperature.lr"]),
        ("agent.batch_size=0", ["agent.batch_size"]),
        ("steps=0", ["steps must be from 1"]),
        ("steps=-5", ["steps must be"]),
        ("agent.batch_size=512", ["larger than agent.replay_capacity"]),
        ("no_such_key=1", ["unknown config key", "no_such_key"]),
        ("agent.no_such_key=1", ["unknown config key"]),
        ("+agent.extra=1", ["unknown config key agent.extra"]),
        ("agent.temperature.target_entropy=[1,2,3]", ["3 entries", "1 dimensions"]),
        ("agent.temperature.mode=sometimes", ["agent.temperature.mode must be one of tuned | fixed"]),
        ("seed=1000003", ["seed must be from 0 to 1000002"]),
        # Renamed keys and values: one line naming the new name (README, "Training": keys from an earlier Kiln are refused with the key to use).
        ("agent.hidden_sizes=[8,8]", ["agent.hidden_sizes is an old name", "agent.layer_widths"]),
        ("agent.activation=tanh", ["agent.nonlinearity"]),
        ("agent.critic_lr=1e-3", ["agent.critic_lr is an old name", "agent.critic.lr"]),
        ("agent.actor_lr=1e-3", ["agent.actor.lr"]),
        ("agent.log_std_bounds=[-5,2]", ["agent.actor.log_std_soft_limits"]),
        ("agent.critics=3", ["agent.critic.count"]),
        ("agent.target_smoothing=0.01", ["agent.critic.target_smoothing"]),
        ("agent.temperature.tune=false", ["agent.temperature.mode"]),
        ("agent.temperature.initial=0.1", ["agent.temperature.start"]),
        ("agent.temperature.target_entropy=auto", ["auto is an old name", "minus_action_dims"]),
        ("collect.updates_per_step=2", ["collect.updates_per_env_step"]),
        ("agent=sac", ["agent=sac is an old name", "agent=published"]),
        # Values that used to pass validation (found by probing as a hostile user would).
        ("agent.critic.lr=inf", ["agent.critic.lr", "finite"]),
        ("agent.temperature.start=inf", ["agent.temperature.start", "finite"]),
        ("agent.temperature.target_entropy=nan", ["agent.temperature.target_entropy", "finite"]),
        ("agent.temperature.target_entropy=-inf", ["agent.temperature.target_entropy", "finite"]),
        ("collect.updates_per_env_step=inf", ["collect.updates_per_env_step", "finite"]),
        ("deterministic=maybe", ["deterministic must be true or false"]),
        ("evaluate.deterministic=abc", ["evaluate.deterministic must be true or false"]),
        ("agent.layer_widths=[1.7,64]", ["agent.layer_widths[0] must be an integer", "1.7"]),
        ("agent.layer_widths=64", ["agent.layer_widths must be a list"]),
        ("agent.layer_widths=[abc]", ["agent.layer_widths[0] must be an integer"]),
        ("agent.actor.log_std_soft_limits=[-5]", ["agent.actor.log_std_soft_limits must be a list of two"]),
        ("agent.temperature.target_entropy=[abc]", ["agent.temperature.target_entropy[0]"]),
        ("seed=18446744073709551615", ["seed must be from 0 to"]),
        ("steps=" + "9" * 400, ["steps must be from 1 to"]),
        ("agent.replay_capacity=1e14", ["agent.replay_capacity must be an integer"]),
        ("agent.replay_capacity=2000000000", ["needs", "GiB", "this machine has"]),
        ("agent.discount=1.0", ["agent.discount must be in [0, 1)"]),
        ("agent.nonlinearity=sigmoidish", ["agent.nonlinearity must be one of"]),
    ],
)
def test_train_rejects_bad_input_before_writing(tmp_path, override, phrases):
    extra = ["agent.replay_capacity=300"] if "batch_size=512" in override else []
    proc = run_script("train", override, *extra, cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, *phrases)
    assert list(tmp_path.iterdir()) == []  # no run folder was created


def test_bad_value_inside_a_sweep_is_caught_before_any_job(tmp_path):
    proc = run_script("train", "-m", "seed=0,1", "agent.actor.lr=3e-4,-1", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "agent.actor.lr")
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
        (["episodes=0", "policy=."], ["episodes must be from 1"]),
        (["seed=-1", "policy=."], ["seed must be from 0"]),
        (["deterministic=perhaps", "policy=."], ["deterministic must be true or false"]),
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
