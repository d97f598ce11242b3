"""scripts/train.py (kiln.cli.train): the output folder and the launcher's settings are checked before
Hydra writes anything, and Hydra's app composes the same config as the check before it.

References: Hydra's own app (``--cfg job`` prints the config it composed; ``--help`` lists each config
group's options, the yaml files of the group's folder); Hydra's documented output folders
(``hydra.run.dir`` for a single run, ``hydra.sweep.dir`` for a multirun); POSIX's ENOTDIR for a path
through a file (mkdir(2)); joblib's ``effective_n_jobs`` refusing ``n_jobs=0``. The rule that nothing is
written before the checks pass is the project's (README, "Bad input"). The bad values themselves are
in tests/cli/test_bad_input.py.
"""

from __future__ import annotations

from pathlib import Path

import joblib
import pytest
import yaml
from omegaconf import OmegaConf

from kiln.cli.train import check_launcher_settings, check_output_folder
from kiln.config.presets import CONFIG_DIR, compose_node
from kiln.errors import ConfigError, KilnError
from tests.support.cli import run_script
from tests.support.restricted import tree


@pytest.fixture(autouse=True)
def no_user_presets(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("KILN_PRESETS", raising=False)


def test_a_run_folder_through_a_file_is_refused_and_nothing_is_left(tmp_path: Path) -> None:
    (tmp_path / "notes").write_text("a file, not a folder")
    before = tree(tmp_path)
    with pytest.raises(KilnError) as refused:
        check_output_folder([f"hydra.run.dir={tmp_path}/notes/run"])
    assert str(refused.value).startswith(f"cannot write to {tmp_path}/notes/run (part of the path is a file, not a folder)")
    assert "hydra.run.dir=" in str(refused.value)
    assert tree(tmp_path) == before


def test_a_sweep_checks_the_sweep_folder_not_the_run_folder(tmp_path: Path) -> None:
    (tmp_path / "notes").write_text("a file")
    good, bad = f"{tmp_path}/fine", f"{tmp_path}/notes/sweep"
    # A single run writes under hydra.run.dir; -m (or a preset's hydra.mode: MULTIRUN) under hydra.sweep.dir.
    check_output_folder([f"hydra.run.dir={good}", f"hydra.sweep.dir={bad}"])
    for sweeping in (["-m", "seed=0,1"], ["sweep=seeds"]):
        with pytest.raises(KilnError, match="cannot write to .*notes/sweep"):
            check_output_folder([*sweeping, f"hydra.run.dir={good}", f"hydra.sweep.dir={bad}"])
        check_output_folder([*sweeping, f"hydra.run.dir={bad}", f"hydra.sweep.dir={good}"])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes"]  # the checks made and removed their folders


def test_the_default_folder_is_checked_in_the_working_folder_and_left_absent(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert str(compose_node("train", [], with_hydra=True).hydra.run.dir).startswith("runs/pendulum/")
    check_output_folder(["seed=3"])
    assert list(tmp_path.iterdir()) == []


def test_informational_options_check_no_folder(tmp_path: Path) -> None:
    (tmp_path / "notes").write_text("a file")
    for flag in ("--help", "--cfg", "--info"):
        check_output_folder([flag, f"hydra.run.dir={tmp_path}/notes/run"])


def test_joblib_refuses_zero_workers_and_so_does_the_check_before_hydra() -> None:
    with pytest.raises(ValueError):
        joblib.effective_n_jobs(0)  # joblib: "n_jobs == 0 in Parallel has no meaning"
    for launcher in ("+launcher=population", "+launcher=local"):
        with pytest.raises(ConfigError, match="hydra.launcher.n_jobs=0 is not a number of worker processes"):
            check_launcher_settings(["-m", "seed=0,1", launcher, "hydra.launcher.n_jobs=0"])


def test_population_settings_are_checked_before_hydra() -> None:
    with pytest.raises(ConfigError, match="hydra.launcher.timeout is not used with launcher=population"):
        check_launcher_settings(["-m", "seed=0,1", "+launcher=population", "hydra.launcher.timeout=60"])
    check_launcher_settings(["-m", "seed=0,1", "+launcher=population", "hydra.launcher.n_jobs=2"])
    # Hydra's joblib launcher takes a timeout; only the population launcher refuses it.
    check_launcher_settings(["-m", "seed=0,1", "+launcher=local", "hydra.launcher.timeout=60"])


def test_hydras_app_composes_the_config_the_check_composed(tmp_path: Path) -> None:
    overrides = ["env=inverted_pendulum", "seed=3", "agent.actor.lr=0.002"]
    proc = run_script("train", *overrides, "--cfg", "job", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    printed = yaml.safe_load(proc.stdout)
    assert printed == OmegaConf.to_container(compose_node("train", overrides), resolve=False)
    assert printed["seed"] == 3 and printed["agent"]["actor"]["lr"] == 0.002
    assert list(tmp_path.iterdir()) == []


def test_help_lists_every_preset_of_each_group(tmp_path: Path) -> None:
    proc = run_script("train", "--help", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    groups = sorted(p for p in CONFIG_DIR.iterdir() if p.is_dir() and any(p.glob("*.yaml")))
    assert {g.name for g in groups} == {"agent", "env", "launcher", "sweep"}
    for group in groups:
        assert f"{group.name}: {', '.join(sorted(p.stem for p in group.glob('*.yaml')))}" in proc.stdout
    assert list(tmp_path.iterdir()) == []
