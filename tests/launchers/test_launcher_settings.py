"""kiln.launchers.launcher_settings: ``hydra.launcher.n_jobs`` counted as joblib counts it, and the
joblib settings a population cannot honour refused in one line.

References: joblib's ``effective_n_jobs`` and ``cpu_count`` (n_jobs=-1 is every CPU, -2 all but one,
in general cpu_count + 1 + n_jobs; joblib's Parallel documentation); the keys of Hydra's joblib
launcher config (``hydra_plugins.hydra_joblib_launcher.config.JobLibLauncherConf``); Hydra's rule that
a ``_target_`` is the dotted path of the class it instantiates.
"""

from __future__ import annotations

import dataclasses

import hydra_plugins.kiln_launchers as shims
import joblib
import pytest
from hydra_plugins.hydra_joblib_launcher.config import JobLibLauncherConf

from kiln.config.presets import compose_node
from kiln.errors import ConfigError
from kiln.launchers.launcher_settings import TARGET, check_n_jobs, worker_count


@pytest.mark.parametrize("n_jobs", [1, 2, 7, -1, -2, -64])
def test_n_jobs_counts_as_joblib_counts(n_jobs: int) -> None:
    assert check_n_jobs(n_jobs) == max(1, joblib.effective_n_jobs(n_jobs))
    # The documented rule, by hand: a negative n_jobs leaves |n_jobs| - 1 CPUs unused, never below one.
    expected = n_jobs if n_jobs > 0 else max(1, joblib.cpu_count() + 1 + n_jobs)
    assert check_n_jobs(n_jobs) == expected


@pytest.mark.parametrize("n_jobs", [0, True, False, 1.5, "2", None, [2]])
def test_what_is_not_a_non_zero_integer_is_refused(n_jobs: object) -> None:
    with pytest.raises(ConfigError) as refused:
        check_n_jobs(n_jobs)
    assert str(refused.value) == (f"hydra.launcher.n_jobs={n_jobs!r} is not a number of worker processes: give a "
                                  "positive integer, or -1 for one per core")  # fmt: skip
    if n_jobs == 0 and not isinstance(n_jobs, bool):
        with pytest.raises(ValueError):
            joblib.effective_n_jobs(0)  # joblib itself: "n_jobs == 0 in Parallel has no meaning"


def test_the_preset_runs_one_population_per_core() -> None:
    node = compose_node("train", ["+launcher=population"], with_hydra=True).hydra.launcher
    assert node._target_ == TARGET
    assert worker_count(node) == joblib.cpu_count()  # n_jobs: -1 in configs/launcher/population.yaml


def test_target_is_the_shims_dotted_path() -> None:
    assert TARGET == f"{shims.PopulationLauncher.__module__}.{shims.PopulationLauncher.__qualname__}"


def test_joblib_settings_a_population_cannot_honour_are_refused() -> None:
    known = {field.name for field in dataclasses.fields(JobLibLauncherConf)}
    assert {"backend", "timeout", "require", "n_jobs", "pre_dispatch", "batch_size"} <= known
    with pytest.raises(ConfigError, match="hydra.launcher.backend='threading' cannot run populations"):
        worker_count({"backend": "threading", "n_jobs": 2})
    for key, value in (("timeout", 60), ("require", "sharedmem")):
        with pytest.raises(ConfigError, match=f"hydra.launcher.{key} is not used with launcher=population"):
            worker_count({key: value, "n_jobs": 2})


def test_settings_it_can_honour_pass() -> None:
    # loky is the backend Hydra's joblib launcher uses itself; the other keys only tune dispatching.
    assert worker_count({"backend": "loky", "n_jobs": 2, "pre_dispatch": "2*n_jobs", "batch_size": "auto",
                         "timeout": None, "require": None}) == 2  # fmt: skip
    assert worker_count({}) == joblib.cpu_count()  # no n_jobs: joblib's -1
