"""The matrix products (GEMMs) of one soft actor-critic update, enumerated from the network sizes.

A linear layer ``y = x W + b`` over ``B`` rows with ``members`` independent weight sets costs, per
member, one product forward (``[B, in] @ [in, out]``) and up to two backward: the weight gradient
``xᵀ g`` (``[in, B] @ [B, out]``) and the input gradient ``g Wᵀ`` (``[B, out] @ [out, in]``). Which
of them an update runs follows from :meth:`kiln.learner.sac.SoftActorCritic.update` (Algorithm 1 of
Haarnoja et al. 2018, arXiv 1812.05905):

* target: actor forward on s′, target critics forward on (s′, a′) — no gradients;
* critic step: critics forward on (s, a), backward for weights; the first layer's input (s, a) is
  data, so it gets no input gradient;
* actor step: actor forward on s, critics forward on (s, a(s)) with the critics frozen: backward
  through every critic layer for inputs only (a(s) needs it), then through the actor for weights
  and for the inputs of every layer but the first (s is data);
* temperature and Polyak averaging: no products.

The enumeration is checked against torch.utils.flop_counter.FlopCounterMode over a real update
(tests/benchmark/test_gemm_shapes.py), so a change of the update that adds or drops a product
shows up there.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class Gemm:
    """``members`` independent products ``[m, k] @ [k, n]``, run ``count`` times per update.

    ``a_transposed`` / ``b_transposed``: the operand is a transposed view of a row-major tensor (as
    xᵀ in a weight gradient and Wᵀ in an input gradient), which BLAS reads without a copy.
    """

    members: int
    m: int
    k: int
    n: int
    a_transposed: bool = False
    b_transposed: bool = False
    count: int = 1

    @property
    def flops(self) -> float:
        """Multiply-adds counted as 2 FLOPs, times ``members`` and ``count``."""
        return 2.0 * self.members * self.m * self.k * self.n * self.count

    @property
    def label(self) -> str:
        """``2×[256,23]ᵀ@[256,256]``-style text for tables."""
        a = f"[{self.k},{self.m}]ᵀ" if self.a_transposed else f"[{self.m},{self.k}]"
        b = f"[{self.n},{self.k}]ᵀ" if self.b_transposed else f"[{self.k},{self.n}]"
        return f"{self.members}×{a}@{b}"


def layer_sizes(in_dim: int, layer_widths: Sequence[int], out_dim: int) -> list[tuple[int, int]]:
    """``(fan_in, fan_out)`` of each linear layer of an MLP."""
    sizes = [in_dim, *layer_widths, out_dim]
    return list(zip(sizes[:-1], sizes[1:]))


def forward(members: int, batch: int, layers: Iterable[tuple[int, int]]) -> list[Gemm]:
    """Products of one forward pass."""
    return [Gemm(members, batch, fan_in, fan_out) for fan_in, fan_out in layers]


def weight_gradients(members: int, batch: int, layers: Iterable[tuple[int, int]]) -> list[Gemm]:
    """Products of the weight gradients ``xᵀ g`` of every layer."""
    return [Gemm(members, fan_in, batch, fan_out, a_transposed=True) for fan_in, fan_out in layers]


def input_gradients(members: int, batch: int, layers: Sequence[tuple[int, int]], first: bool) -> list[Gemm]:
    """Products of the input gradients ``g Wᵀ``; ``first``: include the first layer's (its input needs one)."""
    return [Gemm(members, batch, fan_out, fan_in, b_transposed=True) for fan_in, fan_out in layers[0 if first else 1 :]]


def merge(gemms: Iterable[Gemm]) -> list[Gemm]:
    """The same products with repeats folded into ``count``, largest FLOPs first."""
    counts: Counter[Gemm] = Counter()
    for g in gemms:
        counts[Gemm(g.members, g.m, g.k, g.n, g.a_transposed, g.b_transposed)] += g.count
    merged = [Gemm(g.members, g.m, g.k, g.n, g.a_transposed, g.b_transposed, c) for g, c in counts.items()]
    return sorted(merged, key=lambda g: -g.flops)


def update_gemms(
    obs_dim: int, act_dim: int, layer_widths: Sequence[int], batch: int, critics: int, population: int = 1
) -> list[Gemm]:
    """Every product of one update of ``population`` agents (each: one actor, ``critics`` soft Q-networks).

    The actor has ``2·act_dim`` outputs (mean and log-std); each critic reads ``[s, a]`` and has one.
    Members of a population and critics of one agent are independent weight sets, so they share one
    batched product per layer.
    """
    actor = layer_sizes(obs_dim, layer_widths, 2 * act_dim)
    critic = layer_sizes(obs_dim + act_dim, layer_widths, 1)
    pa, pc = population, population * critics
    gemms = [
        *forward(pa, batch, actor),  # target: a′ ~ π(·|s′)
        *forward(pc, batch, critic),  # target critics on (s′, a′)
        *forward(pc, batch, critic),  # critic step
        *weight_gradients(pc, batch, critic),
        *input_gradients(pc, batch, critic, first=False),
        *forward(pa, batch, actor),  # actor step
        *forward(pc, batch, critic),
        *input_gradients(pc, batch, critic, first=True),  # frozen critics: inputs only
        *weight_gradients(pa, batch, actor),
        *input_gradients(pa, batch, actor, first=False),
    ]
    return merge(gemms)


def total_flops(gemms: Iterable[Gemm]) -> float:
    """FLOPs of all products (each counted ``count`` times)."""
    return sum(g.flops for g in gemms)
