"""Training actions in NumPy: one env step's actions for every agent without torch's per-operation cost.

Collecting a transition needs one forward pass of a few tiny layers for one observation per agent;
in torch that is ≈25 operators at several µs of dispatch each, a measured 5 % of a Pendulum run's
loop. The same arithmetic on NumPy views of the actor's weights (shared memory, so they follow every
optimiser step) measured 2–3x cheaper. The noise still comes from each agent's torch generator,
drawn exactly as :meth:`kiln.learner.actor.SquashedGaussianActor.sample` draws it, so a run's generator
stays on the same course whichever way it acts. Evaluation (training's and the evaluate command's)
acts here too; updates, exports and saved policies' single-observation ``act`` use torch.
"""

from __future__ import annotations

import math
import weakref
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

import numpy as np
import torch

from kiln.learner import squashed_gaussian

if TYPE_CHECKING:  # the actor module acts through this one
    from kiln.learner.actor import SquashedGaussianActor


def _softplus(x: np.ndarray) -> np.ndarray:
    # log(1 + eˣ) in one ufunc, stable at both ends; within float32 rounding of torch's softplus
    # (threshold 20), against which tests/agents/test_numpy_actor.py checks it.
    return np.logaddexp(np.float32(0.0), x)


def _relu(x: np.ndarray) -> np.ndarray:
    return np.maximum(x, np.float32(0.0), out=x)  # x is a fresh product: overwriting it saves an allocation


_NONLINEARITIES: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "relu": _relu,
    "tanh": np.tanh,
    "elu": lambda x: np.where(x > 0.0, x, np.expm1(np.minimum(x, 0.0))),
    "silu": lambda x: x / (1.0 + np.exp(-x)),
}

# Per actor: what its NumPy views were made from (per tensor: the layer's parameter dict, the name,
# the parameter object and its data pointer), and the views (weight, bias) per layer.
_Made = list[tuple[dict, str, torch.Tensor, int]]
_VIEWS: weakref.WeakKeyDictionary[SquashedGaussianActor, tuple[_Made, list[tuple[np.ndarray, np.ndarray]]]]
_VIEWS = weakref.WeakKeyDictionary()


def _layer_views(actor: SquashedGaussianActor) -> list[tuple[np.ndarray, np.ndarray]]:
    """NumPy views of the actor's layers, made once: they share memory with the parameters, which the
    optimiser and checkpoint loading update in place; new ones are made if a parameter was replaced
    (another object in the layer, or new memory under the same one)."""
    cached = _VIEWS.get(actor)
    if cached is not None:
        # Read through the layers' parameter dicts: nn.Module attribute access costs ≈1 µs a name,
        # which made this check a quarter of an action's cost.
        for params, name, tensor, pointer in cached[0]:
            current = params[name]
            if current is not tensor or current.data_ptr() != pointer:
                break
        else:
            return cached[1]
    layers = actor.body.linears()
    made = [(layer._parameters, name, layer._parameters[name], layer._parameters[name].data_ptr()) for layer in layers for name in ("weight", "bias")]
    views = [(layer.weight.detach().numpy(), layer.bias.detach().numpy()) for layer in layers]
    _VIEWS[actor] = (made, views)
    return views


def _outputs(actor: SquashedGaussianActor, x: np.ndarray) -> np.ndarray:
    """The last layer's output, ``[population, n, 2·act_dim]``, for ``x`` ``[population, n, obs_dim]``."""
    hidden = _NONLINEARITIES[actor.nonlinearity]
    views = _layer_views(actor)
    last = len(views) - 1
    for i, (weight, bias) in enumerate(views):
        x = np.matmul(x, weight)
        x += bias
        if i < last:
            x = hidden(x)
    return x


def _mean_log_std(actor: SquashedGaussianActor, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean and soft-limited log-std of u, ``[population, n, act_dim]`` each, for ``x`` ``[population, n, obs_dim]``."""
    x = _outputs(actor, x)
    mean, raw = x[..., : actor.act_dim], x[..., actor.act_dim :]
    low, high = np.float32(actor.log_std_low), np.float32(actor.log_std_high)
    with np.errstate(invalid="ignore"):  # NaN weights: the env's finite check names the divergence, not a warning
        log_std = low + _softplus(high - _softplus(high - raw) - low)  # kiln.learner.actor.soft_clamp
    return mean, log_std


def deterministic_actions(actor: SquashedGaussianActor, obs: np.ndarray) -> np.ndarray:
    """The policy's mode ``tanh(mean)``, ``[n, act_dim]``, for observations ``[n, obs_dim]`` of a one-agent actor."""
    return np.tanh(_outputs(actor, np.asarray(obs, dtype=np.float32)[None])[0, :, : actor.act_dim])


# Per actor: a noise buffer ``[population, 1, act_dim]``, one row view per agent, and its NumPy view.
_NOISE: weakref.WeakKeyDictionary[SquashedGaussianActor, tuple[list[torch.Tensor], np.ndarray]]
_NOISE = weakref.WeakKeyDictionary()


def _noise(actor: SquashedGaussianActor, generators: Sequence[torch.Generator]) -> np.ndarray:
    """Standard-normal noise ``[population, 1, act_dim]``, row k drawn from ``generators[k]``: the
    numbers (and generator states) of ``torch.randn((1, act_dim), generator=generators[k])``, filled
    into a buffer kept per actor (``normal_`` in place measured 0.9 µs against randn's 3.2)."""
    cached = _NOISE.get(actor)
    if cached is None or len(cached[0]) != len(generators):
        buffer = torch.empty(len(generators), 1, actor.act_dim)
        cached = ([buffer[k] for k in range(len(generators))], buffer.numpy())
        _NOISE[actor] = cached
    for row, generator in zip(cached[0], generators):
        row.normal_(generator=generator)
    return cached[1]


# A head of at most this many numbers (2 per action dimension and agent) is squashed in Python floats:
# ten NumPy calls on one or two numbers cost more than the arithmetic itself (measured: ≈30 µs of a
# Pendulum action right after an update, ≈1 % of its loop). Common practice, no source: beyond a
# few numbers a Python loop costs more than NumPy's per-call overhead.
_PYTHON_HEAD_MAX = 4
# exp(log_std) must stay below float64's range for the Python head (math.exp raises beyond it).
_PYTHON_LOG_STD_MAX = 80.0


def _softplus_float(x: float) -> float:
    """log(1 + eˣ) of a Python float, stable at both ends (eˣ is never formed for x > 0)."""
    return (x if x > 0.0 else 0.0) + math.log1p(math.exp(-abs(x)))


def _squash_floats(out: np.ndarray, noise: np.ndarray, act_dim: int, low: float, high: float) -> np.ndarray:
    """``tanh(mean + exp(log_std)·noise)`` per agent from the last layer's output ``[P, 1, 2·act_dim]``
    and noise ``[P, 1, act_dim]``, in Python floats (float64) and returned in float32, ``[P, act_dim]``."""
    actions = []
    for row, draws in zip(out.reshape(len(out), -1).tolist(), noise.reshape(len(noise), -1).tolist()):
        actions.append([
            math.tanh(m + math.exp(low + _softplus_float(high - _softplus_float(high - r) - low)) * e)  # soft_clamp
            for m, r, e in zip(row[:act_dim], row[act_dim:], draws)
        ])
    return np.array(actions, dtype=np.float32)


def sample_actions(actor: SquashedGaussianActor, obs: np.ndarray, generators: Sequence[torch.Generator]) -> np.ndarray:
    """A policy sample ``tanh(mean + std·noise)`` per agent, ``[population, act_dim]``, for ``obs``
    ``[population, obs_dim]``; agent k's noise is drawn from ``generators[k]``."""
    x = np.asarray(obs, dtype=np.float32)[:, None, :]
    if x.shape[0] * 2 * actor.act_dim <= _PYTHON_HEAD_MAX and actor.log_std_high <= _PYTHON_LOG_STD_MAX:
        out = _outputs(actor, x)
        return _squash_floats(out, _noise(actor, generators), actor.act_dim, actor.log_std_low, actor.log_std_high)
    mean, log_std = _mean_log_std(actor, x)
    u = np.exp(log_std)
    u *= _noise(actor, generators)
    u += mean
    return np.tanh(u, out=u)[:, 0]


_LOG_SQRT_2PI = np.float32(squashed_gaussian._LOG_SQRT_2PI)
_LOG_2 = np.float32(squashed_gaussian._LOG_2)


def sample_with_log_prob(actor: SquashedGaussianActor, obs: np.ndarray, generator: torch.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Policy samples for observations ``[n, obs_dim]`` of a one-agent actor, drawn from ``generator``
    as :meth:`kiln.learner.actor.SquashedGaussianActor.sample` draws them, and their per-dimension
    log-densities (kiln.learner.squashed_gaussian.transform's stable form), each ``[n, act_dim]``."""
    mean, log_std = _mean_log_std(actor, np.asarray(obs, dtype=np.float32)[None])
    noise = torch.randn(mean.shape[1:], generator=generator).numpy()
    u = mean[0] + np.exp(log_std[0]) * noise
    # log(1 − tanh² u) = 2 (log 2 − u − softplus(−2u)), finite for every u.
    log_prob = -0.5 * noise * noise - log_std[0] - _LOG_SQRT_2PI - 2.0 * (_LOG_2 - u - _softplus(-2.0 * u))
    return np.tanh(u), log_prob
