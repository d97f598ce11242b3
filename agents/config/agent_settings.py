"""The agent's hyper-parameters as plain typed data, independent of Hydra.

Grouped by the part they belong to, as the code is: the networks' shape and the shared training
quantities at the top, then ``actor``, ``critic`` and ``temperature``. Defaults are the published
values of Haarnoja et al. 2018 ("Soft Actor-Critic Algorithms and Applications", arXiv 1812.05905,
Appendix D, Table 1) unless a comment says otherwise.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from typing import Any

from kiln.config import checks
from kiln.config.nonlinearities import NONLINEARITIES
from kiln.config.renamed import refuse_old_keys
from kiln.errors import ConfigError

# The published heuristic target entropy H̄ = −dim(A) (Table 1), by name.
MINUS_ACTION_DIMS = "minus_action_dims"
TEMPERATURE_MODES = ("tuned", "fixed")


@dataclass(frozen=True)
class ActorSettings:
    """The squashed-Gaussian actor's optimiser and the soft limits of its log-std head."""

    lr: float = 3e-4
    # Not in Table 1; (−20, 2) is common practice (no source): wide enough to never bind early.
    log_std_soft_limits: tuple[float, float] = (-20.0, 2.0)


@dataclass(frozen=True)
class CriticSettings:
    """The soft Q ensemble: how many members, their optimiser, and the target networks' τ."""

    count: int = 2  # twin soft Q-networks (the published method's clipped double Q)
    lr: float = 3e-4
    target_smoothing: float = 0.005  # τ, Polyak averaging after every gradient step


@dataclass(frozen=True)
class TemperatureSettings:
    """How α is set: ``tuned`` toward a target entropy, or ``fixed`` at ``start``."""

    mode: str = "tuned"
    # Table 1 gives no initial α; 1.0 is common practice (no source): the tuner moves it fast.
    start: float = 1.0
    lr: float = 3e-4
    # minus_action_dims = −dim(A) (Table 1); a number, or one number per action dimension.
    target_entropy: Any = MINUS_ACTION_DIMS

    @property
    def tuned(self) -> bool:
        """True when α is learnt (``mode: tuned``)."""
        return self.mode == "tuned"


@dataclass(frozen=True)
class AgentSettings:
    """Soft actor-critic hyper-parameters (Table 1 defaults)."""

    layer_widths: tuple[int, ...] = (256, 256)
    nonlinearity: str = "relu"
    discount: float = 0.99
    batch_size: int = 256
    replay_capacity: int = 1_000_000
    actor: ActorSettings = field(default_factory=ActorSettings)
    critic: CriticSettings = field(default_factory=CriticSettings)
    temperature: TemperatureSettings = field(default_factory=TemperatureSettings)

    @classmethod
    def from_mapping(cls, data: Mapping[str, Any]) -> AgentSettings:
        """Build settings from a plain mapping (e.g. a resolved ``agent:`` config section).

        Missing keys keep their defaults; every given value is checked for type and range.

        Raises:
            ConfigError: On an old or unknown key, or a value of the wrong type or out of range.
        """
        refuse_old_keys(data, "agent")
        values = dict(data)
        parts: dict[str, dict[str, Any]] = {}
        for name, kind in (("actor", ActorSettings), ("critic", CriticSettings), ("temperature", TemperatureSettings)):
            part = values.pop(name, None)
            part = {} if part is None else part  # only a missing or null group keeps its defaults
            if not isinstance(part, Mapping):
                raise ConfigError(f"agent.{name} must be a group of keys, got {part!r}: see configs/agent/published.yaml")
            refuse_old_keys(part, f"agent.{name}")
            _refuse_unknown(part, kind, f"agent.{name}")
            parts[name] = {key: _CHECKS[f"{name}.{key}"](value, f"agent.{name}.{key}") for key, value in part.items()}
        _refuse_unknown(values, cls, "agent", ignore={"actor", "critic", "temperature"})
        values = {key: _CHECKS[key](value, f"agent.{key}") for key, value in values.items()}
        return cls(
            **values,
            actor=ActorSettings(**parts["actor"]),
            critic=CriticSettings(**parts["critic"]),
            temperature=TemperatureSettings(**parts["temperature"]),
        )


def _target_entropy(value: Any, path: str) -> Any:
    """``minus_action_dims``, a finite number, or a list of finite numbers (length checked on resolving)."""
    if isinstance(value, str):
        resolve_target_entropy(value, 1)  # refuses "auto", unknown words and non-finite numbers with the fix
        if value != MINUS_ACTION_DIMS:
            checks.number(float(value), path, -1e6, 1e6)  # a number written as text: the range of a number
        return value
    if isinstance(value, (list, tuple)):
        if not value:
            raise ConfigError(f"{path} is an empty list: give one number, or one per action dimension")
        return tuple(checks.number(v, f"{path}[{i}]", -1e6, 1e6) for i, v in enumerate(value))
    return checks.number(value, path, -1e6, 1e6)


# Dotted key (below agent.) → its check; the limits are far outside any useful setting and only stop
# typos from becoming absurd allocations (common practice, no source).
_CHECKS: dict[str, Any] = {
    "layer_widths": lambda v, p: checks.int_list(v, p, 1, 65_536, 64),
    "nonlinearity": lambda v, p: checks.choice(v, p, sorted(NONLINEARITIES)),
    "discount": lambda v, p: checks.number(v, p, 0.0, 1.0, high_open=True),
    "batch_size": lambda v, p: checks.integer(v, p, 1, 1_000_000),
    "replay_capacity": lambda v, p: checks.integer(v, p, 1, 10**10),
    "actor.lr": checks.positive,
    "actor.log_std_soft_limits": lambda v, p: checks.increasing_pair(v, p, -100.0, 20.0),
    "critic.count": lambda v, p: checks.integer(v, p, 1, 1024),
    "critic.lr": checks.positive,
    "critic.target_smoothing": lambda v, p: checks.number(v, p, 0.0, 1.0, low_open=True),
    "temperature.mode": lambda v, p: checks.choice(v, p, TEMPERATURE_MODES),
    "temperature.start": checks.positive,
    "temperature.lr": checks.positive,
    "temperature.target_entropy": _target_entropy,
}


def _refuse_unknown(data: Mapping[str, Any], kind: type, where: str, ignore: set[str] | None = None) -> None:
    known = {f.name for f in fields(kind)} - (ignore or set())
    unknown = sorted(set(data) - known - (ignore or set()))
    if unknown:
        raise ConfigError(f"unknown config key {where}.{unknown[0]}: known keys here are {sorted(known | (ignore or set()))}")


def resolve_target_entropy(spec: Any, act_dim: int) -> tuple[float, ...]:
    """Turn the configured target entropy into one number or one per action dimension.

    Called once per run, where the action size is known; everything downstream receives the tuple.

    Args:
        spec: ``minus_action_dims`` (−dim(A), Table 1), a number, or a list of ``act_dim`` numbers.
        act_dim: Number of action dimensions.

    Returns:
        A tuple of length 1 (one α for the whole action) or ``act_dim`` (one α per dimension).

    Raises:
        ConfigError: If the spec is none of those.
    """
    key = "agent.temperature.target_entropy"
    if isinstance(spec, str):
        if spec == MINUS_ACTION_DIMS:
            return (-float(act_dim),)
        if spec == "auto":
            raise ConfigError(f"{key}=auto is an old name: use {key}={MINUS_ACTION_DIMS} (= −dim(A))")
        try:
            number = float(spec)
        except ValueError:
            raise ConfigError(
                f"{key}={spec!r} is not understood: use {MINUS_ACTION_DIMS}, a number, or a list of {act_dim} numbers"
            ) from None
        if not math.isfinite(number):
            raise ConfigError(f"{key}={spec!r} must be a finite number: use {MINUS_ACTION_DIMS} or a finite number")
        return (number,)
    if isinstance(spec, bool):
        raise ConfigError(f"{key} must be {MINUS_ACTION_DIMS}, a number or a list, not a boolean")
    if isinstance(spec, (int, float)):
        return (float(spec),)
    values = tuple(float(v) for v in spec)
    if len(values) != act_dim:
        raise ConfigError(
            f"{key} has {len(values)} entries but the action has {act_dim} dimensions: "
            f"give one number, or exactly {act_dim}"
        )
    return values
