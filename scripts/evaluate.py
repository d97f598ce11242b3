"""Load a saved policy and run evaluation episodes; print a table and write JSON.

    python scripts/evaluate.py policy=runs/pendulum/<run>                  # 10 deterministic episodes
    python scripts/evaluate.py policy=<run> deterministic=false episodes=50 video=true

Caution: a policy trained in simulation is not safe to run on physical equipment by itself.
"""

from __future__ import annotations

import sys
from contextlib import nullcontext
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import hydra
from omegaconf import DictConfig, OmegaConf

from kiln.cli.common import check_overrides, guarded, plural, stop_politely_on_sigterm, user_folder_importable
from kiln.config import checks
from kiln.config.presets import CONFIG_DIR
from kiln.config.streams import LARGEST_EPISODES, LARGEST_SEED
from kiln.errors import ConfigError
from kiln.evaluation.policy_eval import EvaluationPlan, check_task_module, evaluate_policy, plan_evaluation
from kiln.storage.policy_io import Policy, load_policy, resolve_policy_folder
from kiln.storage.run_folder import POLICY, RunFolder, write_json_atomic
from kiln.storage.writable import check_writable, kept_only_if_complete


@dataclass(frozen=True)
class Job:
    """One evaluation, checked: the policy, its episodes and where the results go."""

    folder: Path
    policy: Policy
    plan: EvaluationPlan
    mode: str
    out: Path
    video_dir: Path | None


def prepare(raw: dict[str, Any]) -> Job:
    """Check the values, load the policy and plan the episodes; nothing is run or written."""
    if raw.get("policy") in (None, "???", ""):
        raise ConfigError("no policy given: kiln evaluate policy=<run folder or policy folder>")
    checks.boolean(raw["deterministic"], "deterministic")
    checks.boolean(raw["video"], "video")
    # Plain values first: a typo is reported before the policy is even opened.
    if raw["episodes"] is not None:
        checks.integer(raw["episodes"], "episodes", 1, LARGEST_EPISODES)
    if raw["seed"] is not None:
        checks.integer(raw["seed"], "seed", 0, LARGEST_SEED)
    folder = resolve_policy_folder(Path(raw["policy"]))
    policy = load_policy(folder)
    check_task_module(policy.spec["env"]["id"], raw.get("task_module"))
    plan = plan_evaluation(policy, raw["episodes"], raw["seed"])
    mode = "deterministic" if raw["deterministic"] else "stochastic"
    run_folder = RunFolder(folder.parent if folder.name == POLICY else folder)
    out = Path(raw["out"]) if raw.get("out") else run_folder.evaluation_path(mode, plan.reset_seeds)
    if out.is_dir():
        raise ConfigError(f"out={out} is a folder: give a file name such as out={out / 'evaluation.json'}")
    return Job(folder, policy, plan, mode, out, out.with_suffix("") if raw["video"] else None)


def check_outputs(job: Job) -> None:
    """Refuse output folders that cannot be written, before any episode runs."""
    check_writable(job.out.parent, _OUT_FIX)
    if job.video_dir is not None:
        check_writable(job.video_dir, _VIDEO_FIX)


_OUT_FIX = "pass out=<path> in a folder you can write to"
_VIDEO_FIX = "pass out=<path> in a folder you can write to (videos go beside it), or drop video"


def check_evaluate_config(raw: dict[str, Any]) -> None:
    """Check values, that the policy folder loads and that the outputs can be written, before anything runs."""
    check_outputs(prepare(raw))


def episodes_line(mode: str, plan: EvaluationPlan) -> str:
    """``deterministic, 3 episodes, reset seeds 5..7 (seed=5)`` (one episode: ``reset seed 5``)."""
    seeds = plan.reset_seeds
    shown = f"reset seed {seeds[0]}" if len(seeds) == 1 else f"reset seeds {seeds[0]}..{seeds[-1]}"
    return f"{mode}, {plural(len(seeds), 'episode')}, {shown} ({plan.source})"


def table(summary: dict[str, float]) -> str:
    """Render the summary as a small fixed-width table."""
    rows = [f"{'':8}{'mean':>11}{'std':>11}{'min':>11}{'max':>11}"]
    for name in ("return", "length"):
        rows.append(
            f"{name:8}" + "".join(f"{summary[f'{name}_{s}']:>11.1f}" for s in ("mean", "std", "min", "max"))
        )
    return "\n".join(rows)


def run(raw: dict[str, Any]) -> Path:
    """Evaluate and write the JSON; returns its path. A failed write leaves no part of it behind."""
    job = prepare(raw)
    check_outputs(job)
    out, spec = job.out, job.policy.spec
    with kept_only_if_complete(out.parent, f"the evaluation record {out.name}", _OUT_FIX):
        videos = job.video_dir and kept_only_if_complete(job.video_dir, "the videos", _VIDEO_FIX, sole_writer=True)
        with videos or nullcontext():
            result = evaluate_policy(job.policy, job.plan, raw["deterministic"], job.video_dir, raw.get("task_module"))
        record = {
            "policy": str(job.folder.resolve()),
            "env_id": spec["env"]["id"],
            "kiln_version": spec.get("kiln_version"),
            "mode": job.mode,
            "seeds": job.plan.reset_seeds,
            "sampling_seed": job.plan.sampling_seed,
            **result,
        }
        write_json_atomic(out, record)
    trained = (spec.get("config") or {}).get("steps")
    print(f"policy   {job.folder}  ({spec['env']['id']}, {trained} training steps, Kiln {spec.get('kiln_version')})")
    print(f"mode     {episodes_line(job.mode, job.plan)}")
    print(table(result["summary"]))
    print(f"wrote    {out}" + (f"\nvideos   {job.video_dir}" if job.video_dir else ""))
    return out


@hydra.main(config_path=str(CONFIG_DIR), config_name="evaluate", version_base="1.3")
def _hydra_entry(cfg: DictConfig) -> None:
    guarded(lambda: run(OmegaConf.to_container(cfg, resolve=True)))


def main() -> None:
    """Check the command line, then hand it to Hydra."""
    stop_politely_on_sigterm()
    user_folder_importable()  # task_module=<module>: the user's module in this folder
    guarded(lambda: (check_overrides("evaluate", sys.argv[1:], check_evaluate_config), _hydra_entry()))


if __name__ == "__main__":
    main()
