"""Load a saved policy and run evaluation episodes; print a table and write JSON.

    python scripts/evaluate.py policy=runs/pendulum/<run>                  # 10 deterministic episodes
    python scripts/evaluate.py policy=<run> deterministic=false episodes=50 video=true

Caution: a policy trained in simulation is not safe to run on physical equipment by itself.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import hydra
from omegaconf import DictConfig, OmegaConf

from agents import checks
from agents.errors import ConfigError, KilnError
from agents.policy_eval import EvaluationPlan, evaluate_policy, plan_evaluation
from agents.policy_io import load_policy, resolve_policy_folder
from agents.run_folder import POLICY, RunFolder, write_json_atomic
from agents.streams import LARGEST_EPISODES, LARGEST_SEED
from agents.presets import CONFIG_DIR
from kiln_cli._cli import check_overrides, guarded, stop_politely_on_sigterm, plural


def check_evaluate_config(raw: dict[str, Any]) -> None:
    """Check values and that the policy folder loads, before anything runs."""
    if raw.get("policy") in (None, "???", ""):
        raise ConfigError("no policy given: kiln evaluate policy=<run folder or policy folder>")
    checks.boolean(raw["deterministic"], "deterministic")
    checks.boolean(raw["video"], "video")
    # Plain values first: a typo is reported before the policy is even opened.
    if raw["episodes"] is not None:
        checks.integer(raw["episodes"], "episodes", 1, LARGEST_EPISODES)
    if raw["seed"] is not None:
        checks.integer(raw["seed"], "seed", 0, LARGEST_SEED)
    plan_evaluation(load_policy(Path(raw["policy"])), raw["episodes"], raw["seed"])


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
    """Evaluate and write the JSON; returns its path."""
    folder = resolve_policy_folder(Path(raw["policy"]))
    policy = load_policy(folder)
    mode = "deterministic" if raw["deterministic"] else "stochastic"
    plan = plan_evaluation(policy, raw["episodes"], raw["seed"])
    run_folder = RunFolder(folder.parent if folder.name == POLICY else folder)
    out = Path(raw["out"]) if raw.get("out") else run_folder.evaluation_path(mode, plan.reset_seeds)
    video_dir = out.with_suffix("") if raw["video"] else None
    result = evaluate_policy(policy, plan, raw["deterministic"], video_dir)
    spec = policy.spec
    record = {
        "policy": str(folder.resolve()),
        "env_id": spec["env"]["id"],
        "kiln_version": spec.get("kiln_version"),
        "mode": mode,
        "seeds": plan.reset_seeds,
        "sampling_seed": plan.sampling_seed,
        **result,
    }
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        write_json_atomic(out, record)
    except OSError as err:
        raise KilnError(f"cannot write {out} ({err.strerror}): choose another out=<path>") from None
    trained = spec.get("config", {}).get("steps")
    print(f"policy   {folder}  ({spec['env']['id']}, {trained} training steps, Kiln {spec.get('kiln_version')})")
    print(f"mode     {episodes_line(mode, plan)}")
    print(table(result["summary"]))
    print(f"wrote    {out}" + (f"\nvideos   {video_dir}" if video_dir else ""))
    return out


@hydra.main(config_path=str(CONFIG_DIR), config_name="evaluate", version_base="1.3")
def _hydra_entry(cfg: DictConfig) -> None:
    guarded(lambda: run(OmegaConf.to_container(cfg, resolve=True)))


def main() -> None:
    """Check the command line, then hand it to Hydra."""
    stop_politely_on_sigterm()
    guarded(lambda: (check_overrides("evaluate", sys.argv[1:], check_evaluate_config), _hydra_entry()))


if __name__ == "__main__":
    main()
