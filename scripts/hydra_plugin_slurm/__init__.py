"""Kiln's Hydra launcher for SLURM clusters, installed as ``hydra_plugins.kiln_slurm_launcher``.

Hydra instantiates launchers only from the ``hydra_plugins`` namespace, so this folder is mapped
there by pyproject.toml (like ``scripts/`` is mapped to ``kiln_cli``). Hydra finds plugins by listing
that namespace's folders, which an editable install does not have for a mapped package, so
``kiln train`` registers the launcher itself (:func:`register`).
"""

from hydra.core.plugins import Plugins

from hydra_plugins.kiln_slurm_launcher.slurm_sweep import SlurmSweepLauncher


def register() -> None:
    """Make the launcher known to Hydra in this process (a no-op when Hydra's scan found it)."""
    Plugins.instance().register(SlurmSweepLauncher)
