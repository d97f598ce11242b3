"""Evaluation of a saved policy (kiln.evaluation.policy_eval): the record's names (a list of episodes
beside their count), which episodes are planned, and the refusals (a task module the user did not
allow, counts out of range, a task whose observations changed).

Sources: Gymnasium's registry (``gymnasium.spec("Pendulum-v1").max_episode_steps`` is 200; Pendulum
never terminates) and Gymnasium's ``module:id`` convention (the module part is imported to build the
task); hand arithmetic written beside each check.
"""

import gymnasium as gym
import numpy as np
import pytest
import torch

from kiln.errors import ConfigError, KilnError, PolicyFolderError
from kiln.evaluation.policy_eval import DEFAULT_EPISODES, DEFAULT_SEED, check_task_module, evaluate_policy, plan_evaluation
from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import build_spec, load_policy, save_policy

PENDULUM = {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": None}


def _saved(tmp_path, config=None, env=PENDULUM, obs_dim=3):
    actor = SquashedGaussianActor(obs_dim, 1, (8, 8), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    obs_space = gym.spaces.Box(-np.inf, np.inf, (obs_dim,), np.float32)
    act_space = gym.spaces.Box(-2.0, 2.0, (1,), np.float32)
    return load_policy(save_policy(tmp_path / "policy", actor, build_spec(actor, obs_space, act_space, env, config or {})))


def test_record_lists_episodes_with_return_and_counts_them_in_the_summary(tmp_path):
    policy = _saved(tmp_path)
    result = evaluate_policy(policy, plan_evaluation(policy, episodes=2, seed=4))
    # `episodes` is a count wherever it appears (as in result.json); the per-episode list has its own name.
    assert set(result) == {"episode_list", "summary"}
    episodes = result["episode_list"]
    assert result["summary"]["episodes"] == len(episodes) == 2
    assert [set(e) for e in episodes] == [{"seed", "return", "length", "terminated"}] * 2
    assert [e["seed"] for e in episodes] == [4, 5]
    # Gymnasium's registry: Pendulum-v1 never terminates and is truncated at 200 steps.
    assert gym.spec("Pendulum-v1").max_episode_steps == 200
    assert all(e["length"] == 200 and e["terminated"] is False for e in episodes)
    # Hand arithmetic: the summary's mean is the mean of the listed returns.
    assert result["summary"]["return_mean"] == pytest.approx((episodes[0]["return"] + episodes[1]["return"]) / 2)


def test_without_a_seed_the_training_runs_own_evaluation_episodes_are_planned(tmp_path):
    # A policy saved by a run records the run's seed and evaluation count in its config: evaluation
    # then uses the run's streams (kiln.config.streams), so it repeats the run's own final evaluation.
    from kiln.config.streams import RunStreams

    policy = _saved(tmp_path, config={"seed": 7, "evaluate": {"episodes": 3}})
    plan = plan_evaluation(policy, episodes=None, seed=None)
    streams = RunStreams(7)
    assert plan.reset_seeds == streams.evaluation_reset_seeds(3)
    assert plan.sampling_seed == streams.seed_of_evaluation_generator
    # An explicit seed overrides it: reset seeds seed, seed+1, ... and the same sampling seed.
    explicit = plan_evaluation(policy, episodes=2, seed=11)
    assert explicit.reset_seeds == [11, 12] and explicit.sampling_seed == 11


def test_without_seed_or_run_record_the_defaults_are_planned(tmp_path):
    policy = _saved(tmp_path)  # saved outside a training run: no seed or episode count recorded
    plan = plan_evaluation(policy, episodes=None, seed=None)
    assert plan.reset_seeds == list(range(DEFAULT_SEED, DEFAULT_SEED + DEFAULT_EPISODES))
    assert plan.sampling_seed == DEFAULT_SEED and plan.source == f"seed={DEFAULT_SEED}"


def test_counts_out_of_range_are_refused_in_one_line(tmp_path):
    policy = _saved(tmp_path)
    with pytest.raises(ConfigError) as caught:
        plan_evaluation(policy, episodes=0, seed=None)
    assert "episodes" in str(caught.value) and "\n" not in str(caught.value)
    with pytest.raises(ConfigError):
        plan_evaluation(policy, episodes=2, seed=-1)


def test_a_run_record_outside_the_streams_range_is_refused(tmp_path):
    # 1_000_003 is one past the largest seed the streams keep disjoint (kiln.config.streams).
    policy = _saved(tmp_path, config={"seed": 1_000_003, "evaluate": {"episodes": 3}})
    with pytest.raises(PolicyFolderError) as caught:
        plan_evaluation(policy, episodes=None, seed=None)
    message = str(caught.value)
    assert "records seed 1000003" in message and message.endswith("pass seed=<n> and episodes=<n>")
    assert "\n" not in message


@pytest.mark.parametrize(
    "task_id,allowed,refusal",
    [
        ("Pendulum-v1", None, None),
        ("my_tasks:Reach-v0", "my_tasks", None),
        # Gymnasium imports the module part of module:id, running its code: only with the user's consent.
        (
            "my_tasks:Reach-v0",
            None,
            (
                "names Python module 'my_tasks', which evaluation would import and run: "
                "if you trust it, add task_module=my_tasks to the command line"
            ),
        ),
        ("my_tasks:Reach-v0", "other", "add task_module=my_tasks"),
        ("Pendulum-v1", "my_tasks", "task_module=my_tasks is given, but the policy's task 'Pendulum-v1' names no module: drop it"),
    ],
)
def test_a_task_module_runs_only_when_the_user_names_it(task_id, allowed, refusal):
    if refusal is None:
        check_task_module(task_id, allowed)
        return
    with pytest.raises(ConfigError) as caught:
        check_task_module(task_id, allowed)
    assert refusal in str(caught.value) and "\n" not in str(caught.value)


def test_evaluation_refuses_a_module_task_before_building_it(tmp_path):
    # The module does not exist: had evaluation tried to import it, the error would be another one.
    policy = _saved(tmp_path, env={"id": "kiln_no_such_module:Reach-v0", "kwargs": {}, "max_episode_steps": None})
    with pytest.raises(ConfigError, match="task_module=kiln_no_such_module"):
        evaluate_policy(policy, plan_evaluation(policy, episodes=1, seed=0))


def test_a_task_whose_observations_changed_is_refused(tmp_path):
    # A policy for 4 numbers per observation; Pendulum-v1 gives 3 (cos θ, sin θ, θ̇; Gymnasium's docs).
    policy = _saved(tmp_path, obs_dim=4)
    with pytest.raises(KilnError) as caught:
        evaluate_policy(policy, plan_evaluation(policy, episodes=1, seed=0))
    message = str(caught.value)
    assert "now has observations of shape (3,), the policy expects (4,)" in message and "\n" not in message


def test_stochastic_evaluation_repeats_for_the_same_plan_and_differs_for_another(tmp_path):
    policy = _saved(tmp_path)
    plan = plan_evaluation(policy, episodes=2, seed=3)
    first = evaluate_policy(policy, plan, deterministic=False)
    assert evaluate_policy(policy, plan, deterministic=False) == first  # the sampling generator is seeded by the plan
    other = evaluate_policy(policy, plan_evaluation(policy, episodes=2, seed=4), deterministic=False)
    assert other["episode_list"][0]["seed"] == 4 and other != first
