"""Kiln's sweep launchers in Hydra's plugin namespace, installed as ``hydra_plugins.kiln_launchers``.

Hydra instantiates launchers only from the ``hydra_plugins`` namespace, by the name of the module
that defines the class; the launchers themselves are library code (:mod:`kiln.launchers`). These
thin subclasses put them in that namespace and turn their errors into Kiln's one-line message and
exit code, as the rest of ``kiln train`` does. Hydra finds them by scanning the namespace in an
installed Kiln; an editable install maps this folder in a way the scan does not see, so
``kiln train`` registers them itself (:func:`register`).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from hydra.core.plugins import Plugins
from hydra.core.utils import JobReturn

from kiln.cli.common import guarded
from kiln.launchers import population_launcher, slurm_launcher


class PopulationLauncher(population_launcher.PopulationLauncher):
    """``launcher=population``: sweep runs trained as populations, one process per core."""

    def setup(self, **kwargs: Any) -> None:
        """Check the launcher's settings; a bad one ends the command with one line."""
        guarded(lambda: super(PopulationLauncher, self).setup(**kwargs))

    def launch(self, job_overrides: Sequence[Sequence[str]], initial_job_idx: int) -> Sequence[JobReturn]:
        """Train the sweep; a failed or stopped run ends the command with its line and exit code."""
        return guarded(lambda: super(PopulationLauncher, self).launch(job_overrides, initial_job_idx))


class SlurmSweepLauncher(slurm_launcher.SlurmSweepLauncher):
    """``launcher=slurm``: sweep runs as one SLURM array job."""

    def launch(self, job_overrides: Sequence[Sequence[str]], initial_job_idx: int) -> Sequence[JobReturn]:
        """Submit and wait; a cluster out of reach or a lost job ends the command with one line."""
        return guarded(lambda: super(SlurmSweepLauncher, self).launch(job_overrides, initial_job_idx))


def register() -> None:
    """Make both launchers known to Hydra in this process (a no-op when Hydra's scan found them)."""
    Plugins.instance().register(PopulationLauncher)
    Plugins.instance().register(SlurmSweepLauncher)
