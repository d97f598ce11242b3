"""Evaluation rollouts of a saved policy, optionally recorded to video."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import gymnasium as gym
import torch

from agents.errors import KilnError
from agents.policy_io import SavedPolicy
from agents.rollout import run_episodes, summarise
from envs.make import make_env
from envs.task_spec import TaskSpec


def evaluate_policy(
    policy: SavedPolicy,
    episodes: int,
    seed: int,
    deterministic: bool = True,
    video_dir: Path | None = None,
) -> dict[str, Any]:
    """Run ``episodes`` seeded episodes (reset seeds ``seed, seed+1, …``) and summarise them.

    Args:
        policy: A loaded policy.
        episodes: Number of episodes.
        seed: First reset seed; also seeds the policy's sampling when ``deterministic`` is false.
        deterministic: Act with ``tanh(mean)``; otherwise sample from the policy.
        video_dir: Record every episode as MP4 into this folder (Gymnasium's video recorder).

    Returns:
        ``{"episode_list": [...], "summary": {...}}``: one record per episode (``seed``, ``return``,
        ``length``, ``terminated``) and the summary, whose ``episodes`` is their count.

    Raises:
        TaskError: If the task cannot be created.
        KilnError: If it cannot be rendered.
    """
    env_spec = policy.spec["env"]
    env = make_env(TaskSpec.from_record(env_spec), render_mode="rgb_array" if video_dir is not None else None)
    obs_shape = tuple(policy.spec["observation_space"]["shape"])
    if env.observation_space.shape != obs_shape:
        raise KilnError(
            f"the task {env_spec['id']} now has observations of shape {env.observation_space.shape}, "
            f"the policy expects {obs_shape}: evaluate with the Gymnasium version it was trained with"
        )
    if video_dir is not None:
        env = _with_video(env, Path(video_dir))
    generator = torch.Generator().manual_seed(seed)
    try:
        result = run_episodes(
            env, lambda o: policy.act(o, deterministic, generator), [seed + i for i in range(episodes)]
        )
    except gym.error.DependencyNotInstalled as err:
        raise KilnError(f"video needs a renderer that is not installed ({err}): pip install 'kiln-sac[video]'") from None
    except Exception as err:
        if "OpenGL" in str(err) or "GL" in type(err).__name__:
            raise KilnError(
                "video of MuJoCo tasks needs an OpenGL backend: set MUJOCO_GL=egl (GPU) or MUJOCO_GL=osmesa "
                "(apt-get install libosmesa6), or drop video"
            ) from None
        raise
    finally:
        env.close()
    return {"episode_list": [e.record() for e in result], "summary": summarise(result)}


def _with_video(env: gym.Env, folder: Path) -> gym.Env:
    try:
        import moviepy  # noqa: F401  (Gymnasium's recorder needs it; check before any episode runs)
    except ImportError:
        env.close()
        raise KilnError("video needs moviepy: pip install 'kiln-sac[video]', or drop video") from None
    from gymnasium.wrappers import RecordVideo

    return RecordVideo(env, str(folder), episode_trigger=lambda _: True, name_prefix="rollout", disable_logger=True)
