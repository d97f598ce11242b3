"""Checkpoints (kiln.training.checkpoint): complete or absent, replay rows written only when changed,
the newest ``keep`` kept, loading refuses what another config (or anyone else) wrote, and nothing
is ever unpickled.

Sources: Python's ``os.replace`` docs (a rename is atomic on POSIX: a folder appears under its final
name whole or not at all), ``json`` docs (``allow_nan=False`` raises ValueError), safetensors'
format (a JSON header and raw tensor bytes: loading runs no code), and the crafted pickles of
tests/support/pickle_bomb.py (shown live by tests/test_pickle_bomb.py). A kill at every instant of a
real run is covered by tests/training/test_resume_bitwise.py.
"""

import errno
import json
import math
import os
import subprocess
import sys

import numpy as np
import pytest
import torch

from kiln.errors import CheckpointError
from kiln.training import checkpoint as checkpoint_module
from kiln.training import replay as replay_module
from kiln.training.checkpoint import CheckpointStore, config_difference, config_fingerprint
from kiln.training.replay import ReplayBuffer
from tests.support.pickle_bomb import pickle_bomb, torch_bomb

CONFIG = {"seed": 1, "steps": 1000, "log": {"every": 100}, "agent": {"actor": {"lr": 0.0003}, "batch_size": 32}}


@pytest.fixture(autouse=True)
def small_chunks(monkeypatch):
    monkeypatch.setattr(replay_module, "CHUNK_ROWS", 4)  # chunks of rows 0-3, 4-7, 8-9


def _replay(rows: int = 0) -> ReplayBuffer:
    replay = ReplayBuffer(10, 1, 1, torch.Generator())
    _add(replay, range(rows))
    return replay


def _add(replay: ReplayBuffer, values) -> None:
    for i in values:
        replay.add(np.array([i]), np.array([0.0]), float(i), np.array([i + 1]), False)


def _write(store: CheckpointStore, step: int, replay: ReplayBuffer, config=CONFIG, **record):
    tensors = {"agent/w": torch.full((2, 3), float(step)), "rng/training": torch.Generator().manual_seed(step).get_state()}
    return store.write(step, tensors, {"config": config_fingerprint(config), "curve": [[step, -1.5]], **record}, replay)


def test_a_checkpoint_round_trips_tensors_record_and_replay(tmp_path):
    store = CheckpointStore(tmp_path, keep=2)
    replay = _replay(6)
    written = _write(store, 100, replay)
    assert written == tmp_path / "step-000000000100" and store.latest() == written
    assert sorted(os.listdir(written)) == ["manifest.json", "state.safetensors"]
    fresh = _replay()
    tensors, manifest = CheckpointStore(tmp_path, keep=2).load(written, fresh, CONFIG)
    assert torch.equal(tensors["agent/w"], torch.full((2, 3), 100.0))
    assert torch.equal(tensors["rng/training"], torch.Generator().manual_seed(100).get_state())
    assert manifest["step"] == 100 and manifest["curve"] == [[100, -1.5]] and manifest["format"] == "kiln-checkpoint"
    assert torch.equal(fresh.rows, replay.rows) and len(fresh) == 6


def test_only_replay_chunks_that_changed_are_written_again(tmp_path):
    store = CheckpointStore(tmp_path, keep=5)
    replay = _replay(6)  # rows 0-5: chunks 0 and 1
    _write(store, 1, replay)
    assert sorted(os.listdir(tmp_path / "replay")) == [
        "chunk-00000-step000000000001.safetensors",
        "chunk-00001-step000000000001.safetensors",
    ]
    _add(replay, [6])  # row 6: chunk 1 only
    second = _write(store, 2, replay)
    chunks = json.loads((second / "manifest.json").read_text())["replay"]["chunks"]
    # Chunk 0 is still the one step 1 wrote; chunk 1 is new.
    assert chunks == {"0": "chunk-00000-step000000000001.safetensors", "1": "chunk-00001-step000000000002.safetensors"}
    # Step 1's checkpoint still names its own chunk-1 file, so it is kept while step 1 is.
    assert "chunk-00001-step000000000001.safetensors" in os.listdir(tmp_path / "replay")
    fresh = _replay()
    store.load(second, fresh, CONFIG)
    assert torch.equal(fresh.rows, replay.rows) and len(fresh) == 7


def test_the_newest_keep_are_kept_and_unused_chunks_go(tmp_path):
    store = CheckpointStore(tmp_path, keep=2)
    replay = _replay(1)
    for step in (1, 2, 3):
        _add(replay, [step])  # rows 1, 2, 3: each step changes chunk 0 only
        _write(store, step, replay)
    assert [p.name for p in store.complete()] == ["step-000000000002", "step-000000000003"]
    # Step 1's chunk file is used by no kept checkpoint any more.
    assert sorted(os.listdir(tmp_path / "replay")) == [
        "chunk-00000-step000000000002.safetensors",
        "chunk-00000-step000000000003.safetensors",
    ]


def test_a_failed_write_leaves_the_previous_checkpoint_and_no_partial_folder(tmp_path, monkeypatch):
    store = CheckpointStore(tmp_path, keep=2)
    replay = _replay(3)
    _write(store, 100, replay)

    def disk_full(path, data):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(checkpoint_module, "_write_file", disk_full)
    with pytest.raises(OSError):
        _write(store, 200, replay)
    assert sorted(os.listdir(tmp_path)) == ["replay", "step-000000000100"]
    fresh = _replay()
    _, manifest = store.load(store.latest(), fresh, CONFIG)
    assert manifest["step"] == 100 and len(fresh) == 3


def test_a_record_that_is_not_strict_json_is_refused_before_anything_is_renamed(tmp_path):
    store = CheckpointStore(tmp_path, keep=2)
    with pytest.raises(ValueError):  # json.dumps(allow_nan=False) refuses NaN
        _write(store, 5, _replay(1), last_eval={"return_mean": math.nan})
    assert store.complete() == [] and not any(p.name.startswith(".partial") for p in tmp_path.iterdir())


def test_another_config_is_refused_naming_the_first_difference(tmp_path):
    store = CheckpointStore(tmp_path, keep=2)
    written = _write(store, 100, _replay(2))
    other = {**CONFIG, "agent": {"actor": {"lr": 0.001}, "batch_size": 32}}
    with pytest.raises(CheckpointError) as caught:
        store.load(written, _replay(), other)
    message = str(caught.value)
    assert "another config (agent.actor.lr: 0.0003 there, 0.001 now)" in message and "\n" not in message
    assert message.endswith("pass resume=false to set the attempt aside and start over")
    # How long a run goes and how it logs may change between attempts: still the same run.
    longer = {**CONFIG, "steps": 5000, "log": {"every": 500}}
    store.load(written, _replay(), longer)


def test_config_difference_by_hand():
    ours = config_fingerprint({"seed": 1, "agent": {"batch_size": 32}})
    assert config_difference(config_fingerprint({"seed": 2, "agent": {"batch_size": 32}}), ours) == "seed: 2 there, 1 now"
    assert config_difference(config_fingerprint({"seed": 1, "agent": {}}), ours) == "agent.batch_size: '<missing>' there, 32 now"
    # The free keys are not part of the fingerprint at all.
    assert config_fingerprint({"seed": 1, "steps": 9, "resume": False, "threads": 2, "checkpoint": {}}) == config_fingerprint(
        {"seed": 1}
    )


@pytest.mark.parametrize(
    "manifest,refusal",
    [
        (b"{not json", "manifest.json cannot be read (JSONDecodeError)"),
        (b"\xff\xfe", "manifest.json cannot be read (UnicodeDecodeError)"),
        (json.dumps({"format": "something else"}).encode(), "manifest.json is not a Kiln checkpoint"),
        (json.dumps({"format": "kiln-checkpoint", "format_version": 99}).encode(), "has checkpoint format 99, this Kiln reads 1"),
    ],
)
def test_a_damaged_or_foreign_manifest_is_refused_in_one_line(tmp_path, manifest, refusal):
    store = CheckpointStore(tmp_path, keep=2)
    written = _write(store, 100, _replay(2))
    (written / "manifest.json").write_bytes(manifest)
    with pytest.raises(CheckpointError) as caught:
        store.load(written, _replay(), CONFIG)
    assert refusal in str(caught.value) and "\n" not in str(caught.value) and "resume" in str(caught.value)


@pytest.mark.parametrize("bomb", [pickle_bomb, torch_bomb])
@pytest.mark.parametrize("target", ["state", "chunk"])
def test_a_pickle_under_a_checkpoints_name_is_refused_and_never_run(tmp_path, bomb, target):
    store = CheckpointStore(tmp_path / "checkpoints", keep=2)
    written = _write(store, 100, _replay(2))
    marker = tmp_path / "marker"
    path = (
        written / "state.safetensors"
        if target == "state"
        else tmp_path / "checkpoints" / "replay" / "chunk-00000-step000000000100.safetensors"
    )
    path.write_bytes(bomb(marker))
    with pytest.raises(CheckpointError, match="is not a readable safetensors file"):
        store.load(written, _replay(), CONFIG)
    assert not marker.exists()


def test_a_manifest_naming_a_file_outside_the_replay_folder_is_refused(tmp_path):
    store = CheckpointStore(tmp_path, keep=2)
    written = _write(store, 100, _replay(2))
    manifest = json.loads((written / "manifest.json").read_text())
    manifest["replay"]["chunks"]["0"] = "../step-000000000100/state.safetensors"
    (written / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(CheckpointError, match="names an odd replay file"):
        store.load(written, _replay(), CONFIG)


def test_a_replay_of_another_capacity_is_refused(tmp_path):
    store = CheckpointStore(tmp_path, keep=2)
    written = _write(store, 100, _replay(2))
    with pytest.raises(CheckpointError, match="another capacity"):
        store.load(written, ReplayBuffer(20, 1, 1, torch.Generator()), CONFIG)


def test_partial_folders_of_dead_processes_are_removed_and_a_live_writers_kept(tmp_path):
    ended = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True, check=True)
    dead_pid = int(ended.stdout)  # a process that has exited (os.kill(pid, 0) finds no such process)
    live_pid = os.getppid()  # this process's parent: alive while the test runs
    for name in (
        f".partial-000000000100-{dead_pid}",
        f".partial-000000000100-{live_pid}",
        f".partial-000000000100-{os.getpid()}",
    ):
        (tmp_path / name).mkdir()
    CheckpointStore(tmp_path, keep=2).prune()
    assert sorted(os.listdir(tmp_path)) == [f".partial-000000000100-{live_pid}"]
