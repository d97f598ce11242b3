"""The population launcher's settings (``hydra.launcher.*``), checked before anything is written."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from joblib import effective_n_jobs

from kiln.errors import ConfigError

# The target the preset configs/launcher/population.yaml names.
TARGET = "hydra_plugins.kiln_launchers.PopulationLauncher"

# The joblib settings that change what a population task is, and why each is refused.
_REFUSED = {
    "require": "a population runs in its own process, never in threads sharing memory",
    "timeout": "one population holds many members, so a time limit per task would end them all; "
    "stop a sweep with SIGTERM instead (its populations checkpoint first)",
}


def check_n_jobs(n_jobs: Any) -> int:
    """``hydra.launcher.n_jobs`` as joblib counts it: -1 is one per core, -2 all cores but one, ...

    Returns:
        How many worker processes that means on this machine (at least 1).

    Raises:
        ConfigError: If ``n_jobs`` is not a non-zero integer.
    """
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, int) or n_jobs == 0:
        raise ConfigError(
            f"hydra.launcher.n_jobs={n_jobs!r} is not a number of worker processes: give a positive integer, "
            "or -1 for one per core"
        )
    return max(1, effective_n_jobs(n_jobs))


def worker_count(settings: Mapping[str, Any]) -> int:
    """How many population worker processes run at once, from the launcher's settings.

    Raises:
        ConfigError: If ``n_jobs`` is not a non-zero integer, or a joblib setting the population
            launcher cannot honour is set.
    """
    backend = settings.get("backend")
    if backend not in (None, "loky"):
        raise ConfigError(
            f"hydra.launcher.backend={backend!r} cannot run populations, which run in loky worker processes: "
            "leave hydra.launcher.backend unset"
        )
    for key, why in _REFUSED.items():
        if settings.get(key) is not None:
            raise ConfigError(f"hydra.launcher.{key} is not used with launcher=population ({why}): leave it unset")
    return check_n_jobs(settings.get("n_jobs", -1))
