"""Validate a resolved run config (plain nested dicts) and turn it into typed settings.

Hydra gives the scripts a config; everything below the scripts sees only the plain data checked
here, so the training loop can be driven and tested without Hydra.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from kiln.config import checks
from kiln.config.agent_settings import AgentSettings
from kiln.config.renamed import refuse_old_keys
from kiln.config.streams import LARGEST_EPISODES, LARGEST_SEED
from kiln.envs.task_spec import TaskSpec
from kiln.errors import ConfigError

# Every key a run config may hold, per section; anything else is a typo we refuse.
_SECTIONS: dict[str, set[str]] = {
    "": {"seed", "steps", "threads", "deterministic", "resume", "env", "agent", "collect", "evaluate", "log", "checkpoint"},
    "env": {"id", "name", "max_episode_steps", "kwargs"},
    "collect": {"warmup_steps", "updates_per_env_step"},
    "evaluate": {"every", "episodes", "deterministic", "bias_episodes"},
    "log": {"every", "progress"},
    "checkpoint": {"every", "keep"},
}


@dataclass(frozen=True)
class EnvSettings:
    """Which task to build: Gymnasium id, short name for run folders, time limit, constructor kwargs."""

    id: str
    name: str
    max_episode_steps: int | None
    kwargs: dict[str, Any]

    @property
    def task(self) -> TaskSpec:
        """The task to build, as ``envs`` takes it."""
        return TaskSpec(self.id, self.kwargs, self.max_episode_steps)


@dataclass(frozen=True)
class RunSettings:
    """Everything about a run that is not the agent's hyper-parameters."""

    seed: int
    steps: int
    threads: int
    deterministic: bool
    warmup_steps: int
    updates_per_env_step: float
    eval_every: int
    eval_episodes: int
    eval_deterministic: bool
    bias_episodes: int
    log_every: int
    progress: str
    checkpoint_every: int
    checkpoint_keep: int
    resume: bool


@dataclass(frozen=True)
class RunConfig:
    """A validated run config: the run, the task and the agent."""

    run: RunSettings
    env: EnvSettings
    agent: AgentSettings
    raw: dict[str, Any]


def _check_keys(section: str, data: Mapping[str, Any]) -> None:
    if section:
        refuse_old_keys(data, section)
    known = _SECTIONS[section]
    unknown = sorted(set(data) - known)
    if unknown:
        where = f"{section}." if section else ""
        raise ConfigError(
            f"unknown config key {where}{unknown[0]}: known keys here are {sorted(known)} (check the spelling)"
        )


# Upper limits that keep a typo from becoming an absurd allocation or an endless loop; far above any
# run that makes sense on a CPU (common practice, no source).
MAX_STEPS = 10**10
MAX_THREADS = 1024
MAX_UPDATES_PER_ENV_STEP = 1000.0


def _section(raw: Mapping[str, Any], name: str) -> Mapping[str, Any]:
    value = raw.get(name)
    if not isinstance(value, Mapping):
        raise ConfigError(f"config section {name} is missing: choose a preset, e.g. {name}=<preset name>")
    _check_keys(name, value)
    return value


def parse_run_config(raw: Mapping[str, Any]) -> RunConfig:
    """Check a resolved run config and build typed settings.

    Args:
        raw: The resolved config as plain nested dicts and lists.

    Returns:
        The validated settings.

    Raises:
        ConfigError: On an unknown key or an out-of-range value (the message names key and fix).
    """
    _check_keys("", raw)
    env, collect = _section(raw, "env"), _section(raw, "collect")
    evaluate, log = _section(raw, "evaluate"), _section(raw, "log")
    checkpoint = _section(raw, "checkpoint")
    if not isinstance(env.get("id"), str) or not env["id"]:
        raise ConfigError("env.id is missing: choose a preset (env=pendulum) or set env.id=<Gymnasium id>")
    limit = env.get("max_episode_steps")
    kwargs = env.get("kwargs")
    kwargs = {} if kwargs is None else kwargs  # only a missing or null env.kwargs means "no options"
    if not isinstance(kwargs, Mapping):
        raise ConfigError(f"env.kwargs must be a group of keyword arguments, got {kwargs!r}: set env.kwargs={{}}")
    env_settings = EnvSettings(
        id=env["id"],
        name=str(env.get("name") or env["id"]),
        max_episode_steps=None if limit is None else checks.integer(limit, "env.max_episode_steps", 1, MAX_STEPS),
        kwargs=dict(kwargs),
    )

    agent_raw = raw.get("agent")
    if not isinstance(agent_raw, Mapping):
        raise ConfigError("config section agent is missing: choose a preset, e.g. agent=published")
    agent = AgentSettings.from_mapping(agent_raw)
    _check_agent(agent)

    run = RunSettings(
        seed=checks.integer(raw.get("seed"), "seed", 0, LARGEST_SEED),
        steps=checks.integer(raw.get("steps"), "steps", 1, MAX_STEPS),
        threads=checks.integer(raw.get("threads"), "threads", 1, MAX_THREADS),
        deterministic=checks.boolean(raw.get("deterministic", False), "deterministic"),
        warmup_steps=checks.integer(collect.get("warmup_steps"), "collect.warmup_steps", 0, MAX_STEPS),
        updates_per_env_step=checks.positive(
            collect.get("updates_per_env_step"), "collect.updates_per_env_step", MAX_UPDATES_PER_ENV_STEP
        ),
        eval_every=checks.integer(evaluate.get("every"), "evaluate.every", 1, MAX_STEPS),
        eval_episodes=checks.integer(evaluate.get("episodes"), "evaluate.episodes", 1, LARGEST_EPISODES),
        eval_deterministic=checks.boolean(evaluate.get("deterministic", True), "evaluate.deterministic"),
        bias_episodes=checks.integer(evaluate.get("bias_episodes"), "evaluate.bias_episodes", 0, LARGEST_EPISODES),
        log_every=checks.integer(log.get("every"), "log.every", 1, MAX_STEPS),
        progress=checks.choice(log.get("progress", "auto"), "log.progress", ("auto", "bar", "lines", "off")),
        checkpoint_every=checks.integer(checkpoint.get("every"), "checkpoint.every", 1, MAX_STEPS),
        checkpoint_keep=checks.integer(checkpoint.get("keep"), "checkpoint.keep", 1, 1000),
        resume=checks.boolean(raw.get("resume", True), "resume"),
    )
    return RunConfig(run=run, env=env_settings, agent=agent, raw=dict(raw))


def _check_agent(a: AgentSettings) -> None:
    """Ranges that hold between settings (each value's own type and range is checked on parsing)."""
    if a.batch_size > a.replay_capacity:
        raise ConfigError(
            f"agent.batch_size={a.batch_size} is larger than agent.replay_capacity={a.replay_capacity}: "
            f"lower the batch size or raise the capacity"
        )
