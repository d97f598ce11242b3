"""The benchmark's two network sizes against the tasks they stand for (Gymnasium's registered spaces)
and the published network (Haarnoja et al. 2018, arXiv 1812.05905, Table 1), and their labels by hand."""

import time

import gymnasium as gym
import pytest

from kiln.benchmark.cases import CASES, DEFAULT, SMALL, UpdateCase, cpu_clock
from kiln.config.agent_settings import AgentSettings


@pytest.mark.parametrize("case,env_id", [(DEFAULT, "HalfCheetah-v5"), (SMALL, "Pendulum-v1")])
def test_sizes_are_the_tasks_spaces(case, env_id):
    # Source: Gymnasium's registered tasks: HalfCheetah-v5 observes 17 numbers and takes 6 actions,
    # Pendulum-v1 observes 3 and takes 1.
    env = gym.make(env_id)
    try:
        assert (case.obs_dim, case.act_dim) == (env.observation_space.shape[0], env.action_space.shape[0])
    finally:
        env.close()


def test_default_is_the_published_network():
    # Table 1: two hidden layers of 256, minibatch 256, twin soft Q-networks.
    assert (DEFAULT.layer_widths, DEFAULT.batch_size, DEFAULT.critics) == ((256, 256), 256, 2)
    assert CASES == (DEFAULT, SMALL)


def test_settings_change_only_the_size():
    settings = SMALL.settings()
    assert settings.layer_widths == (64, 64) and settings.batch_size == 256
    defaults = AgentSettings()
    assert (settings.discount, settings.actor, settings.critic, settings.temperature) == (
        defaults.discount, defaults.actor, defaults.critic, defaults.temperature)  # fmt: skip


def test_labels_by_hand():
    assert DEFAULT.label == "obs 17, act 6, 2×256, batch 256, 2 critics"
    assert SMALL.label == "obs 3, act 1, 2×64, batch 256, 2 critics"
    # Unequal widths are listed one by one.
    assert UpdateCase("odd", 4, 2, (64, 32, 16), 8, 3).label == "obs 4, act 2, 64×32×16, batch 8, 3 critics"


def test_clock_is_the_measuring_threads_cpu_time():
    # Python's time.thread_time: CPU time of the calling thread only (time module documentation).
    assert cpu_clock is time.thread_time
