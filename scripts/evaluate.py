"""Load a saved policy and run evaluation episodes; print a table and write JSON.

    python scripts/evaluate.py policy=runs/pendulum/<run>                  # 10 deterministic episodes
    python scripts/evaluate.py policy=<run> deterministic=false episodes=50 video=true

Caution: a policy trained in simulation is not safe to run on physical equipment by itself.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path
from typing import Any

import hydra
from omegaconf import DictConfig, OmegaConf

from agents.errors import ConfigError, KilnError
from agents.policy_eval import evaluate_policy
from agents.policy_io import load_policy, resolve_policy_folder
from agents.presets import CONFIG_DIR
from kiln_cli._cli import check_overrides, guarded, plural


def check_evaluate_config(raw: dict[str, Any]) -> None:
    """Check values and that the policy folder loads, before anything runs."""
    if raw.get("policy") in (None, "???", ""):
        raise ConfigError("no policy given: kiln evaluate policy=<run folder or policy folder>")
    for key in ("episodes",):
        if isinstance(raw[key], bool) or not isinstance(raw[key], int) or raw[key] < 1:
            raise ConfigError(f"{key} must be a positive integer, got {raw[key]!r}")
    if isinstance(raw["seed"], bool) or not isinstance(raw["seed"], int) or raw["seed"] < 0:
        raise ConfigError(f"seed must be a non-negative integer, got {raw['seed']!r}")
    load_policy(Path(raw["policy"]))


def episodes_line(mode: str, episodes: int, seed: int) -> str:
    """``deterministic, 3 episodes, reset seeds 5..7`` (one episode: ``reset seed 5``)."""
    seeds = f"reset seed {seed}" if episodes == 1 else f"reset seeds {seed}..{seed + episodes - 1}"
    return f"{mode}, {plural(episodes, 'episode')}, {seeds}"


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
    run_folder = folder.parent if folder.name == "policy" else folder
    stem = f"{mode}_seed{raw['seed']}_{raw['episodes']}ep"
    out = Path(raw["out"]) if raw.get("out") else run_folder / "evaluations" / f"{stem}.json"
    video_dir = out.with_suffix("") if raw["video"] else None
    result = evaluate_policy(policy, raw["episodes"], raw["seed"], raw["deterministic"], video_dir)
    spec = policy.spec
    record = {
        "policy": str(folder.resolve()),
        "env_id": spec["env"]["id"],
        "kiln_version": spec.get("kiln_version"),
        "mode": mode,
        "seeds": [e["seed"] for e in result["episode_list"]],
        **result,
    }
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = out.with_name(f".{out.name}.tmp")
        tmp.write_text(json.dumps(record, indent=2))
        os.replace(tmp, out)
    except OSError as err:
        raise KilnError(f"cannot write {out} ({err.strerror}): choose another out=<path>") from None
    trained = spec.get("config", {}).get("steps")
    print(f"policy   {folder}  ({spec['env']['id']}, {trained} training steps, Kiln {spec.get('kiln_version')})")
    print(f"mode     {episodes_line(mode, raw['episodes'], raw['seed'])}")
    print(table(result["summary"]))
    print(f"wrote    {out}" + (f"\nvideos   {video_dir}" if video_dir else ""))
    return out


@hydra.main(config_path=str(CONFIG_DIR), config_name="evaluate", version_base="1.3")
def _hydra_entry(cfg: DictConfig) -> None:
    guarded(lambda: run(OmegaConf.to_container(cfg, resolve=True)))


def main() -> None:
    """Check the command line, then hand it to Hydra."""
    check_overrides("evaluate", sys.argv[1:], check_evaluate_config)
    _hydra_entry()


if __name__ == "__main__":
    main()
