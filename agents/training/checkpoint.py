"""Checkpoints of a run: everything needed to continue it bit for bit, written so that a kill at any
instant leaves the previous or the new checkpoint complete, never half of one.

Layout under ``<run>/checkpoints/``::

    step-000000001000/manifest.json        counters, curves, random-stream states, the replay's
                                            position and chunk files, the config's fingerprint
    step-000000001000/state.safetensors    networks, target networks, optimiser moments, the
                                            training generator, the log window, the episode's actions
    replay/chunk-00003-step000000001000.safetensors
                                            replay rows, shared between checkpoints: a checkpoint
                                            writes only the chunks that changed since the last one

A checkpoint is first written into ``.partial-<step>-<pid>/`` (files fsynced, then the folder),
then renamed to ``step-<step>/``: only complete checkpoints carry that name. Tensors are safetensors,
the rest JSON; nothing is pickled and loading never unpickles.
"""

from __future__ import annotations

import json
import os
import shutil
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import torch
from safetensors import SafetensorError
from safetensors.torch import load, save

from kiln.errors import CheckpointError
from kiln.storage.run_folder import fsync_folder, write_bytes_atomic
from kiln.training.replay import ReplayBuffer
from kiln.version import KILN_VERSION

FORMAT = "kiln-checkpoint"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
STATE = "state.safetensors"
REPLAY = "replay"
_STEP_PREFIX = "step-"
_PARTIAL_PREFIX = ".partial-"
# Keys that may differ between the attempt that wrote a checkpoint and the one resuming it: how the
# run is shown and checkpointed, and how long it runs, not what it learns.
_FREE_KEYS = ("log", "checkpoint", "resume", "steps", "threads")


def config_fingerprint(config: Mapping[str, Any]) -> str:
    """The part of a resolved config that a resumed run must share with the checkpoint's, as YAML
    text (YAML writes NaN and infinity, which a task's options may hold; text compares exactly)."""
    from omegaconf import OmegaConf

    return OmegaConf.to_yaml(OmegaConf.create({k: v for k, v in config.items() if k not in _FREE_KEYS}))


def config_difference(theirs: str, ours: str) -> str:
    """The first key whose value differs between two fingerprints, as ``key: a there, b now``."""
    import yaml

    return _first_difference(yaml.safe_load(theirs), yaml.safe_load(ours))


def _first_difference(a: Any, b: Any, path: str = "") -> str:
    if isinstance(a, Mapping) and isinstance(b, Mapping):
        for key in sorted(set(a) | set(b), key=str):
            if a.get(key, "<missing>") != b.get(key, "<missing>"):
                return _first_difference(a.get(key, "<missing>"), b.get(key, "<missing>"), f"{path}.{key}".lstrip("."))
    return f"{path or 'config'}: {a!r} there, {b!r} now"


def _write_file(path: Path, data: bytes) -> None:
    with open(path, "xb") as file:
        file.write(data)
        file.flush()
        os.fsync(file.fileno())


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


class CheckpointStore:
    """The checkpoints of one run folder.

    Args:
        folder: ``<run>/checkpoints``.
        keep: How many complete checkpoints to keep (the newest).
    """

    def __init__(self, folder: Path, keep: int) -> None:
        self.folder = Path(folder)
        self.keep = keep
        self._chunk_files: dict[int, str] = {}  # replay chunk → file holding its newest saved rows

    # ----- finding -------------------------------------------------------------------------------

    def complete(self) -> list[Path]:
        """Complete checkpoints, oldest first."""
        if not self.folder.is_dir():
            return []
        found = [p for p in self.folder.iterdir() if p.is_dir() and p.name.startswith(_STEP_PREFIX)]
        return sorted(found, key=lambda p: p.name)

    def latest(self) -> Path | None:
        """The newest complete checkpoint, or ``None``."""
        done = self.complete()
        return done[-1] if done else None

    # ----- writing -------------------------------------------------------------------------------

    def write(self, step: int, tensors: dict[str, torch.Tensor], record: dict[str, Any], replay: ReplayBuffer) -> Path:
        """Write a complete checkpoint of ``step`` and drop the oldest beyond ``keep``.

        Args:
            step: Env steps taken.
            tensors: Every tensor of the state (names are the caller's).
            record: Everything else, as JSON-able data.
            replay: The run's buffer; only its chunks changed since the last checkpoint are written.

        Returns:
            The checkpoint's folder.
        """
        self.folder.mkdir(parents=True, exist_ok=True)
        chunks_dir = self.folder / REPLAY
        chunks_dir.mkdir(exist_ok=True)
        dirty = replay.dirty_chunks()
        for index in dirty:
            name = f"chunk-{index:05d}-step{step:012d}.safetensors"
            write_bytes_atomic(chunks_dir / name, save(replay.chunk(index)))
            self._chunk_files[index] = name
        manifest = {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "kiln_version": KILN_VERSION,
            "step": step,
            "replay": {**replay.position, "chunks": {str(k): v for k, v in sorted(self._chunk_files.items())}},
            **record,
        }
        staging = self.folder / f"{_PARTIAL_PREFIX}{step:012d}-{os.getpid()}"
        shutil.rmtree(staging, ignore_errors=True)
        staging.mkdir()
        try:
            _write_file(staging / STATE, save({k: v.detach().contiguous() for k, v in tensors.items()}))
            _write_file(staging / MANIFEST, json.dumps(manifest, indent=1, allow_nan=False).encode())
            fsync_folder(staging)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)  # a failed write (disk full) leaves no partial folder
            raise
        final = self.folder / f"{_STEP_PREFIX}{step:012d}"
        if final.exists():  # the same step written by an earlier attempt: replace it whole
            shutil.rmtree(final)
        os.replace(staging, final)
        fsync_folder(self.folder)
        replay.mark_saved(dirty)
        self.prune()
        return final

    def prune(self) -> None:
        """Keep the newest ``keep`` checkpoints; remove replay chunks and partial folders nobody uses."""
        done = self.complete()
        for old in done[: max(len(done) - self.keep, 0)]:
            shutil.rmtree(old, ignore_errors=True)
        used = set(self._chunk_files.values())
        for kept in self.complete():
            try:
                used.update(json.loads((kept / MANIFEST).read_text())["replay"]["chunks"].values())
            except (OSError, ValueError, KeyError, TypeError):
                continue
        chunks_dir = self.folder / REPLAY
        if chunks_dir.is_dir():
            for chunk in chunks_dir.iterdir():
                if chunk.name not in used and not chunk.name.startswith("."):
                    chunk.unlink(missing_ok=True)
        for partial in self.folder.glob(f"{_PARTIAL_PREFIX}*"):
            pid = partial.name.rsplit("-", 1)[-1]
            if not pid.isdigit() or int(pid) == os.getpid() or not _pid_alive(int(pid)):
                shutil.rmtree(partial, ignore_errors=True)

    # ----- reading -------------------------------------------------------------------------------

    def load(
        self, checkpoint: Path, replay: ReplayBuffer, config: Mapping[str, Any]
    ) -> tuple[dict[str, torch.Tensor], dict[str, Any]]:
        """Read a checkpoint: fill ``replay`` and return the other tensors and the record.

        Raises:
            CheckpointError: If a file is missing, unreadable, not what it claims, or the checkpoint
                was written by a run with another config.
        """
        where = checkpoint
        try:
            manifest = json.loads((checkpoint / MANIFEST).read_bytes().decode("utf-8"))
        except (OSError, UnicodeDecodeError, ValueError) as err:
            raise CheckpointError(f"{where / MANIFEST} cannot be read ({type(err).__name__}): pass resume=false to start over") from None
        if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
            raise CheckpointError(f"{where / MANIFEST} is not a Kiln checkpoint: pass resume=false to start over")
        if manifest.get("format_version") != FORMAT_VERSION:
            raise CheckpointError(
                f"{where} has checkpoint format {manifest.get('format_version')!r}, this Kiln reads {FORMAT_VERSION}: "
                "resume with the Kiln that wrote it, or pass resume=false"
            )
        theirs, ours = manifest.get("config"), config_fingerprint(config)
        if theirs != ours:
            difference = config_difference(theirs, ours) if isinstance(theirs, str) else "no config recorded"
            raise CheckpointError(
                f"{where} was written by a run with another config ({difference}): "
                "resume with the same config, or pass resume=false to set the attempt aside and start over"
            )
        tensors = _read_tensors(where / STATE)
        position = manifest.get("replay") or {}
        try:
            if int(position["capacity"]) != replay.capacity or int(position["chunk_rows"]) <= 0:
                raise CheckpointError(f"{where}: its replay buffer has another capacity; pass resume=false")
            chunks = {int(k): str(v) for k, v in position["chunks"].items()}
            for index, name in chunks.items():
                if "/" in name or name.startswith("."):
                    raise CheckpointError(f"{where / MANIFEST} names an odd replay file {name!r}: pass resume=false")
                replay.load_chunk(index, _read_tensors(self.folder / REPLAY / name))
            replay.set_position(int(position["size"]), int(position["next"]))
        except CheckpointError:
            raise
        except (KeyError, TypeError, ValueError) as err:
            raise CheckpointError(f"{where}: its replay record is damaged ({err}): pass resume=false") from None
        self._chunk_files = chunks
        return tensors, manifest


def _read_tensors(path: Path) -> dict[str, torch.Tensor]:
    """Tensors from a safetensors file (a pickle or a damaged file is refused, never executed)."""
    try:
        return load(path.read_bytes())
    except (OSError, SafetensorError, ValueError) as err:
        raise CheckpointError(
            f"{path} is not a readable safetensors file ({type(err).__name__}): pass resume=false to start over"
        ) from None
