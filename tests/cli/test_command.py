"""scripts/command.py (kiln.cli.command), the ``kiln`` console command, run from a user's own folder
outside the checkout: the command list, how Kiln's own options are split from the command's, the
version, one-line errors, and the README's "Your own task and presets" done end to end (requirements
of the project, no outside source, except where a check names its reference)."""

import importlib
import json
from importlib.metadata import version
from pathlib import Path

import pytest

from kiln.cli.command import COMMANDS, split_global
from tests.support.cli import REPO, assert_one_line_error, run_kiln, run_script

# A user's own task, written as a user would: a point mass on a line pushed by a bounded force,
# registered with Gymnasium under a plain id in the user's own module (nothing of Kiln's).
USER_TASK = '''\
import gymnasium as gym
import numpy as np


class PointMass(gym.Env):
    """x'' = force; reward -(x^2 + 0.1 force^2); 0.1 s steps."""

    def __init__(self):
        self.observation_space = gym.spaces.Box(-np.inf, np.inf, shape=(2,), dtype=np.float32)
        self.action_space = gym.spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)
        self.state = np.zeros(2)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.state = np.array([self.np_random.uniform(-1.0, 1.0), 0.0])
        return self.state.astype(np.float32), {}

    def step(self, action):
        force = float(np.clip(action[0], -1.0, 1.0))
        x, v = self.state
        v = v + 0.1 * force
        x = x + 0.1 * v
        self.state = np.array([x, v])
        return self.state.astype(np.float32), -(x * x + 0.1 * force * force), False, False, {}


gym.register(id="PointMass-v0", entry_point=PointMass, max_episode_steps=50)
'''

USER_PRESET = """\
# @package _global_
env:
  id: point_task:PointMass-v0   # module-qualified id: Gymnasium imports point_task first
  name: point
  max_episode_steps: 50
  kwargs: {}
"""

# A user preset with the name of one of Kiln's: the user's folder is searched first, so it wins.
USER_PENDULUM = """\
# @package _global_
env:
  id: Pendulum-v1
  name: my_pendulum
  max_episode_steps: 100
  kwargs: {}
"""

SHORT_RUN = ("steps=300", "collect.warmup_steps=100", "agent.batch_size=32", "evaluate.every=300",
             "evaluate.episodes=1", "evaluate.bias_episodes=1", "log.progress=off")  # fmt: skip


@pytest.fixture
def user_folder(tmp_path: Path) -> Path:
    """A user's project folder: their task module and a folder of their own presets."""
    (tmp_path / "point_task.py").write_text(USER_TASK)
    env_presets = tmp_path / "my_presets" / "env"
    env_presets.mkdir(parents=True)
    (env_presets / "point.yaml").write_text(USER_PRESET)
    (env_presets / "pendulum.yaml").write_text(USER_PENDULUM)
    return tmp_path


@pytest.mark.parametrize(
    "argv,split",
    [
        # Worked out by hand: Kiln's options come before the command; --presets takes the next word.
        (["train", "seed=1"], ([], "train", ["seed=1"])),
        (["--presets", "mine", "train", "env=point"], (["--presets", "mine"], "train", ["env=point"])),
        (["--presets", "a", "--presets", "b", "evaluate"], (["--presets", "a", "--presets", "b"], "evaluate", [])),
        (["train", "--presets", "mine"], ([], "train", ["--presets", "mine"])),  # after the command: the command's
        (["--version"], (["--version"], None, [])),
        ([], ([], None, [])),
        (["--presets", "train"], (["--presets", "train"], None, [])),  # "train" is the folder here
    ],
)
def test_split_global(argv: list[str], split: tuple) -> None:
    assert split_global(argv) == split


def test_every_command_names_a_module_with_a_main() -> None:
    for name, (module_name, summary, _) in COMMANDS.items():
        module = importlib.import_module(module_name)
        assert callable(module.main), name
        # kiln.cli.<name> is scripts/<name>.py (pyproject maps scripts/ to kiln.cli).
        assert module_name == f"kiln.cli.{name}" and (REPO / "scripts" / f"{name}.py").is_file()
        assert summary and "\n" not in summary


def test_version_is_the_installed_distributions(tmp_path: Path) -> None:
    # The version pip recorded for the distribution (importlib.metadata reads its METADATA file).
    proc = run_kiln("--version", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout == f"kiln {version('kiln-sac')}\n"


def test_help_lists_the_subcommands(tmp_path: Path) -> None:
    proc = run_kiln("--help", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    listed = [line.split()[0] for line in proc.stdout.splitlines() if line.startswith("  ") and line.split()]
    assert {"train", "evaluate", "compare", "verify", "bench"} <= set(listed)
    assert "--presets DIR" in proc.stdout and "KILN_PRESETS" in proc.stdout


@pytest.mark.parametrize(
    "args,phrases",
    [
        ([], ["no command given", "train, evaluate, compare, verify, bench"]),
        (["fly"], ["unknown command 'fly'", "train, evaluate"]),
        (["--presets", "no_such_folder", "train"], ["no_such_folder", "is not a folder"]),
    ],
)
def test_bad_command_line_is_one_line(tmp_path: Path, args: list[str], phrases: list[str]) -> None:
    assert_one_line_error(run_kiln(*args, cwd=tmp_path, timeout=120), *phrases)
    assert list(tmp_path.iterdir()) == []


def test_own_task_and_presets_train_and_evaluate_from_the_users_folder(user_folder: Path) -> None:
    proc = run_kiln("--presets", "my_presets", "train", "env=point", *SHORT_RUN, cwd=user_folder, timeout=300)
    assert proc.returncode == 0, proc.stderr
    runs = list((user_folder / "runs" / "point").iterdir())
    assert len(runs) == 1
    run = runs[0]
    result = json.loads((run / "result.json").read_text())
    assert result["env_id"] == "point_task:PointMass-v0" and result["steps"] == 300
    assert {p.name for p in (run / "policy").iterdir()} >= {"spec.json", "weights.safetensors"}
    assert "1 deterministic episode of point_task:PointMass-v0 after 300 steps" in proc.stdout
    # Evaluation imports the user's module only when asked to on the command line (a policy folder
    # alone must never make Kiln import code): without task_module it refuses with one line.
    policy = f"policy={run.relative_to(user_folder)}"
    refused = run_kiln("evaluate", policy, "episodes=1", "seed=0", cwd=user_folder, timeout=300)
    assert refused.returncode == 2 and "task_module=point_task" in refused.stderr
    evaluated = run_kiln("evaluate", policy, "episodes=1", "seed=0", "task_module=point_task", cwd=user_folder,
                         timeout=300)  # fmt: skip
    assert evaluated.returncode == 0, evaluated.stderr
    assert "deterministic, 1 episode, reset seed 0" in evaluated.stdout
    assert (run / "evaluations" / "deterministic_seed0_1ep.json").is_file()


def test_user_preset_replaces_kilns_of_the_same_name(user_folder: Path) -> None:
    # Through the environment variable this time, and Hydra's own printing of the composed config.
    proc = run_kiln("train", "env=pendulum", "--cfg", "job", cwd=user_folder, timeout=120,
                    env={"KILN_PRESETS": str(user_folder / "my_presets")})  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert "name: my_pendulum" in proc.stdout and "max_episode_steps: 100" in proc.stdout


def test_unknown_preset_lists_kilns_and_the_users(user_folder: Path) -> None:
    proc = run_script("train", "env=foo", cwd=user_folder, timeout=120,
                      env={"KILN_PRESETS": str(user_folder / "my_presets")})  # fmt: skip
    line = assert_one_line_error(proc, "unknown env preset 'foo'", str(user_folder / "my_presets"))
    options = line.split("choose one of ", 1)[1].split(" (", 1)[0].split(", ")
    # Kiln's own env presets (configs/env/) and the user's point preset, each once.
    assert {"pendulum", "hopper", "damper_trim", "point"} <= set(options)
    assert len(options) == len(set(options))
    assert sorted(p.name for p in user_folder.iterdir()) == ["my_presets", "point_task.py"]
