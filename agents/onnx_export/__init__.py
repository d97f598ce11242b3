"""Export a saved policy to ONNX: the controller observation → action in the task's units.

:func:`export_policy` reads a policy folder (``spec.json`` + ``weights.safetensors``), builds the
ONNX graph from the loaded actor's own steps (:meth:`kiln.learner.actor.SquashedGaussianActor.steps`),
checks it against Kiln's actor with onnxruntime, and writes the file. Nothing here imports onnx
until an export runs, so the rest of Kiln (and ``kiln export --help``) works without the ``export`` extra.
"""

from kiln.onnx_export.controller_file import (
    CAUTION,
    DEFAULT_OPSET,
    SUPPORTED_OPSETS,
    ExportError,
    ExportReport,
    export_policy,
)

__all__ = ["CAUTION", "DEFAULT_OPSET", "SUPPORTED_OPSETS", "ExportError", "ExportReport", "export_policy"]
