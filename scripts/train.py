"""Train a soft actor-critic agent from the Hydra config ``configs/train.yaml``.

    python scripts/train.py                       # default task (Pendulum-v1)
    python scripts/train.py env=hopper seed=3     # another preset and seed
    python scripts/train.py -m seed=0,1,2         # a sweep (see configs/sweep/)

Caution: a policy trained in simulation is not safe to run on physical equipment by itself.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import hydra
from hydra.core.hydra_config import HydraConfig
from omegaconf import DictConfig, OmegaConf

from agents.config import parse_run_config
from agents.presets import CONFIG_DIR
from agents.settings import resolve_target_entropy
from agents.trainer import POLICY, train
from envs.make import make_env
from kiln_cli._cli import check_overrides, guarded, plural


def check_run_config(raw: dict[str, Any]) -> None:
    """Everything that can be checked before a run folder exists: values, task id, spaces."""
    cfg = parse_run_config(raw)
    env = make_env(cfg.env.id, cfg.env.kwargs, cfg.env.max_episode_steps)
    try:
        resolve_target_entropy(cfg.agent.temperature.target_entropy, env.action_space.shape[0])
    finally:
        env.close()


def report(run_dir: Path, result: dict[str, Any]) -> None:
    """Tell the user where everything is and how the final evaluation went."""
    if result.get("skipped"):
        print(f"{run_dir} already holds a finished run (result.json); left as it is.")
        return
    ev = result["evaluation"]
    det = "deterministic" if result.get("eval_deterministic", True) else "stochastic"
    print(f"\nrun folder   {run_dir}")
    print(f"TensorBoard  tensorboard --logdir {run_dir}")
    print(f"policy       {run_dir / POLICY}   (evaluate: kiln evaluate policy={run_dir})")
    print(
        f"evaluation   {plural(ev['episodes'], det + ' episode')} of {result['env_id']} after {result['steps']} steps: "
        f"return {ev['return_mean']:.1f} ± {ev['return_std']:.1f} (min {ev['return_min']:.1f}, max {ev['return_max']:.1f})"
    )
    ups = result.get("updates_per_s")
    print(f"time         {result['wall_time_s']:.0f} s wall, {result['updates']} updates" + (f" at {ups:.0f}/s" if ups else ""))


@hydra.main(config_path=str(CONFIG_DIR), config_name="train", version_base="1.3")
def _hydra_entry(cfg: DictConfig) -> float:
    run_dir = Path(HydraConfig.get().runtime.output_dir)
    raw = OmegaConf.to_container(cfg, resolve=True)
    result = guarded(lambda: train(raw, run_dir))
    report(run_dir, result)
    return float(result["final"]["return_eval"])


def main() -> None:
    """Check the command line, then hand it to Hydra."""
    check_overrides("train", sys.argv[1:], check_run_config)
    _hydra_entry()


if __name__ == "__main__":
    main()
