"""Kiln's Hydra presets, shipped inside the installed package (``kiln.configs``) as data files.

``train.yaml`` and ``evaluate.yaml`` are the primary configs; ``agent/``, ``env/``, ``sweep/`` and
``launcher/`` are their groups. :mod:`kiln.config.presets` finds this folder through the package,
so an installed wheel works from any folder.
"""
