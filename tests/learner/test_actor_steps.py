"""check_steps accepts exactly an actor's computation: Affine (Hidden Affine)*, SplitHeads, SoftLimits,
Squash, with shapes that chain (project rule: kiln.learner.actor_steps's docstring; the shapes by hand)."""

import pytest
import torch
from torch import nn

from kiln.learner.actor import SquashedGaussianActor
from kiln.learner.actor_steps import Affine, Hidden, SoftLimits, SplitHeads, Squash, check_steps

TAIL = [SplitHeads(2), SoftLimits(-20.0, 2.0), Squash()]


def _affine(layer: int, n_in: int, n_out: int) -> Affine:
    return Affine(layer, torch.zeros(n_in, n_out), torch.zeros(n_out))


def test_an_actors_own_steps_are_taken_apart():
    actor = SquashedGaussianActor(5, 2, (16, 8), "tanh", (-3.0, 1.5))
    parts = check_steps(actor.steps())
    # Hand arithmetic: obs 5, widths (16, 8), 2 actions → [5, 16], [16, 8], [8, 4].
    assert [tuple(a.weight.shape) for a in parts.affine] == [(5, 16), (16, 8), (8, 4)]
    assert [type(s) for s in parts.body] == [Affine, Hidden, Affine, Hidden, Affine]
    assert parts.observation_size == 5 and parts.split == SplitHeads(2) and parts.limits == SoftLimits(-3.0, 1.5)


def test_a_network_without_hidden_layers_is_one_affine_step():
    parts = check_steps([_affine(0, 3, 4), *TAIL])
    assert len(parts.body) == 1 and parts.observation_size == 3


HIDDEN = Hidden("relu", nn.ReLU())
BAD = {
    "no squash": ([_affine(0, 3, 4), SplitHeads(2), SoftLimits(-20.0, 2.0)], "end SplitHeads, SoftLimits, Squash"),
    "tail out of order": ([_affine(0, 3, 4), SplitHeads(2), Squash(), SoftLimits(-20.0, 2.0)], "end SplitHeads"),
    "no network": (TAIL, "Affine, then Hidden and Affine in turn"),
    "ends with a nonlinearity": ([_affine(0, 3, 4), HIDDEN, *TAIL], "Hidden and Affine in turn"),
    "two layers without a nonlinearity": ([_affine(0, 3, 4), _affine(1, 4, 4), *TAIL], "Hidden and Affine in turn"),
    "starts with a nonlinearity": ([HIDDEN, _affine(0, 3, 4), *TAIL], "Hidden and Affine in turn"),
    "layers numbered out of order": ([_affine(1, 3, 8), HIDDEN, _affine(0, 8, 4), *TAIL], "numbered 1"),
    "widths that do not chain": ([_affine(0, 3, 8), HIDDEN, _affine(1, 7, 4), *TAIL], "next step takes 7 numbers"),
    "an output that is not 2 x action_size": ([_affine(0, 3, 5), *TAIL], "next step takes 4 numbers"),
    "a bias of another size": ([Affine(0, torch.zeros(3, 4), torch.zeros(3)), *TAIL], "bias (3,)"),
}


@pytest.mark.parametrize("name", list(BAD))
def test_steps_that_are_not_an_actors_are_refused(name):
    steps, phrase = BAD[name]
    with pytest.raises(ValueError, match=phrase.replace("(", r"\(").replace(")", r"\)")):
        check_steps(steps)
