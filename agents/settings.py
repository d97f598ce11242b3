"""The agent's hyper-parameters as plain typed data, independent of Hydra.

Grouped by the part they belong to, as the code is: the networks' shape and the shared training
quantities at the top, then ``actor``, ``critic`` and ``temperature``. Defaults are the published
values of Haarnoja et al. 2018 ("Soft Actor-Critic Algorithms and Applications", arXiv 1812.05905,
Appendix D, Table 1) unless a comment says otherwise.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from typing import Any

from agents.errors import ConfigError
from agents.renamed import refuse_old_keys

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

        Raises:
            ConfigError: On an old or unknown key (the message names the key to use).
        """
        refuse_old_keys(data, "agent")
        values = dict(data)
        parts: dict[str, Any] = {}
        for name, kind in (("actor", ActorSettings), ("critic", CriticSettings), ("temperature", TemperatureSettings)):
            part = values.pop(name, None) or {}
            if not isinstance(part, Mapping):
                raise ConfigError(f"agent.{name} must be a group of keys, got {part!r}: see configs/agent/published.yaml")
            refuse_old_keys(part, f"agent.{name}")
            _refuse_unknown(part, kind, f"agent.{name}")
            parts[name] = dict(part)
        _refuse_unknown(values, cls, "agent", ignore={"actor", "critic", "temperature"})
        if "layer_widths" in values:
            values["layer_widths"] = tuple(int(h) for h in values["layer_widths"])
        if "log_std_soft_limits" in parts["actor"]:
            parts["actor"]["log_std_soft_limits"] = tuple(float(b) for b in parts["actor"]["log_std_soft_limits"])
        target = parts["temperature"].get("target_entropy")
        if isinstance(target, (list, tuple)):
            parts["temperature"]["target_entropy"] = tuple(float(t) for t in target)
        return cls(
            **values,
            actor=ActorSettings(**parts["actor"]),
            critic=CriticSettings(**parts["critic"]),
            temperature=TemperatureSettings(**parts["temperature"]),
        )


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
            return (float(spec),)
        except ValueError:
            raise ConfigError(
                f"{key}={spec!r} is not understood: use {MINUS_ACTION_DIMS}, a number, or a list of {act_dim} numbers"
            ) from None
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
