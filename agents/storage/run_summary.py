"""The few console lines that sum up a finished run: where its logs and policy are, how it evaluated.

``kiln train`` prints them after a run, and the population launcher's workers after each run they
trained, so a run reads the same whichever way it was launched.
"""

from __future__ import annotations

from pathlib import Path

from kiln.storage.run_folder import RunFolder, RunResult


def describe_run(run_dir: Path, result: RunResult) -> str:
    """Where a finished run's logs and policy are and how its final evaluation went, as console lines."""
    lines: list[str] = []
    if result.skipped:
        return f"{run_dir} already holds a finished run (result.json); left as it is."
    ev, seeds = result.evaluation, result.evaluation_seeds
    det = "deterministic" if result.eval_deterministic else "stochastic"
    episodes = f"{len(seeds)} {det} episode{'s' if len(seeds) != 1 else ''}"
    reset = f"reset seed {seeds[0]}" if len(seeds) == 1 else f"reset seeds {seeds[0]}..{seeds[-1]}"
    lines.append(f"\nrun folder   {run_dir}")
    lines.append(f"TensorBoard  tensorboard --logdir {run_dir}")
    lines.append(f"policy       {RunFolder(run_dir).policy_path}")
    lines.append(
        f"evaluation   {episodes} of {result.env_id} after {result.steps} steps ({reset}): return {ev['return_mean']:.1f} ± {ev['return_std']:.1f} "
        f"(min {ev['return_min']:.1f}, max {ev['return_max']:.1f})"
    )
    mode = "" if result.eval_deterministic else " deterministic=false"
    lines.append(f"reproduce    kiln evaluate policy={run_dir}{mode}   (same reset seeds, same sampling)")
    ups = result.updates_per_s
    lines.append(f"time         {result.wall_time_s:.0f} s wall, {result.updates} updates" + (f" at {ups:.0f}/s" if ups else ""))
    return "\n".join(lines)
