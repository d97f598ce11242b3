"""The training loop: collect with the policy, update the agent, evaluate, log, checkpoint, save.

Free of Hydra and of global state beyond torch's thread and determinism switches: a run is a
config (plain data) and a folder. Every random number comes from the run's streams (agents.streams);
every file goes through the run folder's owner (agents.run_folder); checkpoints hold the whole
state, so a resumed run continues bit for bit where the checkpoint left it (agents.checkpoint).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import gymnasium as gym
import numpy as np
import torch
from omegaconf import OmegaConf

from agents.action_scale import ActionScale
from agents.checkpoint import CheckpointStore, config_difference, config_fingerprint
from agents.collector import Collector
from agents.config import RunConfig, parse_run_config
from agents.errors import DivergenceError, RunFolderError, RunStopped
from agents.log_window import LogWindow
from agents.policy_io import build_spec, save_policy
from agents.progress import Progress
from agents.replay import ReplayBuffer, check_replay_fits
from agents.rollout import q_minus_return, run_episodes, summarise
from agents.run_folder import FinalNumbers, RunFolder, RunResult, where_this_runs
from agents.run_log import RunLog
from agents.sac import SoftActorCritic
from agents.settings import resolve_target_entropy
from agents.stop import StopRequest
from agents.streams import RunStreams
from agents.writable import reason
from envs.make import make_env
from envs.task_spec import TaskSpec

_OPTIMISERS = ("actor_opt", "critic_opt", "temperature_opt")


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


def _open_task(cfg: RunConfig) -> tuple[gym.Env, tuple[float, ...]]:
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


class TrainingLoop:
    """One run's state and its loop. Everything a checkpoint holds is an attribute here.

    Args:
        cfg: The validated config.
        folder: The run's folder (claimed by this process).
        env: The training env; ``eval_env`` a second copy for evaluation and the Q-bias diagnostic.
        target: The resolved target entropy.
    """

    def __init__(self, cfg: RunConfig, folder: RunFolder, env: gym.Env, eval_env: gym.Env, target: tuple[float, ...]) -> None:
        r = cfg.run
        self.cfg, self.folder, self.env, self.eval_env = cfg, folder, env, eval_env
        self.target, self.target_total = target, sum(target)
        obs_dim, act_dim = env.observation_space.shape[0], env.action_space.shape[0]
        self.act_dim = act_dim
        self.streams = RunStreams(r.seed)
        self.generator = self.streams.training_generator()
        self.warmup_rng = self.streams.warmup_generator()
        self.agent = SoftActorCritic(obs_dim, act_dim, cfg.agent, target, self.generator)
        self.replay = ReplayBuffer(cfg.agent.replay_capacity, obs_dim, act_dim, self.generator)
        self.scale = ActionScale(env.action_space.low, env.action_space.high)
        env.action_space.seed(self.streams.action_space_seed)
        self.collector = Collector(env, self.replay, self.scale, self.streams.training_env_seed)
        self.eval_seeds = self.streams.evaluation_reset_seeds(r.eval_episodes)
        self.bias_seeds = self.streams.bias_reset_seeds(r.bias_episodes)
        self.store = CheckpointStore(folder.checkpoints_path, r.checkpoint_keep)
        self.window = LogWindow()
        self.step = 0
        self.credit = 0.0  # fractional updates owed, for updates_per_env_step below 1 or non-integer
        self.curve: list[list[float]] = []
        self.last_eval: dict[str, float] = {}
        self.last_metrics: dict[str, float] = {}
        self.wall_before = 0.0  # seconds spent by earlier attempts (a resumed run adds them up)
        self.last_checkpoint: Path | None = None

    # ----- checkpoint state ------------------------------------------------------------------------

    def _state(self) -> tuple[dict[str, torch.Tensor], dict[str, Any]]:
        tensors = {f"agent/{k}": v for k, v in self.agent.state_dict().items()}
        groups = {}
        for name in _OPTIMISERS:
            state = getattr(self.agent, name).state_dict()
            groups[name] = state["param_groups"]
            for index, moments in state["state"].items():
                for key, value in moments.items():
                    tensors[f"optim/{name}/{index}/{key}"] = torch.as_tensor(value)
        tensors["rng/training"] = self.generator.get_state()
        counters, sums = self.window.state()
        tensors["window/sums"] = sums
        episode, actions = self.collector.state()
        tensors["episode/actions"] = torch.from_numpy(actions)
        tensors["episode/observation"] = torch.as_tensor(np.asarray(self.collector.obs, dtype=np.float32))
        record = {
            "config": config_fingerprint(self.cfg.raw),
            "credit": self.credit,
            "curve": self.curve,
            "last_eval": self.last_eval,
            "last_metrics": self.last_metrics,
            "window": counters,
            "optimiser_groups": groups,
            "warmup_rng": self.warmup_rng.bit_generator.state,
            "episode": episode,
            "wall_time_s": self.wall_before + (time.perf_counter() - self.started),
            "env_step_time_s": self.collector.env_step_time,
        }
        return tensors, record

    def _restore(self, tensors: dict[str, torch.Tensor], record: dict[str, Any]) -> None:
        self.agent.load_state_dict({k[len("agent/"):]: v for k, v in tensors.items() if k.startswith("agent/")})
        for name in _OPTIMISERS:
            prefix = f"optim/{name}/"
            state: dict[int, dict[str, torch.Tensor]] = {}
            for key, value in tensors.items():
                if key.startswith(prefix):
                    index, moment = key[len(prefix):].split("/")
                    state.setdefault(int(index), {})[moment] = value
            getattr(self.agent, name).load_state_dict({"state": state, "param_groups": record["optimiser_groups"][name]})
        self.generator.set_state(tensors["rng/training"])
        self.window.restore(record["window"], tensors["window/sums"])
        self.warmup_rng.bit_generator.state = record["warmup_rng"]
        self.collector.restore(record["episode"], tensors["episode/actions"].numpy(), tensors["episode/observation"].numpy())
        self.step, self.credit = int(record["step"]), float(record["credit"])
        self.curve, self.last_eval, self.last_metrics = record["curve"], record["last_eval"], record["last_metrics"]
        self.wall_before = float(record["wall_time_s"])
        self.collector.env_step_time = float(record.get("env_step_time_s", 0.0))

    def resume_from(self, checkpoint: Path) -> None:
        """Continue from ``checkpoint`` (its replay rows, weights, streams and counters).

        Raises:
            CheckpointError: If it cannot be read or was written by another config.
        """
        from agents.errors import CheckpointError

        tensors, record = self.store.load(checkpoint, self.replay, self.cfg.raw)
        try:
            self._restore(tensors, record)
        except (KeyError, ValueError, RuntimeError, TypeError) as err:
            raise CheckpointError(f"{checkpoint} does not match this run's networks or state ({err}): pass resume=false") from None
        self.last_checkpoint = checkpoint

    def _checkpoint(self) -> None:
        self._check_weights()
        tensors, record = self._state()
        self.last_checkpoint = self.store.write(self.step, tensors, record, self.replay)

    def _check_weights(self) -> None:
        for name, value in self.agent.state_dict().items():
            if value.is_floating_point() and not bool(torch.isfinite(value).all()):
                raise DivergenceError(f"weight {name}", float(value[~torch.isfinite(value)][0]), f"at env step {self.step}")

    # ----- the loop --------------------------------------------------------------------------------

    def _evaluate(self, log: RunLog, progress: Progress) -> None:
        r, step = self.cfg.run, self.step
        generator = self.streams.evaluation_generator()
        deterministic = r.eval_deterministic
        episodes = run_episodes(
            self.eval_env, lambda o: self.scale.to_env(self.agent.act(o, deterministic, generator)), self.eval_seeds
        )
        self.last_eval = summarise(episodes)
        self.curve.append([step, self.last_eval["return_mean"]])
        log.scalars({"return/eval": self.last_eval["return_mean"], "return/eval_std": self.last_eval["return_std"]}, step)
        if r.bias_episodes and self.window.total_updates:
            bias = q_minus_return(self.agent, self.eval_env, self.scale, self.bias_seeds, generator)
            log.scalars({"bias/q_minus_return": bias}, step)
        progress.set_eval(step, self.last_eval["return_mean"])

    def _one_step(self, log: RunLog, progress: Progress) -> None:
        r, step = self.cfg.run, self.step
        if step <= r.warmup_steps:
            action = self.warmup_rng.uniform(-1.0, 1.0, self.act_dim).astype(np.float32)
        else:
            action = self.agent.act(self.collector.obs, deterministic=False)
        ended = self.collector.step(action, step)
        self.window.add_step()
        if ended is not None:
            log.scalars({"return/train": ended.return_, "length/train": ended.length}, step)
            progress.set_train(step, ended.return_)

        if step > r.warmup_steps and len(self.replay) >= self.cfg.agent.batch_size:
            self.credit += r.updates_per_env_step
            t0 = time.perf_counter()
            while self.credit >= 1.0:
                self.window.add_update(self.agent.update(self.replay.sample(self.cfg.agent.batch_size)), step)
                self.credit -= 1.0
            self.window.add_update_time(time.perf_counter() - t0)

        if step % r.log_every == 0 or step == r.steps:
            speed, means = self.window.close()
            log.scalars(speed, step)
            if means is not None:
                self.last_metrics = means
                log.scalars({**means, "temperature/target_entropy": self.target_total}, step)
            progress.set_window(
                step, speed["speed/env_steps_per_s"], speed.get("speed/updates_per_s"),
                None if means is None else means["temperature/value"],
            )  # fmt: skip
            self._check_weights()

        if step % r.eval_every == 0 or step == r.steps:
            self._evaluate(log, progress)
        if step % r.checkpoint_every == 0 or step == r.steps:
            self._checkpoint()
        progress.advance(step)

    def run(self, stop: StopRequest) -> RunResult:
        """Train from the current step to the configured number of steps and save the policy.

        Raises:
            RunStopped: If ``stop`` was requested; a checkpoint of the last whole step was written.
            DivergenceError: If training diverged; nothing is saved from the bad state.
        """
        r, cfg = self.cfg.run, self.cfg
        resumed_at = self.step if self.last_checkpoint is not None else None
        self.started = time.perf_counter()
        log = RunLog(self.folder.path, resume_after=resumed_at)
        if resumed_at is None:
            log.hyperparameters(_hyperparameters(cfg, self.target_total))
            # Logged before the first update so that even a run stopped during warm-up can be grouped by target.
            log.scalars({"temperature/target_entropy": self.target_total}, 0)
        progress = Progress(r.steps, r.progress, r.log_every)
        progress.advance(self.step)
        try:
            while self.step < r.steps:
                self.step += 1
                self._one_step(log, progress)
                if stop.requested:
                    if self.step % r.checkpoint_every and self.step != r.steps:
                        self._checkpoint()
                    stop.pass_on()  # a scheduler's own handler (requeue) runs after the checkpoint
                    raise RunStopped(
                        f"{stop.reason} at env step {self.step} of {r.steps}; checkpoint written to "
                        f"{self.last_checkpoint}; run the same command again to resume",
                        stop.exit_code,
                        orphaned=stop.reason == "parent gone",
                    )
            self._check_weights()
            env_record = TaskSpec(cfg.env.id, cfg.env.kwargs, self.eval_env.spec.max_episode_steps).to_record()
            spec = build_spec(self.agent.actor, self.env.observation_space, self.env.action_space, env_record, cfg.raw)
            save_policy(self.folder.policy_path, self.agent.actor, spec)
        except DivergenceError as err:
            err.last_checkpoint = None if self.last_checkpoint is None else str(self.last_checkpoint)
            raise
        finally:
            progress.close()
            log.flush()
        return self._finish(log)

    def _finish(self, log: RunLog) -> RunResult:
        r, cfg, window = self.cfg.run, self.cfg, self.window
        final = FinalNumbers(
            return_eval=self.last_eval["return_mean"],
            return_eval_std=self.last_eval["return_std"],
            entropy=_finite_or_none(self.last_metrics.get("actor/entropy_nats")),
            alpha=_finite_or_none(self.last_metrics.get("temperature/value", float(self.agent.temperature.alpha().mean()))),
        )
        nan = float("nan")
        wall = self.wall_before + (time.perf_counter() - self.started)
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
            target_entropy=self.target_total,
            target_entropy_groups=list(self.target),
            temperature_mode=cfg.agent.temperature.mode,
            final=final,
            evaluation=self.last_eval,
            evaluation_seeds=self.eval_seeds,
            eval_deterministic=r.eval_deterministic,
            eval_curve=self.curve,
            updates=window.total_updates,
            updates_per_s=window.total_updates / window.total_update_time if window.total_update_time else None,
            wall_time_s=wall,
            ran_on=where_this_runs(),
            time_split_s={"env_step": self.collector.env_step_time, "update": window.total_update_time, "loop": wall},
            population=1,
        )
        self.folder.write_result(result)
        return result


def _check_finished_config(folder: RunFolder, raw: Mapping[str, Any]) -> None:
    saved = folder.saved_config()
    if saved is not None and config_fingerprint(saved) != config_fingerprint(raw):
        raise RunFolderError(
            f"{folder.path} already holds a finished run with another config "
            f"({config_difference(config_fingerprint(saved), config_fingerprint(raw))}); it is left as it is: "
            "launch into another folder to train this config"
        )


def _write_failure(err: OSError, folder: RunFolder, checkpoint: Path | None) -> RunFolderError:
    """One line for a file the run could not write (disk full, file-size limit, permissions)."""
    where = err.filename or folder.path
    kept = f"resume from {checkpoint} by running the same command again" if checkpoint else "run the command again"
    return RunFolderError(f"cannot write {where} ({reason(err)}): free some space or raise the limit, then {kept}")


def train(raw_config: Mapping[str, Any], run_dir: Path, stop: StopRequest | None = None) -> RunResult:
    """Run one training run into ``run_dir`` and return its result (also saved as ``result.json``).

    A folder that already holds ``result.json`` is a finished run: it is left as it is and its
    result returned (flagged ``skipped``), so a re-launched sweep skips what it already did. A folder
    holding an unfinished run with a complete checkpoint is continued from its newest checkpoint
    (unless ``resume: false``, which sets the earlier attempt aside and starts over).

    Args:
        raw_config: The resolved run config as plain data (see ``configs/train.yaml``).
        run_dir: The run's folder; created if missing.
        stop: Where stop requests come from; by default SIGINT, SIGTERM and the parent's exit.

    Raises:
        ConfigError: If the config is invalid.
        TaskError: If the task cannot be created or driven by Kiln.
        RunFolderError: If another process works in the folder, or it holds a finished run of
            another config.
        CheckpointError: If the checkpoint to resume cannot be read or belongs to another config.
        RunStopped: If stopped by a signal (after writing a checkpoint).
        DivergenceError: If training diverged.
    """
    # One plain, resolved copy of the config: what is checked is what is saved beside the run.
    cfg = parse_run_config(OmegaConf.to_container(OmegaConf.create(dict(raw_config)), resolve=True))
    folder = RunFolder(run_dir)
    folder.claim()
    try:
        if folder.is_finished():
            _check_finished_config(folder, cfg.raw)
            return folder.read_result()
        r = cfg.run
        torch.set_num_threads(r.threads)
        if r.deterministic:
            torch.use_deterministic_algorithms(True)
        env, target = _open_task(cfg)
        eval_env = None
        try:
            eval_env = make_env(cfg.env.task)
            loop = TrainingLoop(cfg, folder, env, eval_env, target)
            latest = loop.store.latest() if r.resume else None
            if latest is not None:
                loop.resume_from(latest)  # checks the config before anything on disk changes
            else:
                folder.prepare(cfg.raw)
            with stop or StopRequest() as request:
                try:
                    return loop.run(request)
                except OSError as err:
                    raise _write_failure(err, folder, loop.last_checkpoint) from None
        finally:
            env.close()
            if eval_env is not None:
                eval_env.close()
    finally:
        folder.release()
