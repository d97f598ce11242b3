"""Ensemble layers against torch's own definitions.

References: torch.nn.functional.linear (y = x Aᵀ + b) applied member by member; torch.nn.Linear's
documented initialisation, U(−√k, √k) with k = 1/in_features for weight and bias; torch's
``Tensor.uniform_`` stream for which numbers a generator gives; torch.nn.functional's nonlinearities.
"""

import math

import pytest
import torch
import torch.nn.functional as F

from kiln.config.nonlinearities import NONLINEARITIES
from kiln.learner.nets import EnsembleLinear, EnsembleMLP

FUNCTIONAL = {"relu": F.relu, "tanh": torch.tanh, "elu": F.elu, "silu": F.silu}


def _per_member(layer: EnsembleLinear, x: torch.Tensor, k: int) -> torch.Tensor:
    # Kiln stores member k's weight as [in, out]; F.linear takes A as [out, in].
    return F.linear(x, layer.weight[k].detach().T, layer.bias[k, 0].detach())


@pytest.mark.parametrize("out_features", [5, 1])  # 1: the multiply-and-sum path of the critics' last layer
def test_each_member_is_torch_linear_for_shared_and_own_rows(out_features):
    layer = EnsembleLinear(4, 6, out_features, torch.Generator().manual_seed(0))
    g = torch.Generator().manual_seed(1)
    shared, own = torch.randn(7, 6, generator=g), torch.randn(4, 7, 6, generator=g)
    with torch.no_grad():
        got_shared, got_own = layer(shared), layer(own)
    assert got_shared.shape == got_own.shape == (4, 7, out_features)
    for k in range(4):
        torch.testing.assert_close(got_shared[k], _per_member(layer, shared, k), rtol=1e-5, atol=1e-6)
        torch.testing.assert_close(got_own[k], _per_member(layer, own[k], k), rtol=1e-5, atol=1e-6)


def test_gradients_of_one_member_touch_only_its_own_weights():
    layer = EnsembleLinear(3, 4, 1, torch.Generator().manual_seed(0))
    layer(torch.randn(3, 5, 4, generator=torch.Generator().manual_seed(2)))[1].sum().backward()
    assert bool((layer.weight.grad[1] != 0).any())
    assert bool((layer.weight.grad[[0, 2]] == 0).all()) and bool((layer.bias.grad[[0, 2]] == 0).all())


def test_initialisation_is_uniform_within_one_over_root_fan_in():
    # torch.nn.Linear docs: weight and bias ~ U(−√k, √k), k = 1/in_features. A uniform on (−c, c) has
    # mean 0 and variance c²/3; with 64·256·256 draws the sample mean's standard error is
    # c/√(3n) ≈ 6e-4·c, and the largest draw lies within 1e-3·c of c (P(miss) = (1 − 5e-4)^n ≈ 0).
    layer = EnsembleLinear(64, 256, 256, torch.Generator().manual_seed(3))
    bound = 1.0 / math.sqrt(256)
    w = layer.weight.detach()
    assert float(w.abs().max()) <= bound and float(layer.bias.detach().abs().max()) <= bound
    assert float(w.max()) > 0.999 * bound and float(w.min()) < -0.999 * bound
    assert abs(float(w.mean())) < 5 * bound / math.sqrt(3 * w.numel())
    assert float(w.var()) == pytest.approx(bound**2 / 3, rel=0.01)


def test_reset_rows_draws_weights_then_biases_from_the_generator():
    # Rows 1..2 of a 4-member layer, re-initialised from a seeded generator, hold exactly what torch's
    # uniform_ gives from that seed: the weights of the rows first, then their biases.
    layer = EnsembleLinear(4, 3, 2, torch.Generator().manual_seed(0))
    before = layer.weight.detach().clone()
    layer.reset_rows(slice(1, 3), torch.Generator().manual_seed(8))
    g, bound = torch.Generator().manual_seed(8), 1.0 / math.sqrt(3)
    weight = torch.empty(2, 3, 2).uniform_(-bound, bound, generator=g)
    bias = torch.empty(2, 1, 2).uniform_(-bound, bound, generator=g)
    assert torch.equal(layer.weight.detach()[1:3], weight) and torch.equal(layer.bias.detach()[1:3], bias)
    assert torch.equal(layer.weight.detach()[[0, 3]], before[[0, 3]])


@pytest.mark.parametrize("nonlinearity", sorted(NONLINEARITIES))
def test_mlp_is_linear_layers_with_the_nonlinearity_between(nonlinearity):
    mlp = EnsembleMLP(2, 5, (16, 8), 3, nonlinearity, torch.Generator().manual_seed(4))
    linears = mlp.linears()
    assert [(l.in_features, l.out_features) for l in linears] == [(5, 16), (16, 8), (8, 3)]
    # The table's module between each pair of layers, none after the last.
    assert [type(m) for m in mlp.layers] == [EnsembleLinear, NONLINEARITIES[nonlinearity], EnsembleLinear,
                                             NONLINEARITIES[nonlinearity], EnsembleLinear]  # fmt: skip
    x = torch.randn(2, 9, 5, generator=torch.Generator().manual_seed(5)) * 2
    with torch.no_grad():
        got = mlp(x)
    for k in range(2):
        h = x[k]
        for i, layer in enumerate(linears):
            h = _per_member(layer, h, k)
            if i < len(linears) - 1:
                h = FUNCTIONAL[nonlinearity](h)
        torch.testing.assert_close(got[k], h, rtol=1e-5, atol=1e-6)


def test_unknown_nonlinearity_is_refused_with_the_choices():
    with pytest.raises(ValueError, match=r"unknown nonlinearity 'gelu': choose one of \[.*'relu'"):
        EnsembleMLP(1, 2, (4,), 1, "gelu")
