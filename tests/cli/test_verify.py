"""scripts/verify.py through the real command line: the table, the JSON, exit codes, one-line errors."""

import json

import pytest

from kiln.exact.check_row import CheckRow
from tests.support.cli import run_script


def test_quick_prints_the_table_and_exits_0(tmp_path):
    proc = run_script("verify", "--quick", "--out", "table.json", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    assert lines[0].split() == ["check", "reference", "expected", "got", "error", "tolerance", "result"]
    rows = [line for line in lines if line.endswith(("pass", "FAIL"))]
    assert len(rows) == 4 and all(line.endswith("pass") for line in rows)
    assert "Sutton & Barto" in rows[0]
    assert any(line.startswith("4 of 4 checks passed") for line in lines)
    # The table fits a 120-column terminal (long cells wrap onto continuation lines).
    assert max(len(line) for line in lines) <= 120
    data = json.loads((tmp_path / "table.json").read_text())
    assert data["quick"] is True and data["passed"] is True and len(data["checks"]) == 4
    assert "TanhTransform" in data["checks"][2]["source"]
    assert data["runs"] == []  # --quick trains nothing


@pytest.mark.parametrize(
    "args,phrase",
    [
        (["--bogus"], "unrecognized arguments: --bogus"),
        (["--seed", "x"], "invalid int value"),
        (["--seed", "-1"], "--seed must be ≥ 0"),
        (["--out", "missing/table.json"], "does not exist"),
    ],
)
def test_bad_argument_is_one_line_exit_2(tmp_path, args, phrase):
    proc = run_script("verify", *args, cwd=tmp_path, timeout=60)
    # Requirement of the project (no outside source): one line, exit 2, no traceback.
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("kiln: error: ") and phrase in lines[0], proc.stderr
    assert proc.stdout == ""


def test_a_failed_check_exits_1(monkeypatch, capsys):
    import kiln.exact.verify_table
    from kiln.cli import verify as command

    def failing() -> CheckRow:
        return CheckRow("off", "always off", "none", 1.0, 2.0, 1.0, 0.05, "rel")

    monkeypatch.setattr(kiln.exact.verify_table, "SOLVER_CHECKS", (*kiln.exact.verify_table.SOLVER_CHECKS, failing))
    assert command.main(["--quick"]) == 1
    out = capsys.readouterr().out
    assert "FAIL" in out and "4 of 5 checks passed" in out


def test_an_error_inside_the_checks_is_one_line_exit_2(monkeypatch, capsys):
    # A Kiln error raised while the checks run (a preset that cannot be composed, say) is bad input,
    # exit 2 (README, "Bad input"), not a traceback with exit 1, which would read as "a check failed".
    import kiln.exact.verify_table
    from kiln.cli import verify as command
    from kiln.errors import KilnError

    def broken(quick, seed, say=print):
        raise KilnError("the presets cannot be composed: reinstall Kiln")

    monkeypatch.setattr(kiln.exact.verify_table, "run_verify", broken)
    with pytest.raises(SystemExit) as ended:
        command.main(["--quick"])
    assert ended.value.code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["kiln: error: the presets cannot be composed: reinstall Kiln"]
