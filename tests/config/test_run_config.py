"""A resolved run config turned into typed settings, and every kind of bad input refused in one line that
names the key and the fix (DEVELOPERS.md, "Errors"). Expected values are written out by hand from the
config given in each test."""

import copy

import pytest

from kiln.config.run_config import MAX_STEPS, parse_run_config
from kiln.config.streams import LARGEST_EPISODES, LARGEST_SEED
from kiln.envs.task_spec import TaskSpec
from kiln.errors import ConfigError

# A complete config in the shape Hydra resolves configs/train.yaml into (written out by hand).
RAW = {
    "seed": 4,
    "steps": 3000,
    "threads": 1,
    "deterministic": False,
    "resume": True,
    "env": {"id": "Pendulum-v1", "name": "pendulum", "max_episode_steps": None, "kwargs": {"g": 9.0}},
    "agent": {"layer_widths": [64, 64], "batch_size": 128, "replay_capacity": 3000},
    "collect": {"warmup_steps": 500, "updates_per_env_step": 0.5},
    "evaluate": {"every": 1000, "episodes": 5, "deterministic": True, "bias_episodes": 2},
    "log": {"every": 100, "progress": "off"},
    "checkpoint": {"every": 1000, "keep": 2},
}


def _with(path: str, value) -> dict:
    raw = copy.deepcopy(RAW)
    *parents, last = path.split(".")
    node = raw
    for part in parents:
        node = node[part]
    if value is _DELETE:
        del node[last]
    else:
        node[last] = value
    return raw


_DELETE = object()


def _refused(raw) -> str:
    with pytest.raises(ConfigError) as info:
        parse_run_config(raw)
    message = str(info.value)
    assert "\n" not in message
    return message


def test_every_value_lands_in_its_setting():
    config = parse_run_config(RAW)
    run = config.run
    assert (run.seed, run.steps, run.threads, run.deterministic, run.resume) == (4, 3000, 1, False, True)
    assert (run.warmup_steps, run.updates_per_env_step) == (500, 0.5)
    assert (run.eval_every, run.eval_episodes, run.eval_deterministic, run.bias_episodes) == (1000, 5, True, 2)
    assert (run.log_every, run.progress, run.checkpoint_every, run.checkpoint_keep) == (100, "off", 1000, 2)
    assert config.env.task == TaskSpec("Pendulum-v1", {"g": 9.0}, None)
    assert config.env.name == "pendulum"
    assert config.agent.layer_widths == (64, 64) and config.agent.batch_size == 128
    assert config.raw == RAW and config.raw is not RAW


def test_optional_keys_take_their_documented_defaults():
    raw = copy.deepcopy(RAW)
    for section, key in (("", "deterministic"), ("", "resume"), ("evaluate", "deterministic"), ("log", "progress"),
                         ("env", "name"), ("env", "kwargs")):  # fmt: skip
        del (raw[section] if section else raw)[key]
    config = parse_run_config(raw)
    # configs/train.yaml's defaults: deterministic false, resume true, deterministic evaluation,
    # progress auto; an env without a name is named by its id, one without options gets none.
    assert (config.run.deterministic, config.run.resume, config.run.eval_deterministic) == (False, True, True)
    assert config.run.progress == "auto"
    assert config.env.name == "Pendulum-v1" and config.env.kwargs == {}


@pytest.mark.parametrize(
    "path,value,message",
    [
        ("colour", "red", "unknown config key colour: known keys here are"),
        ("collect.warmup", 5,
         "unknown config key collect.warmup: known keys here are ['updates_per_env_step', 'warmup_steps'] (check the spelling)"),
        ("collect.updates_per_step", 1, "collect.updates_per_step is an old name: use collect.updates_per_env_step"),
        ("evaluate", None, "config section evaluate is missing: choose a preset, e.g. evaluate=<preset name>"),
        ("agent", None, "config section agent is missing: choose a preset, e.g. agent=published"),
        ("env.id", "", "env.id is missing: choose a preset (env=pendulum) or set env.id=<Gymnasium id>"),
        ("env.kwargs", [1], "env.kwargs must be a group of keyword arguments, got [1]: set env.kwargs={}"),
        ("env.max_episode_steps", 0, "env.max_episode_steps must be from 1 to"),
        ("seed", -1, f"seed must be from 0 to {LARGEST_SEED}, got -1"),
        ("seed", LARGEST_SEED + 1, f"seed must be from 0 to {LARGEST_SEED}"),
        ("steps", 1.5, "steps must be an integer, got 1.5"),
        ("steps", MAX_STEPS + 1, f"steps must be from 1 to {MAX_STEPS}"),
        ("threads", 0, "threads must be from 1 to 1024, got 0"),
        ("deterministic", "yes", "deterministic must be true or false, got 'yes'"),
        ("collect.updates_per_env_step", 0, "collect.updates_per_env_step must be in (0, 1000], got 0"),
        ("evaluate.episodes", LARGEST_EPISODES + 1, f"evaluate.episodes must be from 1 to {LARGEST_EPISODES}"),
        ("evaluate.bias_episodes", -1, "evaluate.bias_episodes must be from 0 to"),
        ("log.progress", "spinner", "log.progress must be one of auto | bar | lines | off, got 'spinner'"),
        ("checkpoint.keep", 0, "checkpoint.keep must be from 1 to 1000, got 0"),
        ("agent.hidden_sizes", [64], "agent.hidden_sizes is an old name: use agent.layer_widths"),
    ],
)
def test_bad_input_is_refused_naming_the_key(path, value, message):
    assert message in _refused(_with(path, value))


def test_batch_larger_than_the_replay_is_refused_with_both_keys():
    raw = _with("agent.replay_capacity", 100)
    assert _refused(raw) == (
        "agent.batch_size=128 is larger than agent.replay_capacity=100: lower the batch size or raise the capacity"
    )


def test_seed_and_episode_limits_are_the_streams_limits():
    # The config admits exactly the seeds and counts for which the streams' reset seeds stay
    # disjoint (kiln.config.streams, hand arithmetic there): the largest of each parses.
    raw = _with("seed", LARGEST_SEED)
    raw["evaluate"]["episodes"] = raw["evaluate"]["bias_episodes"] = LARGEST_EPISODES
    config = parse_run_config(raw)
    assert config.run.seed == LARGEST_SEED and config.run.eval_episodes == LARGEST_EPISODES


@pytest.mark.parametrize("value", [0, False, "", []])
def test_env_options_given_as_a_falsy_non_mapping_are_refused(value):
    # Only a missing or null env.kwargs means "no options"; 0, false, "" or [] is a typo.
    assert _refused(_with("env.kwargs", value)) == (
        f"env.kwargs must be a group of keyword arguments, got {value!r}: set env.kwargs={{}}"
    )
    assert parse_run_config(_with("env.kwargs", None)).env.kwargs == {}
