"""Benchmark the soft actor-critic update on this CPU and report ratios from one run.

    kiln bench                                  # default network: obs 17, act 6, 2×256, batch 256
    kiln bench --obs 3 --act 1 --hidden 64 64

Reports updates/s per thread count, the fraction of the float32 matmul peak measured in the same
process (the roofline fraction), and the speed-up of the batched critic ensemble over a loop.
Exit codes: 0 done, 2 bad arguments.
"""

from __future__ import annotations

import argparse

from kiln_cli._cli import OneLineParser, plural


def speed_ratio(ratio: float) -> str:
    """A time or rate ratio as the user reads it: ``1.50x faster``, or ``1.02x slower`` below 1."""
    return f"{ratio:.2f}x faster" if ratio >= 1.0 else f"{1.0 / ratio:.2f}x slower"


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    """The checked arguments; a bad one ends the command with one ``kiln: error:`` line (exit 2)."""
    parser = OneLineParser(prog="kiln bench", description=__doc__.splitlines()[0])
    parser.add_argument("--obs", type=int, default=17, help="observation size (default 17, as HalfCheetah-v5)")
    parser.add_argument("--act", type=int, default=6, help="action size (default 6, as HalfCheetah-v5)")
    parser.add_argument("--hidden", type=int, nargs="+", default=[256, 256], help="hidden widths")
    parser.add_argument("--batch", type=int, default=256, help="minibatch size")
    parser.add_argument("--seconds", type=float, default=5.0, help="measuring time per case")
    parser.add_argument("--threads", type=int, nargs="+", default=[1, 2], help="torch thread counts to try")
    args = parser.parse_args(argv)
    if min(args.obs, args.act, args.batch, *args.hidden, *args.threads) < 1 or not args.seconds > 0:
        parser.error("--obs, --act, --hidden, --batch and --threads must be at least 1 and --seconds above 0")
    return args


def main(argv: list[str] | None = None) -> None:
    """Measure and print the table (arguments without the program name; default: the command line)."""
    args = parse_args(argv)
    import torch  # loads only past the argument checks, so a typo is answered at once

    from agents.benchmark import bench_case, critic_ensemble_speedup
    from agents.settings import AgentSettings

    settings = AgentSettings(layer_widths=tuple(args.hidden), batch_size=args.batch)
    print(f"network: obs {args.obs}, act {args.act}, hidden {args.hidden}, batch {args.batch}, critics {settings.critic.count}")
    print(f"{'threads':>8}{'updates/s':>11}{'GFLOP/upd':>11}{'GFLOP/s':>9}{'peak':>8}{'of peak':>9}")
    results = []
    for threads in args.threads:
        r = bench_case(args.obs, args.act, settings, threads, args.seconds)
        results.append(r)
        print(f"{r.threads:>8}{r.updates_per_s:>11.1f}{r.gflop_per_update:>11.3f}{r.achieved_gflops:>9.1f}"
              f"{r.peak_gflops:>8.1f}{r.roofline_fraction:>9.2f}")  # fmt: skip
    base = results[0]
    for r in results[1:]:
        print(f"{plural(r.threads, 'thread')} vs {base.threads}: "
              f"{speed_ratio(r.updates_per_s / base.updates_per_s)} (updates/s)")  # fmt: skip
    torch.set_num_threads(args.threads[0])
    print(f"batched critic ensemble vs a loop of {settings.critic.count} networks ({plural(args.threads[0], 'thread')}): "
          f"{speed_ratio(critic_ensemble_speedup(args.obs, args.act, settings))}")  # fmt: skip


if __name__ == "__main__":
    main()
