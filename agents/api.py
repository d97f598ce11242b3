"""Kiln's Python API: the jobs of ``kiln train``, ``evaluate``, ``compare``, ``export`` and ``verify`` as
functions, and loading a saved policy.

Each function returns its result and raises Kiln's errors (:class:`kiln.errors.KilnError` and its
subclasses; a task that cannot be built raises :class:`kiln.errors.TaskSetupError`); none prints a
summary or exits. Each leaves the caller's process as it found it: torch's thread count and
determinism switch are set only inside the call (:func:`kiln.training.process_state.torch_settings`),
and nothing else process-wide is changed (global random generators, the current folder, logging,
``sys.path``, signal handlers, matplotlib's backend, the environment, Hydra's global instance).

The heavy parts of Kiln (torch, Gymnasium, TensorBoard) are imported inside the functions, so that
importing this module, or naming one of its functions through ``kiln``, stays cheap.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager, nullcontext
from pathlib import Path
from typing import TYPE_CHECKING, Any

from kiln.errors import CompareInputError, ConfigError, KilnError, TaskSetupError

if TYPE_CHECKING:
    from kiln.comparison.summary import Comparison
    from kiln.exact.verify_table import VerifyReport
    from kiln.onnx_export.controller_file import ExportReport
    from kiln.storage.policy_io import Policy

PathLike = str | os.PathLike[str]

_FOLDER_FIX = "pass run_dir=<a folder you can write to>"
_EVALUATION_FIX = "pass out=<path> in a folder you can write to"
_VIDEO_FIX = "pass out=<path> in a folder you can write to (videos go beside it), or drop video"
_VERIFY_OUT_FIX = "pass out=<a file in a folder you can write to>"


@contextmanager
def _kiln_errors() -> Iterator[None]:
    """Raise a task's own error (kiln.envs' TaskError, outside Kiln's family) as a :class:`TaskSetupError`."""
    from kiln.envs.task_error import TaskError

    try:
        yield
    except TaskError as err:
        if isinstance(err, KilnError):
            raise
        raise TaskSetupError(str(err)) from err


@contextmanager
def _torch_kept() -> Iterator[None]:
    """Torch's thread count, determinism switch and global random generator, put back when the call
    ends (whatever ran inside)."""
    import torch

    from kiln.training.process_state import torch_settings

    # Kiln draws only from generators of its own (kiln.config.streams); the fork is the guarantee that
    # the caller's global stream cannot move whatever a task or library does inside the call.
    with torch_settings(), torch.random.fork_rng(devices=[]):
        yield


@contextmanager
def _hydra_kept() -> Iterator[None]:
    """Hydra's global instance as the caller had it when the block ends.

    Composing Kiln's presets clears it (kiln.config.presets), which would leave a caller's own Hydra
    app, inside which ``kiln.train`` may well be called, unable to compose its configs afterwards.
    """
    from hydra.core.global_hydra import GlobalHydra

    saved = GlobalHydra.instance().hydra
    try:
        yield
    finally:
        GlobalHydra.instance().clear()
        if saved is not None:
            GlobalHydra.instance().initialize(saved)


def _override_list(overrides: Sequence[str]) -> list[str]:
    """The overrides as a list of strings, refusing what cannot be one run's overrides.

    Raises:
        ConfigError: For a single string instead of a list, a non-string item, a command-line option
            (``-m``, ``--cfg``) or a sweep (several values for a key, or a sweep preset).
    """
    if isinstance(overrides, str | bytes):
        raise ConfigError(f"overrides must be a list of key=value strings, got the string {overrides!r}: "
                          f"pass [{overrides!r}]")  # fmt: skip
    args = list(overrides)
    for arg in args:
        if not isinstance(arg, str):
            raise ConfigError(f"override {arg!r} is a {type(arg).__name__}: pass each override as a key=value string")
        if arg.startswith("-"):
            raise ConfigError(f"{arg} is an option of the kiln train command, not an override: kiln.train trains one "
                              "run; call train once per run (a sweep is `kiln train -m ...`)")  # fmt: skip
    from hydra.core.override_parser.overrides_parser import OverridesParser
    from hydra.errors import HydraException

    try:
        parsed = OverridesParser.create().parse_overrides(args)
    except HydraException as err:
        raise ConfigError(f"cannot parse the overrides: {str(err).strip().splitlines()[0]}") from None
    for override in parsed:
        if override.is_sweep_override():
            raise ConfigError(f"{override.input_line} is a sweep (several values of one key): kiln.train trains one "
                              "run; call train once per run, e.g. in a loop over the values")  # fmt: skip
    return args


def train(overrides: Sequence[str] = (), run_dir: PathLike | None = None) -> Path:
    """Train one run, exactly as ``kiln train <overrides>`` would, and return its folder.

    The config is composed from Kiln's presets and the user's preset folders named in ``KILN_PRESETS``,
    and checked as the command checks it before anything is written. A folder that holds a finished
    run is left as it is (the same config is skipped, another one refused); an unfinished one is
    resumed from its newest checkpoint (unless ``resume=false``). A task given as
    ``env.id=<module>:<TaskId>`` must be importable from this process's ``sys.path``.

    Args:
        overrides: Hydra overrides, as on the command line (``["env=hopper", "seed=3"]``). One run
            only: a sweep (``seed=0,1``, ``sweep=seeds``, ``-m``) is refused.
        run_dir: The run's folder. None: the folder the command would use, the config's
            ``hydra.run.dir`` (``runs/<env>/<date>_<time>_seed<seed>_<token>``), relative to the
            current folder.

    Returns:
        The run folder, absolute (``config.yaml``, ``result.json``, ``policy/``, event files inside).

    Raises:
        ConfigError: If an override is unknown, invalid or a sweep.
        KilnError: If a preset folder or the run folder cannot be used.
        TaskSetupError: If the task cannot be created or driven by Kiln.
        RunFolderError: If another process works in the folder, or it holds a finished run of another config.
        CheckpointError: If the checkpoint to resume cannot be read or belongs to another config.
        RunStopped: If stopped by SIGINT or SIGTERM (after writing a checkpoint).
        DivergenceError: If training diverged.
    """
    args = _override_list(overrides)
    with _kiln_errors(), _torch_kept(), _hydra_kept():
        from kiln.config.presets import compose_config, compose_node
        from kiln.storage.writable import check_writable
        from kiln.training import trainer

        hydra_node = compose_node("train", args, with_hydra=True).hydra
        if str(hydra_node.mode) == "RunMode.MULTIRUN":
            raise ConfigError("these overrides make a sweep (a sweep preset sets hydra.mode=MULTIRUN): kiln.train "
                              "trains one run; call train once per run, e.g. in a loop over the seeds")  # fmt: skip
        raw = compose_config("train", args)
        trainer.check_run(raw)
        folder = Path(os.path.abspath(os.fspath(run_dir) if run_dir is not None else str(hydra_node.run.dir)))
        check_writable(folder, _FOLDER_FIX)
        trainer.train(raw, folder)
    return folder


def load_policy(path: PathLike) -> Policy:
    """Load a saved policy: nothing is unpickled and nothing named by the files is imported.

    Args:
        path: A run folder holding ``policy/``, or the policy folder itself.

    Returns:
        The policy; ``policy.act(observation, deterministic=True)`` gives an action in the task's units.

    Raises:
        PolicyFolderError: If the folder is missing, incomplete or inconsistent.
    """
    with _kiln_errors(), _torch_kept():
        from kiln.storage.policy_io import load_policy as load

        return load(Path(path))


def evaluate(
    policy: PathLike,
    *,
    episodes: int | None = None,
    seed: int | None = None,
    deterministic: bool = True,
    out: PathLike | None = None,
    video: bool = False,
    task_module: str | None = None,
) -> dict[str, Any]:
    """Run evaluation episodes of a saved policy, as ``kiln evaluate`` does, and return the record.

    Args:
        policy: A run folder holding ``policy/``, or the policy folder itself.
        episodes: How many episodes; None: as many as the training run evaluated (10 for a policy
            saved elsewhere).
        seed: None: the training run's own evaluation episodes (its final figure is reproduced
            exactly); a number: reset seeds ``seed, seed+1, ...``, which also seeds the sampling.
        deterministic: Act with ``tanh(mean)``; False samples actions from the policy.
        out: Also write the record as JSON to this file (atomically). None: nothing is written.
        video: Record every episode as MP4 into the folder named like ``out`` without ``.json`` (with no
            ``out``: the folder the command would use, ``<run>/evaluations/<mode>_seed<first>_<n>ep/``).
        task_module: The Python module the policy's task id (``<module>:<TaskId>``) names, given to
            allow building that task, which imports the module.

    Returns:
        The record the command writes: ``policy`` (the folder), ``env_id``, ``kiln_version``, ``mode``,
        ``seeds``, ``sampling_seed``, ``episode_list`` (``seed``, ``return``, ``length``, ``terminated``
        per episode) and ``summary`` (``return_mean``, ``return_std``, ..., ``length_mean``, ...,
        ``episodes``).

    Raises:
        ConfigError: If a value is out of range, ``out`` is a folder, or the task names a module
            other than ``task_module``.
        PolicyFolderError: If the policy cannot be loaded.
        TaskSetupError: If its task cannot be created.
        KilnError: If an output cannot be written, or the video cannot be recorded.
    """
    with _kiln_errors(), _torch_kept():
        from kiln.config import checks
        from kiln.config.streams import LARGEST_EPISODES, LARGEST_SEED
        from kiln.evaluation.policy_eval import check_task_module, evaluate_policy, plan_evaluation
        from kiln.storage.policy_io import load_policy as load
        from kiln.storage.policy_io import resolve_policy_folder
        from kiln.storage.run_folder import POLICY, RunFolder, write_json_atomic
        from kiln.storage.writable import check_writable, kept_only_if_complete

        checks.boolean(deterministic, "deterministic")
        checks.boolean(video, "video")
        if episodes is not None:
            checks.integer(episodes, "episodes", 1, LARGEST_EPISODES)
        if seed is not None:
            checks.integer(seed, "seed", 0, LARGEST_SEED)
        folder = resolve_policy_folder(Path(policy))
        loaded = load(folder)
        check_task_module(loaded.spec["env"]["id"], task_module)
        plan = plan_evaluation(loaded, episodes, seed)
        mode = "deterministic" if deterministic else "stochastic"
        out_path = None if out is None else Path(out)
        if out_path is not None and out_path.is_dir():
            raise ConfigError(f"out={out_path} is a folder: give a file name such as {out_path / 'evaluation.json'}")
        video_dir = None
        if video:
            run_folder = RunFolder(folder.parent if folder.name == POLICY else folder)
            video_dir = (out_path or run_folder.evaluation_path(mode, plan.reset_seeds)).with_suffix("")
            check_writable(video_dir, _VIDEO_FIX)
        if out_path is not None:
            check_writable(out_path.parent, _EVALUATION_FIX)
        written = out_path and kept_only_if_complete(out_path.parent, f"the evaluation record {out_path.name}", _EVALUATION_FIX)
        with written or nullcontext():
            videos = video_dir and kept_only_if_complete(video_dir, "the videos", _VIDEO_FIX, sole_writer=True)
            with videos or nullcontext():
                result = evaluate_policy(loaded, plan, deterministic, video_dir, task_module)
            spec = loaded.spec
            record = {
                "policy": str(folder.resolve()),
                "env_id": spec["env"]["id"],
                "kiln_version": spec.get("kiln_version"),
                "mode": mode,
                "seeds": plan.reset_seeds,
                "sampling_seed": plan.sampling_seed,
                **result,
            }
            if out_path is not None:
                write_json_atomic(out_path, record)
    return record


def compare(
    paths: PathLike | Sequence[PathLike],
    *,
    group_by: str | None = None,
    metric: str = "return/eval",
    step: int | None = None,
    resamples: int = 2000,
    confidence: float = 0.95,
    resample_seed: int = 0,
    include_unfinished: bool = False,
    out: PathLike | None = None,
) -> Comparison:
    """Compare runs grouped by a config key, as ``kiln compare`` does: IQM with bootstrap CIs, learning
    curves, performance profiles and probability of improvement (Agarwal et al. 2021).

    Args:
        paths: A sweep folder (searched for runs), a run folder, or several of either.
        group_by: Dotted config key to group the runs by; None: the target entropy
            (``agent.temperature.target_entropy``, by resolved value).
        metric: Scalar tag to compare, higher is better.
        step: Env step to compare at; None: the last step every run reached.
        resamples: Bootstrap resamples per interval.
        confidence: Two-sided confidence of every interval, strictly between 0 and 1.
        resample_seed: Seed of the bootstrap random generator.
        include_unfinished: Also compare runs without ``result.json`` (marked unfinished).
        out: Write the report folder (markdown, CSV, JSON, figures) here. None: nothing is written.

    Returns:
        The comparison: ``settings``, ``groups`` (one row per group: ``iqm``, ``iqm_ci``, ...),
        ``runs``, ``curves``, ``profiles`` and ``notes``; ``comparison.best`` is the reference group.

    Raises:
        CompareInputError: If an argument is out of range or the runs cannot be compared (the
            message names the problem and the fix).
        KilnError: If the report folder cannot be written.
    """
    # Comparison never runs torch, so there is no torch setting to keep here.
    from kiln.comparison.bootstrap import MAX_RESAMPLES
    from kiln.comparison.grouping import TARGET_ENTROPY_KEY
    from kiln.comparison.report import check_out_dir, input_root, write_report
    from kiln.comparison.runs import listed, load_runs, select_finished
    from kiln.comparison.summary import summarise

    folders = [Path(paths)] if isinstance(paths, str | os.PathLike) else [Path(p) for p in paths]
    if not folders:
        raise CompareInputError("no folders given", "pass a sweep folder or run folders")
    if isinstance(resamples, bool) or not isinstance(resamples, int) or not 1 <= resamples <= MAX_RESAMPLES:
        raise CompareInputError(
            f"resamples={resamples!r} is outside 1..{MAX_RESAMPLES}",
            "2000 (the default) is the usual choice; each interval keeps resamples x runs random indices in memory",
        )
    if not 0.0 < confidence < 1.0:
        raise CompareInputError(f"confidence={confidence!r} is not strictly between 0 and 1", "pass e.g. confidence=0.95")
    if step is not None and (isinstance(step, bool) or not isinstance(step, int) or step < 0):
        raise CompareInputError(f"step={step!r} is not an env step", "pass an integer of 0 or more, or None")
    out_dir = None if out is None else Path(out)
    if out_dir is not None:
        check_out_dir(out_dir)  # before any work, as the command
    skipped: list[Path] = []
    runs, notes = select_finished(load_runs(folders, skipped), include_unfinished)
    if skipped:
        notes.append(f"skipped {len(skipped)} folder(s) with config.yaml but no event files or "
                     f"result.json yet: {listed(skipped)}")  # fmt: skip
    comparison = summarise(
        runs,
        group_by=TARGET_ENTROPY_KEY if group_by is None else group_by,
        metric=metric,
        step=step,
        confidence=confidence,
        n_resamples=resamples,
        seed=resample_seed,
        notes=notes,
    )
    if out_dir is not None:
        write_report(comparison, out_dir, runs_root=input_root(folders))
    return comparison


def export_onnx(
    policy: PathLike, out: PathLike, *, stochastic: bool = False, opset: int | None = None, overwrite: bool = False
) -> ExportReport:
    """Write a saved policy as an ONNX controller (observation → action in the task's units), as
    ``kiln export`` does; the file is checked against Kiln's actor with onnxruntime before it is written.

    Args:
        policy: A run folder holding ``policy/``, or the policy folder itself.
        out: The ONNX file to write.
        stochastic: Export the sampling controller (second input ``noise`` ~ N(0, I)); else ``tanh(mean)``.
        opset: ONNX opset (13 to 21); None: Kiln's default (``kiln.onnx_export.DEFAULT_OPSET``).
        overwrite: Replace ``out`` if it exists.

    Returns:
        The export report: ``out``, ``size_bytes``, ``opset``, ``checked_observations`` and the
        ``max_difference`` from Kiln's actions.

    Raises:
        ExportError: For an unsupported opset, an output that may not be written, missing packages
            (``pip install 'kiln-sac[export]'``) or a model that does not reproduce Kiln.
        PolicyFolderError: If the policy cannot be loaded.
    """
    with _kiln_errors(), _torch_kept():
        from kiln.onnx_export import DEFAULT_OPSET, export_policy

        return export_policy(Path(policy), Path(out), stochastic, DEFAULT_OPSET if opset is None else opset, overwrite)


def verify(
    quick: bool = False, *, seed: int = 0, out: PathLike | None = None, say: Callable[[str], None] | None = None
) -> VerifyReport:
    """Check Kiln against exact answers, as ``kiln verify`` does, with Kiln's own presets only.

    Args:
        quick: Solver checks only (seconds); otherwise the short training runs too (minutes).
        seed: Seed of the training runs (0 or more).
        out: Also write the table as JSON to this file (atomically). None: nothing is written.
        say: Where progress lines go (e.g. ``print``); None: nowhere.

    Returns:
        The report: ``rows`` (each with ``check``, ``source``, ``expected``, ``got``, ``error``, ``rule``
        and ``passed``), ``passed`` (every row passed), ``runs`` and ``wall_s``.

    Raises:
        ConfigError: If ``seed`` is negative.
        KilnError: If ``out`` cannot be written (checked before any check runs).
    """
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ConfigError(f"seed must be an integer of 0 or more, got {seed!r}")
    out_path = None if out is None else Path(out)
    with _kiln_errors(), _torch_kept(), _hydra_kept(), _without_user_presets():
        import json

        from kiln.exact.verify_table import report_json, run_verify
        from kiln.storage.run_folder import write_text_atomic
        from kiln.storage.writable import check_writable, reason

        if out_path is not None:
            # Checked before the checks run, so minutes of training are not lost to a typo.
            if out_path.is_dir():
                raise KilnError(f"out={out_path} is a folder; give a file name such as {out_path / 'verify.json'}")
            if not out_path.parent.is_dir():
                raise KilnError(f"out={out_path}: folder {out_path.parent} does not exist; create it or pick another path")
            check_writable(out_path.parent, _VERIFY_OUT_FIX)
        report = run_verify(bool(quick), seed, say=say or (lambda line: None))
        if out_path is not None:
            try:
                write_text_atomic(out_path, json.dumps(report_json(report, bool(quick), seed), indent=2, ensure_ascii=False))
            except OSError as err:
                raise KilnError(f"cannot write {out_path} ({reason(err)}): {_VERIFY_OUT_FIX}") from None
    return report


@contextmanager
def _without_user_presets() -> Iterator[None]:
    """``KILN_PRESETS`` unset for the block, then as it was.

    The checks compare Kiln's own task presets with their exact answers; a user preset of the same
    name would change the task under test, so user preset folders are not searched.
    """
    from kiln.config.presets import PRESETS_ENV

    saved = os.environ.pop(PRESETS_ENV, None)
    try:
        yield
    finally:
        if saved is not None:
            os.environ[PRESETS_ENV] = saved
