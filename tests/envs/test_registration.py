"""Kiln's task registration, and the batched form against Gymnasium's own vectorisation."""

from __future__ import annotations

import warnings

import gymnasium as gym
import numpy as np
import pytest

import kiln.envs  # noqa: F401  (registers the kiln/ ids)
from kiln.envs.registration import KILN_TASKS, register_kiln_tasks
from kiln.envs.task_entry import BatchEntry, SingleCopyEntry
from kiln.envs.task_error import TaskError

# Deterministic settings (no noise, fixed start) so two vectorisations must agree exactly.
DETERMINISTIC = {
    "kiln/FiringHold-v0": {"noise_covariance": 0.0, "start_std": 0.0},
    "kiln/DamperTrim-v0": {},
    "kiln/CarDock-v0": {"start_low": 1.3, "start_high": 1.3},
}


def test_ids_are_registered_once_and_re_registration_is_silent() -> None:
    for task_id, (dynamics_type, time_limit) in KILN_TASKS.items():
        spec = gym.spec(task_id)
        assert spec.namespace == "kiln"
        assert (spec.entry_point, spec.vector_entry_point, spec.max_episode_steps) == (
            SingleCopyEntry(task_id, dynamics_type),
            BatchEntry(task_id, dynamics_type),
            time_limit,
        )
    # Gymnasium warns "Overriding environment ..." when an id is registered twice; idempotent means none.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        register_kiln_tasks()
    assert len([name for name in gym.registry if name.startswith("kiln/")]) == len(KILN_TASKS)


def test_time_limits_are_kept() -> None:
    # The limits registered since the tasks were added (kept across refactors): FiringHold and CarDock
    # run 200 steps; DamperTrim has none, as it terminates itself after one step.
    limits = {task_id: gym.spec(task_id).max_episode_steps for task_id in KILN_TASKS}
    assert limits == {"kiln/FiringHold-v0": 200, "kiln/DamperTrim-v0": None, "kiln/CarDock-v0": 200}


# Each task's option names as its module documents them (the keyword arguments users put in env.kwargs).
OPTIONS = {
    "kiln/FiringHold-v0": "state_matrix, input_matrix, state_cost, input_cost, noise_covariance, start_std, "
    "action_bound",
    "kiln/DamperTrim-v0": "stiffness, target",
    "kiln/CarDock-v0": "dt, push_gain, friction, rail_length, dock_position, dock_tolerance, dock_speed, "
    "start_low, start_high, step_cost, effort_cost, dock_bonus",
}


@pytest.mark.parametrize("task_id", sorted(KILN_TASKS))
def test_unknown_option_names_it_and_lists_the_task_options(task_id: str) -> None:
    expected = f"unknown option(s) colour for {task_id}; its options are {OPTIONS[task_id]}"
    with pytest.raises(TaskError) as single:
        gym.make(task_id, colour="red")
    with pytest.raises(TaskError) as batched:
        gym.make_vec(task_id, num_envs=2, vectorization_mode="vector_entry_point", colour="red")
    assert str(single.value) == str(batched.value) == expected


@pytest.mark.parametrize("task_id", sorted(KILN_TASKS))
def test_batched_form_matches_gymnasium_sync_vectorisation(task_id: str) -> None:
    copies, steps = 4, 30
    config = DETERMINISTIC[task_id]
    # Source: Gymnasium's SyncVectorEnv running the single-copy env, as the reference for the batch.
    reference = gym.make_vec(
        task_id, num_envs=copies, vectorization_mode="sync", max_episode_steps=7, **config
    )
    batched = gym.make_vec(
        task_id, num_envs=copies, vectorization_mode="vector_entry_point", max_episode_steps=7, **config
    )
    expected_obs, _ = reference.reset(seed=1)
    observations, _ = batched.reset(seed=1)
    np.testing.assert_allclose(observations, expected_obs)
    rng = np.random.default_rng(0)
    done_seen = False
    for _ in range(steps):
        actions = rng.uniform(-1, 1, size=batched.action_space.shape).astype(np.float32)
        expected = reference.step(actions)
        actual = batched.step(actions)
        np.testing.assert_allclose(actual[0], expected[0], rtol=1e-6, atol=1e-6)  # observations
        np.testing.assert_allclose(actual[1], expected[1], rtol=1e-6, atol=1e-6)  # rewards
        np.testing.assert_array_equal(actual[2], expected[2])  # terminated
        np.testing.assert_array_equal(actual[3], expected[3])  # truncated
        done_seen |= bool(np.any(actual[2] | actual[3]))
    assert done_seen  # the comparison covered at least one episode end and autoreset
