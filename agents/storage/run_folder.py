"""The run folder: its file names, atomic writes, setting aside an unfinished attempt, the result record.

Every module that reads or writes a run's files imports the names and writers from here, so the
layout is stated once:

    <run>/config.yaml               the resolved config of the run
    <run>/events.out.tfevents.*     TensorBoard scalars and the run's hyper-parameters
    <run>/policy/                   the saved policy (see kiln.storage.policy_io)
    <run>/evaluations/*.json        records written by the evaluate command
    <run>/checkpoints/              the newest checkpoints (see kiln.training.checkpoint)
    <run>/result.json               written last: its presence marks a finished run
    <run>/unfinished-<n>/           what an interrupted earlier attempt left behind
    <run>/.lock                     held (an OS file lock) by the process working in the folder
"""

from __future__ import annotations

import fcntl
import json
import os
import secrets
import shutil
import socket
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

CONFIG = "config.yaml"
RESULT = "result.json"
POLICY = "policy"
EVALUATIONS = "evaluations"
CHECKPOINTS = "checkpoints"
LOCK = ".lock"
EVENTS_PREFIX = "events.out.tfevents"
UNFINISHED_PREFIX = "unfinished-"


def fsync_folder(folder: Path) -> None:
    """Flush a folder's entries to disk."""
    # A rename is durable only once the folder's entry is on disk too.
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def write_bytes_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` beside ``path`` under a temporary name, fsync it, then rename it over ``path``.

    A reader (or a crash at any instant) sees the old file or the new one, never half of one.

    Raises:
        OSError: If the folder is missing or not writable.
    """
    path = Path(path)
    # Not tempfile.mkstemp: its files are private (0600); these get the user's usual permissions.
    temporary = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.partial")
    try:
        with open(temporary, "xb") as file:
            file.write(data)
            file.flush()
            os.fsync(file.fileno())
        os.replace(temporary, path)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise
    fsync_folder(path.parent)


def write_text_atomic(path: Path, text: str) -> None:
    """UTF-8 text through :func:`write_bytes_atomic`."""
    write_bytes_atomic(path, text.encode("utf-8"))


def write_json_atomic(path: Path, data: Mapping[str, Any]) -> None:
    """Strict JSON (no NaN or infinity: other readers reject them) through :func:`write_bytes_atomic`."""
    write_text_atomic(path, json.dumps(data, indent=2, allow_nan=False, ensure_ascii=False) + "\n")


def replace_folder_atomic(staged: Path, folder: Path) -> None:
    """Move a completely written folder ``staged`` to ``folder``, replacing what was there.

    The old folder is renamed aside first and removed only after the new one is in place, so an
    interruption leaves either the old or the new folder under a known name.
    """
    if folder.exists():
        old = folder.with_name(f".{folder.name}-replaced")
        shutil.rmtree(old, ignore_errors=True)
        os.replace(folder, old)
        os.replace(staged, folder)
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(staged, folder)
    fsync_folder(folder.parent)


def where_this_runs() -> dict[str, Any]:
    """The host, and the SLURM job when a scheduler started this process (``<array>_<task>`` for an
    array member, as ``squeue`` shows it), recorded so a finished run says where it was trained."""
    env = os.environ
    job = None
    if env.get("SLURM_ARRAY_JOB_ID") and env.get("SLURM_ARRAY_TASK_ID"):
        job = f"{env['SLURM_ARRAY_JOB_ID']}_{env['SLURM_ARRAY_TASK_ID']}"
    elif env.get("SLURM_JOB_ID"):
        job = env["SLURM_JOB_ID"]
    return {"host": socket.gethostname(), "slurm_job": job}


@dataclass(frozen=True)
class FinalNumbers:
    """The figures a comparison reads first: the last evaluation's mean return, entropy and α."""

    return_eval: float
    return_eval_std: float
    entropy: float | None
    alpha: float | None


@dataclass(frozen=True)
class RunResult:
    """What ``result.json`` records about a finished run.

    ``target_entropy`` is the total target over the action (the per-group targets add up because
    the entropy of a diagonal squashed Gaussian is the sum of its per-dimension entropies);
    ``target_entropy_groups`` keeps the one-per-α values.
    """

    env_id: str
    env_name: str
    seed: int
    steps: int
    target_entropy: float
    target_entropy_groups: list[float]
    temperature_mode: str
    final: FinalNumbers
    evaluation: dict[str, float]
    evaluation_seeds: list[int]
    eval_deterministic: bool
    eval_curve: list[list[float]]
    updates: int
    updates_per_s: float | None
    wall_time_s: float
    policy: str = POLICY
    ran_on: dict[str, Any] = field(default_factory=dict)
    # Where the training loop's time went, in seconds: env_step (the training env's step), update
    # (gradient steps), loop (everything, evaluation and checkpoints included); None when unknown.
    time_split_s: dict[str, float] | None = None
    # How many runs shared this run's process (1 for a single run; K for a member of a population).
    population: int | None = None
    skipped: bool = field(default=False, compare=False)

    def to_json(self) -> dict[str, Any]:
        """Plain data for ``result.json`` (without the in-memory ``skipped`` flag)."""
        data = asdict(self)
        data.pop("skipped")
        return data

    @classmethod
    def from_json(cls, data: Mapping[str, Any], skipped: bool = False) -> RunResult:
        """Rebuild a record read from ``result.json``.

        Lenient on purpose: a record written by an older Kiln lacks some fields, which read as
        ``None``; a finished run must still be recognised and left alone.
        """
        names = [f for f in cls.__dataclass_fields__ if f not in ("skipped", "final")]
        values = {name: data.get(name) for name in names}
        final = data.get("final") if isinstance(data.get("final"), Mapping) else {}
        values["final"] = FinalNumbers(**{f: final.get(f) for f in FinalNumbers.__dataclass_fields__})
        return cls(**values, skipped=skipped)


class RunFolder:
    """One run's folder: where each file lives and how it is written.

    Args:
        path: The folder (created on :meth:`prepare`).
    """

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self._lock: int | None = None

    def claim(self) -> None:
        """Take the folder for this process (creating it) until the process ends or :meth:`release`.

        The claim is an OS file lock: it ends when its process dies, however it dies, so a launch
        into a killed run's folder finds it free and resumes it.

        Raises:
            RunFolderError: If another live process holds the folder, or it cannot be created.
        """
        from kiln.errors import RunFolderError

        try:
            self.path.mkdir(parents=True, exist_ok=True)
            fd = os.open(self.path / LOCK, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as err:
            raise RunFolderError(
                f"cannot use run folder {self.path} ({err.strerror}): choose a writable place, e.g. hydra.run.dir=<folder>"
            ) from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(fd, 32, 0).decode(errors="replace").strip() or "unknown"
            os.close(fd)
            raise RunFolderError(
                f"run folder {self.path} is in use by another Kiln process (pid {holder}): wait for it to end, "
                "or launch into another folder"
            ) from None
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{os.getpid()}\n".encode(), 0)
        self._lock = fd

    def release(self) -> None:
        """End this process's claim on the folder."""
        if self._lock is not None:
            os.close(self._lock)  # closing the descriptor releases the lock
            self._lock = None

    @property
    def checkpoints_path(self) -> Path:
        return self.path / CHECKPOINTS

    def saved_config(self) -> dict[str, Any] | None:
        """The config an earlier attempt saved here, or ``None``."""
        from omegaconf import OmegaConf

        if not self.config_path.is_file():
            return None
        try:
            return OmegaConf.to_container(OmegaConf.load(self.config_path), resolve=True)  # type: ignore[return-value]
        except Exception:  # a damaged record is treated as absent: the run is set aside, not trusted
            return None

    @property
    def config_path(self) -> Path:
        return self.path / CONFIG

    @property
    def result_path(self) -> Path:
        return self.path / RESULT

    @property
    def policy_path(self) -> Path:
        return self.path / POLICY

    def evaluation_path(self, mode: str, seeds: list[int]) -> Path:
        """Default file of an evaluation record: named by mode, first reset seed and episode count."""
        return self.path / EVALUATIONS / f"{mode}_seed{seeds[0]}_{len(seeds)}ep.json"

    def is_finished(self) -> bool:
        """True once ``result.json`` exists (it is written last)."""
        return self.result_path.is_file()

    def read_result(self) -> RunResult:
        """The finished run's record, flagged as skipped (the caller did not run it again)."""
        return RunResult.from_json(json.loads(self.result_path.read_text()), skipped=True)

    def prepare(self, resolved_config: Mapping[str, Any]) -> None:
        """Create the folder for a new attempt and save its config.

        What an interrupted earlier attempt left (events, policy, config) is moved into
        ``unfinished-<n>/`` first: nothing already written is deleted.
        """
        from omegaconf import OmegaConf

        self.path.mkdir(parents=True, exist_ok=True)
        self._set_aside_unfinished()
        write_text_atomic(self.config_path, OmegaConf.to_yaml(OmegaConf.create(dict(resolved_config))))

    def write_result(self, result: RunResult) -> None:
        """Write ``result.json``, which marks the run finished."""
        write_json_atomic(self.result_path, result.to_json())

    def _set_aside_unfinished(self) -> None:
        leftovers = [
            p
            for p in self.path.iterdir()
            if p.name.startswith(EVENTS_PREFIX) or p.name in (POLICY, CONFIG, EVALUATIONS, CHECKPOINTS)
        ]
        if not leftovers:
            return
        n = 1
        while (self.path / f"{UNFINISHED_PREFIX}{n}").exists():
            n += 1
        dest = self.path / f"{UNFINISHED_PREFIX}{n}"
        dest.mkdir()
        for p in leftovers:
            shutil.move(str(p), dest / p.name)
