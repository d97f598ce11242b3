"""``export_policy``: a saved policy folder → one checked ONNX file.

Every argument is checked before anything is written: the opset, the output path (an existing file
is kept unless ``overwrite``), the policy folder. The file is written under a temporary name and
renamed (``kiln.storage.run_folder.write_bytes_atomic``), so an interrupted export never leaves half a file.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

from kiln.errors import KilnError
from kiln.storage.policy_io import Policy, load_policy, resolve_policy_folder
from kiln.storage.run_folder import write_bytes_atomic
from kiln.version import KILN_VERSION

# 13 is the first opset in which every operator the graph uses has its present definition (Split
# takes its sizes as an input from 13 on); 21 is the newest the test suite checks against onnxruntime.
SUPPORTED_OPSETS = range(13, 22)
DEFAULT_OPSET = 17
# Observations the export checks against Kiln's actor before writing; the tolerance is the parity
# the tests require of float32 inference (a larger gap means the graph is wrong, not round-off).
CHECK_OBSERVATIONS = 1000
CHECK_SEED = 0
TOLERANCE = 1e-5

CAUTION = (
    "An exported controller is not safe to run on physical equipment without independent safety limits, "
    "an emergency stop and supervision by a person who can take over; local regulations and qualified "
    "engineers govern any deployment."
)


class ExportError(KilnError):
    """An export that cannot be made as asked (opset, output file, missing packages, failed check)."""


@dataclass(frozen=True)
class ExportReport:
    """What an export wrote and how closely it reproduces Kiln."""

    policy_folder: Path
    out: Path
    stochastic: bool
    opset: int
    size_bytes: int
    checked_observations: int
    max_difference: float


def check_opset(opset: int) -> int:
    """Return ``opset`` if supported.

    Raises:
        ExportError: If it is outside :data:`SUPPORTED_OPSETS`.
    """
    if isinstance(opset, bool) or not isinstance(opset, int) or opset not in SUPPORTED_OPSETS:
        raise ExportError(
            f"opset {opset!r} is not supported: choose one from {SUPPORTED_OPSETS.start} to "
            f"{SUPPORTED_OPSETS.stop - 1} (default {DEFAULT_OPSET})"
        )
    return opset


def check_out(out: Path, overwrite: bool) -> Path:
    """Return ``out`` if a file may be written there.

    Raises:
        ExportError: If it is an existing file (and not ``overwrite``), a folder, or its folder is missing.
    """
    out = Path(out)
    if out.is_dir():
        raise ExportError(f"{out} is a folder: give a file name, e.g. --out {out / 'policy.onnx'}")
    if out.exists() and not overwrite:
        raise ExportError(f"{out} already exists: choose another --out, or pass --overwrite to replace it")
    if not out.parent.is_dir():
        raise ExportError(f"the folder {out.parent} does not exist: create it first or choose another --out")
    return out


def _metadata(policy: Policy, stochastic: bool) -> dict[str, str]:
    """Text stored in the file, so a runtime can read what it drives without the policy folder."""
    spec = policy.spec
    inputs = "observation [batch, n]" + (", noise [batch, m] ~ N(0, I)" if stochastic else "")
    return {
        "kiln.controller": "stochastic" if stochastic else "deterministic",
        "kiln.signature": f"{inputs} -> action [batch, m] in the task's units",
        "kiln.env": json.dumps(spec["env"]),
        "kiln.observation_space": json.dumps(spec["observation_space"]),
        "kiln.action_space": json.dumps(spec["action_space"]),
        "kiln.trained_with": str(spec.get("kiln_version")),
        "kiln.caution": CAUTION,
    }


def _require_onnx() -> None:
    try:
        import onnx  # noqa: F401
        import onnxruntime  # noqa: F401
    except ImportError:
        raise ExportError("export needs onnx and onnxruntime: pip install 'kiln-sac[export]'") from None


def export_policy(
    policy_path: Path, out: Path, stochastic: bool = False, opset: int = DEFAULT_OPSET, overwrite: bool = False
) -> ExportReport:
    """Export a saved policy as an ONNX controller and check it against Kiln before writing.

    Args:
        policy_path: A policy folder, or a run folder containing ``policy/``.
        out: The ONNX file to write.
        stochastic: Export the sampling controller (input ``noise``); else the deterministic one.
        opset: ONNX opset, one of :data:`SUPPORTED_OPSETS`.
        overwrite: Replace ``out`` if it exists.

    Returns:
        What was written, with the largest difference from Kiln's actions on the check observations.

    Raises:
        ExportError: For an unsupported opset, an output that may not be written, missing packages,
            or a model that does not reproduce Kiln.
        PolicyFolderError: If ``policy_path`` holds no loadable policy.
    """
    check_opset(opset)
    check_out(out, overwrite)
    folder = resolve_policy_folder(Path(policy_path))
    policy = load_policy(folder)
    _require_onnx()
    from kiln.onnx_export.graph import controller_model
    from kiln.onnx_export.parity import max_difference

    try:
        # The graph is the loaded actor's own steps; the map to task units is the policy's ActionScale.
        model = controller_model(
            policy.actor.steps(), policy.scale, stochastic, opset,
            _metadata(policy, stochastic), f"Kiln controller exported from {folder.resolve()}. {CAUTION}",
        )  # fmt: skip
    except ValueError as err:
        raise ExportError(f"{folder} cannot be exported: {err}") from None
    model.producer_version = KILN_VERSION
    data = model.SerializeToString()
    gap = max_difference(data, policy, stochastic, CHECK_OBSERVATIONS, CHECK_SEED)
    if not gap <= TOLERANCE:  # also refuses NaN
        raise ExportError(
            f"the exported controller differs from Kiln's by {gap:.3g} (> {TOLERANCE:g}) on "
            f"{CHECK_OBSERVATIONS} observations: nothing written; report this with the policy folder"
        )
    try:
        write_bytes_atomic(out, data)
    except OSError as err:
        raise ExportError(f"cannot write {out} ({err.strerror}): choose another --out") from None
    return ExportReport(folder, Path(out), stochastic, opset, len(data), CHECK_OBSERVATIONS, gap)
