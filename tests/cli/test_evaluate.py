"""scripts/evaluate.py: its help shows only what it accepts, and counts read in the right number
(requirements of the project; no outside source)."""

from pathlib import Path

import pytest

from kiln.cli.evaluate import episodes_line
from kiln.evaluation.policy_eval import EvaluationPlan
from tests.support.cli import run_script


def test_help_lists_only_the_keys_evaluate_accepts(tmp_path: Path) -> None:
    proc = run_script("evaluate", "--help", cwd=tmp_path, timeout=120)
    assert proc.returncode == 0, proc.stderr
    keys = {line.split(":")[0] for line in proc.stdout.splitlines() if line and not line[0].isspace() and ":" in line}
    assert {"policy", "episodes", "seed", "deterministic", "video", "out"} <= keys
    # The training config groups exist on the search path but evaluate refuses them.
    assert not keys & {"agent", "env", "sweep"}
    assert "Configuration groups" not in proc.stdout
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    "mode,episodes,seed,text",
    [
        ("deterministic", 1, 5, "deterministic, 1 episode, reset seed 5"),
        ("stochastic", 3, 5, "stochastic, 3 episodes, reset seeds 5..7"),
    ],
)
def test_episodes_line(mode: str, episodes: int, seed: int, text: str) -> None:
    plan = EvaluationPlan([seed + i for i in range(episodes)], seed, f"seed={seed}")
    assert episodes_line(mode, plan) == f"{text} (seed={seed})"
