"""Writing report files so that a reader never sees half a file and nothing else is touched."""

from __future__ import annotations

import csv
import io
import json
import math
import os
import secrets
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any


def write_atomic(path: Path, data: bytes) -> None:
    """Writes ``data`` to a temporary file beside ``path`` and renames it over ``path``.

    The rename is atomic on one filesystem, so an interrupted report leaves the previous file
    intact instead of a truncated one.

    Args:
        path: Destination file; its folder must exist.
        data: The bytes to write.

    Raises:
        OSError: If the folder is not writable.
    """
    # Not tempfile.mkstemp: its files are private (0600); this one gets the user's usual permissions.
    temporary = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.partial")
    try:
        with open(temporary, "xb") as file:
            file.write(data)
        os.replace(temporary, path)
    except BaseException:
        # Leave no stray partial file behind on failure.
        temporary.unlink(missing_ok=True)
        raise


def write_text(path: Path, text: str) -> None:
    """Writes UTF-8 text atomically (see :func:`write_atomic`).

    Args:
        path: Destination file.
        text: Content.
    """
    write_atomic(path, text.encode("utf-8"))


def _cell(value: Any) -> str:
    """A CSV cell: floats in full precision (repr round-trips exactly), missing values empty."""
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    return str(value)


def write_csv(path: Path, header: Sequence[str], rows: Iterable[Sequence[Any]]) -> None:
    """Writes a CSV table atomically; NaN and None become empty cells.

    Args:
        path: Destination file.
        header: Column names.
        rows: Rows of cells.
    """
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([_cell(value) for value in row])
    write_text(path, buffer.getvalue())


def _plain(value: Any) -> Any:
    """Converts to JSON-safe data: NaN/inf → None (JSON has no NaN), numpy → Python, paths → text."""
    if isinstance(value, dict):
        return {str(key): _plain(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(item) for item in value]
    if hasattr(value, "tolist"):
        return _plain(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, Path):
        return str(value)
    return value


def write_json(path: Path, data: Any) -> None:
    """Writes data as indented JSON atomically; floats keep full precision.

    Args:
        path: Destination file.
        data: Nested dicts/lists of numbers, text, numpy arrays and paths.
    """
    write_text(path, json.dumps(_plain(data), indent=2, allow_nan=False) + "\n")
