"""The saved-policy folder: ``weights.safetensors`` + ``spec.json``.

``spec.json`` holds what a consumer needs to rebuild and drive the actor without Kiln's config
system: observation and action spaces with bounds, the network's shape, the env id, Kiln's version
and the resolved run config. Weights are safetensors, so loading never unpickles anything.
"""

from __future__ import annotations

import json
import math
import os
import re
import secrets
import shutil
import socket
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch
from safetensors import SafetensorError, safe_open
from safetensors.torch import load_file, save

from kiln.errors import PolicyFolderError
from kiln.learner.action_scale import ActionScale
from kiln.learner.actor import SquashedGaussianActor
from kiln.learner.actor_steps import ActorSteps, Hidden, check_steps
from kiln.storage.policy_spec import (
    ActorShape,
    actor_shape,
    bad,
    bounds,
    check_shape,
    check_task_id,
    mapping,
    read_spec,
    tensor_names,
)
from kiln.storage.run_folder import POLICY, replace_folder_atomic, write_bytes_atomic, write_text_atomic
from kiln.version import KILN_VERSION

FORMAT = "kiln-policy"
FORMAT_VERSION = 2
ARCHITECTURE = "kiln-squashed-gaussian-mlp"
ARCHITECTURE_VERSION = 1
WEIGHTS = "weights.safetensors"
SPEC = "spec.json"


def _bounds_to_json(values: np.ndarray) -> list[float | str]:
    # JSON has no infinity; write it as a string that float() reads back.
    return [v if math.isfinite(v) else ("inf" if v > 0 else "-inf") for v in np.asarray(values, float).tolist()]


@dataclass
class Policy:
    """A loaded policy: the actor, the action bounds and the spec it came with."""

    actor: SquashedGaussianActor
    scale: ActionScale
    spec: dict[str, Any]

    def act(self, obs: np.ndarray, deterministic: bool = True, generator: torch.Generator | None = None) -> np.ndarray:
        """Action in the task's units for one observation (:meth:`act_batch` of one row)."""
        return self.act_batch(np.asarray(obs)[None], deterministic, generator)[0]

    def act_batch(self, obs: np.ndarray, deterministic: bool = True, generator: torch.Generator | None = None) -> np.ndarray:
        """Actions in the task's units for observations ``[n, obs_dim]`` (see ``SquashedGaussianActor.act_batch``)."""
        return self.scale.to_env(self.actor.act_batch(obs, deterministic, generator))


def _layout(parts: ActorSteps) -> dict[str, Any]:
    """``spec.json``'s ``weight_layout``, written step by step from the actor's steps."""
    affine, m = parts.affine, parts.split.action_size
    hidden = sorted({s.name for s in parts.body if isinstance(s, Hidden)})
    between = f"the nonlinearity ({', '.join(hidden)}) follows every layer but the last" if hidden else "no nonlinearity"
    tensors = []
    for step in affine:
        weight, bias = tensor_names(step.layer)
        tensors.append({
            "layer": step.layer,
            "weight": weight,
            "weight_shape": list(step.weight.shape),
            "bias": bias,
            "bias_shape": list(step.bias.shape),
            "role": "output" if step is affine[-1] else "hidden",
        })  # fmt: skip
    return {
        "orientation": "y = x @ W + b, with x a row vector [batch, in], W [in, out], b [out]",
        "layer_order": f"tensors are applied in the order listed; {between}",
        "tensors": tensors,
        "output_split": (
            f"the last layer gives 2 x {m} numbers: the first {m} are the mean m "
            f"of the pre-squash Gaussian u, the last {m} a raw log-std r"
        ),
        "log_std": (
            "log_std = low + softplus(high - softplus(high - r) - low), with low, high = log_std_soft_limits "
            f"({parts.limits.low!r}, {parts.limits.high!r})"
        ),
        # The squash (the steps' last) and the map to task units, ActionScale's affine formula
        # (kiln.learner.action_scale).
        "action": (
            "deterministic: a = tanh(m); stochastic: a = tanh(m + exp(log_std) * e), e ~ N(0, I); "
            "task units: low_a + (a + 1) / 2 * (high_a - low_a) with action_space's bounds"
        ),
    }


def actor_block(actor: SquashedGaussianActor) -> dict[str, Any]:
    """The ``actor`` block of ``spec.json``: enough to rebuild the controller without Kiln, its sizes
    and weight layout written from :meth:`kiln.learner.actor.SquashedGaussianActor.steps`."""
    parts = check_steps(actor.steps())
    return {
        "architecture": ARCHITECTURE,
        "architecture_version": ARCHITECTURE_VERSION,
        "observation_size": parts.observation_size,
        "action_size": parts.split.action_size,
        "layer_widths": [int(s.weight.shape[1]) for s in parts.affine[:-1]],
        # The config's name for it (a network without hidden layers records it too).
        "nonlinearity": actor.nonlinearity,
        "log_std_soft_limits": [parts.limits.low, parts.limits.high],
        "weight_layout": _layout(parts),
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
    for step in check_steps(actor.steps()).affine:
        weight, bias = tensor_names(step.layer)
        tensors[weight], tensors[bias] = step.weight.contiguous().clone(), step.bias.contiguous().clone()
    return tensors


def save_policy(folder: Path, actor: SquashedGaussianActor, spec: dict[str, Any]) -> Path:
    """Write the policy folder atomically: into a temporary folder, then renamed into place.

    The folder and files get the user's usual permissions (umask), because a policy is meant to be
    handed on. Temporary folders that earlier saves on this machine left behind (their process was
    killed mid-save) are removed first.
    """
    folder = Path(folder)
    folder.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_temporaries(folder)
    tmp = folder.with_name(f"{_temporary_prefix(folder)}{socket.gethostname()}-{os.getpid()}-{secrets.token_hex(4)}")
    try:
        tmp.mkdir()  # not tempfile.mkdtemp: its folders are private (0700)
        weights = save(actor_tensors(actor), metadata={"format": FORMAT, "kiln_version": KILN_VERSION})
        write_bytes_atomic(tmp / WEIGHTS, weights)  # not save_file: it makes the file private (0600)
        write_text_atomic(tmp / SPEC, json.dumps(spec, indent=2, sort_keys=False))
        replace_folder_atomic(tmp, folder)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return folder


def _temporary_prefix(folder: Path) -> str:
    return f".{folder.name}-saving-"


def remove_stale_temporaries(folder: Path) -> list[Path]:
    """Remove the temporary folders of earlier saves of ``folder`` whose process is gone.

    A temporary's name holds the host and process id of its writer; only those of this host whose
    process no longer exists are removed (a live writer's, or another host's on a shared disk,
    are left alone).

    Returns:
        The folders removed.
    """
    pattern = re.compile(re.escape(_temporary_prefix(folder)) + r"(?P<host>.+)-(?P<pid>\d+)-[0-9a-f]{8}")
    removed = []
    for candidate in folder.parent.iterdir():
        match = pattern.fullmatch(candidate.name)
        if match and match["host"] == socket.gethostname() and not _process_exists(int(match["pid"])):
            shutil.rmtree(candidate, ignore_errors=True)
            removed.append(candidate)
    return removed


def _process_exists(pid: int) -> bool:
    try:
        os.kill(pid, 0)  # signal 0 only asks whether the process exists
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError):
        return pid > 0  # another account's process exists; an absurd pid is left alone too
    return True


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


def _check_format(spec: dict[str, Any], path: Path) -> None:
    if spec.get("format") != FORMAT:
        raise PolicyFolderError(f"{path} is not a Kiln policy spec (format={str(spec.get('format'))[:40]!r})")
    version = spec.get("format_version", 0)
    if isinstance(version, bool) or not isinstance(version, int):
        raise bad(path, f"format_version must be an integer, got {str(version)[:30]!r}")
    if version > FORMAT_VERSION:
        raise PolicyFolderError(
            f"{path.parent} was saved in a policy format newer than this Kiln reads ({FORMAT_VERSION}): upgrade Kiln"
        )
    if version < FORMAT_VERSION:
        raise PolicyFolderError(
            f"{path.parent} was saved in policy format {version}, before the weight layout was recorded: "
            f"retrain it, or load it with the Kiln version that saved it ({str(spec.get('kiln_version'))[:20]})"
        )
    block = mapping(spec.get("actor"), "actor", path)
    architecture, revision = block.get("architecture"), block.get("architecture_version", 0)
    if architecture != ARCHITECTURE or not isinstance(revision, int) or revision > ARCHITECTURE_VERSION:
        raise PolicyFolderError(
            f"{path} describes actor {str(architecture)[:40]!r} version {str(revision)[:20]}, "
            "which this Kiln cannot rebuild: upgrade Kiln"
        )


def _check_weights_header(path: Path, shape: ActorShape) -> None:
    """Compare the weights file's names, shapes and types with the spec from its header alone."""
    if path.stat().st_size == 0:
        raise bad(path, "the file is empty")
    expected = shape.tensor_shapes()
    try:
        with safe_open(str(path), framework="pt") as file:
            slices = {name: file.get_slice(name) for name in file.keys()}  # noqa: SIM118 (a safetensors file, not a dict)
            found = {name: (tuple(part.get_shape()), part.get_dtype()) for name, part in slices.items()}
    except (SafetensorError, OSError, ValueError) as err:
        raise bad(path, f"cannot be read as safetensors ({str(err).splitlines()[0][:80]})") from None
    if {name: dims for name, (dims, _) in found.items()} != expected:
        raise bad(path, f"the file does not match the network in {SPEC}: the two files are from different policies")
    wrong = sorted(name for name, (_, dtype) in found.items() if dtype != "F32")
    if wrong:
        raise bad(path, f"tensor {wrong[0]} is {found[wrong[0]][1]}, not float32 as Kiln saves")


def load_policy(path: Path) -> Policy:
    """Load a saved policy: nothing is unpickled, nothing named by the files is imported, and every
    size is checked against caps and the weights file's header before the network is built.

    Args:
        path: A policy folder, or a run folder containing ``policy/``.

    Raises:
        PolicyFolderError: If the folder is missing, incomplete, inconsistent or its files are not
            what they claim to be.
    """
    folder = resolve_policy_folder(path)
    for name in (SPEC, WEIGHTS):
        if not (folder / name).is_file():
            raise PolicyFolderError(f"policy folder {folder} is incomplete: {name} is missing (re-save or re-train the policy)")
    spec_path, weights_path = folder / SPEC, folder / WEIGHTS
    spec = read_spec(spec_path)
    _check_format(spec, spec_path)
    shape = actor_shape(spec["actor"], spec_path)
    env = mapping(spec.get("env"), "env", spec_path)
    check_task_id(env.get("id"), spec_path)
    mapping(spec.get("config", {}), "config", spec_path)
    observations = mapping(spec.get("observation_space"), "observation_space", spec_path)
    check_shape(observations, shape.observation_size, "observation_space", spec_path)
    for key in ("low", "high"):
        bounds(observations, key, shape.observation_size, "observation_space", spec_path, infinite_ok=True)
    actions = mapping(spec.get("action_space"), "action_space", spec_path)
    check_shape(actions, shape.action_size, "action_space", spec_path)
    low, high = (bounds(actions, key, shape.action_size, "action_space", spec_path, False) for key in ("low", "high"))
    if np.any(low > high):
        i = int(np.argmax(low > high))
        raise bad(spec_path, f"action_space.low[{i}] = {low[i]} is above action_space.high[{i}] = {high[i]}")
    _check_weights_header(weights_path, shape)
    try:
        tensors = load_file(str(weights_path))
    except (SafetensorError, OSError) as err:
        raise bad(weights_path, f"cannot be read as safetensors ({str(err).splitlines()[0][:80]})") from None
    broken = sorted(name for name, tensor in tensors.items() if not bool(torch.isfinite(tensor).all()))
    if broken:
        raise bad(weights_path, f"tensor {broken[0]} holds NaN or infinite numbers, so the policy cannot act")
    # A generator of its own for the placeholder weights (overwritten below): building the actor must
    # not move the caller's global torch generator.
    actor = SquashedGaussianActor(
        shape.observation_size, shape.action_size, list(shape.layer_widths), shape.nonlinearity, shape.log_std_soft_limits,
        generator=torch.Generator(),
    )
    with torch.no_grad():
        for i, layer in enumerate(actor.body.linears()):
            weight, bias = tensor_names(i)
            layer.weight.copy_(tensors[weight].unsqueeze(0))
            layer.bias.copy_(tensors[bias].reshape(1, 1, -1))
    actor.eval()
    return Policy(actor=actor, scale=ActionScale(low, high), spec=spec)
