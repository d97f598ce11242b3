"""Update-speed benchmark: updates/s at a given network size, as a fraction of the machine's matmul
peak measured in the same process, and the batched-ensemble critic against a loop of networks.

Speed is reported as ratios from one run on one machine (never asserted in tests): absolute
numbers move with the CPU, ratios much less.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import torch

from agents.critic import SoftQEnsemble
from agents.replay import Batch
from agents.sac import SoftActorCritic
from agents.settings import AgentSettings


def mlp_flops(batch: int, in_dim: int, hidden: tuple[int, ...], out_dim: int) -> float:
    """Multiply-add FLOPs (2 per MAC) of one forward pass of an MLP over ``batch`` rows."""
    sizes = [in_dim, *hidden, out_dim]
    return 2.0 * batch * sum(a * b for a, b in zip(sizes[:-1], sizes[1:]))


def update_flops(obs_dim: int, act_dim: int, hidden: tuple[int, ...], batch: int, critics: int) -> float:
    """FLOPs of one soft actor-critic update (a backward pass counted as two forward passes).

    Target: actor forward on s′ + every target critic forward. Critic step: forward + backward of every
    critic. Actor step: actor forward + backward, critics forward + input-gradient backward.
    """
    actor = mlp_flops(batch, obs_dim, hidden, 2 * act_dim)
    critic = mlp_flops(batch, obs_dim + act_dim, hidden, 1)
    return 4.0 * actor + 6.0 * critics * critic


def matmul_peak_gflops(size: int = 1024, repeats: int = 10) -> float:
    """Best observed float32 GFLOP/s of a square matmul on the current thread setting."""
    a, b = torch.randn(size, size), torch.randn(size, size)
    torch.mm(a, b)
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        torch.mm(a, b)
        best = min(best, time.perf_counter() - t0)
    return 2.0 * size**3 / best / 1e9


def _batch(obs_dim: int, act_dim: int, size: int, g: torch.Generator) -> Batch:
    return Batch(torch.randn(1, size, obs_dim, generator=g), torch.rand(1, size, act_dim, generator=g) * 2 - 1,
                 torch.randn(1, size, generator=g), torch.randn(1, size, obs_dim, generator=g), torch.zeros(1, size))  # fmt: skip


def updates_per_second(obs_dim: int, act_dim: int, settings: AgentSettings, seconds: float = 5.0) -> float:
    """Sustained updates/s of :class:`SoftActorCritic` on random data (after a short warm-up)."""
    g = torch.Generator().manual_seed(0)
    agent = SoftActorCritic.single(obs_dim, act_dim, settings, (-float(act_dim),), g)
    batch = _batch(obs_dim, act_dim, settings.batch_size, g)
    for _ in range(5):
        agent.update(batch)
    n, t0 = 0, time.perf_counter()
    while time.perf_counter() - t0 < seconds:
        agent.update(batch)
        n += 1
    return n / (time.perf_counter() - t0)


def critic_ensemble_speedup(obs_dim: int, act_dim: int, settings: AgentSettings, repeats: int = 50) -> float:
    """Time of ``critics`` separate networks run one after another over the batched ensemble (forward + backward)."""
    g = torch.Generator().manual_seed(0)
    s = settings
    batched = SoftQEnsemble(obs_dim, act_dim, s.layer_widths, s.nonlinearity, s.critic.count, g)
    separate = [SoftQEnsemble(obs_dim, act_dim, s.layer_widths, s.nonlinearity, 1, g) for _ in range(s.critic.count)]
    obs, act = torch.randn(s.batch_size, obs_dim, generator=g), torch.rand(s.batch_size, act_dim, generator=g)

    def timed(fn) -> float:
        fn()
        t0 = time.perf_counter()
        for _ in range(repeats):
            fn()
        return (time.perf_counter() - t0) / repeats

    t_batched = timed(lambda: batched(obs, act).sum().backward())
    t_loop = timed(lambda: sum(net(obs, act).sum() for net in separate).backward())
    return t_loop / t_batched


@dataclass(frozen=True)
class BenchResult:
    """One benchmark case."""

    threads: int
    updates_per_s: float
    gflop_per_update: float
    achieved_gflops: float
    peak_gflops: float
    roofline_fraction: float


def bench_case(obs_dim: int, act_dim: int, settings: AgentSettings, threads: int, seconds: float) -> BenchResult:
    """Measure one thread setting: updates/s, and their FLOP rate against this process's matmul peak."""
    torch.set_num_threads(threads)
    peak = matmul_peak_gflops()
    ups = updates_per_second(obs_dim, act_dim, settings, seconds)
    flop = update_flops(obs_dim, act_dim, settings.layer_widths, settings.batch_size, settings.critic.count)
    return BenchResult(threads, ups, flop / 1e9, ups * flop / 1e9, peak, ups * flop / 1e9 / peak)
