"""Sweeps on a SLURM cluster: Hydra's submitit launcher, submitting one array job per sweep.

Selected by the preset ``configs/launcher/slurm.yaml`` (``kiln train sweep=... launcher=slurm``). The
plugin's own launcher is kept for what happens inside a job (the job runs the member through Hydra,
and submitit checkpoints and requeues it on SIGTERM); this subclass changes the side that submits
and waits:

* a cluster that cannot be reached (no ``sbatch`` on PATH, ``sbatch`` refusing the jobs: controller
  down, unknown partition, limits) ends the command with one ``kiln: error:`` line, exit code 2;
* the wait watches ``squeue`` and the jobs' result files. Submitit's own wait asks ``sacct``, which
  fails on a cluster without accounting storage, and then waits for ever on a job that was killed
  before it wrote its result. Here a job that has left the queue without a result ends the sweep
  with an error naming the job, its last error line and its log.
"""

from __future__ import annotations

import contextlib
import getpass
import io
import os
import shutil
import subprocess
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from hydra.core.singleton import Singleton
from hydra.core.utils import JobReturn, filter_overrides
from hydra_plugins.hydra_submitit_launcher.config import BaseQueueConf
from hydra_plugins.hydra_submitit_launcher.submitit_launcher import SlurmLauncher
from omegaconf import OmegaConf

from kiln.errors import SweepError

# A job can leave squeue a moment before its result file is visible (a shared file system's cache),
# so it counts as lost only after this long without one (the variable shortens it for tests).
LOST_AFTER_S = float(os.environ.get("KILN_SLURM_LOST_AFTER_S", "30"))
# squeue failing this long in a row means the controller is gone, not busy for a moment.
CONTROLLER_GONE_AFTER_S = 120.0
# Submission needs a controller that answers; sbatch retries on its own when it is merely busy.
SBATCH_TIMEOUT_S = 300.0
# First poll soon (short test jobs), then back off to spare a large cluster's controller.
POLL_FIRST_S, POLL_MAX_S = 1.0, 15.0


def _last_error_line(text: str, prefix: str = "") -> str:
    """The last non-empty line of ``text`` that starts with ``prefix`` (else the last line at all)."""
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    chosen = [line for line in lines if line.startswith(prefix)] if prefix else []
    return (chosen or lines or ["its log is empty"])[-1]


class SlurmSweepLauncher(SlurmLauncher):
    """The submitit SLURM launcher with Kiln's checks before submitting and a wait that cannot hang."""

    def launch(self, job_overrides: Sequence[Sequence[str]], initial_job_idx: int) -> Sequence[JobReturn]:
        """Submit every member as one array job, wait for all of them, return Hydra's job records.

        Raises:
            SweepError: When the cluster cannot be reached or a job ends without a result (exit code 2).
        """
        import submitit  # noqa: PLC0415 -- the plugin imports it lazily too: Hydra loads launchers at start

        assert self.config is not None
        sbatch = shutil.which("sbatch")
        if sbatch is None:
            raise SweepError("launcher=slurm needs SLURM's sbatch on PATH, and it is not there: run the sweep on a login "
                             "node of the cluster, or drop launcher=slurm to run it on this machine")  # fmt: skip
        executor = submitit.AutoExecutor(
            folder=self.params["submitit_folder"], cluster="slurm",
            slurm_max_num_timeout=self.params["max_num_timeout"],
        )  # fmt: skip
        # The plugin's keys map to submitit's: the shared ones as they are, SLURM's with a prefix.
        shared = set(OmegaConf.structured(BaseQueueConf).keys())
        executor.update_parameters(**{
            key if key in shared else f"slurm_{key}": value
            for key, value in self.params.items() if key not in ("submitit_folder", "max_num_timeout")
        })  # fmt: skip
        sweep_dir = Path(str(self.config.hydra.sweep.dir))
        sweep_dir.mkdir(parents=True, exist_ok=True)
        members = [" ".join(filter_overrides(overrides)) for overrides in job_overrides]
        arguments = [
            (list(overrides), "hydra.sweep.dir", initial_job_idx + i, f"job_id_for_{initial_job_idx + i}",
             Singleton.get_state())
            for i, overrides in enumerate(job_overrides)
        ]  # fmt: skip
        sbatch_stderr = io.StringIO()  # submitit echoes sbatch's complaints; Kiln reports them in one line
        try:
            with contextlib.redirect_stderr(sbatch_stderr):
                jobs = executor.map_array(self, *zip(*arguments))
        except Exception as err:  # noqa: BLE001 -- submitit wraps sbatch's failure in its own error
            why = _last_error_line(f"{err}\n{sbatch_stderr.getvalue()}", "sbatch: error:")
            raise SweepError(
                f"sbatch refused the sweep's jobs ({why}): check that the cluster's controller is up (sinfo) and "
                "the launcher's settings (hydra.launcher.partition, timeout_min, mem_gb) are allowed there"
            ) from None
        array_id = jobs[0].job_id.split("_")[0]
        print(f"SLURM array job {array_id}: {len(jobs)} members; job logs in {Path(self.params['submitit_folder']).parent}",
              flush=True)  # fmt: skip
        return self._wait(jobs, members)

    def _wait(self, jobs: list[Any], members: list[str]) -> list[JobReturn]:
        """Poll squeue and the result files until every job has its result; a lost job ends the sweep."""
        results: dict[int, JobReturn] = {}
        lost_since: dict[int, float] = {}
        squeue_failing_since: float | None = None
        started = time.monotonic()
        while len(results) < len(jobs):
            queued = self._queued_job_ids()
            now = time.monotonic()
            if queued is None:
                squeue_failing_since = squeue_failing_since or now
                if now - squeue_failing_since > CONTROLLER_GONE_AFTER_S:
                    raise SweepError(
                        f"squeue has failed for {CONTROLLER_GONE_AFTER_S:.0f} s: the SLURM controller is unreachable; "
                        "the jobs may still run, and re-running the same command skips the members that finished"
                    )
            else:
                squeue_failing_since = None
            for i, job in enumerate(jobs):
                if i in results:
                    continue
                if job.paths.result_pickle.exists():
                    results[i] = self._result(job, members[i])
                elif queued is not None and job.job_id not in queued:
                    if now - lost_since.setdefault(i, now) > LOST_AFTER_S:
                        raise SweepError(
                            f"SLURM job {job.job_id} ({members[i]}) ended without a result "
                            f"({self._why(job)}); its log: {job.paths.stderr}"
                        )
                else:
                    lost_since.pop(i, None)
            if len(results) < len(jobs):
                time.sleep(min(POLL_MAX_S, POLL_FIRST_S + (time.monotonic() - started) / 20))
        return [results[i] for i in range(len(jobs))]

    @staticmethod
    def _queued_job_ids() -> set[str] | None:
        """This user's jobs that SLURM still holds (pending, running, requeued...), array tasks one by one;
        None when squeue fails. By user, not by job id: squeue refuses an id it has already forgotten."""
        try:
            proc = subprocess.run(
                ["squeue", "--noheader", "--array", "--user", getpass.getuser(), "--format", "%i"],
                capture_output=True, text=True, timeout=60,
            )  # fmt: skip
        except (OSError, subprocess.TimeoutExpired):
            return None
        return set(proc.stdout.split()) if proc.returncode == 0 else None

    @staticmethod
    def _why(job: Any) -> str:
        """The job's last ``kiln: error:`` line, else the last line of its stderr log."""
        try:
            text = Path(job.paths.stderr).read_text(errors="replace")
        except OSError:
            return "its log is missing: it was probably killed before it started"
        return _last_error_line(text, "kiln: error:")

    @staticmethod
    def _result(job: Any, member: str) -> JobReturn:
        """Hydra's record of one finished job; a job that failed outside the member's run ends the sweep."""
        try:
            return job.results()[0]
        except Exception as err:  # noqa: BLE001 -- submitit re-raises the job's failure with its traceback text
            raise SweepError(
                f"SLURM job {job.job_id} ({member}) failed: {_last_error_line(str(err))}; its log: {job.paths.stderr}"
            ) from None
