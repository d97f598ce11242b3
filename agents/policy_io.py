"""The saved-policy folder: ``weights.safetensors`` + ``spec.json``.

``spec.json`` holds what a consumer needs to rebuild and drive the actor without Kiln's config
system: observation and action spaces with bounds, the network's shape, the env id, Kiln's version
and the resolved run config. Weights are safetensors, so loading never unpickles anything.
"""

from __future__ import annotations

import json
import math
import os
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
from agents.version import KILN_VERSION

FORMAT = "kiln-policy"
FORMAT_VERSION = 1
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
        "network": {
            "kind": "squashed-gaussian-mlp",
            "obs_dim": actor.obs_dim,
            "act_dim": actor.act_dim,
            "hidden_sizes": list(actor.hidden_sizes),
            "activation": actor.activation,
            "log_std_bounds": [actor.log_std_low, actor.log_std_high],
            "outputs": "first act_dim: mean of u; last act_dim: raw log-std of u (soft-clamped); action = tanh(u) rescaled to action_space",
        },
        "config": config,
    }


def save_policy(folder: Path, actor: SquashedGaussianActor, spec: dict[str, Any]) -> Path:
    """Write the policy folder atomically: into a temporary folder, then renamed into place."""
    folder = Path(folder)
    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}-", dir=folder.parent))
    try:
        tensors = {k: v.detach().contiguous().clone() for k, v in actor.state_dict().items()}
        save_file(tensors, str(tmp / WEIGHTS), metadata={"format": FORMAT, "kiln_version": KILN_VERSION})
        (tmp / SPEC).write_text(json.dumps(spec, indent=2, sort_keys=False))
        if folder.exists():
            old = folder.with_name(f".{folder.name}-replaced")
            shutil.rmtree(old, ignore_errors=True)
            os.replace(folder, old)
            os.replace(tmp, folder)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, folder)
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
    if (path / "policy").is_dir():
        return path / "policy"
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
    if spec.get("format_version", 0) > FORMAT_VERSION:
        raise PolicyFolderError(
            f"{folder} was saved in policy format {spec['format_version']}, newer than this Kiln reads ({FORMAT_VERSION}): upgrade Kiln"
        )
    try:
        net = spec["network"]
        actor = SquashedGaussianActor(
            int(net["obs_dim"]),
            int(net["act_dim"]),
            [int(h) for h in net["hidden_sizes"]],
            str(net["activation"]),
            (float(net["log_std_bounds"][0]), float(net["log_std_bounds"][1])),
        )
        space = spec["action_space"]
        scale = ActionScale(_bounds_from_json(space["low"]), _bounds_from_json(space["high"]))
    except (KeyError, TypeError, ValueError, IndexError) as err:
        raise PolicyFolderError(f"{folder / SPEC} is incomplete or malformed ({err!r}): re-save the policy") from None
    try:
        tensors = load_file(str(folder / WEIGHTS))
    except (SafetensorError, OSError) as err:
        raise PolicyFolderError(f"{folder / WEIGHTS} cannot be read ({err}): re-save the policy") from None
    expected = actor.state_dict()
    if set(tensors) != set(expected) or any(tensors[k].shape != expected[k].shape for k in expected):
        raise PolicyFolderError(f"{folder / WEIGHTS} does not match the network in {SPEC}: the two files are from different policies")
    actor.load_state_dict(tensors)
    actor.eval()
    return SavedPolicy(actor=actor, scale=scale, spec=spec)
