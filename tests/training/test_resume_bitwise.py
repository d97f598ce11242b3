"""A run killed with SIGKILL and resumed ends bit-identical to a run never interrupted.

With ``deterministic=true`` every tensor of the final checkpoint (weights, target networks, Adam
moments, α, the training generator), every replay row, the saved policy and the evaluation curve
must be equal bit for bit. Kill moments: during warm-up, inside an update, inside an evaluation,
while a checkpoint's files are being written, while a replay chunk is being written. Project
requirement (exact resume); the reference is the uninterrupted run, not stored numbers.
"""

import json
import subprocess
import sys
from pathlib import Path

import pytest
import torch
from safetensors.torch import load_file
from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

REPO = Path(__file__).resolve().parents[2]
CONFIG = (
    "env=pendulum", "steps=700", "deterministic=true", "collect.warmup_steps=150",
    "agent.layer_widths=[16,16]", "agent.batch_size=32", "agent.replay_capacity=700",
    "evaluate.every=200", "evaluate.episodes=1", "evaluate.bias_episodes=1",
    "log.every=100", "log.progress=off", "checkpoint.every=100", "checkpoint.keep=2",
)  # fmt: skip
# (point, n): the n-th call of the patched function kills the process (see tests/support/kill_driver.py).
KILLS = {
    "warm-up": ("warmup", 120),              # env step 120, after the step-100 checkpoint
    "mid-update": ("update", 130),           # inside the update of env step 280
    "evaluation": ("evaluation", 2),         # inside the evaluation at env step 400
    "checkpoint files": ("checkpoint", 9),   # the 5th checkpoint's state written, its manifest not
    "replay chunk": ("replay_chunk", 3),     # while the 3rd checkpoint's replay rows are written
}  # fmt: skip


def _drive(run_dir: Path, point: str, n: int) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "tests.support.kill_driver", str(run_dir), point, str(n), *CONFIG],
        cwd=REPO, capture_output=True, text=True, timeout=600,
    )  # fmt: skip


def _final(run_dir: Path) -> dict:
    checkpoint = sorted((run_dir / "checkpoints").glob("step-*"))[-1]
    manifest = json.loads((checkpoint / "manifest.json").read_text())
    chunks = {k: load_file(run_dir / "checkpoints" / "replay" / v) for k, v in manifest["replay"]["chunks"].items()}
    result = json.loads((run_dir / "result.json").read_text())
    return {
        "checkpoint": checkpoint.name,
        "tensors": load_file(checkpoint / "state.safetensors"),
        "replay": chunks,
        "position": {k: manifest["replay"][k] for k in ("size", "next")},
        "record": {k: manifest[k] for k in ("curve", "last_eval", "last_metrics", "credit", "warmup_rng", "episode")},
        "policy": load_file(run_dir / "policy" / "weights.safetensors"),
        "curve": result["eval_curve"],
        "evaluation": result["evaluation"],
    }


def _assert_bitwise_equal(a: dict, b: dict) -> None:
    assert a["checkpoint"] == b["checkpoint"]
    assert a["tensors"].keys() == b["tensors"].keys()
    for name in a["tensors"]:
        assert torch.equal(a["tensors"][name], b["tensors"][name]), name
    for chunk in a["replay"]:
        for name in a["replay"][chunk]:
            assert torch.equal(a["replay"][chunk][name], b["replay"][chunk][name]), (chunk, name)
    for name in a["policy"]:
        assert torch.equal(a["policy"][name], b["policy"][name]), name
    assert a["position"] == b["position"]
    assert a["record"] == b["record"]
    assert a["curve"] == b["curve"] and a["evaluation"] == b["evaluation"]


@pytest.fixture(scope="module")
def uninterrupted(tmp_path_factory):
    run_dir = tmp_path_factory.mktemp("whole") / "run"
    proc = _drive(run_dir, "none", 0)
    assert proc.returncode == 0, proc.stderr
    return _final(run_dir)


@pytest.mark.slow
@pytest.mark.parametrize("moment", list(KILLS))
def test_killed_and_resumed_run_is_bit_identical(tmp_path, uninterrupted, moment):
    run_dir = tmp_path / "run"
    point, n = KILLS[moment]
    killed = _drive(run_dir, point, n)
    assert killed.returncode == -9, killed.stderr  # SIGKILL
    assert not (run_dir / "result.json").exists()
    resumed = _drive(run_dir, "none", 0)
    assert resumed.returncode == 0, resumed.stderr
    _assert_bitwise_equal(uninterrupted, _final(run_dir))
    # TensorBoard shows each evaluation once: what the killed attempt logged after its checkpoint
    # is purged (TensorBoard's own reader applies the purge marker).
    events = EventAccumulator(str(run_dir), size_guidance={"scalars": 0})
    events.Reload()
    assert [e.step for e in events.Scalars("return/eval")] == [200, 400, 600, 700]
    assert [e.step for e in events.Scalars("critic/td_mse")] == [200, 300, 400, 500, 600, 700]
    # No half-written checkpoint is left behind, and only the newest `keep` remain.
    leftovers = sorted(p.name for p in (run_dir / "checkpoints").iterdir())
    assert leftovers == ["replay", "step-000000000600", "step-000000000700"]
