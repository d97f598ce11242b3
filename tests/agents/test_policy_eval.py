"""Evaluation of a saved policy: the record's names (a list of episodes beside their count)."""

import gymnasium as gym
import numpy as np
import pytest
import torch

from kiln.evaluation.policy_eval import evaluate_policy, plan_evaluation
from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import build_spec, load_policy, save_policy


def test_record_lists_episodes_with_return_and_counts_them_in_the_summary(tmp_path):
    actor = SquashedGaussianActor(3, 1, (8, 8), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    obs_space = gym.spaces.Box(-np.inf, np.inf, (3,), np.float32)
    act_space = gym.spaces.Box(-2.0, 2.0, (1,), np.float32)
    env = {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": None}
    policy = load_policy(save_policy(tmp_path / "policy", actor, build_spec(actor, obs_space, act_space, env, {})))
    result = evaluate_policy(policy, plan_evaluation(policy, episodes=2, seed=4))
    # `episodes` is a count wherever it appears (as in result.json); the per-episode list has its own name.
    assert set(result) == {"episode_list", "summary"}
    episodes = result["episode_list"]
    assert result["summary"]["episodes"] == len(episodes) == 2
    assert [set(e) for e in episodes] == [{"seed", "return", "length", "terminated"}] * 2
    assert [e["seed"] for e in episodes] == [4, 5]
    # Gymnasium's registry: Pendulum-v1 never terminates and is truncated at 200 steps.
    assert all(e["length"] == 200 and e["terminated"] is False for e in episodes)
    # Hand arithmetic: the summary's mean is the mean of the listed returns.
    assert result["summary"]["return_mean"] == pytest.approx((episodes[0]["return"] + episodes[1]["return"]) / 2)


def test_without_a_seed_the_training_runs_own_evaluation_episodes_are_planned(tmp_path):
    # A policy saved by a run records the run's seed and evaluation count in its config: evaluation
    # then uses the run's streams (kiln.config.streams), so it repeats the run's own final evaluation.
    from kiln.config.streams import RunStreams

    actor = SquashedGaussianActor(3, 1, (8, 8), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    obs_space = gym.spaces.Box(-np.inf, np.inf, (3,), np.float32)
    act_space = gym.spaces.Box(-2.0, 2.0, (1,), np.float32)
    env = {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": None}
    config = {"seed": 7, "evaluate": {"episodes": 3}}
    policy = load_policy(save_policy(tmp_path / "policy", actor, build_spec(actor, obs_space, act_space, env, config)))
    plan = plan_evaluation(policy, episodes=None, seed=None)
    streams = RunStreams(7)
    assert plan.reset_seeds == streams.evaluation_reset_seeds(3)
    assert plan.sampling_seed == streams.seed_of_evaluation_generator
    # An explicit seed overrides it: reset seeds seed, seed+1, ... and the same sampling seed.
    explicit = plan_evaluation(policy, episodes=2, seed=11)
    assert explicit.reset_seeds == [11, 12] and explicit.sampling_seed == 11
