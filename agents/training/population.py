"""Population training: several runs of one task trained together in one process.

Members of a population may differ only in the keys of :data:`MEMBER_KEYS` (their seed and how
their temperature is set); every other key, the task and the network shape included, is shared.
:func:`population_key` says which configs can share a population. Each member writes its own run
folder in exactly the layout a single run writes.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from kiln.errors import ConfigError, KilnError
from kiln.storage.run_folder import RunResult
from kiln.training.stop import StopRequest

# The keys in which members of one population may differ (dotted paths into the run config).
MEMBER_KEYS = ("seed", "agent.temperature.target_entropy", "agent.temperature.start", "agent.temperature.mode")


def _without_member_keys(raw: Mapping[str, Any]) -> dict[str, Any]:
    plain: dict[str, Any] = json.loads(json.dumps(raw, default=str))
    for dotted in MEMBER_KEYS:
        *parents, leaf = dotted.split(".")
        node = plain
        for name in parents:
            node = node.get(name, {}) if isinstance(node, dict) else {}
        if isinstance(node, dict):
            value = node.pop(leaf, None)
            if dotted == "agent.temperature.target_entropy":
                # Members share the number of temperatures (one, or one per action dimension).
                node["target_entropy_groups"] = len(value) if isinstance(value, list) else 1
    return plain


def population_key(raw: Mapping[str, Any]) -> str:
    """A text equal for two resolved run configs exactly when they can train in one population."""
    return json.dumps(_without_member_keys(raw), sort_keys=True)


def check_population(raw_configs: Sequence[Mapping[str, Any]], run_dirs: Sequence[Path]) -> None:
    """Refuse a population whose members cannot share one process.

    Raises:
        ConfigError: If there are no members, the folder count differs, two members share a folder,
            or two members differ in a key outside :data:`MEMBER_KEYS`.
    """
    if not raw_configs or len(raw_configs) != len(run_dirs):
        raise ConfigError(f"a population needs one run folder per member: got {len(raw_configs)} configs and {len(run_dirs)} folders")
    folders = [Path(d).resolve() for d in run_dirs]
    if len(set(folders)) != len(folders):
        raise ConfigError("two members of the population share a run folder: give each member its own folder")
    first = population_key(raw_configs[0])
    for i, raw in enumerate(raw_configs[1:], start=1):
        if population_key(raw) != first:
            raise ConfigError(
                f"member {i} of the population differs from member 0 outside {', '.join(MEMBER_KEYS)}: "
                "train such configs as separate populations"
            )


def train_population(
    raw_configs: Sequence[Mapping[str, Any]], run_dirs: Sequence[Path], stop: StopRequest | None = None
) -> list[RunResult | KilnError]:
    """Train every member in one loop: one agent with a leading member axis, one env per member.

    A member whose folder holds a finished run is skipped (its result returned); an unfinished one
    resumes from its checkpoint. A member that diverges stops there and its error takes its place in
    the returned list while the others go on.

    Raises:
        ConfigError: If the members cannot share a population (see :func:`check_population`), or a config is invalid.
        RunFolderError, CheckpointError, RunStopped: As :func:`kiln.training.trainer.train`, for the population as a whole.
    """
    from kiln.training.trainer import train_members

    check_population(raw_configs, run_dirs)
    return list(train_members(raw_configs, run_dirs, stop))
