"""Kiln's population launcher for Hydra, installed as ``hydra_plugins.kiln_population_launcher``.

``launcher=population`` turns a sweep into populations: one worker process per core, each training
a population of the sweep's points (see :mod:`.launcher`). Like the SLURM launcher, this folder is
mapped into Hydra's plugin namespace by pyproject.toml, and ``kiln train`` registers the launcher
itself (:func:`register`), since Hydra's plugin scan does not see a package an editable install maps.
"""

from hydra.core.plugins import Plugins

from hydra_plugins.kiln_population_launcher.launcher import PopulationLauncher


def register() -> None:
    """Make the launcher known to Hydra in this process (a no-op when Hydra's scan found it)."""
    Plugins.instance().register(PopulationLauncher)
