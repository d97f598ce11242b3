"""Kiln's public Python API through ``import kiln``: each function called in this process on small inputs,
its errors, the caller's process state before and after each call, and the README's example.

What the functions must do is the project's rule (README, "Use from Python"); each value they are
checked against comes from outside Kiln, named beside the check: Gymnasium's registered Pendulum-v1,
onnxruntime, SciPy, hand arithmetic, torch's / NumPy's / Python's own getters.
"""

from __future__ import annotations

import importlib.metadata
import json
import os
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import scipy.stats

import kiln
import kiln.errors
from kiln.envs.task_error import TaskError

REPO = Path(__file__).resolve().parents[1]
README = REPO / "README.md"

# A very short Pendulum-v1 run (the default task): 200 warm-up steps, then 400 updates; evaluations
# and checkpoints at steps 300 and 600.
SHORT_RUN = [
    "steps=600", "collect.warmup_steps=200", "evaluate.every=300", "evaluate.episodes=2",
    "checkpoint.every=300", "log.progress=off",
]  # fmt: skip

# Gymnasium's registration of Pendulum-v1 (gymnasium/envs/__init__.py): a 200-step time limit, and
# the pendulum never terminates on its own, so every episode is exactly 200 steps long.
PENDULUM = gym.spec("Pendulum-v1")
PENDULUM_ACTIONS = gym.make("Pendulum-v1").action_space  # Box(-2, 2, (1,)): the torque bounds


def one_line(err: BaseException) -> str:
    """The error's message, which Kiln keeps to one line (README, "Bad input")."""
    message = str(err)
    assert message and "\n" not in message, message
    return message


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, Path]:
    """Two short runs under <work>/runs/pendulum: seed 0 into a named folder, seed 1 into the folder
    the command would choose (run_dir=None, from <work> as the current folder)."""
    work = tmp_path_factory.mktemp("api")
    first = kiln.train([*SHORT_RUN, "seed=0"], run_dir=work / "runs" / "pendulum" / "seed0")
    with pytest.MonkeyPatch.context() as patch:
        patch.chdir(work)
        second = kiln.train([*SHORT_RUN, "seed=1"])
    return work, first, second


# ----- the face -------------------------------------------------------------------------------------


def _fresh_python(code: str, cwd: Path) -> str:
    command = [sys.executable, "-c", textwrap.dedent(code)]
    proc = subprocess.run(command, cwd=cwd, capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    return proc.stdout.strip()


def test_import_kiln_and_the_command_load_no_torch(tmp_path: Path) -> None:
    # README, "Use from Python": `import kiln` loads nothing heavy; nor do kiln.envs, the error
    # family, the version or `kiln --help` through the face.
    loaded = _fresh_python("""
        import sys
        import kiln, kiln.envs
        kiln.KilnError, kiln.TaskSetupError, kiln.__version__
        before_help = "torch" in sys.modules
        from kiln.cli.command import main
        try:
            main(["--help"])
        except SystemExit:
            pass
        print(before_help, "torch" in sys.modules)
    """, tmp_path)  # fmt: skip
    assert loaded.splitlines()[-1] == "False False"


def test_the_face_names_the_api_the_policy_class_the_errors_and_the_version() -> None:
    import kiln.api
    import kiln.storage.policy_io

    for name in ("train", "load_policy", "evaluate", "compare", "export_onnx", "verify"):
        assert getattr(kiln, name) is getattr(kiln.api, name)
        assert name in kiln.__all__ and name in dir(kiln)
    assert kiln.Policy is kiln.storage.policy_io.Policy
    assert sorted(set(dir(kiln)) & set(kiln.__all__)) == sorted(kiln.__all__)
    for name in kiln.__all__:
        getattr(kiln, name)  # every listed name resolves
    # Every error class of kiln.errors, found by looking at the module itself.
    family = {n for n, v in vars(kiln.errors).items() if isinstance(v, type) and issubclass(v, kiln.errors.KilnError)}
    assert family <= set(kiln.__all__)
    assert all(getattr(kiln, n) is getattr(kiln.errors, n) for n in family)
    assert issubclass(kiln.ExportError, kiln.KilnError)
    # The installed distribution's own metadata (importlib.metadata), not Kiln's.
    assert kiln.__version__ == importlib.metadata.version("kiln-sac")
    with pytest.raises(AttributeError, match="no attribute 'no_such_name'"):
        kiln.no_such_name  # noqa: B018


# ----- train ------------------------------------------------------------------------------------------


def test_train_returns_the_finished_run_folder(runs: tuple[Path, Path, Path]) -> None:
    work, first, _ = runs
    assert first.is_absolute() and first.resolve() == (work / "runs" / "pendulum" / "seed0").resolve()
    result = json.loads((first / "result.json").read_text())
    assert result["env_id"] == "Pendulum-v1" and result["steps"] == 600
    # Hand arithmetic: evaluate.every=300 within 600 steps evaluates at 300 and 600. One update per env
    # step (Haarnoja et al. 2018, Table 1) once the warm-up (200 steps) is over and the replay holds one
    # minibatch of 256 transitions (Table 1's batch size), i.e. from step 256: 600 - 256 + 1 = 345.
    assert [step for step, _ in result["eval_curve"]] == [300, 600]
    assert result["updates"] == 345
    # The default target entropy is -dim(A) (Table 1), and Pendulum-v1's action has one dimension.
    assert result["target_entropy"] == -float(np.prod(PENDULUM_ACTIONS.shape)) == -1.0
    assert (first / "policy" / "spec.json").is_file()


def test_train_without_run_dir_uses_the_folder_the_command_would(runs: tuple[Path, Path, Path]) -> None:
    work, _, second = runs
    # README, "Training": runs/<env>/<date>_<time>_seed<seed>_<token>/, under the current folder.
    assert second.is_absolute() and second.parent.resolve() == (work / "runs" / "pendulum").resolve()
    assert re.fullmatch(r"\d{4}-\d\d-\d\d_\d\d-\d\d-\d\d_seed1_[0-9a-f]+", second.name), second.name
    assert json.loads((second / "result.json").read_text())["seed"] == 1


def test_train_skips_a_finished_folder_and_refuses_another_config_there(runs: tuple[Path, Path, Path]) -> None:
    _, first, _ = runs
    # README, "Crashes, interrupts and resuming": a folder holding result.json is never touched again;
    # the same config is skipped, a different one refused. (The folder's lock file, .lock, names the
    # process that claimed the folder last: every launch claims it, as the command does.)
    def files() -> dict[Path, tuple[int, bytes]]:
        kept = [p for p in first.rglob("*") if p.is_file() and p.name != ".lock"]
        return {p.relative_to(first): (p.stat().st_mtime_ns, p.read_bytes()) for p in kept}

    before = files()
    assert kiln.train([*SHORT_RUN, "seed=0"], run_dir=first) == first
    with pytest.raises(kiln.RunFolderError) as refused:
        kiln.train([*SHORT_RUN, "seed=5"], run_dir=first)
    assert "already holds a finished run" in one_line(refused.value)
    assert files() == before


def test_train_resumes_an_unfinished_folder(runs: tuple[Path, Path, Path], tmp_path: Path) -> None:
    import shutil

    from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

    _, first, _ = runs
    unfinished = tmp_path / "unfinished"
    shutil.copytree(first, unfinished)
    (unfinished / "result.json").unlink()  # a run killed after its last checkpoint (step 600)
    shutil.rmtree(unfinished / "policy")
    assert kiln.train([*SHORT_RUN, "seed=0"], run_dir=unfinished).resolve() == unfinished.resolve()
    result = json.loads((unfinished / "result.json").read_text())
    # Resumed at the step-600 checkpoint, not started over: no earlier attempt set aside (README:
    # resume=false would move it to unfinished-<n>/), the 345 updates of the first attempt (hand
    # arithmetic above) counted once, and TensorBoard shows each evaluation step once.
    assert not list(unfinished.glob("unfinished-*"))
    assert result["updates"] == 345
    events = EventAccumulator(str(unfinished), size_guidance={"scalars": 0})
    events.Reload()
    assert sorted({e.step for e in events.Scalars("return/eval")}) == [300, 600]
    assert (unfinished / "policy" / "spec.json").is_file()


@pytest.mark.parametrize(
    "overrides",
    [["seed=0,1"], ["seed=range(2)"], ["sweep=seeds"], ["-m", "seed=1"]],
    ids=["comma-values", "range", "sweep-preset", "multirun-flag"],
)
def test_a_sweep_is_refused_in_one_line(overrides: list[str], tmp_path: Path) -> None:
    with pytest.raises(kiln.ConfigError) as refused:
        kiln.train([*SHORT_RUN, *overrides], run_dir=tmp_path / "never")
    assert "call train once per run" in one_line(refused.value)
    assert not (tmp_path / "never").exists()


@pytest.mark.parametrize(
    "overrides,error,phrase",
    [
        (["agent.no_such_key=1"], kiln.KilnError, "unknown config key"),
        (["steps=-5"], kiln.ConfigError, "steps"),
        (["env.id=NoSuchTask-v0"], kiln.TaskSetupError, "unknown env id"),
        ("seed=3", kiln.ConfigError, "list of key=value strings"),
    ],
    ids=["unknown-key", "bad-value", "unknown-task", "a-string-not-a-list"],
)
def test_bad_input_raises_kilns_errors_never_system_exit(overrides, error, phrase, tmp_path: Path) -> None:
    with pytest.raises(error) as refused:
        kiln.train(overrides, run_dir=tmp_path / "never")
    assert isinstance(refused.value, kiln.KilnError)
    assert phrase in one_line(refused.value)
    assert not (tmp_path / "never").exists()


def test_a_task_error_stays_a_task_error_too(tmp_path: Path) -> None:
    # kiln.envs has its own error (it imports nothing else of Kiln); the API's is both kinds.
    with pytest.raises(TaskError):
        kiln.train(["env.id=NoSuchTask-v0"], run_dir=tmp_path / "never")


# ----- load_policy ------------------------------------------------------------------------------------


def test_load_policy_acts_within_pendulums_torque_bounds(runs: tuple[Path, Path, Path]) -> None:
    _, first, _ = runs
    policy = kiln.load_policy(first)
    assert isinstance(policy, kiln.Policy)
    env = gym.make("Pendulum-v1")
    observation, _ = env.reset(seed=0)
    action = policy.act(observation)
    # Gymnasium's Pendulum-v1 action space: Box(-2.0, 2.0, (1,)).
    assert PENDULUM_ACTIONS.low.tolist() == [-2.0] and PENDULUM_ACTIONS.high.tolist() == [2.0]
    assert np.shape(action) == PENDULUM_ACTIONS.shape
    assert PENDULUM_ACTIONS.contains(np.asarray(action, dtype=np.float32))
    # The deterministic action is tanh(mean) mapped to the bounds (Haarnoja et al. 2018, Appendix C):
    # a function of the observation alone.
    assert np.array_equal(policy.act(observation, deterministic=True), action)
    sampled = policy.act(observation, deterministic=False)
    assert PENDULUM_ACTIONS.contains(np.asarray(sampled, dtype=np.float32))
    assert policy.spec["env"]["id"] == "Pendulum-v1"
    assert kiln.load_policy(first / "policy").spec == policy.spec  # the run folder or its policy/


def test_load_policy_of_a_folder_without_one_is_a_policy_folder_error(tmp_path: Path) -> None:
    with pytest.raises(kiln.PolicyFolderError) as refused:
        kiln.load_policy(tmp_path / "missing")
    assert "no such folder" in one_line(refused.value)
    with pytest.raises(kiln.PolicyFolderError, match="holds no saved policy"):
        kiln.load_policy(tmp_path)


# ----- evaluate -----------------------------------------------------------------------------------------


def test_evaluate_returns_the_record_and_writes_nothing(runs: tuple[Path, Path, Path]) -> None:
    _, first, _ = runs
    record = kiln.evaluate(first, episodes=3, seed=5)
    # README, "Evaluation": reset seeds seed, seed+1, ...
    assert record["seeds"] == [5, 6, 7] and record["mode"] == "deterministic"
    assert record["env_id"] == "Pendulum-v1" and record["policy"] == str((first / "policy").resolve())
    episodes = record["episode_list"]
    assert [e["seed"] for e in episodes] == [5, 6, 7]
    # Gymnasium's registration: 200 steps, never terminated.
    assert all(e["length"] == PENDULUM.max_episode_steps == 200 and not e["terminated"] for e in episodes)
    returns = [e["return"] for e in episodes]
    # Hand arithmetic: the summary's mean and count of the three returns (numpy as the calculator).
    assert record["summary"]["return_mean"] == pytest.approx(np.mean(returns))
    assert record["summary"]["episodes"] == 3
    assert not (first / "evaluations").exists()  # README, "Use from Python": a file only with out=


def test_evaluate_episode_is_gymnasiums_own_rollout(runs: tuple[Path, Path, Path]) -> None:
    _, first, _ = runs
    record = kiln.evaluate(first, episodes=1, seed=5)
    policy = kiln.load_policy(first)
    # The same episode run by hand in Gymnasium's Pendulum-v1: reset seed 5, the deterministic action
    # at every step, rewards summed. 1e-4 relative allows float32 round-off of one row against a batch.
    env = gym.make("Pendulum-v1")
    observation, _ = env.reset(seed=5)
    total, done = 0.0, False
    while not done:
        observation, reward, terminated, truncated, _ = env.step(policy.act(observation))
        total += float(reward)
        done = terminated or truncated
    assert record["episode_list"][0]["return"] == pytest.approx(total, rel=1e-4)


def test_evaluate_writes_the_record_when_asked(runs: tuple[Path, Path, Path], tmp_path: Path) -> None:
    _, first, _ = runs
    out = tmp_path / "pendulum.json"
    record = kiln.evaluate(first, episodes=2, seed=0, deterministic=False, out=out)
    assert json.loads(out.read_text()) == json.loads(json.dumps(record))
    assert record["mode"] == "stochastic"


@pytest.mark.parametrize(
    "options,phrase",
    [({"episodes": 0}, "episodes"), ({"seed": -1}, "seed"), ({"out": "<a folder>"}, "is a folder")],
    ids=["no-episodes", "negative-seed", "out-is-a-folder"],
)
def test_evaluate_refuses_bad_options(runs: tuple[Path, Path, Path], options: dict, phrase: str, tmp_path: Path) -> None:
    _, first, _ = runs
    options = {k: tmp_path if v == "<a folder>" else v for k, v in options.items()}
    with pytest.raises(kiln.ConfigError) as refused:
        kiln.evaluate(first, **options)
    assert phrase in one_line(refused.value)


# ----- export_onnx --------------------------------------------------------------------------------------


def test_export_onnx_runs_in_onnxruntime_as_the_policy_acts(runs: tuple[Path, Path, Path], tmp_path: Path) -> None:
    import onnxruntime

    _, first, _ = runs
    out = tmp_path / "pendulum.onnx"
    report = kiln.export_onnx(first, out)
    assert report.out == out and out.stat().st_size == report.size_bytes and not report.stochastic
    policy = kiln.load_policy(first)
    env = gym.make("Pendulum-v1")
    observations = np.stack([env.reset(seed=seed)[0] for seed in range(20)]).astype(np.float32)
    session = onnxruntime.InferenceSession(str(out))
    exported = session.run(["action"], {"observation": observations})[0]
    kilns = np.stack([policy.act(o) for o in observations])
    # README, "Export for deployment": the file reproduces Kiln to 1e-5.
    np.testing.assert_allclose(exported, kilns, atol=1e-5, rtol=0)
    with pytest.raises(kiln.ExportError) as refused:
        kiln.export_onnx(first, out)
    assert "already exists" in one_line(refused.value)


# ----- compare ------------------------------------------------------------------------------------------


def test_compare_a_folder_of_two_runs(runs: tuple[Path, Path, Path], tmp_path: Path) -> None:
    work, first, second = runs
    folder = work / "runs" / "pendulum"
    comparison = kiln.compare(folder)
    assert sorted(row.path.resolve() for row in comparison.runs) == sorted([first.resolve(), second.resolve()])
    # Both runs have the default target entropy -dim(A) = -1: one group of two, compared at the last
    # step both reached (600).
    (group,) = comparison.groups
    assert group.n_runs == 2 and comparison.settings.step == 600
    finals = [json.loads((run / "result.json").read_text())["eval_curve"][-1][1] for run in (first, second)]
    # IQM = the 25% trimmed mean (Agarwal et al. 2021, Sec. 4.1), with SciPy's trim_mean as the reference.
    assert group.iqm == pytest.approx(scipy.stats.trim_mean(finals, 0.25))
    assert not (folder / "report").exists()  # README, "Use from Python": a report only with out=


def test_compare_writes_the_report_when_asked(runs: tuple[Path, Path, Path], tmp_path: Path) -> None:
    _, first, second = runs
    out = tmp_path / "report"
    comparison = kiln.compare([first, second], resamples=200, out=out)
    assert comparison.settings.n_resamples == 200
    assert (out / "report.md").is_file() and (out / "comparison.json").is_file()


@pytest.mark.parametrize(
    "options,phrase",
    [({"resamples": 0}, "resamples"), ({"confidence": 1.0}, "confidence"), ({"step": -1}, "step")],
    ids=["no-resamples", "confidence-one", "negative-step"],
)
def test_compare_refuses_bad_options(runs: tuple[Path, Path, Path], options: dict, phrase: str) -> None:
    _, first, _ = runs
    with pytest.raises(kiln.CompareInputError) as refused:
        kiln.compare(first, **options)
    assert phrase in one_line(refused.value)


def test_compare_of_a_missing_folder_is_a_compare_input_error(tmp_path: Path) -> None:
    with pytest.raises(kiln.CompareInputError) as refused:
        kiln.compare(tmp_path / "missing")
    assert "does not exist" in one_line(refused.value)


# ----- verify -------------------------------------------------------------------------------------------


def test_verify_quick_passes_prints_nothing_and_keeps_the_users_presets(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    presets = tmp_path / "presets"
    presets.mkdir()
    monkeypatch.setenv("KILN_PRESETS", str(presets))
    out = tmp_path / "verify.json"
    report = kiln.verify(quick=True, out=out)
    # Each row is a check against an exact answer named in its `source` (a textbook example, a
    # closed form, torch.distributions); the quick table runs no training.
    assert report.rows and all(row.passed for row in report.rows) and report.passed
    assert all(row.source for row in report.rows) and not report.runs
    assert json.loads(out.read_text())["passed"] is True
    assert capsys.readouterr().out == ""
    assert os.environ["KILN_PRESETS"] == str(presets)


def test_verify_refuses_a_negative_seed() -> None:
    with pytest.raises(kiln.ConfigError, match="seed"):
        kiln.verify(quick=True, seed=-1)


# ----- the caller's process state -----------------------------------------------------------------------

# Run in a fresh interpreter, so that every first import of Kiln's modules happens inside the calls.
# The caller has set every item to something of its own first; Kiln's dependencies are imported
# before the first snapshot (a caller that uses them has them too; what their own import does is
# theirs, not Kiln's).
STATE_SCRIPT = r'''
import hashlib, json, logging, os, random, signal, sys

import gymnasium, hydra, matplotlib, numpy as np, omegaconf, onnx, onnxruntime, safetensors, scipy.stats, torch, tqdm
from hydra.core.global_hydra import GlobalHydra
from tensorboard.backend.event_processing import event_accumulator
from torch.utils.tensorboard import SummaryWriter

SHORT_RUN = json.loads(sys.argv[1])
TASK_MODULE = """
import gymnasium as gym
import numpy as np


class Hold(gym.Env):
    observation_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return np.zeros(1, dtype=np.float32), {}

    def step(self, action):
        return np.zeros(1, dtype=np.float32), -abs(float(action[0])), False, False, {}


gym.register("StateHold-v0", entry_point=Hold, max_episode_steps=20)
"""


def loggers():
    found = {"": logging.getLogger()}
    found.update({n: v for n, v in logging.Logger.manager.loggerDict.items() if isinstance(v, logging.Logger)})
    table = {n: [lg.level, [repr(h) for h in lg.handlers], lg.propagate, lg.disabled] for n, lg in found.items()}
    table["(logging.disable)"] = logging.root.manager.disable
    return table


def snapshot():
    return {
        "torch threads": torch.get_num_threads(),
        "deterministic algorithms": [torch.are_deterministic_algorithms_enabled(),
                                     torch.is_deterministic_algorithms_warn_only_enabled()],
        "torch global RNG": hashlib.sha256(torch.get_rng_state().numpy().tobytes()).hexdigest(),
        "NumPy global RNG": hashlib.sha256(repr(np.random.get_state()).encode()).hexdigest(),
        "Python random": hashlib.sha256(repr(random.getstate()).encode()).hexdigest(),
        "current folder": os.getcwd(),
        "logging": loggers(),
        "sys.path": list(sys.path),
        "signal handlers": {s.name: repr(signal.getsignal(s)) for s in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)},
        # The raw rcParams entry: reading it through get_backend() would itself choose a backend.
        "matplotlib backend": repr(dict.__getitem__(matplotlib.rcParams, "backend")),
        "environment": dict(os.environ),
        "Hydra's global instance": GlobalHydra.instance().hydra is CALLERS_HYDRA,
    }


torch.set_num_threads(3)
torch.use_deterministic_algorithms(True, warn_only=True)
torch.manual_seed(11)
np.random.seed(12)
random.seed(13)
logging.basicConfig(level=logging.WARNING)
logging.getLogger("tensorboard").setLevel(logging.INFO)
signal.signal(signal.SIGINT, lambda signum, frame: None)
signal.signal(signal.SIGTERM, lambda signum, frame: None)
sys.path.append("/caller/own/entry")
os.makedirs("callers_conf")  # the caller's own Hydra app, as inside a @hydra.main function
hydra.initialize_config_dir(config_dir=os.path.abspath("callers_conf"), version_base="1.3").__enter__()
CALLERS_HYDRA = GlobalHydra.instance().hydra
# The caller's own task in the current folder, importable through sys.path's "" entry (python -c).
with open("state_task.py", "w") as f:
    f.write(TASK_MODULE)
snapshots = {"before": snapshot()}

import kiln

# deterministic=true: the run switches torch's deterministic kernels on (strict) while it trains.
run = kiln.train([*SHORT_RUN, "deterministic=true"], run_dir="runs/a")
snapshots["train"] = snapshot()
kiln.train([*SHORT_RUN, "env.id=state_task:StateHold-v0", "env.name=hold"], run_dir="runs/own")
snapshots["train (own task)"] = snapshot()
kiln.load_policy(run).act([1.0, 0.0, 0.0])
snapshots["load_policy"] = snapshot()
kiln.evaluate(run, episodes=2, seed=0)
snapshots["evaluate"] = snapshot()
kiln.export_onnx(run, "a.onnx")
snapshots["export_onnx"] = snapshot()
kiln.compare([run], resamples=100, out="report")
snapshots["compare"] = snapshot()
kiln.verify(quick=True)
snapshots["verify"] = snapshot()
print(json.dumps(snapshots))
'''

STATE_ITEMS = (
    "torch threads", "deterministic algorithms", "torch global RNG", "NumPy global RNG", "Python random",
    "current folder", "logging", "sys.path", "signal handlers", "matplotlib backend", "environment",
    "Hydra's global instance",
)  # fmt: skip
CALLS = ("train", "train (own task)", "load_policy", "evaluate", "export_onnx", "compare", "verify")
# A logger that first appears during a call (a module imported for the first time makes its own)
# with logging's defaults has changed nothing: level NOTSET, no handler, propagating, enabled.
_NEW_LOGGER = [0, [], True, False]


@pytest.fixture(scope="module")
def state_table(tmp_path_factory: pytest.TempPathFactory) -> dict[str, dict]:
    work = tmp_path_factory.mktemp("state")
    presets = work / "presets"
    presets.mkdir()
    env = dict(os.environ, KILN_PRESETS=str(presets), PYTHONUNBUFFERED="1")
    proc = subprocess.run(
        [sys.executable, "-c", STATE_SCRIPT, json.dumps(SHORT_RUN)], cwd=work, env=env, capture_output=True, text=True,
        timeout=600, check=False,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    table = json.loads(proc.stdout.strip().splitlines()[-1])
    assert set(table) == {"before", *CALLS}
    return table


def _changed(item: str, before, after) -> object:
    """What differs between two snapshots of one item (None when nothing does)."""
    if item == "logging":
        names = set(before) | set(after)
        diff = {n: (before.get(n, _NEW_LOGGER), after.get(n, _NEW_LOGGER)) for n in sorted(names)}
        return {n: pair for n, pair in diff.items() if pair[0] != pair[1]} or None
    if isinstance(before, dict):
        keys = set(before) | set(after)
        return {k: (before.get(k), after.get(k)) for k in sorted(keys) if before.get(k) != after.get(k)} or None
    return None if before == after else (before, after)


@pytest.mark.parametrize("item", STATE_ITEMS)
def test_every_call_leaves_the_callers_process_state_as_it_was(state_table: dict[str, dict], item: str) -> None:
    before = state_table["before"][item]
    changed = {call: _changed(item, before, state_table[call][item]) for call in CALLS}
    assert not any(changed.values()), f"{item} changed: {changed}"


def test_the_callers_settings_were_not_kilns_defaults(state_table: dict[str, dict]) -> None:
    # The table above would pass trivially if the caller's values were the ones Kiln sets anyway:
    # one torch thread (configs/train.yaml's threads: 1) and strict determinism (deterministic=true).
    before = state_table["before"]
    assert before["torch threads"] == 3 and before["deterministic algorithms"] == [True, True]
    assert before["logging"]["tensorboard"][0] == 20  # logging.INFO; Kiln reads event files at ERROR
    assert before["Hydra's global instance"] is True


# ----- the README's example -----------------------------------------------------------------------------


def readme_example() -> str:
    """The README's Python block that starts with the line ``# use_kiln.py``, exactly as written."""
    blocks = re.findall(r"```python\n(.*?)```", README.read_text(), flags=re.DOTALL)
    found = [b for b in blocks if b.splitlines()[0] == "# use_kiln.py"]
    assert len(found) == 1, "README.md should hold one example whose first line is # use_kiln.py"
    return found[0]


def test_the_readme_example_runs_from_an_empty_folder(tmp_path: Path) -> None:
    (tmp_path / "use_kiln.py").write_text(readme_example())
    env = {k: v for k, v in os.environ.items() if k != "KILN_PRESETS"}
    proc = subprocess.run(
        [sys.executable, "use_kiln.py"], cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300, check=False
    )
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    # Only the example's two lines: the library prints no summary of its own.
    assert len(lines) == 2, proc.stdout
    word, torque = lines[0].split()
    assert word == "action"
    # Gymnasium's Pendulum-v1 torque bounds [-2, 2].
    assert PENDULUM_ACTIONS.low[0] <= float(torque) <= PENDULUM_ACTIONS.high[0]
    fields = lines[1].split()
    assert fields[:4] == ["episodes", "3", "length", "200.0"]  # Gymnasium's registered 200-step limit
    assert fields[4] == "return" and np.isfinite(float(fields[5]))
    assert (tmp_path / "runs" / "quick" / "result.json").is_file()
