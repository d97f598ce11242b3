"""The saved-policy folder: ``weights.safetensors`` + ``spec.json``.

``spec.json`` holds what a consumer needs to rebuild and drive the actor without Kiln's config
system: observation and action spaces with bounds, the network's shape, the env id, Kiln's version
and the resolved run config. Weights are safetensors, so loading never unpickles anything.
"""

from __future__ import annotations

import json
import math
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch
from safetensors import SafetensorError
from safetensors.torch import load_file, save_file

from agents.action_scale import ActionScale
from agents.actor import SquashedGaussianActor
from agents.errors import PolicyFolderError
from agents.nets import EnsembleLinear
from agents.run_folder import POLICY, replace_folder_atomic, write_text_atomic
from agents.version import KILN_VERSION

FORMAT = "kiln-policy"
FORMAT_VERSION = 2
ARCHITECTURE = "kiln-squashed-gaussian-mlp"
ARCHITECTURE_VERSION = 1
WEIGHTS = "weights.safetensors"
SPEC = "spec.json"


def _bounds_to_json(values: np.ndarray) -> list[float | str]:
    # JSON has no infinity; write it as a string that float() reads back.
    return [v if math.isfinite(v) else ("inf" if v > 0 else "-inf") for v in np.asarray(values, float).tolist()]


def _bounds_from_json(values: list[float | str]) -> np.ndarray:
    return np.array([float(v) for v in values], dtype=np.float64)


@dataclass
class SavedPolicy:
    """A loaded policy: the actor, the action bounds and the spec it came with."""

    actor: SquashedGaussianActor
    scale: ActionScale
    spec: dict[str, Any]

    @torch.no_grad()
    def act(self, obs: np.ndarray, deterministic: bool = True, generator: torch.Generator | None = None) -> np.ndarray:
        """Action in the task's units for one observation."""
        x = torch.as_tensor(np.asarray(obs), dtype=torch.float32).unsqueeze(0)
        if deterministic:
            a = self.actor.deterministic(x)
        else:
            a, _, _ = self.actor.sample(x, generator)
        return self.scale.to_env(a[0].numpy())


def _linear_layers(actor: SquashedGaussianActor) -> list[EnsembleLinear]:
    return [m for m in actor.body.layers if isinstance(m, EnsembleLinear)]


def actor_block(actor: SquashedGaussianActor) -> dict[str, Any]:
    """The ``actor`` block of ``spec.json``: enough to rebuild the controller without Kiln."""
    layers = _linear_layers(actor)
    low, high = actor.log_std_low, actor.log_std_high
    return {
        "architecture": ARCHITECTURE,
        "architecture_version": ARCHITECTURE_VERSION,
        "observation_size": actor.obs_dim,
        "action_size": actor.act_dim,
        "layer_widths": list(actor.layer_widths),
        "nonlinearity": actor.nonlinearity,
        "log_std_soft_limits": [low, high],
        "weight_layout": {
            "orientation": "y = x @ W + b, with x a row vector [batch, in], W [in, out], b [out]",
            "layer_order": "tensors are applied in the order listed; the nonlinearity follows every layer but the last",
            "tensors": [
                {
                    "layer": i,
                    "weight": f"layers.{i}.weight",
                    "weight_shape": [layer.in_features, layer.out_features],
                    "bias": f"layers.{i}.bias",
                    "bias_shape": [layer.out_features],
                    "role": "output" if i == len(layers) - 1 else "hidden",
                }
                for i, layer in enumerate(layers)
            ],
            "output_split": (
                f"the last layer gives 2 x {actor.act_dim} numbers: the first {actor.act_dim} are the mean m "
                f"of the pre-squash Gaussian u, the last {actor.act_dim} a raw log-std r"
            ),
            "log_std": (
                "log_std = low + softplus(high - softplus(high - r) - low), with low, high = log_std_soft_limits"
            ),
            "action": (
                "deterministic: a = tanh(m); stochastic: a = tanh(m + exp(log_std) * e), e ~ N(0, I); "
                "task units: low_a + (a + 1) / 2 * (high_a - low_a) with action_space's bounds"
            ),
        },
    }


def build_spec(
    actor: SquashedGaussianActor,
    observation_space: Any,
    action_space: Any,
    env: dict[str, Any],
    config: dict[str, Any],
) -> dict[str, Any]:
    """Describe a policy for ``spec.json``."""
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "kiln_version": KILN_VERSION,
        "env": env,
        "observation_space": {
            "shape": list(observation_space.shape),
            "low": _bounds_to_json(observation_space.low),
            "high": _bounds_to_json(observation_space.high),
        },
        "action_space": {
            "shape": list(action_space.shape),
            "low": _bounds_to_json(action_space.low),
            "high": _bounds_to_json(action_space.high),
        },
        "actor": actor_block(actor),
        "config": config,
    }


def actor_tensors(actor: SquashedGaussianActor) -> dict[str, torch.Tensor]:
    """The actor's weights under the names and shapes ``spec.json`` documents (member axis dropped)."""
    tensors = {}
    for i, layer in enumerate(_linear_layers(actor)):
        tensors[f"layers.{i}.weight"] = layer.weight.detach()[0].contiguous().clone()
        tensors[f"layers.{i}.bias"] = layer.bias.detach()[0, 0].contiguous().clone()
    return tensors


def save_policy(folder: Path, actor: SquashedGaussianActor, spec: dict[str, Any]) -> Path:
    """Write the policy folder atomically: into a temporary folder, then renamed into place."""
    folder = Path(folder)
    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}-", dir=folder.parent))
    try:
        save_file(actor_tensors(actor), str(tmp / WEIGHTS), metadata={"format": FORMAT, "kiln_version": KILN_VERSION})
        write_text_atomic(tmp / SPEC, json.dumps(spec, indent=2, sort_keys=False))
        replace_folder_atomic(tmp, folder)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return folder


def resolve_policy_folder(path: Path) -> Path:
    """Accept a policy folder or a run folder that contains ``policy/``."""
    path = Path(path)
    if not path.exists():
        raise PolicyFolderError(f"no such folder {path}: pass a run folder or its policy/ folder")
    if (path / SPEC).exists() or (path / WEIGHTS).exists():
        return path
    if (path / POLICY).is_dir():
        return path / POLICY
    raise PolicyFolderError(
        f"{path} holds no saved policy: pass a run folder that contains policy/, or a folder with {SPEC} and {WEIGHTS}"
    )


def load_policy(path: Path) -> SavedPolicy:
    """Load a saved policy (never unpickles).

    Args:
        path: A policy folder, or a run folder containing ``policy/``.

    Raises:
        PolicyFolderError: If the folder is missing, incomplete or inconsistent.
    """
    folder = resolve_policy_folder(path)
    for name in (SPEC, WEIGHTS):
        if not (folder / name).is_file():
            raise PolicyFolderError(f"policy folder {folder} is incomplete: {name} is missing (re-save or re-train the policy)")
    try:
        spec = json.loads((folder / SPEC).read_text())
    except json.JSONDecodeError as err:
        raise PolicyFolderError(f"{folder / SPEC} is not valid JSON ({err.msg}, line {err.lineno})") from None
    if spec.get("format") != FORMAT:
        raise PolicyFolderError(f"{folder / SPEC} is not a Kiln policy spec (format={spec.get('format')!r})")
    version = spec.get("format_version", 0)
    if version > FORMAT_VERSION:
        raise PolicyFolderError(
            f"{folder} was saved in policy format {version}, newer than this Kiln reads ({FORMAT_VERSION}): upgrade Kiln"
        )
    if version < FORMAT_VERSION:
        raise PolicyFolderError(
            f"{folder} was saved in policy format {version}, before the weight layout was recorded: "
            f"retrain it, or load it with the Kiln version that saved it ({spec.get('kiln_version')})"
        )
    try:
        block = spec["actor"]
        if block.get("architecture") != ARCHITECTURE or int(block.get("architecture_version", 0)) > ARCHITECTURE_VERSION:
            raise PolicyFolderError(
                f"{folder / SPEC} describes actor {block.get('architecture')!r} version "
                f"{block.get('architecture_version')}, which this Kiln cannot rebuild: upgrade Kiln"
            )
        actor = SquashedGaussianActor(
            int(block["observation_size"]),
            int(block["action_size"]),
            [int(h) for h in block["layer_widths"]],
            str(block["nonlinearity"]),
            (float(block["log_std_soft_limits"][0]), float(block["log_std_soft_limits"][1])),
        )
        space = spec["action_space"]
        scale = ActionScale(_bounds_from_json(space["low"]), _bounds_from_json(space["high"]))
    except (KeyError, TypeError, ValueError, IndexError, AttributeError) as err:
        raise PolicyFolderError(f"{folder / SPEC} is incomplete or malformed ({err!r}): re-save the policy") from None
    try:
        tensors = load_file(str(folder / WEIGHTS))
    except (SafetensorError, OSError) as err:
        raise PolicyFolderError(f"{folder / WEIGHTS} cannot be read ({err}): re-save the policy") from None
    expected = actor_tensors(actor)
    if set(tensors) != set(expected) or any(tensors[k].shape != expected[k].shape for k in expected):
        raise PolicyFolderError(f"{folder / WEIGHTS} does not match the network in {SPEC}: the two files are from different policies")
    with torch.no_grad():
        for i, layer in enumerate(_linear_layers(actor)):
            layer.weight.copy_(tensors[f"layers.{i}.weight"].unsqueeze(0))
            layer.bias.copy_(tensors[f"layers.{i}.bias"].reshape(1, 1, -1))
    actor.eval()
    return SavedPolicy(actor=actor, scale=scale, spec=spec)
