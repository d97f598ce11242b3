"""The verification table: its solver checks, how a failure shows, and its tolerances."""

import json
import math

from agents import agent_vs_exact, verify


def test_solver_checks_pass_against_their_sources():
    report = verify.run_verify(quick=True, seed=0, say=lambda line: None)
    by_check = {row.check: row for row in report.rows}
    assert len(by_check) == 4 and report.passed, verify.format_table(report)
    # Sutton & Barto 2nd ed., Figure 3.5: every rounded cell equal.
    assert by_check["soft VI α=0: max |round(V,1) − v*| over 25 cells"].got == 0.0
    # DESIGN.md bound α log|A| / (1 − γ) with α = 1, |A| = 4, γ = 0.9: log 4 / 0.1 = 13.863 (hand arithmetic).
    bound = by_check["soft VI α=1: max (V_soft − v*) within bound"]
    assert math.isclose(bound.expected, 13.8629, abs_tol=1e-4)
    assert 0.0 < bound.got <= bound.expected
    # DESIGN.md (SciPy quadrature): tanh(N(0, 1)) has entropy 0.6698 nats.
    assert math.isclose(by_check["entropy of tanh(N(0,1)) from Kiln's log π"].got, 0.6698, abs_tol=1e-4)


def test_a_failed_row_shows_in_table_summary_and_json():
    good = verify.CheckRow("a", "src", 1.0, 1.0, 0.0, "≤ 5 % rel", True)
    bad = verify.CheckRow("b", "src", 1.0, 2.0, 1.0, "≤ 5 % rel", False)
    odd = verify.CheckRow("c", "src", 1.0, 0.5, math.nan, "0 ≤ got ≤ expected", True)
    report = verify.VerifyReport(rows=[good, bad, odd], wall_s=1.0)
    assert not report.passed
    table = verify.format_table(report)
    lines = table.splitlines()
    assert lines[0].split() == ["check", "reference", "expected", "got", "error", "tolerance", "result"]
    assert lines[3].endswith("FAIL") and lines[2].endswith("pass")
    assert "—" in lines[4]  # an error that does not apply is shown as a dash
    assert lines[-1] == "2 of 3 checks passed in 1 s"
    data = json.loads(json.dumps(verify.report_json(report, quick=True, seed=0), allow_nan=False))
    assert data["passed"] is False and data["checks"][2]["error"] is None


def test_tolerances_are_the_issue_numbers():
    # Issue 3 (the project's requirement): the slow tests repeat these literals beside their asserts.
    assert agent_vs_exact.BANDIT_FIXED_TOLERANCE == 0.05
    assert agent_vs_exact.BANDIT_TUNED_TOLERANCE == 0.10
    assert agent_vs_exact.LQR_ACTION_TOLERANCE == 0.10
    assert agent_vs_exact.LQR_RETURN_TOLERANCE == 0.05


def test_agent_rows_carry_each_comparison():
    measurement = agent_vs_exact.Measurement("std", "bandit: std of a", "quadrature", 0.15, 0.16, 0.0667, 0.05)
    check = agent_vs_exact.AgentCheck("bandit", (measurement,), 4000, 3745, 20.0, {})
    (row,) = verify.agent_rows(check)
    # 0.0667 > 0.05: fails, and the tolerance reads as a percentage.
    assert (row.expected, row.got, row.tolerance, row.passed) == (0.15, 0.16, "≤ 5 % rel", False)
    assert check.get("std") is measurement
