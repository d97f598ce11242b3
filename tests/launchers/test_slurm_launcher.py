"""Sweeps on a real SLURM cluster (launcher=slurm): 2 entropy targets × 2 seeds as SLURM array jobs,
compared afterwards; and the one-line errors when the cluster cannot be reached.

The cluster is a real one-node cluster (Debian's slurmctld, slurmd and munge) that CI starts with
``.ci/slurm_cluster.sh`` before the suite; the script exports KILN_SLURM_CLUSTER (the partition) and
SLURM_CONF. In CI (CI=true) a missing cluster fails these tests; elsewhere they are skipped, or
deselected with ``-m "not slurm"``.
"""

import csv
import json
import os
import sys
from pathlib import Path

import pytest

from kiln.launchers.slurm_launcher import SlurmSweepLauncher, _last_error_line
from tests.support.cli import TINY_RUN, assert_one_line_error, run_script

TARGETS = ("-1.0", "-3.0")
SLURM_ARGS = ("sweep=target_entropy", "launcher=slurm", "hydra.launcher.mem_gb=1", "hydra.launcher.timeout_min=10")
ONE_MEMBER = ("agent.temperature.target_entropy=-1.0", "seed=0")  # the error tests need no more


@pytest.fixture(scope="module")
def partition():
    name = os.environ.get("KILN_SLURM_CLUSTER")
    if not name:
        message = ("no SLURM cluster: start one with `bash .ci/slurm_cluster.sh start DIR && source DIR/env` "
                   "(CI's .ci/run does), or deselect these tests with -m 'not slurm'")  # fmt: skip
        if os.environ.get("CI"):
            pytest.fail(message)  # CI promises a cluster: its absence is a failure, never a skip
        pytest.skip(message)
    return name


@pytest.fixture(scope="module")
def sweep(partition, tmp_path_factory):
    work = tmp_path_factory.mktemp("slurm_sweep")
    sweep_dir = work / "sweep"
    proc = run_script(
        "train", *SLURM_ARGS, f"hydra.launcher.partition={partition}",
        f"agent.temperature.target_entropy={','.join(TARGETS)}", "seed=0,1", f"hydra.sweep.dir={sweep_dir}",
        *TINY_RUN, cwd=work, timeout=300,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    return work, sweep_dir, proc


@pytest.mark.slurm
def test_every_member_ran_as_a_slurm_job(sweep):
    _, sweep_dir, proc = sweep
    array_id = proc.stdout.split("SLURM array job ", 1)[1].split(":", 1)[0]
    members = sorted(f"pendulum_target={t}_seed={s}" for t in TARGETS for s in (0, 1))
    job_ids = set()
    for name in members:
        run = sweep_dir / name
        result = json.loads((run / "result.json").read_text())
        assert (run / "policy" / "weights.safetensors").exists() and (run / "policy" / "spec.json").exists()
        assert f"target={result['target_entropy']}" in name and f"seed={result['seed']}" in name
        # result.json records the SLURM job that trained the member ("<array>_<task>", as squeue shows)...
        job_id = result["ran_on"]["slurm_job"]
        assert job_id.startswith(f"{array_id}_")
        job_ids.add(job_id)
        # ...and that job's own log, written by srun on the node, shows the run finishing there.
        log = (sweep_dir / "slurm" / job_id / f"{job_id}_0_log.out").read_text()
        assert f"job_id={job_id}" in log and f"run folder   {run}" in log
    assert len(job_ids) == 4


@pytest.mark.slurm
def test_compare_reads_the_cluster_sweep(sweep):
    work, sweep_dir, _ = sweep
    proc = run_script("compare", str(sweep_dir), "--resamples", "200", cwd=work, timeout=300)
    assert proc.returncode == 0, proc.stderr
    with open(sweep_dir / "report" / "groups.csv") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == 2 and sum(int(row["runs"]) for row in rows) == 4, rows


@pytest.mark.slurm
def test_unknown_partition_is_one_line(partition, tmp_path):
    proc = run_script("train", *SLURM_ARGS, "hydra.launcher.partition=no_such_partition", *ONE_MEMBER, *TINY_RUN,
                      f"hydra.sweep.dir={tmp_path / 'sweep'}", cwd=tmp_path, timeout=120)  # fmt: skip
    assert_one_line_error(proc, "sbatch refused", "Invalid partition")


@pytest.mark.slurm
def test_unreachable_controller_is_one_line(partition, tmp_path):
    # The same cluster description with the controller's port moved to one nobody listens on.
    conf = Path(os.environ["SLURM_CONF"]).read_text()
    dead = tmp_path / "slurm.conf"
    dead.write_text("".join("SlurmctldPort=9\n" if line.startswith("SlurmctldPort=") else line
                            for line in conf.splitlines(keepends=True)))  # fmt: skip
    proc = run_script("train", *SLURM_ARGS, *ONE_MEMBER, *TINY_RUN, f"hydra.sweep.dir={tmp_path / 'sweep'}",
                      cwd=tmp_path, timeout=180, env={"SLURM_CONF": str(dead)})  # fmt: skip
    assert_one_line_error(proc, "sbatch refused", "Unable to contact slurm controller")


@pytest.mark.slurm
def test_job_lost_before_its_result_ends_the_sweep(partition, tmp_path):
    # The job script dies before the member starts, so no result is ever written: the launcher must
    # notice that the job left the queue and stop with the job's last error line, not wait for ever.
    proc = run_script(
        "train", *SLURM_ARGS, f"hydra.launcher.partition={partition}", *ONE_MEMBER, *TINY_RUN,
        "hydra.launcher.setup=['echo node lost its scratch disk >&2','exit 3']",
        f"hydra.sweep.dir={tmp_path / 'sweep'}", cwd=tmp_path, timeout=120, env={"KILN_SLURM_LOST_AFTER_S": "2"},
    )  # fmt: skip
    assert_one_line_error(proc, "ended without a result", "node lost its scratch disk")


def test_missing_sbatch_is_one_line(tmp_path):
    # No cluster needed: a PATH holding only Python's folder has no sbatch.
    proc = run_script("train", *SLURM_ARGS, *ONE_MEMBER, *TINY_RUN, f"hydra.sweep.dir={tmp_path / 'sweep'}",
                      cwd=tmp_path, timeout=120, env={"PATH": str(Path(sys.executable).parent)})  # fmt: skip
    assert_one_line_error(proc, "sbatch on PATH")
    assert not any((tmp_path / "sweep").glob("pendulum_*")), "no run folder may be made"


def test_last_error_line_picks_the_last_line_with_the_prefix() -> None:
    # Hand-made logs: sbatch's own complaint lines start with "sbatch: error:" (as the cluster tests show).
    refusal = "sbatch: error: Batch job submission failed: Invalid partition name specified"
    log = f"submitting\n{refusal}\n\n  trailing note  \n"
    assert _last_error_line(log, "sbatch: error:") == refusal
    assert _last_error_line(log) == "trailing note"  # no prefix: the last non-empty line, stripped
    assert _last_error_line("only this\n", "kiln: error:") == "only this"  # no line with the prefix
    assert _last_error_line("\n \n", "kiln: error:") == "its log is empty"


def test_squeue_out_of_reach_reads_as_unknown(monkeypatch, tmp_path: Path) -> None:
    # No squeue on PATH: the program cannot be started (ENOENT), which the wait treats as a failing
    # controller (None), not as an empty queue that would mark every job lost.
    monkeypatch.setenv("PATH", str(tmp_path))
    assert SlurmSweepLauncher._queued_job_ids() is None
