"""The training loop: collect with the policy, update the agent, evaluate, log, save.

Free of Hydra and of global state beyond torch's thread and determinism switches: a run is a
config (plain data) and a folder. Every random number comes from the run's streams (agents.streams);
every file goes through the run folder's owner (agents.run_folder).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import torch
from omegaconf import OmegaConf

from agents.action_scale import ActionScale
from agents.collector import Collector
from agents.config import RunConfig, parse_run_config
from agents.log_window import LogWindow
from agents.policy_io import build_spec, save_policy
from agents.progress import Progress
from agents.replay import ReplayBuffer, check_replay_fits
from agents.rollout import q_minus_return, run_episodes, summarise
from agents.run_folder import FinalNumbers, RunFolder, RunResult
from agents.run_log import RunLog
from agents.sac import SoftActorCritic
from agents.settings import resolve_target_entropy
from agents.streams import RunStreams
from envs.make import make_env
from envs.task_spec import TaskSpec


def _hyperparameters(cfg: RunConfig, target_total: float) -> dict[str, float | int | str | bool]:
    """The run's record in TensorBoard's hyper-parameter view, under the config's own key names."""
    a = cfg.agent
    return {
        "env.id": cfg.env.id,
        "seed": cfg.run.seed,
        "agent.temperature.target_entropy": target_total,
        "agent.temperature.mode": a.temperature.mode,
        "agent.temperature.start": a.temperature.start,
        "steps": cfg.run.steps,
        "agent.layer_widths": "x".join(str(h) for h in a.layer_widths),
        "agent.batch_size": a.batch_size,
        "agent.discount": a.discount,
        "agent.critic.lr": a.critic.lr,
        "agent.actor.lr": a.actor.lr,
        "agent.critic.count": a.critic.count,
        "collect.updates_per_env_step": cfg.run.updates_per_env_step,
    }


def _finite_or_none(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def _open_task(cfg: RunConfig) -> tuple[Any, tuple[float, ...]]:
    """The training env and the resolved target entropy; the replay's memory checked against the machine."""
    env = make_env(cfg.env.task)
    try:
        obs_dim, act_dim = env.observation_space.shape[0], env.action_space.shape[0]
        check_replay_fits(cfg.agent.replay_capacity, obs_dim, act_dim)
        # Resolved once, here, where the action size is known; everything below receives the tuple.
        return env, resolve_target_entropy(cfg.agent.temperature.target_entropy, act_dim)
    except BaseException:
        env.close()
        raise


def check_run(raw_config: Mapping[str, Any]) -> None:
    """Everything that can be checked before a run folder exists: values, task id, spaces, memory.

    Raises:
        ConfigError: If the config is invalid.
        TaskError: If the task cannot be created or driven by Kiln.
    """
    env, _ = _open_task(parse_run_config(raw_config))
    env.close()


def train(raw_config: Mapping[str, Any], run_dir: Path) -> RunResult:
    """Run one training run into ``run_dir`` and return its result (also saved as ``result.json``).

    A folder that already holds ``result.json`` is a finished run: it is left as it is and its
    result returned (flagged ``skipped``), so a re-launched sweep skips what it already did.

    Args:
        raw_config: The resolved run config as plain data (see ``configs/train.yaml``).
        run_dir: The run's folder; created if missing.

    Raises:
        ConfigError: If the config is invalid.
        TaskError: If the task cannot be created or driven by Kiln.
    """
    # One plain, resolved copy of the config: what is checked is what is saved beside the run.
    cfg = parse_run_config(OmegaConf.to_container(OmegaConf.create(dict(raw_config)), resolve=True))
    folder = RunFolder(run_dir)
    if folder.is_finished():
        return folder.read_result()
    r = cfg.run
    torch.set_num_threads(r.threads)
    if r.deterministic:
        torch.use_deterministic_algorithms(True)

    env, target = _open_task(cfg)
    eval_env = make_env(cfg.env.task)
    obs_dim, act_dim = env.observation_space.shape[0], env.action_space.shape[0]
    target_total = sum(target)
    folder.prepare(cfg.raw)

    streams = RunStreams(r.seed)
    generator = streams.training_generator()
    warmup_rng = streams.warmup_generator()
    agent = SoftActorCritic(obs_dim, act_dim, cfg.agent, target, generator)
    replay = ReplayBuffer(cfg.agent.replay_capacity, obs_dim, act_dim, generator)
    scale = ActionScale(env.action_space.low, env.action_space.high)
    log = RunLog(folder.path)
    log.hyperparameters(_hyperparameters(cfg, target_total))
    # Logged before the first update so that even a run stopped during warm-up can be grouped by target.
    log.scalars({"temperature/target_entropy": target_total}, 0)
    progress = Progress(r.steps, r.progress, r.log_every)
    eval_seeds = streams.evaluation_reset_seeds(r.eval_episodes)
    bias_seeds = streams.bias_reset_seeds(r.bias_episodes)
    eval_mode = r.eval_deterministic

    started = time.perf_counter()
    window = LogWindow()
    last_metrics: dict[str, float] = {}
    curve: list[list[float]] = []
    last_eval: dict[str, float] = {}
    credit = 0.0  # fractional updates owed, for updates_per_env_step below 1 or non-integer

    def evaluate(step: int) -> None:
        nonlocal last_eval
        eval_generator = streams.evaluation_generator()
        episodes = run_episodes(eval_env, lambda o: scale.to_env(agent.act(o, eval_mode, eval_generator)), eval_seeds)
        last_eval = summarise(episodes)
        curve.append([step, last_eval["return_mean"]])
        log.scalars({"return/eval": last_eval["return_mean"], "return/eval_std": last_eval["return_std"]}, step)
        if r.bias_episodes and window.total_updates:
            bias = q_minus_return(agent, eval_env, scale, bias_seeds, eval_generator)
            log.scalars({"bias/q_minus_return": bias}, step)
        progress.set_eval(step, last_eval["return_mean"])

    collector = Collector(env, replay, scale, streams.training_env_seed)
    try:
        for step in range(1, r.steps + 1):
            if step <= r.warmup_steps:
                action = warmup_rng.uniform(-1.0, 1.0, act_dim).astype("float32")
            else:
                action = agent.act(collector.obs, deterministic=False)
            ended = collector.step(action)
            window.add_step()
            if ended is not None:
                log.scalars({"return/train": ended.return_, "length/train": ended.length}, step)
                progress.set_train(step, ended.return_)

            if step > r.warmup_steps and len(replay) >= cfg.agent.batch_size:
                credit += r.updates_per_env_step
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
                    log.scalars({**means, "temperature/target_entropy": target_total}, step)
                progress.set_window(
                    step, speed["speed/env_steps_per_s"], speed.get("speed/updates_per_s"),
                    None if means is None else means["temperature/value"],
                )  # fmt: skip

            if step % r.eval_every == 0 or step == r.steps:
                evaluate(step)
            progress.advance(step)

        wall = time.perf_counter() - started
        env_record = TaskSpec(cfg.env.id, cfg.env.kwargs, eval_env.spec.max_episode_steps).to_record()
        spec = build_spec(agent.actor, env.observation_space, env.action_space, env_record, cfg.raw)
        save_policy(folder.policy_path, agent.actor, spec)
    finally:
        progress.close()
        env.close()
        eval_env.close()

    final = FinalNumbers(
        return_eval=last_eval["return_mean"],
        return_eval_std=last_eval["return_std"],
        entropy=_finite_or_none(last_metrics.get("actor/entropy_nats")),
        alpha=_finite_or_none(last_metrics.get("temperature/value", float(agent.temperature.alpha().mean()))),
    )
    nan = float("nan")
    log.scalars(
        {
            "final/return_eval": final.return_eval,
            "final/entropy": nan if final.entropy is None else final.entropy,
            "final/alpha": nan if final.alpha is None else final.alpha,
        },
        r.steps,
    )
    log.close()
    result = RunResult(
        env_id=cfg.env.id,
        env_name=cfg.env.name,
        seed=r.seed,
        steps=r.steps,
        target_entropy=target_total,
        target_entropy_groups=list(target),
        temperature_mode=cfg.agent.temperature.mode,
        final=final,
        evaluation=last_eval,
        evaluation_seeds=eval_seeds,
        eval_deterministic=eval_mode,
        eval_curve=curve,
        updates=window.total_updates,
        updates_per_s=window.total_updates / window.total_update_time if window.total_update_time else None,
        wall_time_s=wall,
    )
    folder.write_result(result)
    return result
