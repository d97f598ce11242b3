"""The actor's computation as typed steps, in the order it applies them.

:meth:`kiln.learner.actor.SquashedGaussianActor.steps` derives the list from the actor's own modules
(its affine layers, the nonlinearity modules between them, its action size and log-std limits), so
whatever reads it — the ``weight_layout`` of a saved policy's ``spec.json``
(:func:`kiln.storage.policy_io.actor_block`) and the ONNX graph (:mod:`kiln.onnx_export.graph`) —
describes the network the actor runs rather than a second account of it. :func:`check_steps` is
how both take the list apart, so neither can accept steps the actor could not have produced.

A one-agent actor's steps, for hidden widths ``(h₁, h₂)``::

    Affine(0) → Hidden → Affine(1) → Hidden → Affine(2) → SplitHeads → SoftLimits → Squash
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import torch
from torch import nn


@dataclass(frozen=True)
class Affine:
    """``y = x @ weight + bias`` for row vectors ``x`` ``[batch, in]``.

    Attributes:
        layer: Position among the actor's affine layers, input first.
        weight: ``[in, out]``, a detached view of the actor's parameter (no copy).
        bias: ``[out]``, a detached view of the actor's parameter.
    """

    layer: int
    weight: torch.Tensor
    bias: torch.Tensor


@dataclass(frozen=True)
class Hidden:
    """The hidden nonlinearity applied elementwise.

    Attributes:
        name: Its name in :data:`kiln.config.nonlinearities.NONLINEARITIES`.
        module: The module instance the actor applies (its attributes, e.g. ELU's ``alpha``, are the
            ones in use).
    """

    name: str
    module: nn.Module


@dataclass(frozen=True)
class SplitHeads:
    """The last layer's ``2·action_size`` outputs: the first half the mean ``m`` of the pre-squash
    Gaussian ``u``, the second half the raw log-std ``r``."""

    action_size: int


@dataclass(frozen=True)
class SoftLimits:
    """``log_std = low + softplus(high − softplus(high − r) − low)`` (:func:`kiln.learner.actor.soft_clamp`)."""

    low: float
    high: float


@dataclass(frozen=True)
class Squash:
    """The action in (−1, 1): ``tanh(m)`` for the mode, ``tanh(m + exp(log_std)·e)`` for a sample with
    standard-normal ``e`` (:mod:`kiln.learner.squashed_gaussian`)."""


Step = Affine | Hidden | SplitHeads | SoftLimits | Squash


@dataclass(frozen=True)
class ActorSteps:
    """An actor's steps, checked and taken apart: the network body, then its three fixed last steps.

    Attributes:
        body: ``Affine``, then pairs ``Hidden, Affine``: the network from observation to the last layer.
        split: The split of the last layer's output into mean and raw log-std.
        limits: The log-std soft limits.
    """

    body: tuple[Affine | Hidden, ...]
    split: SplitHeads
    limits: SoftLimits

    @property
    def affine(self) -> tuple[Affine, ...]:
        """The affine layers, input first."""
        return tuple(s for s in self.body if isinstance(s, Affine))

    @property
    def observation_size(self) -> int:
        """Length of the observation the first layer takes."""
        return int(self.affine[0].weight.shape[0])


def check_steps(steps: Sequence[Step]) -> ActorSteps:
    """Take an actor's steps apart, checking that they are an actor's computation.

    An actor's steps are ``Affine (Hidden Affine)* SplitHeads SoftLimits Squash``, its affine layers
    numbered 0, 1, … in order, each layer's input the previous one's output, and the last layer's
    output the ``2·action_size`` numbers the split divides.

    Args:
        steps: What :meth:`kiln.learner.actor.SquashedGaussianActor.steps` returns.

    Returns:
        The parts, for writers that treat the body and the last steps differently.

    Raises:
        ValueError: If the steps are not in that order, or the shapes do not fit together.
    """
    steps = list(steps)
    tail = [type(s) for s in steps[-3:]]
    if tail != [SplitHeads, SoftLimits, Squash]:
        raise ValueError(f"an actor's steps end SplitHeads, SoftLimits, Squash, not {[t.__name__ for t in tail]}")
    body = steps[:-3]
    kinds = [Affine if i % 2 == 0 else Hidden for i in range(len(body))]
    if not body or len(body) % 2 == 0 or [type(s) for s in body] != kinds:
        raise ValueError(f"an actor's network is Affine, then Hidden and Affine in turn, not {[type(s).__name__ for s in body]}")
    split, limits = steps[-3], steps[-2]
    affine = [s for s in body if isinstance(s, Affine)]
    widths = [int(a.weight.shape[0]) for a in affine[1:]] + [2 * split.action_size]
    for i, (a, width) in enumerate(zip(affine, widths)):
        if a.layer != i or a.weight.dim() != 2 or tuple(a.bias.shape) != (width,) or a.weight.shape[1] != width:
            raise ValueError(
                f"affine layer {i} (numbered {a.layer}) has weight {tuple(a.weight.shape)} and bias {tuple(a.bias.shape)}, "
                f"but the next step takes {width} numbers"
            )
    return ActorSteps(tuple(body), split, limits)
