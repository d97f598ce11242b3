"""The two network sizes the benchmark measures, and the clock it measures them with."""

from __future__ import annotations

import time
from dataclasses import dataclass

from kiln.config.agent_settings import AgentSettings

# The measuring thread's CPU time: on a machine shared with other work, time the scheduler gives
# to other processes does not count against the code measured (one torch thread runs on the
# calling thread). Wall-clock figures (the loop, the sweep) use time.perf_counter instead.
cpu_clock = time.thread_time


@dataclass(frozen=True)
class UpdateCase:
    """One network size: observation and action sizes, hidden widths, minibatch, critics."""

    name: str
    obs_dim: int
    act_dim: int
    layer_widths: tuple[int, ...]
    batch_size: int
    critics: int

    def settings(self) -> AgentSettings:
        """Agent settings of this size (every other value the published default)."""
        return AgentSettings(layer_widths=self.layer_widths, batch_size=self.batch_size)

    @property
    def label(self) -> str:
        """``obs 17, act 6, 2×256, batch 256, 2 critics``."""
        widths = "×".join(str(w) for w in self.layer_widths)
        if len(set(self.layer_widths)) == 1:
            widths = f"{len(self.layer_widths)}×{self.layer_widths[0]}"
        return f"obs {self.obs_dim}, act {self.act_dim}, {widths}, batch {self.batch_size}, {self.critics} critics"


# HalfCheetah-v5's sizes (17-D observation, 6-D action) with the published network (Table 1 of
# Haarnoja et al. 2018: 2 × 256, minibatch 256, twin critics).
DEFAULT = UpdateCase("default", 17, 6, (256, 256), 256, 2)
# Pendulum-v1 (3-D observation, 1-D action) with configs/env/pendulum.yaml's 2 × 64 layers.
SMALL = UpdateCase("small", 3, 1, (64, 64), 256, 2)
CASES = (DEFAULT, SMALL)
