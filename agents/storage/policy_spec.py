"""Checks of a saved policy's ``spec.json`` before anything is built from it.

A policy folder is handed from person to person, so its files are input like any other: every
number is checked for type, finiteness and a cap, and the task id for its form, before a network
is allocated or a task created. A file that fails gets one line naming the file, the field and the
fix (:class:`kiln.errors.PolicyFolderError`).
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from itertools import pairwise
from pathlib import Path
from typing import Any

import numpy as np

from kiln.config.nonlinearities import NONLINEARITIES
from kiln.errors import PolicyFolderError

# A spec with its resolved config is a few kB; a file this size is not one, and reading it whole
# would cost memory for nothing.
MAX_SPEC_BYTES = 4 * 2**20
# Sizes and widths: far above any controller Kiln trains (the published width is 256), far below
# sizes whose allocation could exhaust a machine.
MAX_SIZE = 2**16
MAX_LAYERS = 64
# 2**28 float32 numbers are 1 GiB: no saved actor comes near, and none beyond it is built.
MAX_PARAMETERS = 2**28

# Gymnasium's ``module:id`` form: a dotted Python module name, then an id of letters, digits and
# ``_ . -`` with at most one namespace ``/``. Nothing else: no spaces, no control characters, and
# (checked separately) no ``..`` that could climb folders where an id becomes a path.
_MODULE = r"[A-Za-z_][A-Za-z0-9_]*(?:\.[A-Za-z_][A-Za-z0-9_]*)*"
_NAME = r"[A-Za-z0-9_][A-Za-z0-9_.\-]*"
_TASK_ID = re.compile(rf"(?:(?P<module>{_MODULE}):)?(?:{_NAME}/)?{_NAME}")
_MAX_ID_LENGTH = 200


def bad(path: Path, problem: str) -> PolicyFolderError:
    """The one-line error for a policy file: the file, what is wrong, and the fix."""
    return PolicyFolderError(f"{path}: {problem}; re-save the policy, or ask for the folder again")


def _refuse_constant(name: str) -> None:
    # json.loads accepts NaN and Infinity, which no JSON writer but Python's emits.
    raise ValueError(f"it holds {name}, which is not JSON")


def read_spec(path: Path) -> dict[str, Any]:
    """Read ``spec.json`` as a JSON object, refusing anything else without reading past the cap.

    Raises:
        PolicyFolderError: If the file is too large, not UTF-8, not JSON or not a JSON object.
    """
    with open(path, "rb") as file:
        data = file.read(MAX_SPEC_BYTES + 1)
    if len(data) > MAX_SPEC_BYTES:
        raise bad(path, f"the file is larger than {MAX_SPEC_BYTES // 2**20} MiB, so it is not a spec Kiln wrote")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as err:
        raise bad(path, f"not UTF-8 text (byte {err.start} is {data[err.start]:#04x}), so not a spec Kiln wrote") from None
    try:
        spec = json.loads(text, parse_constant=_refuse_constant)
    except json.JSONDecodeError as err:
        raise bad(path, f"not valid JSON ({err.msg}, line {err.lineno})") from None
    except RecursionError:
        raise bad(path, "its JSON is nested too deeply to be a spec") from None
    except ValueError as err:  # a number Python will not convert (thousands of digits), or NaN
        reason = str(err).splitlines()[0][:120]
        raise bad(path, f"holds a number Kiln cannot read ({reason})") from None
    if not isinstance(spec, dict):
        raise bad(path, f"holds a JSON {type(spec).__name__}, not a JSON object as Kiln writes")
    return spec


def mapping(value: Any, name: str, path: Path) -> Mapping[str, Any]:
    """``value`` if it is a JSON object, else the one-line error naming field ``name``."""
    if not isinstance(value, Mapping):
        raise bad(path, f"{name} must be a JSON object, got {type(value).__name__}")
    return value


def count(value: Any, name: str, largest: int, path: Path) -> int:
    """An integer from 1 to ``largest`` (not a bool, not a float), else the one-line error."""
    if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= largest:
        shown = repr(value) if len(repr(value)) <= 30 else f"{repr(value)[:27]}..."
        raise bad(path, f"{name} must be an integer from 1 to {largest}, got {shown}")
    return value


def _number(value: Any, name: str, path: Path, infinite_ok: bool) -> float:
    """A JSON number, or the strings ``inf`` / ``-inf`` where ``infinite_ok`` (Kiln writes JSON's
    missing infinity so); NaN and any other text are refused."""
    if infinite_ok and value in ("inf", "-inf"):
        return float(value)
    if isinstance(value, bool) or not isinstance(value, int | float) or math.isnan(value):
        raise bad(path, f"{name} must be a number, got {str(value)[:30]!r}")
    number = float(value)
    if not infinite_ok and not math.isfinite(number):
        raise bad(path, f"{name} must be finite, got {value!r}")
    return number


def bounds(space: Mapping[str, Any], key: str, size: int, name: str, path: Path, infinite_ok: bool) -> np.ndarray:
    """One bound list of a space (``low`` or ``high``) with ``size`` entries."""
    values = space.get(key)
    if not isinstance(values, list) or len(values) != size:
        raise bad(path, f"{name}.{key} must hold {size} number(s), got {str(values)[:40]}")
    return np.array([_number(v, f"{name}.{key}[{i}]", path, infinite_ok) for i, v in enumerate(values)])


def check_shape(space: Mapping[str, Any], size: int, name: str, path: Path) -> None:
    """A space's ``shape`` must be ``[size]``, the size the actor block gives."""
    if space.get("shape") != [size]:
        raise bad(path, f"{name}.shape is {str(space.get('shape'))[:40]}, but the actor block says [{size}]")


def tensor_names(layer: int) -> tuple[str, str]:
    """The names ``weights.safetensors`` and ``spec.json`` give affine layer ``layer``'s weight and bias."""
    return f"layers.{layer}.weight", f"layers.{layer}.bias"


@dataclass(frozen=True)
class ActorShape:
    """The checked numbers of the ``actor`` block: enough to know every tensor before building."""

    observation_size: int
    action_size: int
    layer_widths: tuple[int, ...]
    nonlinearity: str
    log_std_soft_limits: tuple[float, float]

    def tensor_shapes(self) -> dict[str, tuple[int, ...]]:
        """Each tensor's name and shape, as ``spec.json``'s weight layout documents them."""
        sizes = [self.observation_size, *self.layer_widths, 2 * self.action_size]
        shapes: dict[str, tuple[int, ...]] = {}
        for i, (n_in, n_out) in enumerate(pairwise(sizes)):
            weight, bias = tensor_names(i)
            shapes[weight], shapes[bias] = (n_in, n_out), (n_out,)
        return shapes


def actor_shape(block: Any, path: Path) -> ActorShape:
    """Check the ``actor`` block's numbers, and the total size, without allocating anything.

    Raises:
        PolicyFolderError: If a number is missing, of the wrong type, out of range, or the network
            would hold more than :data:`MAX_PARAMETERS` numbers.
    """
    block = mapping(block, "actor", path)
    obs = count(block.get("observation_size"), "actor.observation_size", MAX_SIZE, path)
    act = count(block.get("action_size"), "actor.action_size", MAX_SIZE, path)
    widths = block.get("layer_widths")
    if not isinstance(widths, list):
        raise bad(path, f"actor.layer_widths must be a list of integers, got {str(widths)[:40]}")
    if len(widths) > MAX_LAYERS:
        raise bad(path, f"actor.layer_widths may hold at most {MAX_LAYERS} layers, got {len(widths)}")
    widths = tuple(count(w, f"actor.layer_widths[{i}]", MAX_SIZE, path) for i, w in enumerate(widths))
    nonlinearity = block.get("nonlinearity")
    if nonlinearity not in NONLINEARITIES:
        raise bad(path, f"actor.nonlinearity must be one of {sorted(NONLINEARITIES)}, got {str(nonlinearity)[:30]!r}")
    limits = block.get("log_std_soft_limits")
    if not isinstance(limits, list) or len(limits) != 2:
        raise bad(path, f"actor.log_std_soft_limits must be [low, high], got {str(limits)[:40]}")
    low, high = (_number(v, f"actor.log_std_soft_limits[{i}]", path, False) for i, v in enumerate(limits))
    if not low < high:
        raise bad(path, f"actor.log_std_soft_limits must have low below high, got [{low}, {high}]")
    shape = ActorShape(obs, act, widths, nonlinearity, (low, high))
    parameters = sum(math.prod(s) for s in shape.tensor_shapes().values())
    if parameters > MAX_PARAMETERS:
        raise bad(path, f"the actor block describes {parameters:,} weights, more than the {MAX_PARAMETERS:,} Kiln loads")
    return shape


def check_task_id(task_id: Any, path: Path) -> str:
    """A task id in Gymnasium's form (``Pendulum-v1``, ``kiln/FiringHold-v0``, ``module:Id``).

    Raises:
        PolicyFolderError: If the id has other characters, a ``..``, or is too long.
    """
    if (
        not isinstance(task_id, str)
        or len(task_id) > _MAX_ID_LENGTH
        or ".." in task_id
        or _TASK_ID.fullmatch(task_id) is None
    ):
        raise bad(path, f"env.id {str(task_id)[:60]!r} is not a task id (letters, digits, _ . - and one /, "
                        "optionally after module:)")  # fmt: skip
    return task_id


def task_module(task_id: str) -> str | None:
    """The module part of a ``module:id`` task id, which Gymnasium would import; None without one."""
    match = _TASK_ID.fullmatch(task_id)
    return match.group("module") if match else None
