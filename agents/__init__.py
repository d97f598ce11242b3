"""Kiln: soft actor-critic on CPU — train, evaluate, compare and hand on stochastic controllers.

The public Python API (README, "Use from Python")::

    import kiln

    run = kiln.train(["env=pendulum", "seed=3"])   # the folder of the finished run
    policy = kiln.load_policy(run)
    action = policy.act(observation)               # in the task's units
    record = kiln.evaluate(run, episodes=10)

``kiln.train``, ``load_policy``, ``evaluate``, ``compare``, ``export_onnx`` and ``verify`` (from
:mod:`kiln.api`), the loaded policy's class ``kiln.Policy``, Kiln's errors (``kiln.KilnError`` and its
subclasses) and ``kiln.__version__``. Every name is resolved when first used (PEP 562), so ``import
kiln`` loads nothing heavy: ``import kiln.envs`` and the ``kiln`` command do not load torch through here.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

# Public name → the module that defines it.
_LAZY: dict[str, str] = {
    "train": "kiln.api",
    "load_policy": "kiln.api",
    "evaluate": "kiln.api",
    "compare": "kiln.api",
    "export_onnx": "kiln.api",
    "verify": "kiln.api",
    "Policy": "kiln.storage.policy_io",
    "KilnError": "kiln.errors",
    "ConfigError": "kiln.errors",
    "PolicyFolderError": "kiln.errors",
    "RunFolderError": "kiln.errors",
    "CheckpointError": "kiln.errors",
    "RunStopped": "kiln.errors",
    "DivergenceError": "kiln.errors",
    "CompareInputError": "kiln.errors",
    "SweepError": "kiln.errors",
    "TaskSetupError": "kiln.errors",
    "ExportError": "kiln.onnx_export.controller_file",
}

# Written out (not taken from the table) so that tools that read the file without running it see them.
__all__ = [
    "CheckpointError",
    "CompareInputError",
    "ConfigError",
    "DivergenceError",
    "ExportError",
    "KilnError",
    "Policy",
    "PolicyFolderError",
    "RunFolderError",
    "RunStopped",
    "SweepError",
    "TaskSetupError",
    "__version__",
    "compare",
    "evaluate",
    "export_onnx",
    "load_policy",
    "train",
    "verify",
]  # fmt: skip

if TYPE_CHECKING:  # what the names are, for type checkers and editors; nothing is imported at run time
    from kiln.api import compare, evaluate, export_onnx, load_policy, train, verify
    from kiln.errors import (
        CheckpointError,
        CompareInputError,
        ConfigError,
        DivergenceError,
        KilnError,
        PolicyFolderError,
        RunFolderError,
        RunStopped,
        SweepError,
        TaskSetupError,
    )
    from kiln.onnx_export.controller_file import ExportError
    from kiln.storage.policy_io import Policy

    __version__: str


def __getattr__(name: str) -> Any:
    """Resolve a public name on first use, and keep it, so later uses cost nothing.

    Args:
        name: The attribute asked for.

    Returns:
        The function, class or version string.

    Raises:
        AttributeError: If ``name`` is not one of Kiln's public names.
    """
    if name == "__version__":
        value: Any = importlib.import_module("kiln.version").KILN_VERSION
    elif name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
    else:
        raise AttributeError(f"module 'kiln' has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    """The public names (resolved or not) and the module's dunders, without its helpers.

    Returns:
        The names, sorted.
    """
    return sorted({*__all__, *(name for name in globals() if name.startswith("__"))})
