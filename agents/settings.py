"""The agent's hyper-parameters as plain typed data, independent of Hydra.

Defaults are the published values of Haarnoja et al. 2018 ("Soft Actor-Critic Algorithms and
Applications", arXiv 1812.05905, Appendix D, Table 1) unless a comment says otherwise.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from typing import Any

from agents.errors import ConfigError


@dataclass(frozen=True)
class TemperatureSettings:
    """How α is set: tuned toward a target entropy, or fixed at ``initial``."""

    tune: bool = True
    # Table 1 gives no initial α; 1.0 is common practice (no source): the tuner moves it fast.
    initial: float = 1.0
    # "auto" means −dim(A) (Table 1); a number, or one number per action dimension.
    target_entropy: Any = "auto"
    lr: float = 3e-4


@dataclass(frozen=True)
class AgentSettings:
    """Soft actor-critic hyper-parameters (Table 1 defaults)."""

    hidden_sizes: tuple[int, ...] = (256, 256)
    activation: str = "relu"
    discount: float = 0.99
    target_smoothing: float = 0.005
    batch_size: int = 256
    replay_capacity: int = 1_000_000
    critic_lr: float = 3e-4
    actor_lr: float = 3e-4
    # Not in Table 1; (−20, 2) is common practice (no source): wide enough to never bind early.
    log_std_bounds: tuple[float, float] = (-20.0, 2.0)
    critics: int = 2
    temperature: TemperatureSettings = field(default_factory=TemperatureSettings)

    @classmethod
    def from_mapping(cls, data: Mapping[str, Any]) -> AgentSettings:
        """Build settings from a plain mapping (e.g. a resolved ``agent:`` config section).

        Raises:
            ConfigError: On an unknown key.
        """
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise ConfigError(f"unknown agent key(s) {unknown}: known keys are {sorted(known)}")
        values = dict(data)
        temp = dict(values.pop("temperature", {}) or {})
        temp_known = {f.name for f in fields(TemperatureSettings)}
        bad = sorted(set(temp) - temp_known)
        if bad:
            raise ConfigError(f"unknown agent.temperature key(s) {bad}: known keys are {sorted(temp_known)}")
        if "hidden_sizes" in values:
            values["hidden_sizes"] = tuple(int(h) for h in values["hidden_sizes"])
        if "log_std_bounds" in values:
            values["log_std_bounds"] = tuple(float(b) for b in values["log_std_bounds"])
        if isinstance(temp.get("target_entropy"), (list, tuple)):
            temp["target_entropy"] = tuple(float(t) for t in temp["target_entropy"])
        return cls(**values, temperature=TemperatureSettings(**temp))


def resolve_target_entropy(spec: Any, act_dim: int) -> tuple[float, ...]:
    """Turn the configured target entropy into one number or one per action dimension.

    Args:
        spec: ``"auto"`` (−dim(A), Table 1), a number, or a list of ``act_dim`` numbers.
        act_dim: Number of action dimensions.

    Returns:
        A tuple of length 1 (one α for the whole action) or ``act_dim`` (one α per dimension).

    Raises:
        ConfigError: If the spec is none of those.
    """
    if isinstance(spec, str):
        if spec == "auto":
            return (-float(act_dim),)
        try:
            return (float(spec),)
        except ValueError:
            raise ConfigError(
                f"agent.temperature.target_entropy={spec!r} is not understood: use auto, a number, "
                f"or a list of {act_dim} numbers"
            ) from None
    if isinstance(spec, bool):
        raise ConfigError("agent.temperature.target_entropy must be auto, a number or a list, not a boolean")
    if isinstance(spec, (int, float)):
        return (float(spec),)
    values = tuple(float(v) for v in spec)
    if len(values) != act_dim:
        raise ConfigError(
            f"agent.temperature.target_entropy has {len(values)} entries but the action has {act_dim} "
            f"dimensions: give one number, or exactly {act_dim}"
        )
    return values
