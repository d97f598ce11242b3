"""A controller rebuilt with NumPy from nothing but what a policy folder documents.

Written only from ``spec.json`` (its ``actor.weight_layout`` text, the action space's bounds) and the
safetensors file format; it imports nothing of Kiln's, so agreement with Kiln shows that the saved
format describes the controller completely. Computed in float64, so it is also the more precise side.
The hidden nonlinearities are the textbook definitions of the names spec.json records (as torch
documents them: ELU with alpha 1, SiLU x·sigmoid(x)).
"""

import json
from pathlib import Path

import numpy as np
from safetensors.numpy import load_file

_NONLINEARITIES = {
    "relu": lambda x: np.maximum(x, 0.0),
    "tanh": np.tanh,
    "elu": lambda x: np.where(x > 0.0, x, np.expm1(np.minimum(x, 0.0))),
    "silu": lambda x: x / (1.0 + np.exp(-x)),
}


def _softplus(x: np.ndarray) -> np.ndarray:
    # log(1 + eˣ) without overflow: max(x, 0) + log1p(e^−|x|).
    return np.maximum(x, 0.0) + np.log1p(np.exp(-np.abs(x)))


def _spec(policy_folder: Path) -> dict:
    return json.loads((Path(policy_folder) / "spec.json").read_text())


def reference_heads(policy_folder: Path, observations: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The mean m of the pre-squash Gaussian and its (soft-limited) log-std, per spec.json."""
    actor = _spec(policy_folder)["actor"]
    weights = load_file(str(Path(policy_folder) / "weights.safetensors"))
    # "y = x @ W + b, with x a row vector [batch, in], W [in, out], b [out]"; "tensors are applied in
    # the order listed; the nonlinearity (<name>) follows every layer but the last".
    x = np.asarray(observations, dtype=np.float64)
    entries = actor["weight_layout"]["tensors"]
    for i, entry in enumerate(entries):
        w = weights[entry["weight"]].astype(np.float64)
        b = weights[entry["bias"]].astype(np.float64)
        assert list(w.shape) == entry["weight_shape"] and list(b.shape) == entry["bias_shape"]
        x = x @ w + b
        if i < len(entries) - 1:
            x = _NONLINEARITIES[actor["nonlinearity"]](x)
    # "the first m are the mean m of the pre-squash Gaussian u, the last m a raw log-std r".
    m = actor["action_size"]
    mean, raw = x[:, :m], x[:, m:]
    # "log_std = low + softplus(high - softplus(high - r) - low)".
    low, high = actor["log_std_soft_limits"]
    return mean, low + _softplus(high - _softplus(high - raw) - low)


def reference_actions(policy_folder: Path, observations: np.ndarray, noise: np.ndarray | None = None) -> np.ndarray:
    """Actions in the task's units, per spec.json: deterministic, or stochastic with the given noise."""
    mean, log_std = reference_heads(policy_folder, observations)
    # "deterministic: a = tanh(m); stochastic: a = tanh(m + exp(log_std) * e)".
    a = np.tanh(mean if noise is None else mean + np.exp(log_std) * np.asarray(noise, dtype=np.float64))
    # "task units: low_a + (a + 1) / 2 * (high_a - low_a) with action_space's bounds".
    space = _spec(policy_folder)["action_space"]
    low_a, high_a = (np.array([float(v) for v in space[k]]) for k in ("low", "high"))
    return low_a + (a + 1.0) / 2.0 * (high_a - low_a)
