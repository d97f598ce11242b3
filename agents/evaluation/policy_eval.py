"""Evaluation rollouts of a saved policy, optionally recorded to video."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import gymnasium as gym
import torch

from kiln.config import checks
from kiln.config.streams import LARGEST_EPISODES, LARGEST_SEED, RunStreams
from kiln.envs.make import make_env
from kiln.envs.task_spec import TaskSpec
from kiln.errors import ConfigError, KilnError, PolicyFolderError
from kiln.evaluation.rollout import run_episodes, summarise
from kiln.storage.policy_io import SPEC, Policy
from kiln.storage.policy_spec import task_module
from kiln.storage.writable import reason

# Without a run's own record (a policy saved elsewhere), evaluation falls back to these.
DEFAULT_EPISODES = 10
DEFAULT_SEED = 0


def check_task_module(task_id: str, allowed: str | None) -> None:
    """Refuse a task id whose module part the user has not named: building the task would import
    that module, running code chosen by whoever wrote the policy folder.

    Args:
        task_id: The policy's task id (already checked for its form by the loader).
        allowed: The module the user allows on the command line (``task_module=``), or None.

    Raises:
        ConfigError: If the id names a module other than ``allowed``, or ``allowed`` is given for an
            id without one.
    """
    module = task_module(task_id)
    if module is not None and allowed != module:
        raise ConfigError(
            f"the policy's task {task_id!r} names Python module {module!r}, which evaluation would import "
            f"and run: if you trust it, add task_module={module} to the command line"
        )
    if allowed is not None and module is None:
        raise ConfigError(f"task_module={allowed} is given, but the policy's task {task_id!r} names no module: drop it")


@dataclass(frozen=True)
class EvaluationPlan:
    """Which episodes to run: their reset seeds, and the seed of the policy's sampling generator."""

    reset_seeds: list[int]
    sampling_seed: int
    source: str  # says where the seeds come from, for the printed summary


def plan_evaluation(policy: Policy, episodes: int | None, seed: int | None) -> EvaluationPlan:
    """The episodes an evaluation runs.

    With no ``seed``, a policy saved by a training run is evaluated on that run's own evaluation
    episodes (the streams of kiln.config.streams: same reset seeds, same sampling generator), so the
    figure training printed is reproduced exactly. With a ``seed``, reset seeds are ``seed, seed+1, …``
    and the sampling generator is seeded with ``seed``.

    Raises:
        ConfigError: If ``episodes`` or ``seed`` is out of range.
    """
    if episodes is not None:
        checks.integer(episodes, "episodes", 1, LARGEST_EPISODES)
    config = policy.spec.get("config") or {}
    run_seed = config.get("seed") if isinstance(config, dict) else None
    run_episodes_count = (config.get("evaluate") or {}).get("episodes") if isinstance(config, dict) else None
    if seed is None and isinstance(run_seed, int) and isinstance(run_episodes_count, int):
        if not (0 <= run_seed <= LARGEST_SEED and 1 <= run_episodes_count <= LARGEST_EPISODES):
            raise PolicyFolderError(
                f"{SPEC} records seed {str(run_seed)[:30]} and evaluate.episodes {str(run_episodes_count)[:30]}, "
                f"outside 0..{LARGEST_SEED} and 1..{LARGEST_EPISODES}: pass seed=<n> and episodes=<n>"
            )
        streams = RunStreams(run_seed)
        count = episodes if episodes is not None else run_episodes_count
        return EvaluationPlan(
            streams.evaluation_reset_seeds(count),
            streams.seed_of_evaluation_generator,
            f"the training run's evaluation episodes (run seed {run_seed})",
        )
    first = DEFAULT_SEED if seed is None else checks.integer(seed, "seed", 0, LARGEST_SEED)
    count = episodes if episodes is not None else DEFAULT_EPISODES
    return EvaluationPlan([first + i for i in range(count)], first, f"seed={first}")


def evaluate_policy(
    policy: Policy,
    plan: EvaluationPlan,
    deterministic: bool = True,
    video_dir: Path | None = None,
    task_module: str | None = None,
) -> dict[str, Any]:
    """Run the planned seeded episodes and summarise them.

    Args:
        policy: A loaded policy.
        plan: Reset seeds and the sampling seed (see :func:`plan_evaluation`).
        deterministic: Act with ``tanh(mean)``; otherwise sample from the policy.
        video_dir: Record every episode as MP4 into this folder (Gymnasium's video recorder).
        task_module: The module the user allows the task id to name (see :func:`check_task_module`).

    Returns:
        ``{"episode_list": [...], "summary": {...}}``: one record per episode (``seed``, ``return``,
        ``length``, ``terminated``) and the summary, whose ``episodes`` is their count.

    Raises:
        TaskError: If the task cannot be created.
        KilnError: If it cannot be rendered, the video cannot be written, or the task id names a
            module the user did not allow.
    """
    env_spec = policy.spec["env"]
    check_task_module(env_spec["id"], task_module)
    render_mode = "rgb_array" if video_dir is not None else None
    # One copy of the task per episode: the episodes run side by side, as training evaluates.
    envs = [make_env(TaskSpec.from_record(env_spec), render_mode=render_mode)]
    try:
        obs_shape = tuple(policy.spec["observation_space"]["shape"])
        if envs[0].observation_space.shape != obs_shape:
            raise KilnError(
                f"the task {env_spec['id']} now has observations of shape {envs[0].observation_space.shape}, "
                f"the policy expects {obs_shape}: evaluate with the Gymnasium version it was trained with"
            )
        envs += [make_env(TaskSpec.from_record(env_spec), render_mode=render_mode) for _ in plan.reset_seeds[1:]]
        if video_dir is not None:
            envs = _with_video(envs, Path(video_dir), plan.reset_seeds)
        generator = torch.Generator().manual_seed(plan.sampling_seed)
        result = run_episodes(envs, lambda o: policy.act_batch(o, deterministic, generator), plan.reset_seeds)
    except gym.error.DependencyNotInstalled as err:
        raise KilnError(f"video needs a renderer that is not installed ({err}): pip install 'kiln-sac[video]'") from None
    except OSError as err:
        if video_dir is None:
            raise
        raise KilnError(f"cannot write the videos to {video_dir} ({reason(err)}): free space, or drop video") from None
    except Exception as err:
        if "OpenGL" in str(err) or "GL" in type(err).__name__:
            raise KilnError(
                "video of MuJoCo tasks needs an OpenGL backend: set MUJOCO_GL=egl (GPU) or MUJOCO_GL=osmesa "
                "(apt-get install libosmesa6), or drop video"
            ) from None
        raise
    finally:
        for env in envs:
            env.close()
    return {"episode_list": [e.record() for e in result], "summary": summarise(result)}


def _with_video(envs: list[gym.Env], folder: Path, seeds: list[int]) -> list[gym.Env]:
    """Each episode's env recording to ``rollout-seed<seed>-episode-0.mp4`` in ``folder``."""
    try:
        import moviepy  # noqa: F401  (Gymnasium's recorder needs it; check before any episode runs)
    except ImportError:
        for env in envs:
            env.close()
        raise KilnError("video needs moviepy: pip install 'kiln-sac[video]', or drop video") from None
    from gymnasium.wrappers import RecordVideo

    return [
        RecordVideo(env, str(folder), episode_trigger=lambda _: True, name_prefix=f"rollout-seed{seed}", disable_logger=True)
        for env, seed in zip(envs, seeds)
    ]
