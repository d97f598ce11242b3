"""The training loop: collect with the policy, update the agent, evaluate, log, checkpoint, save.

Free of Hydra and of global state beyond torch's thread and determinism switches: a run is a
config (plain data) and a folder. Every random number comes from the run's streams (kiln.config.streams);
every file goes through the run folder's owner (kiln.storage.run_folder); checkpoints hold the whole
state, so a resumed run continues bit for bit where the checkpoint left it (kiln.training.checkpoint).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from contextlib import ExitStack
from pathlib import Path
from typing import Any

import gymnasium as gym
import numpy as np
import torch
from omegaconf import OmegaConf

from kiln.config.agent_settings import resolve_target_entropy
from kiln.config.run_config import RunConfig, parse_run_config
from kiln.config.streams import RunStreams
from kiln.envs.make import make_env
from kiln.envs.task_spec import TaskSpec
from kiln.errors import DivergenceError, RunFolderError, RunStopped
from kiln.evaluation.rollout import q_minus_return, run_episodes, summarise
from kiln.learner.action_scale import ActionScale
from kiln.learner.sac import MemberSetup, SoftActorCritic
from kiln.storage.policy_io import build_spec, save_policy
from kiln.storage.run_folder import FinalNumbers, RunFolder, RunResult, where_this_runs
from kiln.storage.writable import reason
from kiln.training.checkpoint import CheckpointStore, config_difference, config_fingerprint
from kiln.training.collector import Collector
from kiln.training.log_window import LogWindow
from kiln.training.process_state import torch_settings
from kiln.training.progress import Progress
from kiln.training.replay import PopulationReplay, check_replay_fits
from kiln.training.run_log import RunLog
from kiln.training.stop import StopRequest

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


def _open_task(cfg: RunConfig, agents: int = 1) -> tuple[gym.Env, tuple[float, ...]]:
    """The training env and the resolved target entropy; the replay's memory checked against the machine."""
    env = make_env(cfg.env.task)
    try:
        obs_dim, act_dim = env.observation_space.shape[0], env.action_space.shape[0]
        check_replay_fits(cfg.agent.replay_capacity, obs_dim, act_dim, agents)
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


class Member:
    """One run inside the loop: its config, folder, tasks, random streams and records.

    A single run is the only member of its loop; the members of a population share the agent's
    tensors (one row each) and the step counter, and nothing else.

    Args:
        cfg: The run's validated config.
        folder: Its folder (claimed by this process).
        env: Its training env; ``eval_envs`` one more copy per evaluation episode (the episodes run
            side by side; so do the Q-bias diagnostic's, on the first copies).
        target: Its resolved target entropy.
        index: Its place in the population (0 for a single run).
    """

    def __init__(
        self, cfg: RunConfig, folder: RunFolder, env: gym.Env, eval_envs: list[gym.Env], target: tuple[float, ...], index: int
    ) -> None:
        r = cfg.run
        self.cfg, self.folder, self.env, self.eval_envs, self.index = cfg, folder, env, eval_envs, index
        self.target, self.target_total = target, sum(target)
        self.streams = RunStreams(r.seed)
        self.generator = self.streams.training_generator()
        self.warmup_rng = self.streams.warmup_generator()
        self.scale = ActionScale(env.action_space.low, env.action_space.high)
        self.eval_seeds = self.streams.evaluation_reset_seeds(r.eval_episodes)
        self.bias_seeds = self.streams.bias_reset_seeds(r.bias_episodes)
        self.store = CheckpointStore(folder.checkpoints_path, r.checkpoint_keep)
        self.curve: list[list[float]] = []
        self.last_eval: dict[str, float] = {}
        self.last_metrics: dict[str, float] = {}
        self.wall_before = 0.0  # seconds spent by earlier attempts (a resumed run adds them up)
        self.last_checkpoint: Path | None = None
        self.failed: DivergenceError | None = None
        self.log: RunLog | None = None
        self.collector: Collector | None = None  # made once the replay rows exist

    def setup(self) -> MemberSetup:
        """What the agent needs to know of this run."""
        t = self.cfg.agent.temperature
        return MemberSetup(self.target, self.generator, t.start, t.tuned)


class TrainingLoop:
    """The loop of one run, or of a population of runs stepping together. Everything a checkpoint
    holds is an attribute here or of a :class:`Member`.

    Args:
        members: The runs, which differ at most in the keys of :data:`kiln.training.population.MEMBER_KEYS`.
    """

    def __init__(self, members: list[Member]) -> None:
        self.members = members
        first = members[0]
        self.cfg = first.cfg  # every key that is read from it here is shared by all members
        obs_dim, act_dim = first.env.observation_space.shape[0], first.env.action_space.shape[0]
        self.act_dim = act_dim
        self.agent = SoftActorCritic(obs_dim, act_dim, self.cfg.agent, [m.setup() for m in members])
        self.replay = PopulationReplay(self.cfg.agent.replay_capacity, obs_dim, act_dim, [m.generator for m in members])
        for m, buffer in zip(members, self.replay.buffers):
            m.env.action_space.seed(m.streams.action_space_seed)
            m.collector = Collector(m.env, buffer, m.scale, m.streams.training_env_seed)
        self.window = LogWindow(len(members))
        self.step = 0
        self.credit = 0.0  # fractional updates owed, for updates_per_env_step below 1 or non-integer
        self.started = time.perf_counter()

    def _active(self) -> list[Member]:
        return [m for m in self.members if m.failed is None]

    # ----- checkpoint state ------------------------------------------------------------------------

    def _state(self, m: Member) -> tuple[dict[str, torch.Tensor], dict[str, Any]]:
        """Member ``m``'s checkpoint: exactly what a single run of its config would write."""
        i = m.index
        tensors = {f"agent/{k}": v for k, v in self.agent.member_state(i).items()}
        groups = {}
        for name in _OPTIMISERS:
            state = getattr(self.agent, name).state_dict()
            groups[name] = state["param_groups"]
            for index, moments in state["state"].items():
                for key, value in moments.items():
                    value = torch.as_tensor(value)
                    # Adam's step count is one number for all members; the moments have one row per member.
                    tensors[f"optim/{name}/{index}/{key}"] = value if value.dim() == 0 else value[self.agent.rows(value, i)]
        tensors["rng/training"] = m.generator.get_state()
        counters, sums = self.window.state()
        tensors["window/sums"] = sums[i:i + 1].clone()
        episode, actions = m.collector.state()
        tensors["episode/actions"] = torch.from_numpy(actions)
        tensors["episode/observation"] = torch.as_tensor(np.asarray(m.collector.obs, dtype=np.float32))
        record = {
            "config": config_fingerprint(m.cfg.raw),
            "credit": self.credit,
            "curve": m.curve,
            "last_eval": m.last_eval,
            "last_metrics": m.last_metrics,
            "window": counters,
            "optimiser_groups": groups,
            "warmup_rng": m.warmup_rng.bit_generator.state,
            "episode": episode,
            "wall_time_s": m.wall_before + (time.perf_counter() - self.started),
            "env_step_time_s": m.collector.env_step_time,
            "population": len(self.members),
        }
        return tensors, record

    def _restore(self, saved: list[tuple[dict[str, torch.Tensor], dict[str, Any]]]) -> None:
        """Put every member's checkpoint (all of the same step) back, in member order."""
        for m, (tensors, record) in zip(self.members, saved):
            self.agent.load_member_state(m.index, {k[len("agent/"):]: v for k, v in tensors.items() if k.startswith("agent/")})
            m.generator.set_state(tensors["rng/training"])
            m.warmup_rng.bit_generator.state = record["warmup_rng"]
            m.collector.restore(record["episode"], tensors["episode/actions"].numpy(), tensors["episode/observation"].numpy())
            m.curve, m.last_eval, m.last_metrics = record["curve"], record["last_eval"], record["last_metrics"]
            m.wall_before = float(record["wall_time_s"])
            m.collector.env_step_time = float(record.get("env_step_time_s", 0.0))
        first_tensors, first = saved[0]
        for name in _OPTIMISERS:
            prefix = f"optim/{name}/"
            rows: dict[int, dict[str, list[torch.Tensor]]] = {}
            for tensors, _ in saved:
                for key, value in tensors.items():
                    if key.startswith(prefix):
                        index, moment = key[len(prefix):].split("/")
                        rows.setdefault(int(index), {}).setdefault(moment, []).append(value)
            state = {
                index: {moment: parts[0] if parts[0].dim() == 0 else torch.cat(parts) for moment, parts in moments.items()}
                for index, moments in rows.items()
            }
            getattr(self.agent, name).load_state_dict({"state": state, "param_groups": first["optimiser_groups"][name]})
        self.window.restore(first["window"], torch.cat([t["window/sums"] for t, _ in saved]))
        self.step, self.credit = int(first["step"]), float(first["credit"])

    def resume_from(self, checkpoints: list[Path]) -> None:
        """Continue from one checkpoint per member, all of the same step (replay rows, weights, streams, counters).

        Raises:
            CheckpointError: If one cannot be read or was written by another config.
        """
        from kiln.errors import CheckpointError

        saved = [m.store.load(c, m.collector.replay, m.cfg.raw) for m, c in zip(self.members, checkpoints)]
        try:
            self._restore(saved)
        except (KeyError, ValueError, RuntimeError, TypeError) as err:
            raise CheckpointError(
                f"{checkpoints[0]} does not match this run's networks or state ({err}): pass resume=false"
            ) from None
        for m, c in zip(self.members, checkpoints):
            m.last_checkpoint = c

    def _checkpoint(self) -> None:
        self._check_weights()
        for m in self._active():
            tensors, record = self._state(m)
            m.last_checkpoint = m.store.write(self.step, tensors, record, m.collector.replay)

    def _fail(self, m: Member, err: DivergenceError) -> None:
        """Stop member ``m`` (the others go on): nothing more is saved from its state."""
        err.member = m.index
        err.last_checkpoint = None if m.last_checkpoint is None else str(m.last_checkpoint)
        m.failed = err
        if m.log is not None:
            m.log.close()

    def _check_weights(self) -> None:
        population = len(self.members)
        for name, value in self.agent.state_dict().items():
            if not value.is_floating_point():
                continue
            finite = torch.isfinite(value).view(population, -1).all(dim=1)
            if bool(finite.all()):
                continue
            for m in self._active():
                if not bool(finite[m.index]):
                    rows = value[self.agent.rows(value, m.index)]
                    self._fail(m, DivergenceError(f"weight {name}", float(rows[~torch.isfinite(rows)][0]), f"at env step {self.step}"))

    # ----- the loop --------------------------------------------------------------------------------

    def _evaluate(self, m: Member) -> float:
        r, step = self.cfg.run, self.step
        generator = m.streams.evaluation_generator()
        deterministic = r.eval_deterministic
        # A one-agent copy: exactly the network the saved policy will hold, evaluated the way the
        # evaluate command evaluates it.
        alone = self.agent if len(self.members) == 1 else self.agent.member(m.index)
        act = alone.actor.act_batch
        episodes = run_episodes(m.eval_envs[: len(m.eval_seeds)], lambda o: m.scale.to_env(act(o, deterministic, generator)), m.eval_seeds)
        m.last_eval = summarise(episodes)
        m.curve.append([step, m.last_eval["return_mean"]])
        m.log.scalars({"return/eval": m.last_eval["return_mean"], "return/eval_std": m.last_eval["return_std"]}, step)
        if r.bias_episodes and self.window.total_updates:
            bias = q_minus_return(alone, m.eval_envs, m.scale, m.bias_seeds, generator)
            m.log.scalars({"bias/q_minus_return": bias}, step)
        return m.last_eval["return_mean"]

    def _collect(self, progress: Progress) -> None:
        r, step = self.cfg.run, self.step
        if step <= r.warmup_steps:
            actions = [m.warmup_rng.uniform(-1.0, 1.0, self.act_dim).astype(np.float32) for m in self.members]
        else:
            obs = [m.collector.obs for m in self.members]
            actions = self.agent.act_all(obs[0][None] if len(obs) == 1 else np.stack(obs))
        # Every member's actions in task units in one call: members run the same task, so one scale serves all.
        env_actions = self.members[0].scale.to_env(np.asarray(actions))
        for m, action, env_action in zip(self.members, actions, env_actions):
            if m.failed is not None:
                continue
            try:
                ended = m.collector.step(action, step, env_action)
            except DivergenceError as err:
                self._fail(m, err)
                continue
            if ended is not None:
                m.log.scalars({"return/train": ended.return_, "length/train": ended.length}, step)
                progress.set_train(step, ended.return_)
        self.window.add_step()

    def _one_step(self, progress: Progress) -> None:
        r, step = self.cfg.run, self.step
        self._collect(progress)
        if not self._active():
            return
        if step > r.warmup_steps and len(self.replay) >= self.cfg.agent.batch_size:
            self.credit += r.updates_per_env_step
            t0 = time.perf_counter()
            while self.credit >= 1.0:
                errors = self.window.add_update(self.agent.update(self.replay.sample(self.cfg.agent.batch_size)), step)
                for index, err in errors.items():
                    if self.members[index].failed is None:
                        self._fail(self.members[index], err)
                self.credit -= 1.0
            self.window.add_update_time(time.perf_counter() - t0)

        if step % r.log_every == 0 or step == r.steps:
            speed, means = self.window.close()
            for m in self._active():
                m.log.scalars(speed, step)
                if means is not None:
                    m.last_metrics = means[m.index]
                    m.log.scalars({**means[m.index], "temperature/target_entropy": m.target_total}, step)
            alphas = [m.last_metrics["temperature/value"] for m in self._active() if means is not None]
            progress.set_window(
                step, speed["speed/env_steps_per_s"], speed.get("speed/updates_per_s"),
                float(np.mean(alphas)) if alphas else None,
            )  # fmt: skip
            self._check_weights()

        if step % r.eval_every == 0 or step == r.steps:
            returns = [self._evaluate(m) for m in self._active()]
            if returns:
                progress.set_eval(step, float(np.mean(returns)))
        if step % r.checkpoint_every == 0 or step == r.steps:
            self._checkpoint()
        progress.advance(step)

    def run(self, stop: StopRequest) -> list[RunResult | DivergenceError]:
        """Train from the current step to the configured number of steps and save each member's policy.

        Returns:
            Per member, its result, or the error that stopped it when it diverged (the others go on).

        Raises:
            RunStopped: If ``stop`` was requested; a checkpoint of the last whole step was written for every member.
        """
        r = self.cfg.run
        resumed_at = self.step if self.members[0].last_checkpoint is not None else None
        self.started = time.perf_counter()
        for m in self.members:
            m.log = RunLog(m.folder.path, resume_after=resumed_at)
            if resumed_at is None:
                m.log.hyperparameters(_hyperparameters(m.cfg, m.target_total))
                # Logged before the first update so that even a run stopped during warm-up can be grouped by target.
                m.log.scalars({"temperature/target_entropy": m.target_total}, 0)
        progress = Progress(r.steps, r.progress, r.log_every)
        progress.advance(self.step)
        try:
            while self.step < r.steps and self._active():
                self.step += 1
                self._one_step(progress)
                if stop.requested:
                    if self.step % r.checkpoint_every and self.step != r.steps:
                        self._checkpoint()
                    stop.pass_on()  # a scheduler's own handler (requeue) runs after the checkpoint
                    written = [str(m.last_checkpoint) for m in self._active()]
                    raise RunStopped(
                        f"{stop.reason} at env step {self.step} of {r.steps}; checkpoint written to "
                        f"{written[0] if len(written) == 1 else f'each run folder ({len(written)} runs)'}; "
                        "run the same command again to resume",
                        stop.exit_code,
                        orphaned=stop.reason == "parent gone",
                    )
            self._check_weights()
            for m in self._active():
                env_record = TaskSpec(m.cfg.env.id, m.cfg.env.kwargs, m.eval_envs[0].spec.max_episode_steps).to_record()
                actor = self.agent.actor if len(self.members) == 1 else self.agent.member(m.index).actor
                spec = build_spec(actor, m.env.observation_space, m.env.action_space, env_record, m.cfg.raw)
                save_policy(m.folder.policy_path, actor, spec)
        finally:
            progress.close()
            for m in self.members:
                if m.failed is None:
                    m.log.flush()
        return [m.failed if m.failed is not None else self._finish(m) for m in self.members]

    def _finish(self, m: Member) -> RunResult:
        r, cfg, window = self.cfg.run, m.cfg, self.window
        final = FinalNumbers(
            return_eval=m.last_eval["return_mean"],
            return_eval_std=m.last_eval["return_std"],
            entropy=_finite_or_none(m.last_metrics.get("actor/entropy_nats")),
            alpha=_finite_or_none(m.last_metrics.get("temperature/value", float(self.agent.temperature.alpha()[m.index].mean()))),
        )
        nan = float("nan")
        wall = m.wall_before + (time.perf_counter() - self.started)
        m.log.scalars(
            {
                "final/return_eval": final.return_eval,
                "final/entropy": nan if final.entropy is None else final.entropy,
                "final/alpha": nan if final.alpha is None else final.alpha,
            },
            r.steps,
        )
        m.log.close()
        result = RunResult(
            env_id=cfg.env.id,
            env_name=cfg.env.name,
            seed=cfg.run.seed,
            steps=r.steps,
            target_entropy=m.target_total,
            target_entropy_groups=list(m.target),
            temperature_mode=cfg.agent.temperature.mode,
            final=final,
            evaluation=m.last_eval,
            evaluation_seeds=m.eval_seeds,
            eval_deterministic=r.eval_deterministic,
            eval_curve=m.curve,
            updates=window.total_updates,
            updates_per_s=window.total_updates / window.total_update_time if window.total_update_time else None,
            wall_time_s=wall,
            ran_on=where_this_runs(),
            time_split_s={"env_step": m.collector.env_step_time, "update": window.total_update_time, "loop": wall},
            population=len(self.members),
        )
        m.folder.write_result(result)
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
    outcome = train_members([raw_config], [run_dir], stop)[0]
    if isinstance(outcome, DivergenceError):
        raise outcome
    return outcome


def _common_checkpoints(members: list[Member]) -> list[Path] | None:
    """One checkpoint per member, of the newest step every member has; ``None`` when none has any.

    Raises:
        CheckpointError: If the members' checkpoints share no step.
    """
    from kiln.errors import CheckpointError

    by_step = [{int(p.name.rsplit("-", 1)[-1]): p for p in m.store.complete()} for m in members]
    if not any(by_step):
        return None
    shared = set.intersection(*(set(d) for d in by_step))
    if not shared:
        held = "; ".join(f"{m.folder.path}: {sorted(d) or 'none'}" for m, d in zip(members, by_step))
        raise CheckpointError(
            f"the population's runs hold checkpoints of different steps ({held}): train them separately, "
            "or pass resume=false to start them over"
        )
    step = max(shared)
    return [d[step] for d in by_step]


def train_members(
    raw_configs: Sequence[Mapping[str, Any]], run_dirs: Sequence[Path], stop: StopRequest | None = None
) -> list[RunResult | DivergenceError]:
    """Train runs that share every key outside :data:`kiln.training.population.MEMBER_KEYS` as one loop.

    Each member is handled as :func:`train` handles its one run (a finished folder skipped, an
    unfinished one resumed); a member that diverges stops and its error takes its place in the list.

    Raises:
        As :func:`train`, for the members together.
    """
    # One plain, resolved copy of each config: what is checked is what is saved beside the run.
    cfgs = [parse_run_config(OmegaConf.to_container(OmegaConf.create(dict(raw)), resolve=True)) for raw in raw_configs]
    folders = [RunFolder(d) for d in run_dirs]
    claimed: list[RunFolder] = []
    outcomes: dict[int, RunResult | DivergenceError] = {}
    envs: list[gym.Env] = []
    kept = ExitStack()  # torch's threads and determinism switch go back to the caller's on the way out
    try:
        for folder in folders:
            folder.claim()
            claimed.append(folder)
        for i, (cfg, folder) in enumerate(zip(cfgs, folders)):
            if folder.is_finished():
                _check_finished_config(folder, cfg.raw)
                outcomes[i] = folder.read_result()
        todo = [i for i in range(len(cfgs)) if i not in outcomes]
        if todo:
            r = cfgs[todo[0]].run
            kept.enter_context(torch_settings(r.threads, r.deterministic))
            members = []
            for index, i in enumerate(todo):
                env, target = _open_task(cfgs[i], len(todo))
                envs.append(env)
                copies = max(cfgs[i].run.eval_episodes, cfgs[i].run.bias_episodes)
                eval_envs = [make_env(cfgs[i].env.task) for _ in range(copies)]
                envs += eval_envs
                members.append(Member(cfgs[i], folders[i], env, eval_envs, target, index))
            loop = TrainingLoop(members)
            latest = _common_checkpoints(members) if r.resume else None
            if latest is not None:
                loop.resume_from(latest)  # checks the configs before anything on disk changes
            else:
                for m in members:
                    m.folder.prepare(m.cfg.raw)
            with stop or StopRequest() as request:
                try:
                    results = loop.run(request)
                except OSError as err:
                    first = members[0]
                    raise _write_failure(err, first.folder, first.last_checkpoint) from None
            outcomes.update(zip(todo, results))
    finally:
        kept.close()
        for env in envs:
            env.close()
        for folder in claimed:
            folder.release()
    return [outcomes[i] for i in range(len(cfgs))]
