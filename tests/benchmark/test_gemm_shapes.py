"""The benchmark's list of an update's matrix products against torch.utils.flop_counter.FlopCounterMode
(PyTorch's own FLOP counter, run over a real update) and against hand arithmetic."""

import pytest
from torch.utils.flop_counter import FlopCounterMode

from kiln.benchmark.cases import DEFAULT, SMALL
from kiln.benchmark.gemm_shapes import (
    Gemm,
    forward,
    input_gradients,
    layer_sizes,
    merge,
    total_flops,
    update_gemms,
    weight_gradients,
)
from kiln.benchmark.update_speed import build_agent, random_batch
from kiln.config.presets import compose_config


def test_hand_arithmetic_on_a_tiny_network():
    # obs 2, act 1, one hidden layer of 3, batch 4, 2 critics; 2 FLOPs per multiply-add.
    # Actor layers 2→3, 3→2 (mean and log-std): 12 MACs a row, 96 FLOPs a forward pass of 4 rows.
    #   2 forwards (192) + weight gradients (96) + input gradient of the second layer (3·2·4·2 = 48) = 336.
    # Critic layers 3→3, 3→1: 12 MACs a row, 96 FLOPs a pass per member, 192 for both.
    #   3 forwards (576) + weight gradients (192) + critic step's input gradient of the last layer
    #   (3·4·2·2 = 48) + actor step's input gradients of every layer (192) = 1008.
    assert total_flops(update_gemms(2, 1, (3,), 4, 2)) == 336 + 1008


@pytest.mark.parametrize(
    "case,population", [(DEFAULT, 1), (SMALL, 1), (SMALL, 8)], ids=["default", "small", "small-population-8"]
)
def test_flops_match_torch_flop_counter_over_a_real_update(case, population):
    # Reference: torch.utils.flop_counter.FlopCounterMode counts 2·m·k·n per (batched) matmul that
    # autograd and the forward pass actually run (mm, bmm, addmm, baddbmm, matmul's decompositions).
    agent = build_agent(case.obs_dim, case.act_dim, case.settings(), population=population)
    batch = random_batch(case.obs_dim, case.act_dim, case.batch_size, population=population)
    agent.update(batch)  # the first update creates the optimisers' state; count a later one
    counter = FlopCounterMode(display=False)
    with counter:
        agent.update(batch)
    counted = counter.get_total_flops()
    gemms = update_gemms(case.obs_dim, case.act_dim, case.layer_widths, case.batch_size, case.critics, population)
    # Products with a width-1 side (the critics' last layer: forward, weight and input gradients) run
    # as multiply-and-sum (agents/nets.py), the same arithmetic, which the counter does not see.
    width_one = [g for g in gemms if g.n == 1 or g.k == 1]
    assert width_one and total_flops(gemms) == counted + total_flops(width_one)


def test_population_multiplies_every_product_by_the_member_count():
    # Hand arithmetic: K independent agents do K times the work of one, shape for shape.
    one = update_gemms(3, 1, (64, 64), 256, 2)
    eight = update_gemms(3, 1, (64, 64), 256, 2, population=8)
    assert total_flops(eight) == 8 * total_flops(one)
    assert [g.members for g in eight] == [8 * g.members for g in one]


def test_merge_folds_repeats_into_counts():
    # Hand arithmetic: two identical products and one other → counts 2 and 1, FLOPs unchanged.
    a, b = Gemm(2, 256, 64, 64), Gemm(1, 256, 3, 64)
    merged = merge([a, b, a])
    assert {(g.members, g.k, g.count) for g in merged} == {(2, 64, 2), (1, 3, 1)}
    assert total_flops(merged) == total_flops([a, b, a])


def test_small_case_is_the_pendulum_preset():
    # Project requirement (no outside source): the benchmark's small size is the Pendulum-v1 preset's network.
    raw = compose_config("train", ["env=pendulum"])
    assert tuple(raw["agent"]["layer_widths"]) == SMALL.layer_widths
    assert raw["agent"]["batch_size"] == SMALL.batch_size == DEFAULT.batch_size
    assert raw["agent"]["critic"]["count"] == SMALL.critics


def test_layer_sizes_and_the_three_kinds_of_product_by_hand():
    # An MLP 5 → 8 → 4 → 2 has layers (5, 8), (8, 4), (4, 2).
    layers = layer_sizes(5, (8, 4), 2)
    assert layers == [(5, 8), (8, 4), (4, 2)]
    # Forward x W: [B, in] @ [in, out]; weight gradient xᵀ g: [in, B] @ [B, out]; input gradient g Wᵀ:
    # [B, out] @ [out, in], the first layer's only when its input needs one.
    assert forward(3, 16, layers[:1]) == [Gemm(3, 16, 5, 8)]
    assert weight_gradients(3, 16, layers[:1]) == [Gemm(3, 5, 16, 8, a_transposed=True)]
    assert input_gradients(3, 16, layers, first=False) == [Gemm(3, 16, 4, 8, b_transposed=True),
                                                            Gemm(3, 16, 2, 4, b_transposed=True)]  # fmt: skip
    assert len(input_gradients(3, 16, layers, first=True)) == 3


def test_gemm_flops_and_label_by_hand():
    g = Gemm(2, 256, 23, 256, a_transposed=True, count=3)
    # 2 FLOPs per multiply-add: 2 · 2 members · 256 · 23 · 256 · 3 times.
    assert g.flops == 2 * 2 * 256 * 23 * 256 * 3
    assert g.label == "2×[23,256]ᵀ@[23,256]"
    assert Gemm(1, 4, 5, 6, b_transposed=True).label == "1×[4,5]@[6,5]ᵀ"
