"""The per-operator profile of an update: its table laid out by hand from given rows, and the profile
of a real (tiny) update read through torch.profiler, checked for its keys and units (shares of the
operators' self time add up to 1; µs per update add up to the total), never for speed."""

from __future__ import annotations

import pytest

from kiln.benchmark.update_profile import OperatorRow, operator_table, profile_update
from kiln.config.agent_settings import AgentSettings


def test_table_by_hand():
    rows = [
        OperatorRow("aten::bmm", 12.0, 800.0, 0.5),
        OperatorRow("aten::addmm", 6.0, 400.0, 0.25),
        OperatorRow("aten::relu", 4.0, 240.0, 0.15),
        OperatorRow("aten::add_", 10.0, 160.0, 0.1),
    ]
    lines = operator_table(rows, top=2)
    assert lines[0] == f"{'operator':<36}{'calls/upd':>10}{'self µs/upd':>13}{'share':>8}"
    # Fixed columns: name (36), calls (10, one decimal), µs (13, one decimal), share (8, a percentage).
    assert lines[1] == f"{'aten::bmm':<36}{'12.0':>10}{'800.0':>13}{'50.0%':>8}"
    # The rest in one line: 4 + 10 calls, 240 + 160 µs, 15 % + 10 % of the time.
    assert lines[3] == f"{'(2 others)':<36}{'14.0':>10}{'400.0':>13}{'25.0%':>8}"
    assert len(lines) == 4 and len(operator_table(rows)) == 5  # no "others" line when every row is shown


def test_long_operator_names_are_cut_to_their_column():
    line = operator_table([OperatorRow("x" * 50, 1.0, 1.0, 1.0)])[1]
    assert line.startswith("x" * 35 + " ") and len(line) == 36 + 10 + 13 + 8


def test_profile_of_a_real_update_adds_up():
    rows, total_us = profile_update(3, 1, AgentSettings(layer_widths=(8,), batch_size=16), population=2, updates=2)
    assert rows and total_us > 0
    # Rows are sorted by self time, their shares of it add up to 1 and their µs to the total.
    assert [r.self_us_per_update for r in rows] == sorted((r.self_us_per_update for r in rows), reverse=True)
    assert sum(r.share for r in rows) == pytest.approx(1.0, rel=1e-9)
    assert sum(r.self_us_per_update for r in rows) == pytest.approx(total_us, rel=1e-9)
    # A 2-member update multiplies its layers with batched products (torch.profiler names them aten::*).
    assert any(r.name == "aten::bmm" for r in rows) and all(r.calls_per_update > 0 for r in rows)
