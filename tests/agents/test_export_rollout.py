"""A seeded episode driven by the exported file reproduces Kiln's evaluation of the same policy.

Kiln's side is kiln.evaluation.policy_eval (through kiln.evaluation.rollout); the exported side is a plain Gymnasium
loop feeding onnxruntime. Tolerance: 1e-4 relative on the return (project requirement, no outside
source); float32 action round-off of ~1e-6 is what separates the two.
"""

from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch

from kiln.config.presets import compose_config
from kiln.evaluation.policy_eval import evaluate_policy, plan_evaluation
from kiln.onnx_export import export_policy
from kiln.storage.policy_io import load_policy
from kiln.training.trainer import train
from tests.support.cli import TINY_RUN
from tests.support.export_fixtures import onnx_session

SEED = 11


@pytest.fixture(scope="module")
def trained_run(tmp_path_factory) -> Path:
    """A tiny Pendulum-v1 run trained through the library."""
    run = tmp_path_factory.mktemp("export") / "run"
    train(compose_config("train", ["env=pendulum", "log.progress=off", *TINY_RUN]), run)
    return run


def onnx_episode_return(model: Path, env_record: dict, seed: int, noise_seed: int | None) -> float:
    """One episode of the task, actions from onnxruntime; noise drawn as Kiln's act draws it."""
    session = onnx_session(model)
    env = gym.make(env_record["id"], max_episode_steps=env_record["max_episode_steps"], **env_record["kwargs"])
    size = env.action_space.shape[0]
    # Kiln's stochastic act draws randn(1, m) per step from a generator seeded with the sampling seed.
    generator = None if noise_seed is None else torch.Generator().manual_seed(noise_seed)
    obs, _ = env.reset(seed=seed)
    total, done = 0.0, False
    while not done:
        feeds = {"observation": np.asarray(obs, np.float32)[None]}
        if generator is not None:
            feeds["noise"] = torch.randn((1, size), generator=generator).numpy()
        action = session.run(["action"], feeds)[0][0]
        obs, reward, terminated, truncated, _ = env.step(action)
        total += float(reward)
        done = terminated or truncated
    env.close()
    return total


@pytest.mark.parametrize("stochastic", [False, True], ids=["deterministic", "stochastic"])
def test_seeded_episode_reproduces_kilns_evaluation_return(trained_run, tmp_path, stochastic):
    policy = load_policy(trained_run)
    plan = plan_evaluation(policy, 1, SEED)
    kiln = evaluate_policy(policy, plan, deterministic=not stochastic)["episode_list"][0]["return"]
    out = tmp_path / "controller.onnx"
    export_policy(trained_run, out, stochastic=stochastic)
    exported = onnx_episode_return(out, policy.spec["env"], SEED, plan.sampling_seed if stochastic else None)
    print(f"{'stochastic' if stochastic else 'deterministic'} episode, reset seed {SEED}: Kiln {kiln!r}, "
          f"exported {exported!r}, relative difference {abs(exported - kiln) / abs(kiln):.2e}")  # fmt: skip
    assert exported == pytest.approx(kiln, rel=1e-4)
