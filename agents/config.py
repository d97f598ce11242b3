"""Validate a resolved run config (plain nested dicts) and turn it into typed settings.

Hydra gives the scripts a config; everything below the scripts sees only the plain data checked
here, so the training loop can be driven and tested without Hydra.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from agents.errors import ConfigError
from agents.renamed import refuse_old_keys
from agents.settings import TEMPERATURE_MODES, AgentSettings
from agents.streams import LARGEST_EPISODES, LARGEST_SEED

# Every key a run config may hold, per section; anything else is a typo we refuse.
_SECTIONS: dict[str, set[str]] = {
    "": {"seed", "steps", "threads", "deterministic", "env", "agent", "collect", "evaluate", "log"},
    "env": {"id", "name", "max_episode_steps", "kwargs"},
    "collect": {"warmup_steps", "updates_per_env_step"},
    "evaluate": {"every", "episodes", "deterministic", "bias_episodes"},
    "log": {"every", "progress"},
}


@dataclass(frozen=True)
class EnvSettings:
    """Which task to build: Gymnasium id, short name for run folders, time limit, constructor kwargs."""

    id: str
    name: str
    max_episode_steps: int | None
    kwargs: dict[str, Any]


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


def _int(data: Mapping[str, Any], key: str, path: str, minimum: int, maximum: int | None = None) -> int:
    value = data.get(key)
    if isinstance(value, bool) or not isinstance(value, int):
        raise ConfigError(f"{path} must be an integer, got {value!r}: set {path}=<integer ≥ {minimum}>")
    if value < minimum:
        raise ConfigError(f"{path} must be ≥ {minimum}, got {value}: set {path}=<integer ≥ {minimum}>")
    if maximum is not None and value > maximum:
        raise ConfigError(f"{path} must be ≤ {maximum}, got {value}: set {path}=<integer from {minimum} to {maximum}>")
    return value


def _positive(value: Any, path: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
        raise ConfigError(f"{path} must be a positive number, got {value!r}: set {path}=<number > 0>")
    return float(value)


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
    if not isinstance(env.get("id"), str) or not env["id"]:
        raise ConfigError("env.id is missing: choose a preset (env=pendulum) or set env.id=<Gymnasium id>")
    limit = env.get("max_episode_steps")
    env_settings = EnvSettings(
        id=env["id"],
        name=str(env.get("name") or env["id"]),
        max_episode_steps=None if limit is None else _int(env, "max_episode_steps", "env.max_episode_steps", 1),
        kwargs=dict(env.get("kwargs") or {}),
    )

    agent_raw = raw.get("agent")
    if not isinstance(agent_raw, Mapping):
        raise ConfigError("config section agent is missing: choose a preset, e.g. agent=published")
    agent = AgentSettings.from_mapping(agent_raw)
    _check_agent(agent)

    progress = str(log.get("progress", "auto"))
    if progress not in {"auto", "bar", "lines", "off"}:
        raise ConfigError(f"log.progress must be auto, bar, lines or off, got {progress!r}")
    run = RunSettings(
        seed=_int(raw, "seed", "seed", 0, LARGEST_SEED),
        steps=_int(raw, "steps", "steps", 1),
        threads=_int(raw, "threads", "threads", 1),
        deterministic=bool(raw.get("deterministic", False)),
        warmup_steps=_int(collect, "warmup_steps", "collect.warmup_steps", 0),
        updates_per_env_step=_positive(collect.get("updates_per_env_step"), "collect.updates_per_env_step"),
        eval_every=_int(evaluate, "every", "evaluate.every", 1),
        eval_episodes=_int(evaluate, "episodes", "evaluate.episodes", 1, LARGEST_EPISODES),
        eval_deterministic=bool(evaluate.get("deterministic", True)),
        bias_episodes=_int(evaluate, "bias_episodes", "evaluate.bias_episodes", 0, LARGEST_EPISODES),
        log_every=_int(log, "every", "log.every", 1),
        progress=progress,
    )
    return RunConfig(run=run, env=env_settings, agent=agent, raw=dict(raw))


def _check_agent(a: AgentSettings) -> None:
    _positive(a.actor.lr, "agent.actor.lr")
    _positive(a.critic.lr, "agent.critic.lr")
    _positive(a.temperature.lr, "agent.temperature.lr")
    _positive(a.temperature.start, "agent.temperature.start")
    if a.temperature.mode not in TEMPERATURE_MODES:
        raise ConfigError(
            f"agent.temperature.mode must be tuned or fixed, got {a.temperature.mode!r}: "
            "set agent.temperature.mode=tuned (toward target_entropy) or fixed (α stays at start)"
        )
    for name, value in (("batch_size", a.batch_size), ("replay_capacity", a.replay_capacity), ("critic.count", a.critic.count)):
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise ConfigError(f"agent.{name} must be a positive integer, got {value!r}: set agent.{name}=<integer ≥ 1>")
    if a.batch_size > a.replay_capacity:
        raise ConfigError(
            f"agent.batch_size={a.batch_size} is larger than agent.replay_capacity={a.replay_capacity}: "
            f"lower the batch size or raise the capacity"
        )
    if not 0.0 <= a.discount < 1.0:
        raise ConfigError(f"agent.discount must be in [0, 1), got {a.discount}")
    if not 0.0 < a.critic.target_smoothing <= 1.0:
        raise ConfigError(f"agent.critic.target_smoothing must be in (0, 1], got {a.critic.target_smoothing}")
    if not a.layer_widths or any(h < 1 for h in a.layer_widths):
        raise ConfigError(f"agent.layer_widths must be positive widths, got {list(a.layer_widths)}")
    low, high = a.actor.log_std_soft_limits
    if not low < high:
        raise ConfigError(
            f"agent.actor.log_std_soft_limits must be [low, high] with low < high, got {list(a.actor.log_std_soft_limits)}"
        )
    from agents.nets import NONLINEARITIES

    if a.nonlinearity not in NONLINEARITIES:
        raise ConfigError(f"agent.nonlinearity={a.nonlinearity!r} is unknown: choose one of {sorted(NONLINEARITIES)}")
