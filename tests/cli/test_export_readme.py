"""The README's standalone example runs an exported controller with onnxruntime and Gymnasium only,
and prints the return Kiln's own evaluation gives (project requirement, no outside source; 1e-4
relative covers float32 round-off of the actions)."""

import os
import re
import subprocess
import sys
from pathlib import Path

import gymnasium as gym
import pytest
import torch

from kiln.evaluation.policy_eval import evaluate_policy, plan_evaluation
from kiln.learner.actor import SquashedGaussianActor
from kiln.onnx_export import export_policy
from kiln.storage.policy_io import build_spec, load_policy, save_policy

README = Path(__file__).resolve().parents[2] / "README.md"
# The import names a Kiln install adds (pyproject's packages: kiln, and its launchers in Hydra's plugin
# namespace); the example must need neither.
KILN_PACKAGES = ("kiln", "hydra_plugins.kiln_launchers")


def readme_example() -> str:
    """The Python block of the README that starts with ``# run_exported.py``, exactly as written."""
    blocks = re.findall(r"```python\n(.*?)```", README.read_text(), flags=re.DOTALL)
    found = [b for b in blocks if b.startswith("# run_exported.py")]
    assert len(found) == 1, "README.md should hold one example starting with # run_exported.py"
    return found[0]


def without_kiln(tmp_path: Path) -> dict[str, str]:
    """An environment in which ``import kiln`` (or hydra_plugins.kiln_launchers) fails, even with Kiln
    installed.

    PYTHONPATH holds only packages of those names that refuse to import; entries of PYTHONPATH are
    searched before site-packages and before an editable install's finder, so they win. hydra_plugins
    is a namespace package (PEP 420: no __init__.py), so the blocker adds a portion to it that holds
    its own kiln_launchers, found first, and Hydra's other plugins stay importable.
    """
    blocker = tmp_path / "no_kiln"
    for name in KILN_PACKAGES:
        package = blocker.joinpath(*name.split("."))
        package.mkdir(parents=True)
        (package / "__init__.py").write_text(f"raise ImportError('the example must not import {name}')\n")
    return {**os.environ, "PYTHONPATH": str(blocker), "PYTHONUNBUFFERED": "1"}


@pytest.fixture
def pendulum_policy(tmp_path: Path) -> Path:
    """An actor for Pendulum-v1 (spaces read from Gymnasium), saved as a policy folder."""
    env = gym.make("Pendulum-v1")
    actor = SquashedGaussianActor(3, 1, (32, 32), "relu", (-20.0, 2.0), torch.Generator().manual_seed(3))
    record = {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": None}
    spec = build_spec(actor, env.observation_space, env.action_space, record, {})
    return save_policy(tmp_path / "run" / "policy", actor, spec)


def test_readme_example_runs_without_kiln_and_prints_kilns_return(tmp_path: Path, pendulum_policy: Path) -> None:
    work = tmp_path / "deploy"
    work.mkdir()
    export_policy(pendulum_policy, work / "pendulum.onnx")
    (work / "run_exported.py").write_text(readme_example())
    env = without_kiln(tmp_path)
    for name in KILN_PACKAGES:  # the guard works: none of Kiln's packages imports there
        probe = subprocess.run([sys.executable, "-c", f"import {name}"], check=False, cwd=work, env=env,
                               capture_output=True, text=True)  # fmt: skip
        assert probe.returncode != 0 and "must not import" in probe.stderr
    proc = subprocess.run([sys.executable, "run_exported.py"], check=False, cwd=work, env=env,
                          capture_output=True, text=True, timeout=300)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    printed = re.fullmatch(r"return (-?\d+\.\d+)\n", proc.stdout)
    assert printed, proc.stdout
    policy = load_policy(pendulum_policy)
    # `kiln evaluate ... episodes=1 seed=0`: reset seed 0, deterministic.
    kiln = evaluate_policy(policy, plan_evaluation(policy, 1, 0))["episode_list"][0]["return"]
    assert float(printed.group(1)) == pytest.approx(kiln, rel=1e-4)
