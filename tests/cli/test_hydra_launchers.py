"""scripts/hydra_launchers/__init__.py (hydra_plugins.kiln_launchers): the thin shims in Hydra's plugin
namespace. Hydra instantiates the class a preset's ``_target_`` names once ``register()`` made it
known (Hydra's ``Plugins.instantiate_launcher``, the call Hydra's own app makes), and an error the
library launcher raises ends the command with one ``kiln: <prefix>:`` line and that error's exit code
(project requirement, README "Bad input"; 143 = 128 + SIGTERM, the POSIX shell convention).
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
from pathlib import Path

import hydra_plugins.kiln_launchers as shims
import pytest
from omegaconf import OmegaConf

from kiln.errors import SweepError
from kiln.launchers import population_launcher, slurm_launcher

# In a fresh process (Hydra's plugin registry is process-wide): register, then let Hydra build the
# launcher each preset names, as its app does when a sweep starts.
REGISTER_AND_INSTANTIATE = """\
import json
from hydra.core.plugins import Plugins
from hydra.plugins.launcher import Launcher
from hydra.types import HydraContext
import hydra_plugins.kiln_launchers as shims
from kiln.config.presets import compose_node

shims.register()
shims.register()  # twice is harmless: a command may register after Hydra's own scan found them
known = sorted(f"{c.__module__}.{c.__name__}" for c in Plugins.instance().discover(Launcher))
built = {}
for preset in ("population", "slurm"):
    extra = ["hydra.launcher.n_jobs=1"] if preset == "population" else []
    cfg = compose_node("train", [f"+launcher={preset}", *extra], with_hydra=True)
    launcher = Plugins.instance().instantiate_launcher(
        hydra_context=HydraContext(config_loader=None, callbacks=None), task_function=lambda c: None, config=cfg)
    built[preset] = [cfg.hydra.launcher._target_, f"{type(launcher).__module__}.{type(launcher).__name__}"]
print(json.dumps({"known": known, "built": built}))
"""


def test_register_makes_both_launchers_known_to_hydra(tmp_path: Path) -> None:
    proc = subprocess.run([sys.executable, "-c", REGISTER_AND_INSTANTIATE], cwd=tmp_path, check=False, capture_output=True,
                          text=True, timeout=120)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    found = json.loads(proc.stdout)
    names = {"hydra_plugins.kiln_launchers.PopulationLauncher", "hydra_plugins.kiln_launchers.SlurmSweepLauncher"}
    assert names <= set(found["known"])
    for target, built in found["built"].values():
        assert target == built and target in names  # the preset's _target_ is the class Hydra built


def test_shims_subclass_the_library_launchers() -> None:
    assert issubclass(shims.PopulationLauncher, population_launcher.PopulationLauncher)
    assert issubclass(shims.SlurmSweepLauncher, slurm_launcher.SlurmSweepLauncher)


def one_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


def test_bad_population_settings_end_setup_with_one_line(capsys: pytest.CaptureFixture) -> None:
    launcher = shims.PopulationLauncher(n_jobs=0)
    with pytest.raises(SystemExit) as stop:
        launcher.setup(hydra_context=None, task_function=None, config=OmegaConf.create({}))  # type: ignore[arg-type]
    assert stop.value.code == 2
    assert one_line(capsys.readouterr().err).startswith("kiln: error: hydra.launcher.n_jobs=0 is not a number of worker")


@pytest.mark.parametrize(
    "error,code,line",
    [
        (SweepError("training diverged at env step 150 (run folder s1)", 3), 3,
         "kiln: error: training diverged at env step 150 (run folder s1)"),
        (SweepError("SIGTERM: the sweep stopped", 128 + signal.SIGTERM, "stopped"), 143,
         "kiln: stopped: SIGTERM: the sweep stopped"),
        (SweepError("a population worker ended without reporting", 1), 1,
         "kiln: error: a population worker ended without reporting"),
    ],
)  # fmt: skip
@pytest.mark.parametrize("shim,library", [(shims.PopulationLauncher, population_launcher.PopulationLauncher),
                                          (shims.SlurmSweepLauncher, slurm_launcher.SlurmSweepLauncher)])  # fmt: skip
def test_a_failed_launch_ends_with_its_line_and_exit_code(capsys, monkeypatch, shim, library, error, code, line) -> None:
    def failing_launch(self, job_overrides, initial_job_idx):
        raise error

    monkeypatch.setattr(library, "launch", failing_launch)
    with pytest.raises(SystemExit) as stop:
        shim.__new__(shim).launch([["seed=0"]], 0)
    assert stop.value.code == code
    assert one_line(capsys.readouterr().err) == line


def test_a_launch_that_succeeds_returns_the_librarys_records(monkeypatch) -> None:
    records = [object(), object()]
    monkeypatch.setattr(population_launcher.PopulationLauncher, "launch", lambda self, overrides, idx: records)
    assert shims.PopulationLauncher.__new__(shims.PopulationLauncher).launch([["seed=0"], ["seed=1"]], 0) is records


def test_no_sbatch_on_path_is_one_line_through_the_shim(capsys, monkeypatch, tmp_path: Path) -> None:
    # The library's own refusal, not a stand-in: a PATH of one empty folder has no sbatch.
    monkeypatch.setenv("PATH", str(tmp_path))
    launcher = shims.SlurmSweepLauncher(submitit_folder=str(tmp_path / "slurm"), max_num_timeout=0)
    launcher.config = OmegaConf.create({"hydra": {"sweep": {"dir": str(tmp_path / "sweep")}}})
    with pytest.raises(SystemExit) as stop:
        launcher.launch([["seed=0"]], 0)
    assert stop.value.code == 2
    assert "needs SLURM's sbatch on PATH" in one_line(capsys.readouterr().err)
    assert list(tmp_path.iterdir()) == []
