"""Run a command where the file system says no: a read-only folder (also for root) or a small
file-size limit, and compare the folder tree before and after.

Root ignores permission bits through the capabilities CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH and
CAP_FOWNER (capabilities(7)); dropping them from the child's bounding set makes a 0o555 folder
read-only for root too, so the same test holds for every account.
"""

from __future__ import annotations

import ctypes
import os
import resource
from collections.abc import Callable
from pathlib import Path

_PR_CAPBSET_DROP = 24  # <linux/prctl.h>
_PERMISSION_OVERRIDES = (1, 2, 3)  # CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH, CAP_FOWNER (<linux/capability.h>)

# Python would write __pycache__ files as it imports, and those writes would meet the limit too.
NO_BYTECODE = {"PYTHONDONTWRITEBYTECODE": "1"}


def _drop_permission_overrides() -> None:
    if os.geteuid() != 0:
        return  # an ordinary account is already bound by permission bits
    libc = ctypes.CDLL(None, use_errno=True)
    for capability in _PERMISSION_OVERRIDES:
        if libc.prctl(_PR_CAPBSET_DROP, capability, 0, 0, 0) != 0:
            raise OSError(ctypes.get_errno(), "prctl(PR_CAPBSET_DROP) failed")


def restricted(file_size: int | None = None) -> Callable[[], None]:
    """A ``preexec_fn``: permission bits bind the child (root included) and, if given, files it
    writes may grow to at most ``file_size`` bytes (RLIMIT_FSIZE, setrlimit(2))."""

    def apply() -> None:
        _drop_permission_overrides()
        if file_size is not None:
            resource.setrlimit(resource.RLIMIT_FSIZE, (file_size, file_size))

    return apply


def tree(root: Path) -> dict[str, bytes | None]:
    """Every path under ``root`` (relative) with a file's bytes, or None for a folder."""
    return {
        str(path.relative_to(root)): (None if path.is_dir() else path.read_bytes())
        for path in sorted(root.rglob("*"))
    }
