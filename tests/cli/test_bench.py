"""scripts/bench.py: bad arguments end in Kiln's one-line error, the last line is the JSON record with
every key, and the loop's time split adds up (requirements of the project; no outside source).
Nothing here asserts on speed: speed lives in the command's output only."""

import json
from pathlib import Path

import pytest

from kiln.benchmark.loop_split import LoopSplit
from kiln.benchmark.sweep_wall import population_launcher_exists, sweep_command
from kiln.cli.bench import parse_parts, speed_ratio
from kiln.cli.common import check_overrides
from kiln.training.trainer import check_run
from tests.support.cli import assert_one_line_error, run_kiln, run_script

# The keys the issue asks the JSON line to carry, with the sub-keys of those that are objects.
REQUIRED = {
    "gemm_gflops": None,
    "updates_per_s": {"default", "small"},
    "gemm_fraction": {"default", "small"},
    "population_speedup": {"small_k8", "default_k8"},
    "loop_overhead_fraction": None,
    "sweep_wall_s": {"jobs", "population"},
}


@pytest.mark.parametrize(
    "args,phrase",
    [
        (["--parts", "gemm,warp"], "unknown part 'warp' in --parts"),
        (["--parts", ","], "--parts is empty"),
        (["--seconds", "0"], "--seconds must be a number above 0"),
        (["--seconds", "nan"], "--seconds must be a number above 0"),
        (["--seconds", "x"], "invalid float value: 'x'"),
        (["--steps", "0"], "--steps must be at least 1"),
        (["--profile", "--updates", "0"], "--updates must be at least 1"),
        (["--bogus"], "unrecognized arguments: --bogus"),
    ],
)
def test_bad_argument_is_one_line_exit_2(tmp_path: Path, args: list[str], phrase: str) -> None:
    proc = run_script("bench", *args, cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, phrase, "kiln bench --help")
    assert proc.stdout == ""


def test_loop_budget_within_the_warmup_is_refused_before_measuring(tmp_path: Path) -> None:
    proc = run_kiln("bench", "--parts", "loop", "--steps", "500", cwd=tmp_path, timeout=120)
    assert_one_line_error(proc, "--steps 500 ends within", "warm-up of 1000 steps", "above 1000")
    assert proc.stdout == ""


def test_last_line_is_json_with_every_key(tmp_path: Path) -> None:
    # Tiny budgets: the figures are meaningless, only their presence and kind are checked.
    proc = run_kiln("bench", "--parts", "update,population,loop", "--seconds", "0.05", "--steps", "1050", cwd=tmp_path, timeout=300)
    assert proc.returncode == 0, proc.stderr
    record = json.loads(proc.stdout.strip().splitlines()[-1])
    for key, sub in REQUIRED.items():
        assert key in record, key
        if sub is not None:
            assert set(record[key]) >= sub, key
    assert record["parts"] == ["gemm", "update", "population", "loop"]  # update brings its denominator, gemm
    for value in (record["gemm_gflops"], *record["updates_per_s"].values(), *record["gemm_fraction"].values(),
                  *record["population_speedup"].values()):
        assert value > 0
    assert 0 < record["loop_overhead_fraction"] < 1
    assert record["env_steps_per_s"] > 0
    assert set(record["act_us"]) == {"warm", "after_update", "after_pause"} and all(v > 0 for v in record["act_us"].values())
    assert record["sweep_wall_s"] == {"jobs": None, "population": None}  # not run
    assert list(tmp_path.iterdir()) == []  # runs and sweeps go to temporary folders


def test_profile_prints_operator_and_gemm_tables(tmp_path: Path) -> None:
    proc = run_kiln("bench", "--profile", "--updates", "2", "--seconds", "0.05", cwd=tmp_path, timeout=300)
    assert proc.returncode == 0, proc.stderr
    for size in ("default", "small", "small, population of 8"):
        assert f"update profile, {size} (" in proc.stdout and f"GEMMs of one update, {size}:" in proc.stdout
    assert "aten::bmm" in proc.stdout and "others)" in proc.stdout


def test_sweep_command_passes_kilns_own_override_checks() -> None:
    # The benchmark launches the sweep as a user would: every variant of its command line must compose.
    for population in (False, True) if population_launcher_exists() else (False,):
        args = sweep_command(Path("/tmp/kiln-bench-check"), 1200, population)
        assert args[1:3] == ["-m", "kiln.cli.train"]
        check_overrides("train", args[3:], check_run)  # exits 2 with one line on a bad override


def test_update_brings_gemm_and_parts_keep_their_order() -> None:
    assert parse_parts("loop,update") == ("gemm", "update", "loop")
    assert parse_parts(" sweep ") == ("sweep",)


def test_loop_split_adds_up() -> None:
    # Hand arithmetic: loop 10 s, env 1 s, update 6 s → overhead 3 s = 30 %; of it evaluate 2 s,
    # checkpoint 0.25 s, act 0.5 s, other 0.25 s; 2000 steps in 10 s = 200 steps/s.
    split = LoopSplit(steps=2000, loop_s=10.0, env_step_s=1.0, update_s=6.0, evaluate_s=2.0, checkpoint_s=0.25, act_s=0.5)
    assert split.overhead_fraction == pytest.approx(0.3)
    assert split.env_steps_per_s == pytest.approx(200.0)
    assert split.other_s == pytest.approx(0.25)
    assert sum(split.shares().values()) == pytest.approx(1.0)
    assert LoopSplit(2000, 10.0, 1.0, 6.0, None, 0.25, 0.5).shares()["other"] is None


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


def test_jobs_side_of_the_sweep_asks_for_the_local_launcher() -> None:
    # What the population launcher's author found: with the presets defaulting to populations, a jobs
    # command without launcher=local measured populations on both sides (project requirement, no source).
    assert "launcher=local" in sweep_command(Path("/tmp/kiln-bench-check"), 1200, False)
    assert "launcher=population" in sweep_command(Path("/tmp/kiln-bench-check"), 1200, True)
