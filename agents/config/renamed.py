"""Config keys that Kiln renamed, and the one-line refusal that names the key to use instead.

The single table of old → new names: the config parser refuses an old key in a config file, and the
command-line check refuses it in an override, both with the same words.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from kiln.errors import ConfigError

# Full dotted old key → full dotted new key.
OLD_KEYS: dict[str, str] = {
    "agent.hidden_sizes": "agent.layer_widths",
    "agent.activation": "agent.nonlinearity",
    "agent.critic_lr": "agent.critic.lr",
    "agent.actor_lr": "agent.actor.lr",
    "agent.log_std_bounds": "agent.actor.log_std_soft_limits",
    "agent.critics": "agent.critic.count",
    "agent.target_smoothing": "agent.critic.target_smoothing",
    "agent.temperature.tune": "agent.temperature.mode (tuned | fixed)",
    "agent.temperature.initial": "agent.temperature.start",
    "collect.updates_per_step": "collect.updates_per_env_step",
}

# Preset (config group option) that Kiln renamed → the override to use.
OLD_PRESETS: dict[str, str] = {"agent/sac": "agent=published"}


def renamed_preset_message(text: str) -> str | None:
    """The refusal when a Hydra error ``text`` is about a renamed preset, else ``None``."""
    for old, new in OLD_PRESETS.items():
        if f"'{old}'" in text:
            group, name = old.split("/")
            return f"{group}={name} is an old name: use {new}"
    return None


def renamed_message(old: str) -> str | None:
    """The refusal for a dotted key, or ``None`` when the key was never renamed."""
    new = OLD_KEYS.get(old.lstrip("+~"))
    return None if new is None else f"{old.lstrip('+~')} is an old name: use {new}"


def refuse_old_keys(section: Mapping[str, Any], prefix: str) -> None:
    """Raise for the first key of ``section`` (at dotted ``prefix``) that was renamed.

    Raises:
        ConfigError: Naming the old key and the new one.
    """
    for key in section:
        message = renamed_message(f"{prefix}.{key}")
        if message is not None:
            raise ConfigError(message)
