"""`launcher=population`: a sweep trained as populations, checked against Hydra's joblib launcher.

The reference for folders and files is what Hydra's own joblib launcher (the `hydra-joblib-launcher`
plugin, `launcher=local`) writes for the same command; folder names are also worked out by hand from
Hydra's documented rules (`hydra.job.num`: the point's place in the sweep, counted from 0;
`hydra.job.override_dirname`: the job's overrides as `key=value`, sorted, joined by `,`). The rest
is the project's requirement (DEVELOPERS.md, "Sweeps as populations"; no outside source): finished
members are skipped on a re-run, points that cannot share a population still all train, a failing
member fails alone and ends the command as a failing joblib job does (its exit code; a stop's is
128 + the signal's number, the POSIX shell convention), bad launcher settings give one line.
"""

import csv
import json
import signal
from pathlib import Path

import pytest
from omegaconf import OmegaConf
from scipy.stats import trim_mean

from kiln.errors import ConfigError, SweepError
from kiln.launchers.population_launcher import PopulationLauncher, _distinct_folders
from kiln.launchers.population_worker import Outcome
from kiln.launchers.sweep_points import Point
from tests.support.cli import assert_one_line_error, run_kiln, run_script

# A sweep preset of the test's own (a user preset folder, as `kiln --presets` reads): tiny runs, so
# that the command line holds only what a test varies. The launcher choice is left out of the folder
# names, so that both launchers name every point alike.
TINY_PRESET = """\
# @package _global_
defaults:
  - /launcher: local

steps: 300
collect:
  warmup_steps: 100
evaluate:
  every: 150
  episodes: 2
  bias_episodes: 1
log:
  every: 100
  progress: "off"
agent:
  layer_widths: [16, 16]
  batch_size: 32
  replay_capacity: 300

hydra:
  mode: MULTIRUN
  sweep:
    subdir: ${hydra.job.num}_${hydra.job.override_dirname}
  job:
    config:
      override_dirname:
        exclude_keys: [launcher]
  sweeper:
    params:
      agent.temperature.target_entropy: -1.0,-3.0
      seed: 0,1
"""

# A task whose reward turns NaN at env step 150 when its first reset seed is 1, i.e. in the run with
# seed=1 (Kiln resets the training env with the run's seed; kiln.config.streams).
BAD_TASK = """\
import gymnasium as gym
import numpy as np


class BadForSeedOne(gym.Env):
    observation_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def __init__(self):
        self.count, self.bad = 0, False

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        if seed is not None:
            self.bad = seed == 1
        return np.zeros(1, np.float32), {}

    def step(self, action):
        self.count += 1
        reward = float("nan") if self.bad and self.count == 150 else -float(np.square(action).sum())
        return np.zeros(1, np.float32), reward, False, False, {}


gym.register("BadForSeedOne-v0", entry_point=BadForSeedOne, max_episode_steps=50)
"""


@pytest.fixture(scope="module")
def presets(tmp_path_factory):
    folder = tmp_path_factory.mktemp("presets")
    (folder / "sweep").mkdir()
    (folder / "sweep" / "tiny_targets.yaml").write_text(TINY_PRESET)
    return {"KILN_PRESETS": str(folder)}


@pytest.fixture(scope="module")
def sweeps(tmp_path_factory, presets):
    """The same sweep through both launchers: (work folder, population sweep, joblib sweep, population args, stdout)."""
    work = tmp_path_factory.mktemp("population")
    population_args = ("sweep=tiny_targets", "launcher=population", "hydra.launcher.n_jobs=2",
                       f"hydra.sweep.dir={work / 'population'}")  # fmt: skip
    population = run_script("train", *population_args, cwd=work, env=presets)
    assert population.returncode == 0, population.stderr
    joblib = run_script("train", "sweep=tiny_targets", f"hydra.sweep.dir={work / 'joblib'}", cwd=work, env=presets)
    assert joblib.returncode == 0, joblib.stderr
    return work, work / "population", work / "joblib", population_args, population.stdout


def _layout(sweep_dir: Path) -> list[str]:
    """Every file under the sweep, by relative path; an event file's name holds the time, host and
    process id, so only its prefix is compared."""
    names = []
    for path in sorted(sweep_dir.rglob("*")):
        if path.is_file():
            name = str(path.relative_to(sweep_dir))
            names.append(name.split(".out.tfevents.")[0] + ".out.tfevents.*" if ".out.tfevents." in name else name)
    return sorted(names)


def _members(sweep_dir: Path) -> list[Path]:
    return sorted(p for p in sweep_dir.iterdir() if (p / "result.json").exists())


def test_population_sweep_writes_the_folders_and_files_the_joblib_launcher_writes(sweeps):
    _, population, joblib, _, _ = sweeps
    assert _layout(population) == _layout(joblib)
    for member in _members(joblib):
        # The resolved config each member trained with is the one Hydra composed for that point.
        assert (population / member.name / "config.yaml").read_text() == (member / "config.yaml").read_text()


def test_folder_names_follow_hydra_job_num_and_override_dirname(sweeps):
    _, population, _, _, _ = sweeps
    # The preset's product, target outermost (Hydra's basic sweeper keeps the order of the params):
    # 0: (-1.0, 0), 1: (-1.0, 1), 2: (-3.0, 0), 3: (-3.0, 1); overrides sorted by key (by hand).
    expected = [
        f"{num}_agent.temperature.target_entropy={target},seed={seed},sweep=tiny_targets"
        for num, (target, seed) in enumerate([("-1.0", 0), ("-1.0", 1), ("-3.0", 0), ("-3.0", 1)])
    ]
    assert [p.name for p in _members(population)] == expected
    for member in _members(population):
        result = json.loads((member / "result.json").read_text())
        assert f"target_entropy={result['target_entropy']}" in member.name and f"seed={result['seed']}," in member.name


def test_each_member_is_reported_as_a_single_run_is(sweeps):
    _, population, _, _, stdout = sweeps
    assert "4 sweep points in 2 populations (2, 2)" in stdout
    for member in _members(population):
        assert f"run folder   {member}\n" in stdout
        assert f"kiln evaluate policy={member}" in stdout
        # Each member records how many runs shared its process.
        assert json.loads((member / "result.json").read_text())["population"] == 2


def test_rerun_skips_finished_members(sweeps, presets):
    work, population, _, args, _ = sweeps
    before = {p.name: (p / "result.json").stat().st_mtime_ns for p in _members(population)}
    again = run_script("train", *args, cwd=work, env=presets)
    assert again.returncode == 0, again.stderr
    assert again.stdout.count("already holds a finished run") == 4
    assert {p.name: (p / "result.json").stat().st_mtime_ns for p in _members(population)} == before


def test_compare_reads_the_population_sweep(sweeps):
    work, population, _, _, _ = sweeps
    proc = run_script("compare", str(population), "--resamples", "200", "--out", str(work / "report"), cwd=work)
    assert proc.returncode == 0, proc.stderr
    with open(work / "report" / "groups.csv") as f:
        assert len(list(csv.DictReader(f))) == 2
    finals: dict[float, list[float]] = {}
    for member in _members(population):
        result = json.loads((member / "result.json").read_text())
        finals.setdefault(result["target_entropy"], []).append(result["final"]["return_eval"])
    # Two runs per group: the 25 % trimmed mean (Agarwal et al. 2021's IQM, scipy.stats.trim_mean)
    # is their mean. Event files store float32, hence the tolerance.
    got = {g["target_entropy"]: g["iqm"] for g in json.loads((work / "report" / "comparison.json").read_text())["groups"]}
    assert set(got) == set(finals)
    for target, values in finals.items():
        assert got[target] == pytest.approx(trim_mean(values, 0.25), rel=1e-5)


def test_points_that_cannot_share_a_population_train_separately(tmp_path, presets):
    # agent.actor.lr is not a member key: two learning rates are two populations, even on one slot.
    sweep = tmp_path / "sweep"
    proc = run_script("train", "sweep=tiny_targets", "agent.temperature.target_entropy=-1.0", "agent.actor.lr=0.0003,0.001",
                      "launcher=population", "hydra.launcher.n_jobs=1", f"hydra.sweep.dir={sweep}",
                      cwd=tmp_path, env=presets)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert "4 sweep points in 2 populations (2, 2), at most 1 at once" in proc.stdout
    members = _members(sweep)
    assert len(members) == 4
    for member in members:
        lr = "0.0003" if "agent.actor.lr=0.0003" in member.name else "0.001"
        assert f"lr: {lr}" in (member / "config.yaml").read_text().split("actor:")[1].split("critic:")[0]
        assert json.loads((member / "result.json").read_text())["population"] == 2


def test_a_member_that_diverges_fails_alone_and_ends_the_sweep_as_a_failing_job_does(tmp_path, presets):
    (tmp_path / "bad_task.py").write_text(BAD_TASK)
    sweep = tmp_path / "sweep"
    # Three seeds on two slots: seeds 0 and 1 share a population, seed 2 has its own.
    proc = run_kiln("train", "sweep=tiny_targets", "env.id=bad_task:BadForSeedOne-v0", "env.name=bad",
                    "agent.temperature.target_entropy=-1.0", "seed=0,1,2", "launcher=population",
                    "hydra.launcher.n_jobs=2", f"hydra.sweep.dir={sweep}", "hydra.sweep.subdir=s${seed}",
                    cwd=tmp_path, env=presets)  # fmt: skip
    # As a joblib sweep whose job diverged: that run's one line, exit code 3 (README, exit codes).
    assert proc.returncode == 3, proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in proc.stderr, proc.stderr
    assert lines[0].startswith("kiln: error: training diverged at env step 150 ")
    assert lines[0].endswith(f"(run folder {sweep / 's1'})")
    assert (sweep / "s0" / "result.json").is_file() and (sweep / "s2" / "result.json").is_file()
    assert not (sweep / "s1" / "result.json").exists() and not (sweep / "s1" / "policy").exists()
    assert f"run folder   {sweep / 's1'}\nfailed       training diverged" in proc.stdout


BAD_SETTINGS = [
    ("hydra.launcher.n_jobs=0", "hydra.launcher.n_jobs=0 is not a number of worker processes"),
    ("hydra.launcher.n_jobs=two", "hydra.launcher.n_jobs='two' is not a number of worker processes"),
    ("hydra.launcher.n_jobs=1.5", "give a positive integer, or -1 for one per core"),
    ("hydra.launcher.timeout=60", "hydra.launcher.timeout is not used with launcher=population"),
    ("hydra.launcher.backend=threading", "cannot run populations"),
    ("hydra.launcher.require=sharedmem", "hydra.launcher.require is not used with launcher=population"),
    ("hydra.launcher.n_job=2", "unknown config key 'hydra.launcher.n_job'"),
]  # fmt: skip


@pytest.mark.parametrize("setting,phrase", BAD_SETTINGS)
def test_bad_launcher_settings_give_one_line_and_write_nothing(tmp_path, presets, setting, phrase):
    proc = run_script("train", "sweep=tiny_targets", "launcher=population", setting, f"hydra.sweep.dir={tmp_path / 'sweep'}",
                      cwd=tmp_path, env=presets, timeout=120)  # fmt: skip
    assert_one_line_error(proc, phrase)
    assert list(tmp_path.iterdir()) == []


def test_points_that_would_share_a_folder_are_refused_before_training(tmp_path, presets):
    sweep = tmp_path / "sweep"
    proc = run_script("train", "sweep=tiny_targets", "launcher=population", f"hydra.sweep.dir={sweep}",
                      "hydra.sweep.subdir=same", cwd=tmp_path, env=presets, timeout=120)  # fmt: skip
    assert_one_line_error(proc, f"would both train in {sweep / 'same'}", "hydra.sweep.subdir")
    assert not (sweep / "same").exists()


def test_member_folders_that_cannot_be_made_give_one_line(tmp_path, presets):
    # Found by hand: a population whose folders cannot even be looked at (a name over the 255-byte
    # limit of Linux file systems) ended with a traceback instead of the runs' own one-line error.
    sweep = tmp_path / "sweep"
    proc = run_script("train", "sweep=tiny_targets", "launcher=population", f"hydra.sweep.dir={sweep}",
                      "hydra.sweep.subdir=${hydra.job.num}" + "x" * 300, cwd=tmp_path, env=presets, timeout=300)  # fmt: skip
    assert_one_line_error(proc, "cannot use run folder", "File name too long", "4 sweep members failed")


def _points(*folders: str) -> list[Point]:
    empty = OmegaConf.create({})
    return [Point(num=i, overrides=[f"seed={i}"], raw={}, run_dir=Path(f), task_cfg=empty, hydra_cfg=empty)
            for i, f in enumerate(folders)]  # fmt: skip


def test_two_points_bound_for_one_folder_are_named() -> None:
    _distinct_folders(_points("/s/a", "/s/b"))
    with pytest.raises(ConfigError) as refused:
        _distinct_folders(_points("/s/a", "/s/b", "/s/a"))
    assert str(refused.value).startswith("sweep points 'seed=0' and 'seed=2' would both train in /s/a")


def test_every_member_done_ends_nothing() -> None:
    PopulationLauncher._end_if_not_done(_points("/s/a", "/s/b"), [Outcome("done", 1.0), Outcome("done", 2.0)])


def test_a_stop_ends_the_sweep_with_the_signals_exit_code_before_any_failure() -> None:
    # 128 + signal number, as a shell reports a process that signal ended (POSIX shell convention).
    for sig in (signal.SIGINT, signal.SIGTERM):
        outcomes = [Outcome("failed", message="diverged", exit_code=3), Outcome("done", 1.0),
                    Outcome("stopped", message="stopped", exit_code=128 + sig)]  # fmt: skip
        with pytest.raises(SweepError) as ended:
            PopulationLauncher._end_if_not_done(_points("/s/a", "/s/b", "/s/c"), outcomes)
        assert ended.value.exit_code == 128 + sig and ended.value.prefix == "stopped"
        assert str(ended.value).startswith(f"{sig.name}: the sweep stopped with 1 of 3 members unfinished")


def test_the_first_failure_in_sweep_order_ends_the_sweep_with_its_code() -> None:
    points = _points("/s/a", "/s/b", "/s/c")
    one = [Outcome("done", 1.0), Outcome("failed", message="training diverged", exit_code=3), Outcome("done", 2.0)]
    with pytest.raises(SweepError) as ended:
        PopulationLauncher._end_if_not_done(points, one)
    assert ended.value.exit_code == 3 and str(ended.value) == "training diverged (run folder /s/b)"
    two = [Outcome("failed", message="cannot use run folder", exit_code=2), *one[1:]]
    with pytest.raises(SweepError) as ended:
        PopulationLauncher._end_if_not_done(points, two)
    assert ended.value.exit_code == 2
    assert str(ended.value) == "cannot use run folder (2 sweep members failed; each is listed above with its run folder)"
