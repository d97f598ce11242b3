"""scripts/bench.py: bad arguments end in Kiln's one-line error, and ratios read the right way round
(requirements of the project; no outside source)."""

from pathlib import Path

import pytest

from kiln_cli.bench import speed_ratio
from tests.scripts.cli import assert_one_line_error, run_kiln, run_script


@pytest.mark.parametrize(
    "args,phrase",
    [
        (["--obs", "0"], "must be at least 1"),
        (["--threads", "1", "0"], "must be at least 1"),
        (["--seconds", "0"], "--seconds above 0"),
        (["--obs", "x"], "invalid int value: 'x'"),
        (["--bogus"], "unrecognized arguments: --bogus"),
    ],
)
def test_bad_argument_is_one_line_exit_2(tmp_path: Path, args: list[str], phrase: str) -> None:
    proc = run_script("bench", *args, cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, phrase, "kiln bench --help")
    assert proc.stdout == ""


def test_kiln_bench_refuses_the_same_way(tmp_path: Path) -> None:
    assert_one_line_error(run_kiln("bench", "--batch", "-3", cwd=tmp_path, timeout=120), "must be at least 1")


@pytest.mark.parametrize(
    "ratio,text",
    [
        (1.5, "1.50x faster"),
        (1.0, "1.00x faster"),
        # Hand arithmetic: 1 / 0.98 = 1.0204…, so a ratio of 0.98 is about 2 % slower.
        (0.98, "1.02x slower"),
        (0.5, "2.00x slower"),
    ],
)
def test_speed_ratio_reads_as_faster_or_slower(ratio: float, text: str) -> None:
    assert speed_ratio(ratio) == text
