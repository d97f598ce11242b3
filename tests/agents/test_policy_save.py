"""The saved policy is meant to be handed on: it gets the user's usual permissions, and a save
killed midway leaves nothing that outlives the next save (requirements of the project; file modes
as umask(2) and open(2) define them)."""

from __future__ import annotations

import os
import socket
import stat
import subprocess
import sys
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch

from kiln.learner.actor import SquashedGaussianActor
from kiln.storage.policy_io import build_spec, load_policy, save_policy

REPO = Path(__file__).resolve().parents[2]


def _save(folder: Path) -> Path:
    actor = SquashedGaussianActor(3, 1, (8,), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    box = gym.spaces.Box(-1.0, 1.0, (3,), np.float32)
    spec = build_spec(actor, box, gym.spaces.Box(-2.0, 2.0, (1,), np.float32),
                      {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": None}, {})  # fmt: skip
    return save_policy(folder, actor, spec)


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


@pytest.mark.parametrize("umask,folder_mode,file_mode", [(0o022, 0o755, 0o644), (0o077, 0o700, 0o600)])
def test_policy_follows_the_umask(tmp_path: Path, umask: int, folder_mode: int, file_mode: int) -> None:
    previous = os.umask(umask)
    try:
        folder = _save(tmp_path / "policy")
    finally:
        os.umask(previous)
    # Folders are created 0o777 and files 0o666, less the umask (umask(2)).
    assert _mode(folder) == folder_mode
    assert {p.name: _mode(p) for p in folder.iterdir()} == {"spec.json": file_mode, "weights.safetensors": file_mode}


_KILLED_SAVE = """
import os, sys
from kiln.storage import policy_io
from tests.agents.test_policy_save import _save
# Die the way a killed process does (no cleanup) after the weights are written, before the spec.
policy_io.write_text_atomic = lambda *args: os._exit(9)
_save(__import__("pathlib").Path(sys.argv[1]))
"""


def test_a_killed_save_leaves_a_temporary_that_the_next_save_removes(tmp_path: Path) -> None:
    proc = subprocess.run([sys.executable, "-c", _KILLED_SAVE, str(tmp_path / "policy")], cwd=REPO,
                          env=dict(os.environ, PYTHONPATH=str(REPO)), capture_output=True, text=True, timeout=120, check=False)  # fmt: skip
    assert proc.returncode == 9, proc.stderr
    left = [p.name for p in tmp_path.iterdir()]
    assert len(left) == 1 and left[0].startswith(".policy-saving-"), left  # the killed save's temporary
    _save(tmp_path / "policy")
    assert [p.name for p in tmp_path.iterdir()] == ["policy"]
    assert load_policy(tmp_path / "policy").spec["env"]["id"] == "Pendulum-v1"


def test_a_live_writers_temporary_and_another_hosts_are_left_alone(tmp_path: Path) -> None:
    host = socket.gethostname()
    live = tmp_path / f".policy-saving-{host}-{os.getppid()}-0123abcd"  # our parent is alive
    elsewhere = tmp_path / ".policy-saving-some-other-host-1-0123abcd"  # another machine's pid 1
    mine = tmp_path / "my-notes"
    for folder in (live, elsewhere, mine):
        folder.mkdir()
    _save(tmp_path / "policy")
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([live.name, elsewhere.name, mine.name, "policy"])
