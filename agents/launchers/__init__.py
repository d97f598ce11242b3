"""Sweep launchers as library code: populations in this machine's processes, and SLURM array jobs.

Hydra instantiates launchers only from its ``hydra_plugins`` namespace; the thin classes there
(``hydra_plugins.kiln_launchers``, from ``scripts/hydra_launchers/``) subclass the ones here.
"""
