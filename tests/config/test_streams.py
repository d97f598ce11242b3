"""A run's random streams, derived from its seed by the formula the module documents, worked out by hand
here; the generators are checked against torch's and NumPy's own seeded generators."""

import numpy as np
import pytest
import torch

from kiln.config.streams import LARGEST_EPISODES, LARGEST_SEED, RunStreams


def test_reset_seeds_by_hand():
    streams = RunStreams(3)
    # Hand arithmetic, formula of the module docstring with stride 1_000_003:
    # evaluation 1_000_003·(3+1) + i = 4_000_012 + i; bias 1_000_003·(3+7920) + i = 7_923_023_769 + i.
    assert streams.evaluation_reset_seeds(3) == [4_000_012, 4_000_013, 4_000_014]
    assert streams.bias_reset_seeds(2) == [7_923_023_769, 7_923_023_770]
    # The training env is reset with the seed itself, its action space seeded with it too; the
    # evaluation generator starts from 3 + 1_000_003 = 1_000_006.
    assert streams.training_env_seed == 3 and streams.action_space_seed == 3
    assert streams.seed_of_evaluation_generator == 1_000_006
    assert streams.evaluation_reset_seeds(0) == [] and streams.bias_reset_seeds(0) == []


def test_generators_draw_what_torch_and_numpy_draw_from_the_same_seed():
    streams = RunStreams(11)
    # Source: torch.Generator.manual_seed and numpy.random.default_rng, seeded as the docstring says.
    torch.testing.assert_close(torch.randn(5, generator=streams.training_generator()),
                               torch.randn(5, generator=torch.Generator().manual_seed(11)), rtol=0, atol=0)  # fmt: skip
    reference = torch.Generator().manual_seed(11 + 1_000_003)
    torch.testing.assert_close(torch.rand(5, generator=streams.evaluation_generator()),
                               torch.rand(5, generator=reference), rtol=0, atol=0)  # fmt: skip
    np.testing.assert_array_equal(streams.warmup_generator().uniform(size=4), np.random.default_rng(11).uniform(size=4))


def test_each_call_makes_a_fresh_generator():
    # "A fresh generator per evaluation, the same each time" (module docstring): drawing from one
    # must not move the next.
    streams = RunStreams(0)
    first = streams.evaluation_generator()
    torch.rand(100, generator=first)
    assert torch.equal(torch.rand(3, generator=streams.evaluation_generator()),
                       torch.rand(3, generator=torch.Generator().manual_seed(1_000_003)))  # fmt: skip


@pytest.mark.parametrize("seed", [0, 1, 7918, LARGEST_SEED])
def test_reset_seeds_of_one_run_are_disjoint_and_above_its_training_seed(seed):
    streams = RunStreams(seed)
    # The largest counts the config allows (LARGEST_EPISODES = 1_000_002): only the ends are needed,
    # since each range is consecutive.
    evaluation = streams.evaluation_reset_seeds(LARGEST_EPISODES)
    bias = streams.bias_reset_seeds(LARGEST_EPISODES)
    assert evaluation[-1] - evaluation[0] == bias[-1] - bias[0] == LARGEST_EPISODES - 1
    assert seed < evaluation[0] and evaluation[-1] < bias[0]


def test_nearby_seeds_keep_their_evaluation_and_bias_ranges_apart():
    # Hand arithmetic: evaluation of seed s' starts at 1_000_003·(s'+1), bias of seed s at
    # 1_000_003·(s+7920); they meet only when s' = s + 7919, so seeds closer than that never share a
    # start state between one run's evaluation and another's diagnostic.
    count = 10
    for s, other in ((0, 7918), (100, 0), (5000, 12_000)):
        evaluation = set(RunStreams(other).evaluation_reset_seeds(count))
        assert evaluation.isdisjoint(RunStreams(s).bias_reset_seeds(count))
    assert RunStreams(7919).evaluation_reset_seeds(1) == RunStreams(0).bias_reset_seeds(1)


def test_limits_are_one_below_the_stride():
    # The module's bound: seeds and episode counts below 1_000_003 keep the ranges disjoint.
    assert LARGEST_SEED == LARGEST_EPISODES == 1_000_002
