"""Report files as CSV and JSON, read back with Python's own csv and json modules: floats round-trip
exactly, missing values are empty (CSV) or null (JSON has no NaN, RFC 8259), and nothing half-written is
left beside them."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from kiln.comparison.writing import write_csv, write_json


def test_csv_keeps_full_precision_and_empties_missing_cells(tmp_path: Path) -> None:
    path = tmp_path / "groups.csv"
    third = 1 / 3
    rows = [["-1", third, None, "n=1, no CI", True], ["-3", math.nan, 2, "", False]]
    write_csv(path, ["group", "iqm", "low", "note", "best"], rows)
    with open(path, newline="", encoding="utf-8") as file:
        rows = list(csv.reader(file))
    # Source: Python's csv module; repr of a float round-trips it exactly (Python's float repr guarantee).
    assert rows == [
        ["group", "iqm", "low", "note", "best"], ["-1", repr(third), "", "n=1, no CI", "True"], ["-3", "", "2", "", "False"]
    ]
    assert float(rows[1][1]) == third
    assert path.read_text(encoding="utf-8").endswith("\n") and "\r" not in path.read_text(encoding="utf-8")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["groups.csv"]  # no temporary file left


def test_json_turns_numpy_paths_and_non_finite_numbers_into_plain_data(tmp_path: Path) -> None:
    path = tmp_path / "comparison.json"
    data = {
        "scores": np.array([1.5, np.nan, np.inf]),
        "run": Path("sweep") / "0",
        "nested": [{"step": np.int64(7), "pair": (0.1, -math.inf)}],
        1: "key made text",
    }
    write_json(path, data)
    # Source: json.loads with strict parsing of the constants JSON does not have (NaN, Infinity).
    def refuse(name: str) -> None:
        raise AssertionError(f"{name} in the file")

    loaded = json.loads(path.read_text(encoding="utf-8"), parse_constant=refuse)
    assert loaded == {"scores": [1.5, None, None], "run": str(Path("sweep") / "0"),
                      "nested": [{"step": 7, "pair": [0.1, None]}], "1": "key made text"}  # fmt: skip
    assert path.read_text(encoding="utf-8").startswith("{\n  ")  # indented for a reader


def test_rewriting_replaces_the_whole_file(tmp_path: Path) -> None:
    path = tmp_path / "runs.csv"
    write_csv(path, ["a"], [[1], [2], [3]])
    write_csv(path, ["b"], [[4]])
    assert path.read_text(encoding="utf-8") == "b\n4\n"
