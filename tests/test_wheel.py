"""Kiln as a new user gets it: a wheel built from the checkout, installed (not editable) into a fresh
virtual environment, and every command run from an empty folder outside the checkout.

What an installed Kiln once did here: `kiln train` and `kiln evaluate` ended with "Primary config
directory not found" (the presets were not in the wheel), `--help` ended in a traceback, and the
install put the generic names `agents`, `envs` and `kiln_cli` into the user's environment. The
checks below compare with facts from outside the project: Gymnasium's registry and documentation
for Pendulum-v1, onnxruntime running the exported file, SciPy for the statistics and the entropy,
Sutton & Barto for the gridworld, the Python packaging formats (the wheel's file list, PEP 427; its
entry points, the entry-points specification), and hand arithmetic written beside the check.

Slow (minutes): the install alone takes about a minute with pip's cache, full `kiln verify` a
minute more. Run alone with `python3 -m pytest -q tests/test_wheel.py`.
"""

from __future__ import annotations

import configparser
import json
import math
import os
import re
import shutil
import subprocess
import sys
import tempfile
import tomllib
import zipfile
from collections.abc import Iterator
from pathlib import Path

import gymnasium as gym
import pytest
from scipy import integrate, stats

pytestmark = pytest.mark.slow

REPO = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((REPO / "pyproject.toml").read_text())
README = REPO / "README.md"

# Pendulum-v1 as Gymnasium registers and documents it (checked against this machine's Gymnasium
# where it is read): episodes truncate at 200 steps, torque within [-2, 2], and a step's reward is
# at least -(pi^2 + 0.1 * 8^2 + 0.001 * 2^2) = -16.2736044 (Gymnasium's Pendulum documentation,
# "Rewards"), so a return over n steps lies in [-16.2736044 n, 0].
PENDULUM = gym.spec("Pendulum-v1")
WORST_PENDULUM_REWARD = -(math.pi**2 + 0.1 * 8**2 + 0.001 * 2**2)

# One short run: 600 steps, 200 of them warm-up; a batch of 100 is in the replay before the warm-up
# ends, so the updates are one per env step after it (Haarnoja et al. 2018, Table 1: one gradient
# step per environment step): 600 - 200 = 400 (hand arithmetic).
SHORT = ("steps=600", "collect.warmup_steps=200", "agent.batch_size=100", "evaluate.every=300",
         "evaluate.episodes=2", "checkpoint.every=300", "log.progress=off")  # fmt: skip

# A preset folder of the test's own, as `kiln --presets DIR` reads it: Pendulum-v1 cut to 50 steps.
SHORT_PENDULUM = """\
# @package _global_
env:
  id: Pendulum-v1
  name: short_pendulum
  max_episode_steps: 50
  kwargs: {}
steps: 300
collect:
  warmup_steps: 100
agent:
  batch_size: 32
evaluate:
  every: 300
  episodes: 1
  bias_episodes: 0
log:
  progress: "off"
"""

# The exported controller run on Pendulum-v1 with onnxruntime and Gymnasium only, over given reset
# seeds (deterministic, as `kiln evaluate` acts by default); prints the returns as JSON.
ONNX_EPISODES = """\
import json, sys
import gymnasium as gym
import numpy as np
import onnxruntime as ort

session = ort.InferenceSession(sys.argv[1])
env = gym.make("Pendulum-v1")
returns, actions = [], []
for seed in json.loads(sys.argv[2]):
    obs, _ = env.reset(seed=seed)
    total, done = 0.0, False
    while not done:
        action = session.run(["action"], {"observation": obs[None].astype(np.float32)})[0][0]
        actions.append(float(action[0]))
        obs, reward, terminated, truncated, _ = env.step(action)
        total += float(reward)
        done = terminated or truncated
    returns.append(total)
print(json.dumps({"returns": returns, "low": min(actions), "high": max(actions), "count": len(actions)}))
"""


def _checkout_sources(dest: Path) -> Path:
    """The checkout's package sources (the folders pyproject maps, pyproject.toml, README.md) in ``dest``.

    The wheel is built from a copy: setuptools builds in the source tree and reuses its build/
    folder, so a module deleted from the checkout would still be packed from an earlier build's copy.
    """
    tops = {folder.split("/")[0] for folder in PYPROJECT["tool"]["setuptools"]["package-dir"].values()}
    for top in sorted(tops):
        shutil.copytree(REPO / top, dest / top, ignore=shutil.ignore_patterns("__pycache__"))
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(REPO / name, dest / name)
    return dest


@pytest.fixture(scope="module")
def scratch() -> Iterator[Path]:
    """One temporary folder outside the checkout for the whole module, removed at the end."""
    folder = Path(tempfile.mkdtemp(prefix="kiln-wheel-"))
    assert not folder.resolve().is_relative_to(REPO)
    yield folder
    shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture(scope="module")
def wheel(scratch: Path) -> Path:
    """The wheel pip builds from the checkout (no dependencies, this Python's setuptools)."""
    source = _checkout_sources(scratch / "source")
    proc = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-w", str(scratch / "dist"), str(source)],
        check=False, capture_output=True, text=True, timeout=600,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stdout + proc.stderr
    wheels = list((scratch / "dist").glob("kiln_sac-*.whl"))
    assert len(wheels) == 1, wheels
    return wheels[0]


@pytest.fixture(scope="module")
def wheel_files(wheel: Path) -> list[str]:
    with zipfile.ZipFile(wheel) as archive:
        return archive.namelist()


@pytest.fixture(scope="module")
def venv(scratch: Path, wheel: Path) -> Path:
    """A fresh virtual environment (its own site-packages only) with ``<wheel>[export]`` installed.

    pip runs with this machine's pip configuration (it supplies torch 2.13.0 from a local folder);
    the rest comes from the package index or pip's cache.
    """
    root = scratch / "venv"
    made = subprocess.run([sys.executable, "-m", "venv", str(root)], check=False, capture_output=True, text=True, timeout=300)
    assert made.returncode == 0, made.stderr
    config = configparser.ConfigParser()
    config.read_string("[venv]\n" + (root / "pyvenv.cfg").read_text())
    assert config["venv"]["include-system-site-packages"] == "false"  # PEP 405's key
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME", "VIRTUAL_ENV")}
    proc = subprocess.run([str(root / "bin" / "python"), "-m", "pip", "install", f"{wheel}[export]"],
                          check=False, capture_output=True, text=True, timeout=2400, env=env)  # fmt: skip
    assert proc.returncode == 0, proc.stdout[-4000:] + proc.stderr[-4000:]
    return root


@pytest.fixture(scope="module")
def user(scratch: Path, venv: Path) -> dict[str, Path]:
    """An empty working folder and an empty home, as a new user of the installed Kiln has them."""
    work, home = scratch / "work", scratch / "home"
    work.mkdir()
    home.mkdir()
    return {"work": work, "home": home, "venv": venv}


def run(user: dict[str, Path], *args: str, timeout: float = 900, cwd: Path | None = None) -> subprocess.CompletedProcess:
    """Run a program of the venv (``kiln``, ``python``) in the user's folder with a clean environment:
    no PYTHONPATH, nothing of this test's Python, the venv's bin first on PATH."""
    program = str(user["venv"] / "bin" / args[0])
    env = {"PATH": f"{user['venv'] / 'bin'}{os.pathsep}/usr/bin{os.pathsep}/bin", "HOME": str(user["home"]),
           "PYTHONUNBUFFERED": "1"}  # fmt: skip
    return subprocess.run([program, *args[1:]], cwd=cwd or user["work"], env=env, check=False, capture_output=True,
                          text=True, timeout=timeout)  # fmt: skip


def assert_clean(proc: subprocess.CompletedProcess) -> None:
    """Exit 0 and no traceback (what the installed Kiln failed with)."""
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "Traceback" not in proc.stderr and "Primary config directory not found" not in proc.stdout + proc.stderr


def train_short(user: dict[str, Path], name: str, *extra: str) -> tuple[Path, subprocess.CompletedProcess]:
    """A short Pendulum run in ``<work>/<name>``; returns the folder and the command's output."""
    proc = run(user, "kiln", "train", *SHORT, *extra, f"hydra.run.dir={name}")
    assert_clean(proc)
    return user["work"] / name, proc


@pytest.fixture(scope="module")
def run_a(user: dict[str, Path]) -> tuple[Path, subprocess.CompletedProcess]:
    return train_short(user, "run_a")


@pytest.fixture(scope="module")
def run_b(user: dict[str, Path]) -> tuple[Path, subprocess.CompletedProcess]:
    return train_short(user, "run_b", "seed=1")


def readme_block(first_line: str) -> str:
    """The README's fenced Python block whose first line is ``first_line``, exactly as written."""
    blocks = re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.DOTALL)
    found = [b for b in blocks if b.splitlines()[:1] == [first_line]]
    assert len(found) == 1, f"README.md should hold one ```python block whose first line is {first_line!r}"
    return found[0]


# -- the wheel itself --------------------------------------------------------------------------------


def test_wheel_installs_only_kiln_and_its_hydra_plugin(wheel_files: list[str]) -> None:
    # A wheel's top-level folders are the import names it installs, besides its .dist-info (PEP 427).
    tops = {name.split("/")[0] for name in wheel_files if not name.split("/")[0].endswith(".dist-info")}
    assert tops == {"kiln", "hydra_plugins"}
    # hydra_plugins is Hydra's namespace package, shared by every plugin: the wheel adds one folder to it
    # and no hydra_plugins/__init__.py, which would hide other installed plugins (Python's namespace
    # packages, PEP 420).
    assert {name.split("/")[1] for name in wheel_files if name.startswith("hydra_plugins/")} == {"kiln_launchers"}
    assert "hydra_plugins/__init__.py" not in wheel_files
    assert "hydra_plugins/kiln_launchers/__init__.py" in wheel_files


def _package_folder(package: str) -> Path:
    """The checkout folder of an installed package, by pyproject's package-dir (the longest mapped prefix)."""
    mapping = PYPROJECT["tool"]["setuptools"]["package-dir"]
    prefix = max((p for p in mapping if package == p or package.startswith(p + ".")), key=len)
    rest = package[len(prefix):].lstrip(".")
    return (REPO / mapping[prefix]).joinpath(*rest.split(".")) if rest else REPO / mapping[prefix]


def test_wheel_holds_every_module_and_preset_of_the_checkout(wheel_files: list[str]) -> None:
    # Every module of every listed package, and the presets as package data (pyproject's package-data
    # patterns), at their installed paths.
    setuptools = PYPROJECT["tool"]["setuptools"]
    expected = set()
    for package in setuptools["packages"]:
        folder = _package_folder(package)
        patterns = ["*.py", *setuptools.get("package-data", {}).get(package, [])]
        for pattern in patterns:
            for path in folder.glob(pattern):
                expected.add(f"{package.replace('.', '/')}/{path.relative_to(folder).as_posix()}")
    assert {"kiln/configs/train.yaml", "kiln/configs/evaluate.yaml", "kiln/configs/env/pendulum.yaml",
            "kiln/configs/agent/published.yaml", "kiln/configs/launcher/population.yaml",
            "kiln/learner/sac.py", "kiln/cli/command.py", "kiln/envs/make.py"} <= expected  # fmt: skip
    missing = sorted(expected - set(wheel_files))
    assert not missing, f"not in the wheel: {missing}"
    yaml_in_checkout = {p.relative_to(REPO / "configs").as_posix() for p in (REPO / "configs").rglob("*.yaml")}
    assert {f"kiln/configs/{name}" for name in yaml_in_checkout} <= set(wheel_files)  # no preset left out


def test_wheel_names_the_kiln_command(wheel: Path, wheel_files: list[str]) -> None:
    # entry_points.txt in the .dist-info: an INI file, console scripts under [console_scripts]
    # (the Python packaging entry-points specification).
    name = next(n for n in wheel_files if n.endswith(".dist-info/entry_points.txt"))
    with zipfile.ZipFile(wheel) as archive:
        points = configparser.ConfigParser()
        points.read_string(archive.read(name).decode())
    assert dict(points["console_scripts"]) == {"kiln": PYPROJECT["project"]["scripts"]["kiln"]}


# -- the installed environment -------------------------------------------------------------------------


def test_installed_kiln_is_the_venvs_and_adds_no_generic_names(user: dict[str, Path]) -> None:
    probe = ("import importlib.util, json, kiln, hydra_plugins.kiln_launchers as shims\n"
             "generic = {n: importlib.util.find_spec(n) is not None for n in ('agents', 'envs', 'kiln_cli', 'scripts')}\n"
             "print(json.dumps({'kiln': kiln.__file__, 'shims': shims.__file__, 'generic': generic}))")  # fmt: skip
    proc = run(user, "python", "-c", probe)
    assert_clean(proc)
    found = json.loads(proc.stdout)
    site = (user["venv"] / "lib").resolve()
    for name in ("kiln", "shims"):
        path = Path(found[name]).resolve()
        assert path.is_relative_to(site) and not path.is_relative_to(REPO), found
    assert found["generic"] == {"agents": False, "envs": False, "kiln_cli": False, "scripts": False}


def test_version_is_the_distributions(user: dict[str, Path]) -> None:
    proc = run(user, "kiln", "--version")
    assert_clean(proc)
    assert proc.stdout.strip() == f"kiln {PYPROJECT['project']['version']}"


def test_train_help_lists_the_installed_presets(user: dict[str, Path], wheel_files: list[str]) -> None:
    proc = run(user, "kiln", "train", "--help")
    assert_clean(proc)
    # Hydra's help lists each config group's options (the yaml files of that group's folder).
    for group in ("env", "agent", "launcher", "sweep"):
        options = sorted(n.rsplit("/", 1)[1][:-5] for n in wheel_files if re.fullmatch(rf"kiln/configs/{group}/\w+\.yaml", n))
        assert f"{group}: {', '.join(options)}" in proc.stdout, (group, proc.stdout)
    assert "steps:" in proc.stdout and "seed: 0" in proc.stdout


def test_evaluate_help_lists_its_keys(user: dict[str, Path]) -> None:
    proc = run(user, "kiln", "evaluate", "--help")
    assert_clean(proc)
    keys = {line.split(":")[0] for line in proc.stdout.splitlines() if line and not line[0].isspace() and ":" in line}
    assert {"policy", "episodes", "seed", "deterministic", "video", "out", "task_module"} <= keys


def test_train_writes_a_run_of_pendulum(run_a: tuple[Path, subprocess.CompletedProcess]) -> None:
    run_a, proc = run_a
    assert f"run folder   {run_a}" in proc.stdout
    result = json.loads((run_a / "result.json").read_text())
    assert result["env_id"] == "Pendulum-v1" and result["steps"] == 600
    assert result["updates"] == 400  # hand arithmetic beside SHORT
    # Target entropy -dim(A) = -1 for Pendulum's one torque (Haarnoja et al. 2018, Sec. 5 / Table 1).
    assert result["target_entropy"] == -1.0
    assert [step for step, _ in result["eval_curve"]] == [300, 600]
    # Evaluation episodes last the registered 200 steps (Pendulum never terminates); returns in range.
    assert PENDULUM.max_episode_steps == 200
    assert result["evaluation"]["length_min"] == result["evaluation"]["length_max"] == PENDULUM.max_episode_steps
    assert 200 * WORST_PENDULUM_REWARD <= result["evaluation"]["return_min"] <= result["evaluation"]["return_max"] <= 0
    spec = json.loads((run_a / "policy" / "spec.json").read_text())
    space = gym.make("Pendulum-v1").action_space
    assert spec["action_space"] == {"shape": [1], "low": space.low.tolist(), "high": space.high.tolist()}
    assert space.low.tolist() == [-2.0] and space.high.tolist() == [2.0]
    assert spec["env"]["max_episode_steps"] == 200
    assert sorted(p.name for p in (run_a / "checkpoints").iterdir())  # checkpoint.every=300 wrote some


def test_evaluate_the_installed_run(user: dict[str, Path], run_a: tuple[Path, subprocess.CompletedProcess]) -> None:
    run_a, _ = run_a
    proc = run(user, "kiln", "evaluate", "policy=run_a")
    assert_clean(proc)
    result = json.loads((run_a / "result.json").read_text())
    records = list((run_a / "evaluations").glob("*.json"))
    assert len(records) == 1
    record = json.loads(records[0].read_text())
    # Without seed=, the run's own evaluation episodes, as the `reproduce` line of `kiln train` says
    # (project requirement, no outside source): the same seeds, the same returns.
    assert record["seeds"] == result["evaluation_seeds"]
    assert record["summary"]["return_mean"] == result["evaluation"]["return_mean"]
    assert all(e["length"] == 200 and not e["terminated"] for e in record["episode_list"])  # Gymnasium registry
    returns = [e["return"] for e in record["episode_list"]]
    assert record["summary"]["return_mean"] == pytest.approx(sum(returns) / len(returns))  # hand arithmetic


def test_compare_two_installed_runs(user: dict[str, Path], run_a: tuple, run_b: tuple) -> None:
    runs = [run_a[0], run_b[0]]
    proc = run(user, "kiln", "compare", "run_a", "run_b", "--out", "report", "--resamples", "200")
    assert_clean(proc)
    assert "2 runs of Pendulum-v1 in 1 groups" in proc.stdout
    numbers = json.loads((user["work"] / "report" / "comparison.json").read_text())
    finals = [json.loads((r / "result.json").read_text())["final"]["return_eval"] for r in runs]
    # One group of two runs: its IQM, the 25 % trimmed mean (Agarwal et al. 2021), keeps both values
    # (scipy.stats.trim_mean); event files store float32, hence the tolerance.
    assert [g["runs"] for g in numbers["groups"]] == [2]
    assert numbers["groups"][0]["iqm"] == pytest.approx(stats.trim_mean(finals, 0.25), rel=1e-5)
    assert (user["work"] / "report" / "report.md").is_file()


def test_export_runs_in_onnxruntime_and_replays_the_evaluation(user: dict[str, Path], run_a: tuple) -> None:
    run_a, _ = run_a
    proc = run(user, "kiln", "export", "run_a", "--out", "a.onnx")
    assert_clean(proc)
    assert (user["work"] / "a.onnx").is_file()
    result = json.loads((run_a / "result.json").read_text())
    (user["work"] / "onnx_episodes.py").write_text(ONNX_EPISODES)
    episodes = run(user, "python", "onnx_episodes.py", "a.onnx", json.dumps(result["evaluation_seeds"]))
    assert_clean(episodes)
    got = json.loads(episodes.stdout)
    # onnxruntime's actions stay within Pendulum's torque bounds (Gymnasium's action space [-2, 2]) ...
    assert -2.0 <= got["low"] <= got["high"] <= 2.0 and got["count"] == 200 * len(result["evaluation_seeds"])
    # ... and the same seeded episodes give the returns Kiln's final evaluation recorded: with two
    # episodes, its min and max are the two returns (float32 round-off of the actions: 1e-4 relative,
    # as README "Export for deployment" states).
    assert len(got["returns"]) == result["evaluation"]["episodes"] == 2
    recorded = [result["evaluation"]["return_min"], result["evaluation"]["return_max"]]
    assert sorted(got["returns"]) == pytest.approx(recorded, rel=1e-4)


def test_verify_quick(user: dict[str, Path]) -> None:
    proc = run(user, "kiln", "verify", "--quick", "--out", "quick.json")
    assert_clean(proc)
    table = json.loads((user["work"] / "quick.json").read_text())
    assert table["quick"] is True and table["passed"] is True and len(table["checks"]) == 4
    assert "4 of 4 checks passed" in proc.stdout
    _check_outside_values(table)


def test_verify_full(user: dict[str, Path]) -> None:
    proc = run(user, "kiln", "verify", "--out", "full.json", timeout=1800)
    assert_clean(proc)
    table = json.loads((user["work"] / "full.json").read_text())
    assert table["quick"] is False and table["passed"] is True
    count = len(table["checks"])
    assert count > 4 and f"{count} of {count} checks passed" in proc.stdout
    assert len(table["runs"]) >= 1 and all(r["steps"] > 0 for r in table["runs"])
    _check_outside_values(table)


def _check_outside_values(table: dict) -> None:
    """The expected values of two solver rows, recomputed here from their sources."""
    rows = {row["source"]: row for row in table["checks"]}
    gridworld = next(row for source, row in rows.items() if "Sutton & Barto" in source)
    # Sutton & Barto 2018, Fig. 3.5: v* of the top-left cell of the 5x5 gridworld is 22.0.
    assert gridworld["expected"] == pytest.approx(22.0)
    entropy = next(row for row in table["checks"] if "entropy of tanh(N(0,1))" in row["check"])
    # H(tanh X) = H(X) + E[log(1 - tanh^2 X)] for X ~ N(0, 1) (change of variables), by SciPy quadrature;
    # 1 - tanh^2 x = sech^2 x = 4 / (e^x + e^-x)^2, so its log is 2 (log 2 - |x| - log(1 + e^(-2|x|))).
    def log_sech2(x: float) -> float:
        return 2.0 * (math.log(2.0) - abs(x) - math.log1p(math.exp(-2.0 * abs(x))))

    correction, _ = integrate.quad(lambda x: stats.norm.pdf(x) * log_sech2(x), -math.inf, math.inf)
    exact = stats.norm.entropy() + correction
    assert entropy["expected"] == pytest.approx(exact, abs=5e-5)  # the table gives it to 4 decimals
    assert entropy["got"] == pytest.approx(exact, abs=1e-4)  # the row's own tolerance


def test_user_preset_folder(user: dict[str, Path]) -> None:
    presets = user["work"].parent / "my_presets"
    (presets / "env").mkdir(parents=True)
    (presets / "env" / "short_pendulum.yaml").write_text(SHORT_PENDULUM)
    proc = run(user, "kiln", "--presets", str(presets), "train", "env=short_pendulum", "hydra.run.dir=run_p")
    assert_clean(proc)
    result = json.loads((user["work"] / "run_p" / "result.json").read_text())
    assert result["env_name"] == "short_pendulum" and result["steps"] == 300
    # The preset's limit replaces the registered 200 steps; returns within 50 of the worst steps.
    assert result["evaluation"]["length_max"] == 50
    assert 50 * WORST_PENDULUM_REWARD <= result["evaluation"]["return_min"] <= 0


def test_population_multirun(user: dict[str, Path]) -> None:
    sweep = user["work"] / "sweep_pop"
    proc = run(user, "kiln", "train", "-m", "seed=0,1", "steps=300", "collect.warmup_steps=100", "agent.batch_size=32",
               "evaluate.every=300", "evaluate.episodes=1", "evaluate.bias_episodes=0", "log.progress=off",
               "+launcher=population", "hydra.launcher.n_jobs=1", f"hydra.sweep.dir={sweep.name}",
               "hydra.sweep.subdir=seed${seed}")  # fmt: skip
    assert_clean(proc)
    assert "2 sweep points in 1 populations (2), at most 1 at once" in proc.stdout
    for seed in (0, 1):
        result = json.loads((sweep / f"seed{seed}" / "result.json").read_text())
        assert result["seed"] == seed and result["population"] == 2
        assert result["evaluation"]["length_max"] == PENDULUM.max_episode_steps  # Gymnasium registry
        assert f"run folder   {sweep / f'seed{seed}'}" in proc.stdout


def test_readme_use_from_python(user: dict[str, Path]) -> None:
    folder = user["work"].parent / "python_user"
    folder.mkdir()
    (folder / "use_kiln.py").write_text(readme_block("# use_kiln.py"))
    proc = run(user, "python", "use_kiln.py", cwd=folder)
    assert_clean(proc)
    # What the example prints: a torque within Pendulum-v1's action space [-2, 2], then an evaluation
    # whose episodes last the registered 200 steps and whose return lies within 200 worst steps
    # (Gymnasium's registry and Pendulum documentation, as above).
    action = re.search(r"^action (-?[\d.e+-]+)$", proc.stdout, flags=re.MULTILINE)
    assert action, proc.stdout
    assert -2.0 <= float(action.group(1)) <= 2.0
    evaluation = re.search(r"^episodes (\d+) length ([\d.]+) return (-?[\d.]+)$", proc.stdout, flags=re.MULTILINE)
    assert evaluation, proc.stdout
    episodes, length, episode_return = int(evaluation.group(1)), float(evaluation.group(2)), float(evaluation.group(3))
    assert episodes >= 1 and length == PENDULUM.max_episode_steps
    assert 200 * WORST_PENDULUM_REWARD <= episode_return <= 0
