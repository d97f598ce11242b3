"""Sweeps as populations: Hydra's joblib launcher, with one population of sweep points per worker.

Selected by ``configs/launcher/population.yaml`` (``kiln train sweep=target_entropy launcher=population``).
The plain joblib launcher runs one job per sweep point; this one composes every point first (as
the joblib launcher would, :mod:`.points`), groups the points that can share a process
(``kiln.training.population.population_key``, and on a re-run the checkpoint each would resume from),
cuts the groups into at most ``n_jobs`` balanced populations (:mod:`.grouping`) and trains each
population in one loky worker (:mod:`.worker`). Each
member writes the folder the joblib launcher would have given its point, and Hydra gets one job
record per point, in the sweep's order.

A member that fails (divergence) fails alone; the others train on. When everything has ended,
a failure ends the command as a failing joblib job does: its one ``kiln: error:`` line and exit code.
"""

from __future__ import annotations

import logging
import os
import tempfile
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from hydra.core.hydra_config import HydraConfig
from hydra.core.utils import JobReturn, JobStatus, configure_log, filter_overrides, setup_globals
from hydra.types import HydraContext, TaskFunction
from hydra_plugins.hydra_joblib_launcher._core import process_joblib_cfg
from hydra_plugins.hydra_joblib_launcher.joblib_launcher import JoblibLauncher
from joblib import Parallel, delayed, parallel_config
from joblib.externals.loky.process_executor import TerminatedWorkerError
from omegaconf import DictConfig

from kiln.errors import ConfigError, SweepError
from kiln.launchers.launcher_settings import worker_count
from kiln.launchers.population_groups import split_points
from kiln.launchers.population_worker import Outcome, run_population
from kiln.launchers.stop_note import StopNote
from kiln.launchers.sweep_points import Point, compose_point, resume_mark
from kiln.training.population import population_key

log = logging.getLogger(__name__)

# A pool worker left without work ends after this long (loky's default is 300 s). Workers are idle
# only at the end of a sweep, and a worker idle when its launcher is killed would otherwise outlive
# it by minutes; a busy one notices the loss itself (see .stop).
IDLE_WORKER_S = 5.0


def _distinct_folders(points: Sequence[Point]) -> None:
    """Refuse two sweep points that would train in one folder (Hydra's subdir misses a swept key).

    Raises:
        ConfigError: Naming both points and the fix.
    """
    seen: dict[Path, Point] = {}
    for point in points:
        other = seen.setdefault(point.run_dir, point)
        if other is not point:
            raise ConfigError(
                f"sweep points {' '.join(filter_overrides(other.overrides))!r} and "
                f"{' '.join(filter_overrides(point.overrides))!r} would both train in {point.run_dir}: "
                "make hydra.sweep.subdir name every swept key, e.g. hydra.sweep.subdir=${hydra.job.override_dirname}"
            )


class PopulationLauncher(JoblibLauncher):
    """Hydra's joblib launcher, launching populations of sweep points instead of single points.

    Hydra's job callbacks (``hydra.callbacks``) and ``hydra.job.env_set`` are not applied to members:
    Kiln sets neither, and members sharing a process could not have environments of their own.
    """

    def setup(self, *, hydra_context: HydraContext, task_function: TaskFunction, config: DictConfig) -> None:
        """Keep Hydra's context and check the settings (before Hydra writes anything for the sweep)."""
        super().setup(hydra_context=hydra_context, task_function=task_function, config=config)
        self.slots = worker_count(self.joblib)

    def launch(self, job_overrides: Sequence[Sequence[str]], initial_job_idx: int) -> Sequence[JobReturn]:
        """Train every point of the batch in populations; return Hydra's job records in the batch's order.

        Raises:
            SweepError: Once every population has ended, with the one-line error of the first failed
                member (or the stop line after a signal), and its exit code.
        """
        setup_globals()
        assert self.config is not None and self.hydra_context is not None
        if not job_overrides:
            return []
        configure_log(self.config.hydra.hydra_logging, self.config.hydra.verbose)
        launcher_cfg = HydraConfig.instance().cfg
        try:
            points = [
                compose_point(self.hydra_context, self.config, overrides, initial_job_idx + i)
                for i, overrides in enumerate(job_overrides)
            ]  # fmt: skip
        finally:
            HydraConfig.instance().cfg = launcher_cfg  # the launcher's own config again, as before
        _distinct_folders(points)
        populations = split_points([f"{population_key(p.raw)} {resume_mark(p)}" for p in points], self.slots)
        sweep_dir = Path(str(self.config.hydra.sweep.dir))
        sweep_dir.mkdir(parents=True, exist_ok=True)
        self._log_plan(points, populations, sweep_dir)
        outcomes = self._run(points, populations)
        self._end_if_not_done(points, outcomes)
        return [p.job_return(JobStatus.COMPLETED, outcomes[i].value) for i, p in enumerate(points)]

    def _log_plan(self, points: Sequence[Point], populations: list[list[int]], sweep_dir: Path) -> None:
        sizes = ", ".join(str(len(p)) for p in populations)
        log.info(f"Population launcher: {len(points)} sweep points in {len(populations)} populations ({sizes}), "
                 f"at most {self.slots} at once")  # fmt: skip
        log.info(f"Launching populations, sweep output dir : {sweep_dir}")
        for n, members in enumerate(populations):
            log.info(f"\tpopulation {n}:")
            for i in members:
                log.info(f"\t\t#{points[i].num} : {' '.join(filter_overrides(points[i].overrides))}")

    def _run(self, points: Sequence[Point], populations: list[list[int]]) -> list[Outcome]:
        """Train the populations in loky workers; a SIGINT or SIGTERM here stops them after a checkpoint."""
        joblib_cfg: dict[str, Any] = {k: v for k, v in self.joblib.items() if k != "backend"}
        joblib_cfg["n_jobs"] = min(self.slots, len(populations))
        process_joblib_cfg(joblib_cfg)
        outcomes: list[Outcome | None] = [None] * len(points)
        with tempfile.TemporaryDirectory(prefix="kiln-population-") as private:
            stop = StopNote(Path(private) / "stop")
            # As Hydra's joblib launcher: loky processes (threads would share torch's thread setting and the signals).
            with stop.catching(), parallel_config(backend="loky", idle_worker_timeout=IDLE_WORKER_S):
                try:
                    ended = Parallel(**joblib_cfg)(
                        delayed(run_population)(
                            [points[i].raw for i in members], [points[i].run_dir for i in members], os.getpid(), stop.note
                        )
                        for members in populations
                    )  # fmt: skip
                except TerminatedWorkerError as err:
                    raise SweepError(
                        f"a population worker ended without reporting ({str(err).splitlines()[0].rstrip('.')}); "
                        "finished members are kept: run the same command again to train the rest", 1
                    ) from None
        for members, population_outcomes in zip(populations, ended):
            for i, outcome in zip(members, population_outcomes):
                outcomes[i] = outcome
        assert all(o is not None for o in outcomes)
        return outcomes  # type: ignore[return-value]

    @staticmethod
    def _end_if_not_done(points: Sequence[Point], outcomes: Sequence[Outcome]) -> None:
        """End the command as one failing job would: a stop first, else the first failure in sweep order."""
        stopped = [i for i, o in enumerate(outcomes) if o.kind == "stopped"]
        failed = [i for i, o in enumerate(outcomes) if o.kind == "failed"]
        if stopped:
            code = outcomes[stopped[0]].exit_code
            reason = {130: "SIGINT", 143: "SIGTERM"}.get(code, "a stop request")
            raise SweepError(
                f"{reason}: the sweep stopped with {len(stopped)} of {len(points)} members unfinished (those that had "
                "begun wrote a checkpoint); run the same command again to resume them (finished members are skipped)",
                code, "stopped",
            )
        if failed:
            first = outcomes[failed[0]]
            where = f"run folder {points[failed[0]].run_dir}"
            if len(failed) > 1:
                where = f"{len(failed)} sweep members failed; each is listed above with its run folder"
            raise SweepError(f"{first.message} ({where})", first.exit_code)
