"""The sweep benchmark's command line (Hydra's override grammar: key=value, a comma sweeps a list,
range(4) sweeps 0 … 3), and its wall time and failure on injected results: the subprocess and the clock
are replaced by stand-ins, so nothing is trained and the time is hand arithmetic. Never the speed itself."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest

from kiln.benchmark import sweep_wall
from kiln.benchmark.sweep_wall import population_launcher_exists, sweep_command, sweep_wall_seconds
from kiln.config.presets import CONFIG_DIR, compose_node
from kiln.errors import KilnError


def test_command_by_hand(tmp_path: Path):
    command = sweep_command(tmp_path / "sweep", steps=1500, population=True)
    assert command == [
        sys.executable, "-m", "kiln.cli.train", "sweep=target_entropy", "agent.temperature.target_entropy=-2.0,-0.5",
        "seed=range(4)", f"hydra.sweep.dir={tmp_path / 'sweep'}", "log.progress=off", "steps=1500", "launcher=population",
    ]  # fmt: skip
    # The jobs side names the local launcher (the sweep presets default to populations) and, without a
    # budget, keeps the preset's.
    jobs = sweep_command(tmp_path / "sweep", steps=None, population=False)
    assert jobs[-1] == "launcher=local" and not any(part.startswith("steps=") for part in jobs)


@pytest.mark.parametrize("population", [True, False])
def test_every_single_value_override_composes(tmp_path: Path, population: bool):
    # Composed as the command line composes them (the swept values, a comma list and range(4), are
    # Hydra's sweep syntax and are left to the sweeper).
    command = sweep_command(tmp_path / "sweep", steps=1500, population=population)
    overrides = [part for part in command[3:] if "," not in part and "range(" not in part]
    node = compose_node("train", overrides, with_hydra=True)
    assert node.hydra.sweep.dir == str(tmp_path / "sweep") and node.steps == 1500
    assert node.hydra.launcher._target_.endswith("PopulationLauncher") == population


def test_the_launcher_presets_it_names_exist():
    assert population_launcher_exists() == (CONFIG_DIR / "launcher" / "population.yaml").is_file() is True
    assert (CONFIG_DIR / "launcher" / "local.yaml").is_file() and (CONFIG_DIR / "sweep" / "target_entropy.yaml").is_file()


class _Stand_ins:
    def __init__(self, returncode: int, stderr: str) -> None:
        self.now, self.returncode, self.stderr, self.seen = 100.0, returncode, stderr, []

    def perf_counter(self) -> float:
        return self.now

    def run(self, command, cwd, capture_output, text, timeout):
        self.seen.append((command, Path(cwd), Path(cwd).is_dir(), timeout))
        self.now += 42.5  # the sweep takes 42.5 fake seconds
        return subprocess.CompletedProcess(command, self.returncode, stdout="", stderr=self.stderr)


@pytest.fixture
def stand_ins(monkeypatch: pytest.MonkeyPatch):
    def install(returncode: int = 0, stderr: str = "") -> _Stand_ins:
        fake = _Stand_ins(returncode, stderr)
        monkeypatch.setattr(sweep_wall, "time", SimpleNamespace(perf_counter=fake.perf_counter))
        monkeypatch.setattr(sweep_wall, "subprocess", SimpleNamespace(run=fake.run))
        return fake

    return install


def test_wall_time_of_a_sweep_in_a_temporary_folder(stand_ins):
    fake = stand_ins()
    assert sweep_wall_seconds(steps=1500, population=False, timeout_s=60.0) == 42.5
    [(command, cwd, existed, timeout)] = fake.seen
    # The sweep ran in a temporary folder that existed then and is gone afterwards, writing below it.
    assert existed and not cwd.exists() and timeout == 60.0
    assert command == sweep_command(cwd / "sweep", 1500, False)


def test_a_failed_sweep_is_one_kiln_error_quoting_its_last_line(stand_ins):
    stand_ins(returncode=2, stderr="starting\nkiln: error: agent.colour is not a key\n")
    with pytest.raises(KilnError) as info:
        sweep_wall_seconds(steps=10, population=True)
    message = str(info.value)
    assert message.startswith("the benchmark's sweep (-m kiln.cli.train sweep=target_entropy ")
    assert message.endswith("failed with exit 2: kiln: error: agent.colour is not a key") and "\n" not in message


def test_a_silent_failure_says_so(stand_ins):
    stand_ins(returncode=1, stderr="")
    with pytest.raises(KilnError, match=r"failed with exit 1: \(no message\)$"):
        sweep_wall_seconds(steps=10, population=False)
