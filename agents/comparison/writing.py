"""Report files as CSV and JSON, written atomically so that a reader never sees half a file."""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

# The atomic writer is the run folder's (one owner for every file Kiln writes).
from kiln.storage.run_folder import write_text_atomic


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
    write_text_atomic(path, buffer.getvalue())


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
    write_text_atomic(path, json.dumps(_plain(data), indent=2, allow_nan=False) + "\n")
