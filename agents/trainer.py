"""The training loop: collect with the policy, update the agent, evaluate, log, save.

Free of Hydra and of global state beyond torch's thread and determinism switches: a run is a
config (plain data) and a folder. Every random number comes from the run's own generators.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import torch
from omegaconf import OmegaConf

from agents.action_scale import ActionScale
from agents.collector import Collector
from agents.config import RunConfig, parse_run_config
from agents.log_window import LogWindow
from agents.policy_io import build_spec, save_policy
from agents.progress import Progress
from agents.replay import ReplayBuffer
from agents.rollout import evaluation_seeds, q_minus_return, run_episodes, summarise
from agents.run_log import RunLog
from agents.sac import SoftActorCritic
from agents.settings import resolve_target_entropy
from envs.make import make_env

RESULT = "result.json"
CONFIG = "config.yaml"
POLICY = "policy"


def _write_json_atomic(path: Path, data: Mapping[str, Any]) -> None:
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(json.dumps(data, indent=2, allow_nan=False))
    os.replace(tmp, path)


def _set_aside_unfinished(run_dir: Path) -> None:
    """Move what an interrupted earlier attempt left in ``run_dir`` into ``unfinished-<n>/``.

    Nothing already written is deleted; the new attempt starts from a clean folder.
    """
    leftovers = [p for p in run_dir.iterdir() if p.name.startswith("events.out.tfevents") or p.name in (POLICY, CONFIG)]
    if not leftovers:
        return
    n = 1
    while (run_dir / f"unfinished-{n}").exists():
        n += 1
    dest = run_dir / f"unfinished-{n}"
    dest.mkdir()
    for p in leftovers:
        shutil.move(str(p), dest / p.name)


def _hyperparameters(cfg: RunConfig, target: tuple[float, ...]) -> dict[str, float | int | str | bool]:
    a = cfg.agent
    return {
        "env": cfg.env.id,
        "seed": cfg.run.seed,
        "target_entropy": target[0] if len(target) == 1 else sum(target),
        "target_entropy_spec": str(a.temperature.target_entropy),
        "temperature": "tuned" if a.temperature.tune else "fixed",
        "alpha_initial": a.temperature.initial,
        "steps": cfg.run.steps,
        "hidden_sizes": "x".join(str(h) for h in a.hidden_sizes),
        "batch_size": a.batch_size,
        "discount": a.discount,
        "critic_lr": a.critic_lr,
        "actor_lr": a.actor_lr,
        "updates_per_step": cfg.run.updates_per_step,
        "critics": a.critics,
    }


def _finite_or_none(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def train(raw_config: Mapping[str, Any], run_dir: Path) -> dict[str, Any]:
    """Run one training run into ``run_dir`` and return its result (also saved as ``result.json``).

    A folder that already holds ``result.json`` is a finished run: it is left as it is and its
    result returned, so a re-launched sweep skips what it already did.

    Args:
        raw_config: The resolved run config as plain data (see ``configs/train.yaml``).
        run_dir: The run's folder; created if missing.

    Raises:
        ConfigError: If the config is invalid or the task cannot be driven by Kiln.
    """
    # One plain, resolved copy of the config: what is checked is what is saved beside the run.
    cfg = parse_run_config(OmegaConf.to_container(OmegaConf.create(dict(raw_config)), resolve=True))
    run_dir = Path(run_dir)
    run_dir.mkdir(parents=True, exist_ok=True)
    if (run_dir / RESULT).exists():
        result = json.loads((run_dir / RESULT).read_text())
        result["skipped"] = True
        return result
    r = cfg.run
    torch.set_num_threads(r.threads)
    if r.deterministic:
        torch.use_deterministic_algorithms(True)

    env_args = (cfg.env.id, cfg.env.kwargs, cfg.env.max_episode_steps)
    env, eval_env = make_env(*env_args), make_env(*env_args)
    obs_dim, act_dim = env.observation_space.shape[0], env.action_space.shape[0]
    target = resolve_target_entropy(cfg.agent.temperature.target_entropy, act_dim)
    _set_aside_unfinished(run_dir)
    OmegaConf.save(OmegaConf.create(cfg.raw), run_dir / CONFIG)

    generator = torch.Generator().manual_seed(r.seed)
    # Evaluation and diagnostics sample from their own stream: evaluating more or less often must
    # not change the training trajectory of a seed.
    eval_generator = torch.Generator().manual_seed(r.seed + 1_000_003)
    warmup_rng = np.random.default_rng(r.seed)
    agent = SoftActorCritic(obs_dim, act_dim, cfg.agent, generator)
    replay = ReplayBuffer(cfg.agent.replay_capacity, obs_dim, act_dim, generator)
    scale = ActionScale(env.action_space.low, env.action_space.high)
    log = RunLog(run_dir)
    log.hyperparameters(_hyperparameters(cfg, target))
    # Logged before the first update so that even a run stopped during warm-up can be grouped by target.
    log.scalars({"temperature/target_entropy": sum(target)}, 0)
    progress = Progress(r.steps, r.progress)
    eval_seeds = evaluation_seeds(r.seed, r.eval_episodes)
    bias_seeds = evaluation_seeds(r.seed + 7919, r.bias_episodes)  # disjoint from eval_seeds
    eval_mode = r.eval_deterministic

    started = time.perf_counter()
    window = LogWindow()
    last_metrics: dict[str, float] = {}
    curve: list[list[float]] = []
    last_eval: dict[str, float] = {}
    credit = 0.0  # fractional updates owed, for updates_per_step below 1 or non-integer

    def evaluate(step: int) -> None:
        nonlocal last_eval
        episodes = run_episodes(eval_env, lambda o: scale.to_env(agent.act(o, eval_mode, eval_generator)), eval_seeds)
        last_eval = summarise(episodes)
        curve.append([step, last_eval["return_mean"]])
        log.scalars({"return/eval": last_eval["return_mean"], "return/eval_std": last_eval["return_std"]}, step)
        if r.bias_episodes and window.total_updates:
            bias = q_minus_return(agent, eval_env, scale, bias_seeds, eval_generator)
            log.scalars({"bias/q_minus_return": bias}, step)
        progress.set({"eval": last_eval["return_mean"]})

    collector = Collector(env, replay, scale, r.seed)
    try:
        for step in range(1, r.steps + 1):
            if step <= r.warmup_steps:
                action = warmup_rng.uniform(-1.0, 1.0, act_dim).astype(np.float32)
            else:
                action = agent.act(collector.obs, deterministic=False)
            ended = collector.step(action)
            window.add_step()
            if ended is not None:
                log.scalars({"return/train": ended.ret, "length/train": ended.length}, step)
                progress.set({"train": ended.ret})

            if step > r.warmup_steps and len(replay) >= cfg.agent.batch_size:
                credit += r.updates_per_step
                t0 = time.perf_counter()
                while credit >= 1.0:
                    window.add_update(agent.update(replay.sample(cfg.agent.batch_size)))
                    credit -= 1.0
                window.add_update_time(time.perf_counter() - t0)

            if step % r.log_every == 0 or step == r.steps:
                speed, means = window.close()
                log.scalars(speed, step)
                if means is not None:
                    last_metrics = means
                    log.scalars({**means, "temperature/target_entropy": sum(target)}, step)
                    progress.set({"alpha": means["temperature/alpha"]})
                progress.set({"env/s": speed["speed/env_steps_per_s"], "upd/s": speed.get("speed/updates_per_s")})

            if step % r.eval_every == 0 or step == r.steps:
                evaluate(step)
                progress.advance(step)
                progress.line()
            elif step % 100 == 0:
                progress.advance(step)

        wall = time.perf_counter() - started
        env_record = {"id": cfg.env.id, "kwargs": cfg.env.kwargs, "max_episode_steps": eval_env.spec.max_episode_steps}
        spec = build_spec(agent.actor, env.observation_space, env.action_space, env_record, cfg.raw)
        save_policy(run_dir / POLICY, agent.actor, spec)
    finally:
        progress.close()
        env.close()
        eval_env.close()

    final = {
        "return_eval": last_eval["return_mean"],
        "return_eval_std": last_eval["return_std"],
        "entropy": _finite_or_none(last_metrics.get("actor/entropy")),
        "alpha": _finite_or_none(last_metrics.get("temperature/alpha", float(agent.temperature.alpha().mean()))),
    }
    nan = float("nan")
    log.scalars({f"final/{k}": nan if final[k] is None else final[k] for k in ("return_eval", "entropy", "alpha")}, r.steps)
    log.close()
    result = {
        "env_id": cfg.env.id,
        "env_name": cfg.env.name,
        "seed": r.seed,
        "steps": r.steps,
        "target_entropy": sum(target),
        "target_entropy_per_group": list(target),
        "temperature_tuned": cfg.agent.temperature.tune,
        "final": final,
        "evaluation": last_eval,
        "eval_deterministic": eval_mode,
        "eval_curve": curve,
        "updates": window.total_updates,
        "updates_per_s": window.total_updates / window.total_update_time if window.total_update_time else None,
        "wall_time_s": wall,
        "policy": POLICY,
    }
    _write_json_atomic(run_dir / RESULT, result)
    return result
