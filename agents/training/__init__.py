"""Collecting and the training loop: replay, collector, checkpoints, progress, stop requests, populations.

:func:`kiln.training.trainer.train` is the whole loop of one run and needs no Hydra; a population
(:mod:`kiln.training.population`) is several runs in one loop.
"""
