"""The random streams of a run, all derived from its ``seed`` here and nowhere else.

A run draws from five sources, each with its own purpose so that changing one never shifts another:

* training generator (torch): initial weights, every training policy sample, replay sampling;
* warm-up generator (NumPy): the uniform random actions before learning starts;
* training env: reset once with ``seed`` (later resets continue the env's own generator); its
  action space's generator is seeded with ``seed`` too;
* evaluation generator (torch): policy samples of stochastic evaluations and of the Q-bias
  diagnostic, made afresh for each evaluation, so that how often a run evaluates never changes what
  it learns, and any single evaluation can be repeated by the evaluate command;
* evaluation and bias reset seeds: the start states of evaluation episodes and of the bias
  diagnostic's episodes.

Why the reset seeds are disjoint. Evaluation seeds of run ``s`` are ``1_000_003·(s+1) + i`` and bias
seeds ``1_000_003·(s+7920) + i`` for ``i`` below the episode count. While ``0 ≤ s < 1_000_003`` and
each count is below 1_000_003 (checked by the config), both ranges lie above the training env's seed
``s`` and do not overlap each other, so no evaluation replays a training episode's start and the
diagnostic's episodes are not the evaluation's. (1_000_003 is prime; the offset 7919 is the
1000th prime: values that keep the ranges of nearby seeds apart.)

A population (several agents in one process) derives one ``RunStreams`` per member seed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch

_STRIDE = 1_000_003
_BIAS_OFFSET = 7919
# Keeps the stated disjointness true; the config checks seeds and episode counts against it.
LARGEST_SEED = _STRIDE - 1
LARGEST_EPISODES = _STRIDE - 1


@dataclass(frozen=True)
class RunStreams:
    """Every random stream of the run seeded ``seed``."""

    seed: int

    def training_generator(self) -> torch.Generator:
        """Initial weights, training policy samples and replay sampling."""
        return torch.Generator().manual_seed(self.seed)

    def warmup_generator(self) -> np.random.Generator:
        """Uniform random actions during warm-up."""
        return np.random.default_rng(self.seed)

    @property
    def training_env_seed(self) -> int:
        """Reset seed of the training env's first episode."""
        return self.seed

    @property
    def seed_of_evaluation_generator(self) -> int:
        """The seed :meth:`evaluation_generator` starts from (the evaluate command reuses it)."""
        return self.seed + _STRIDE

    @property
    def action_space_seed(self) -> int:
        """Seed of the training env's action-space generator. Kiln never samples from it, but a task
        or wrapper may, and an unseeded one would start from the OS's entropy and break exact resume."""
        return self.seed

    def evaluation_generator(self) -> torch.Generator:
        """Policy samples of one evaluation (a fresh generator per evaluation, the same each time)."""
        return torch.Generator().manual_seed(self.seed_of_evaluation_generator)

    def evaluation_reset_seeds(self, episodes: int) -> list[int]:
        """Reset seeds of the evaluation episodes: the same start states at every evaluation."""
        base = _STRIDE * (self.seed + 1)
        return [base + i for i in range(episodes)]

    def bias_reset_seeds(self, episodes: int) -> list[int]:
        """Reset seeds of the Q-bias diagnostic's episodes (disjoint from the evaluation's)."""
        base = _STRIDE * (self.seed + _BIAS_OFFSET + 1)
        return [base + i for i in range(episodes)]
