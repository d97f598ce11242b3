"""Benchmark Kiln's update, training loop and sweeps on this CPU; the last line printed is JSON.

    kiln bench                                   # every part (minutes: the sweep trains 16 runs)
    kiln bench --parts gemm,update --seconds 1   # only some parts, shorter measurements
    kiln bench --parts loop --steps 2000         # a shorter Pendulum-v1 run than the preset's
    kiln bench --profile                         # per-operator profile of the update instead
    kiln bench --profile --updates 50            # ... over more updates per size

Parts: gemm (float32 GEMM rate at the update's shapes), update (updates/s and their fraction of
that rate; runs gemm too), population (agent-updates/s of 8 agents on one member axis against the
same 8 updated one after another), loop (a Pendulum-v1 training run split into env step, update and the
rest), sweep (2 targets × 4 seeds of Pendulum-v1 on all cores, as separate jobs and as populations).
Everything but the sweep runs in this process on one torch thread. Exit codes: 0 done, 2 bad arguments.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import time
from typing import Any

from kiln.cli.common import OneLineParser, fail, guarded

PARTS = ("gemm", "update", "population", "loop", "sweep")
POPULATION = 8  # K of the population part: 8 = the 2-target × 4-seed comparison in one process


def speed_ratio(ratio: float) -> str:
    """A time or rate ratio as the user reads it: ``1.50x faster``, or ``1.02x slower`` below 1."""
    return f"{ratio:.2f}x faster" if ratio >= 1.0 else f"{1.0 / ratio:.2f}x slower"


def parse_parts(text: str) -> tuple[str, ...]:
    """``gemm,update`` → the parts in their running order; raises ValueError naming an unknown one."""
    names = [p.strip() for p in text.split(",") if p.strip()]
    if not names:
        raise ValueError("--parts is empty: give one or more of " + ",".join(PARTS))
    unknown = [n for n in names if n not in PARTS]
    if unknown:
        raise ValueError(f"unknown part {unknown[0]!r} in --parts: choose from {','.join(PARTS)}")
    return tuple(p for p in PARTS if p in names or (p == "gemm" and "update" in names))


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    """The checked arguments; a bad one ends the command with one ``kiln: error:`` line (exit 2)."""
    parser = OneLineParser(prog="kiln bench", description=__doc__.splitlines()[0])
    parser.add_argument("--parts", default=",".join(PARTS), help=f"comma-separated parts to run (default {','.join(PARTS)})")
    parser.add_argument("--seconds", type=float, default=2.0, help="measuring time per case of gemm and update (default 2)")
    parser.add_argument("--steps", type=int, default=None,
                        help="env steps of the loop and sweep runs (default: the Pendulum-v1 preset's budget)")
    parser.add_argument("--profile", action="store_true", help="print the update's per-operator profile and per-shape GEMM table instead")
    parser.add_argument("--updates", type=int, default=20, help="profiled updates per size with --profile (default 20)")
    args = parser.parse_args(argv)
    try:
        args.parts = parse_parts(args.parts)
    except ValueError as err:
        parser.error(str(err))
    if not (math.isfinite(args.seconds) and args.seconds > 0):
        parser.error(f"--seconds must be a number above 0, got {args.seconds}")
    if args.steps is not None and args.steps < 1:
        parser.error(f"--steps must be at least 1, got {args.steps}")
    if args.updates < 1:
        parser.error(f"--updates must be at least 1, got {args.updates}")
    return args


def _check_budget(steps: int | None) -> None:
    """Refuse a loop or sweep budget that ends within the preset's warm-up (no update would run)."""
    if steps is None:
        return
    from kiln.config.presets import compose_config

    warmup = compose_config("train", ["env=pendulum"])["collect"]["warmup_steps"]
    if steps <= warmup:
        fail(f"--steps {steps} ends within the Pendulum-v1 preset's warm-up of {warmup} steps, so nothing "
             f"would be updated; fix: give --steps above {warmup}")  # fmt: skip


def _fmt(x: float | None, spec: str = ".1f") -> str:
    return "n/a" if x is None else format(x, spec)


def run_gemm_and_update(args: argparse.Namespace, out: dict[str, Any]) -> None:
    """GEMM rates at each case's shapes and the 256² square; with ``update``, updates/s and fractions
    (update and GEMM rounds alternate, so both see the same load)."""
    from kiln.benchmark.cases import CASES
    from kiln.benchmark.gemm_fraction import measure_update_vs_gemm
    from kiln.benchmark.gemm_rate import shape_rates, square_gflops, weighted_gflops
    from kiln.benchmark.gemm_shapes import total_flops, update_gemms

    with_update = "update" in args.parts
    print("GEMM rate at each update's shapes (float32, best time per shape, FLOP-weighted)"
          + (", and the update (SoftActorCritic.update on a fixed random minibatch), in alternating rounds:" if with_update else ":"))  # fmt: skip
    for case in CASES:
        gemms = update_gemms(case.obs_dim, case.act_dim, case.layer_widths, case.batch_size, case.critics)
        if with_update:
            m = measure_update_vs_gemm(case, args.seconds)
            rate, per_member = m.gemm_gflops, m.gemm_gflops_per_member_mm
            out["updates_per_s"][case.name], out["gemm_fraction"][case.name] = m.updates_per_s, m.gemm_fraction
        else:
            rates = shape_rates(gemms, args.seconds)
            rate, per_member = weighted_gflops(rates), weighted_gflops(rates, per_member_mm=True)
        gflop = total_flops(gemms) / 1e9
        out["gemm_gflops_by_case"][case.name], out["gemm_gflops_per_member_mm"][case.name] = rate, per_member
        out["update_gflop"][case.name] = gflop
        print(f"  {case.name:<8}{case.label}: {gflop:.4f} GFLOP/update in {len(gemms)} shapes")
        print(f"          GEMM {rate:.1f} GFLOP/s (with one mm per member where faster than bmm: {per_member:.1f})")
        if with_update:
            print(f"          update {m.updates_per_s:.1f}/s = {m.updates_per_s * gflop:.1f} GFLOP/s = "
                  f"{m.gemm_fraction:.2f} of the GEMM rate at its shapes")  # fmt: skip
    out["gemm_gflops"] = out["gemm_gflops_by_case"]["default"]
    square = square_gflops(256, args.seconds / 2)
    out["gemm_gflops_by_case"]["square_256"] = square
    print(f"  square  256×256 @ 256×256: {square:.1f} GFLOP/s")


def run_population(args: argparse.Namespace, out: dict[str, Any]) -> None:
    """K agents as one K-member agent against the same K agents updated one after another."""
    from kiln.benchmark.cases import CASES
    from kiln.benchmark.update_speed import population_speed

    print(f"population (K = {POPULATION}; agent-updates/s, each agent its own minibatch):")
    for case in reversed(CASES):  # small first: the size populations are for
        speed = population_speed(case, POPULATION, args.seconds)
        key = f"{case.name}_k{POPULATION}"
        out["population_speedup"][key] = speed.speedup
        out["agent_updates_per_s"][key] = {"together": speed.together, "one_after_another": speed.one_after_another}
        print(f"  {case.name:<8}one {POPULATION}-member agent {speed.together:8.1f}, {POPULATION} agents one after another "
              f"{speed.one_after_another:8.1f}: {speed_ratio(speed.speedup)}")  # fmt: skip


def _loop_line(name: str, split: Any) -> str:
    s = split.shares()
    return (f"  {name:<23}{split.env_steps_per_s:6.0f} env steps/s; env.step {s['env_step']:.1%}, update {s['update']:.1%}, "
            f"overhead {split.overhead_fraction:.1%} = evaluate {_fmt(s['evaluate'], '.1%')}, checkpoint "
            f"{_fmt(s['checkpoint'], '.1%')}, act {_fmt(s['act'], '.1%')}, other {_fmt(s['other'], '.1%')}")  # fmt: skip


def run_loop(args: argparse.Namespace, out: dict[str, Any]) -> None:
    """The Pendulum-v1 preset run, and the same run evaluating and checkpointing only at its end."""
    from kiln.benchmark.loop_split import measure_loop, pendulum_overrides

    budget = "the preset's budget" if args.steps is None else f"{args.steps} steps"
    print(f"loop (Pendulum-v1 preset, {budget}, trained through kiln.training.trainer.train; shares of loop time):")
    for name, periodic, label in (("preset", True, "as the preset"), ("final_eval_only", False, "eval+checkpoint at end")):
        split = measure_loop(pendulum_overrides(args.steps, periodic))
        out["loop_split"][name] = {"steps": split.steps, "loop_s": split.loop_s, "env_steps_per_s": split.env_steps_per_s,
                                   "overhead_fraction": split.overhead_fraction, "shares": split.shares()}  # fmt: skip
        print(_loop_line(label, split))
    preset = out["loop_split"]["preset"]
    out["env_steps_per_s"], out["loop_overhead_fraction"] = preset["env_steps_per_s"], preset["overhead_fraction"]
    from kiln.benchmark.act_cost import act_cost

    cost = act_cost()
    out["act_us"] = {"warm": cost.warm_us, "after_update": cost.after_update_us, "after_pause": cost.after_pause_us}
    print(f"  one training action (torch actor, Pendulum size): {cost.warm_us:.0f} µs repeated at once, "
          f"{cost.after_update_us:.0f} µs right after an update ({cost.ratio:.1f}x), "
          f"{cost.after_pause_us:.0f} µs after a busy pause as long as an update")


def run_sweep(args: argparse.Namespace, out: dict[str, Any]) -> None:
    """Wall time of the 2-target × 4-seed comparison as separate jobs and as populations."""
    from kiln.benchmark.sweep_wall import population_launcher_exists, sweep_wall_seconds

    budget = "the preset's budget" if args.steps is None else f"{args.steps} steps"
    print(f"sweep (Pendulum-v1, 2 targets × 4 seeds, {budget}, all {os.cpu_count()} cores):")
    jobs = guarded(lambda: sweep_wall_seconds(args.steps, population=False))
    out["sweep_wall_s"]["jobs"] = jobs
    print(f"  separate jobs (launcher=local)  {jobs:7.1f} s")
    if not population_launcher_exists():
        print("  populations (launcher=population)  n/a: Kiln has no launcher=population preset yet")
        return
    pop = guarded(lambda: sweep_wall_seconds(args.steps, population=True))
    out["sweep_wall_s"]["population"] = pop
    print(f"  populations (launcher=population) {pop:7.1f} s = {pop / jobs:.2f} of the jobs' wall time")


def run_profile(args: argparse.Namespace) -> None:
    """Per-operator tables of the update (default, small, and a population of small agents), and the
    per-shape GEMM tables."""
    from kiln.benchmark.cases import DEFAULT, SMALL
    from kiln.benchmark.gemm_rate import shape_rates
    from kiln.benchmark.gemm_shapes import update_gemms
    from kiln.benchmark.update_profile import operator_table, profile_update

    for case, k in ((DEFAULT, 1), (SMALL, 1), (SMALL, POPULATION)):
        rows, us = profile_update(case.obs_dim, case.act_dim, case.settings(), population=k, updates=args.updates)
        gemm_share = sum(r.share for r in rows if r.name in ("aten::mm", "aten::bmm", "aten::addmm", "aten::baddbmm"))
        name = case.name if k == 1 else f"{case.name}, population of {k}"
        print(f"update profile, {name} ({case.label}): {us:.0f} µs of operator self time per profiled update, "
              f"{gemm_share:.1%} in GEMM operators (mm, bmm, addmm, baddbmm)")  # fmt: skip
        print("\n".join(operator_table(rows)))
        print(f"GEMMs of one update, {name}: best µs per call as the update runs them (mm or bmm) and as one mm per member")
        print(f"  {'product':<28}{'calls':>6}{'µs':>9}{'GFLOP/s':>9}{'mm/member µs':>14}{'GFLOP/s':>9}")
        gemms = update_gemms(case.obs_dim, case.act_dim, case.layer_widths, case.batch_size, case.critics, k)
        for r in shape_rates(gemms, args.seconds):
            print(f"  {r.gemm.label:<28}{r.gemm.count:>6}{r.best_s * 1e6:>9.1f}{r.gflops:>9.1f}"
                  f"{r.per_member_mm_s * 1e6:>14.1f}{r.per_member_mm_gflops:>9.1f}")  # fmt: skip
        print()


def empty_report(args: argparse.Namespace) -> dict[str, Any]:
    """Every key of the JSON line, None until its part runs."""
    both = lambda: {"default": None, "small": None}  # noqa: E731
    return {
        "gemm_gflops": None,
        "gemm_gflops_by_case": {**both(), "square_256": None},
        "gemm_gflops_per_member_mm": both(),
        "update_gflop": both(),
        "updates_per_s": both(),
        "gemm_fraction": both(),
        "population_speedup": {f"small_k{POPULATION}": None, f"default_k{POPULATION}": None},
        "agent_updates_per_s": {f"small_k{POPULATION}": None, f"default_k{POPULATION}": None},
        "env_steps_per_s": None,
        "loop_overhead_fraction": None,
        "loop_split": {"preset": None, "final_eval_only": None},
        "act_us": {"warm": None, "after_update": None, "after_pause": None},
        "sweep_wall_s": {"jobs": None, "population": None},
        "parts": list(args.parts),
        "threads": 1,
        "seconds": args.seconds,
        "steps": args.steps,
    }


def main(argv: list[str] | None = None) -> None:
    """Run the chosen parts and print their lines, then the JSON line (arguments without the program name)."""
    args = parse_args(argv)
    if not args.profile and {"loop", "sweep"} & set(args.parts):
        _check_budget(args.steps)
    # Loads torch only past the argument checks, so a typo is answered at once.
    from kiln.training.process_state import torch_settings

    with torch_settings(threads=1):
        if args.profile:
            run_profile(args)
            return
        out = empty_report(args)
        load_start, wall0 = os.getloadavg()[0], time.perf_counter()
        print(f"kiln bench: one torch thread, float32; rates per CPU-second of the measuring thread; load average {load_start:.2f}")
        if "gemm" in args.parts:
            run_gemm_and_update(args, out)
        if "population" in args.parts:
            run_population(args, out)
        if "loop" in args.parts:
            run_loop(args, out)
        if "sweep" in args.parts:
            run_sweep(args, out)
    out["load_average"] = {"start": load_start, "end": os.getloadavg()[0]}
    out["wall_s"] = time.perf_counter() - wall0
    print(json.dumps(out))


if __name__ == "__main__":
    main()
