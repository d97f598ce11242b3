"""kiln.launchers.sweep_points: a sweep point composed in the launching process as Hydra's joblib
launcher composes it in its worker.

The reference is Hydra's own code: for the same command and job, ``execute_job`` of the
hydra-joblib-launcher plugin (``load_sweep_config``, ``hydra.job.num`` / ``hydra.job.id``, then
``run_job`` making the job's output folder ``hydra.sweep.dir/hydra.sweep.subdir`` and calling the task
function) runs in a fresh process beside :func:`compose_point`; folder, resolved config, job number
and id, and Hydra's job record must agree. Folder names are also worked out by hand from Hydra's
documented rules (``hydra.job.override_dirname``: the job's overrides as ``key=value``, sorted, joined
by ``,``). :func:`resume_mark` is checked on folders laid out by hand as kiln.training.checkpoint's
docstring describes them (``checkpoints/step-<12 digits>/``, unfinished ones under ``.partial-``).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from omegaconf import OmegaConf

from kiln.launchers.sweep_points import Point, resume_mark

BOTH_WAYS = """\
import json, sys
from hydra._internal.callbacks import Callbacks
from hydra._internal.hydra import Hydra
from hydra._internal.utils import create_config_search_path
from hydra.core.hydra_config import HydraConfig
from hydra.core.singleton import Singleton
from hydra.core.utils import JobStatus
from hydra.types import HydraContext, RunMode
from hydra_plugins.hydra_joblib_launcher._core import execute_job
from omegaconf import OmegaConf
from kiln.config.presets import CONFIG_DIR
from kiln.launchers.sweep_points import compose_point

command, jobs = json.loads(sys.argv[1]), json.loads(sys.argv[2])
# As Hydra's app starts a multirun of scripts/train.py (its task name is the script's name).
app = Hydra.create_main_hydra2(task_name="train", config_search_path=create_config_search_path(str(CONFIG_DIR)))
master = app.compose_config("train", command, run_mode=RunMode.MULTIRUN)
context = HydraContext(config_loader=app.config_loader, callbacks=Callbacks(master))
HydraConfig.instance().set_config(master)


def record(ret):
    return {"overrides": ret.overrides, "working_dir": ret.working_dir, "task_name": ret.task_name,
            "status": ret.status.name, "value": ret.return_value, "cfg": OmegaConf.to_yaml(ret.cfg),
            "output_dir": ret.hydra_cfg.hydra.runtime.output_dir,
            "job": [ret.hydra_cfg.hydra.job.num, ret.hydra_cfg.hydra.job.id]}


out = []
for num, overrides in jobs:
    point = compose_point(context, master, overrides, num)
    HydraConfig.instance().set_config(master)  # as the launcher restores its own config
    seen = {}

    def task(cfg):
        seen["output_dir"] = HydraConfig.get().runtime.output_dir
        seen["raw"] = OmegaConf.to_container(cfg, resolve=True)
        return -123.5

    ret = execute_job(num, overrides, context, master, task, Singleton.get_state())
    out.append({
        "kiln": {"run_dir": str(point.run_dir), "raw": point.raw, "num": point.num,
                 "record": record(point.job_return(JobStatus.COMPLETED, -123.5))},
        "hydra": {"run_dir": seen["output_dir"], "raw": seen["raw"], "num": num, "record": record(ret)},
    })
print(json.dumps(out))
"""


def both_ways(tmp_path: Path, command: list[str], jobs: list[tuple[int, list[str]]]) -> list[dict]:
    proc = subprocess.run([sys.executable, "-c", BOTH_WAYS, json.dumps(command), json.dumps(jobs)], cwd=tmp_path,
                          check=False, capture_output=True, text=True, timeout=300)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


@pytest.mark.parametrize(
    "case,command,jobs,folders",
    [
        # The seeds preset names its folders ${env.name}_seed=${seed}: pendulum_seed=3 for seed 3 (by hand).
        ("seeds", ["sweep=seeds"], [(0, ["sweep=seeds", "seed=0"]), (3, ["sweep=seeds", "seed=3"])],
         ["pendulum_seed=0", "pendulum_seed=3"]),
        # train.yaml's own subdir, ${hydra.job.override_dirname}: overrides sorted by key, joined by ",".
        ("plain", ["seed=0,1", "agent.actor.lr=0.002"],
         [(0, ["seed=0", "agent.actor.lr=0.002"]), (1, ["seed=1", "agent.actor.lr=0.002"])],
         ["agent.actor.lr=0.002,seed=0", "agent.actor.lr=0.002,seed=1"]),
        # A subdir that uses the job's number: set only once the point's hydra.job.num is (batch from 5).
        ("numbered", ["seed=0,1", "hydra.sweep.subdir=n${hydra.job.num}_s${seed}"],
         [(5, ["seed=0"]), (6, ["seed=1"])], ["n5_s0", "n6_s1"]),
    ],
)  # fmt: skip
def test_a_point_is_the_job_hydras_joblib_launcher_would_run(tmp_path: Path, case, command, jobs, folders) -> None:
    sweep_dir = tmp_path / case
    results = both_ways(tmp_path, [*command, f"hydra.sweep.dir={sweep_dir}"], jobs)
    for (num, _), folder, result in zip(jobs, folders, results):
        kiln, hydra = result["kiln"], result["hydra"]
        assert kiln["run_dir"] == hydra["run_dir"] == str(sweep_dir / folder)
        assert kiln["raw"] == hydra["raw"]
        assert kiln["num"] == hydra["num"] == num
        assert kiln["record"] == hydra["record"]
        assert kiln["record"]["job"] == [num, f"train_{num}"]  # hydra.job.id is <job name>_<num>
    # run_job made the folders; compose_point itself writes nothing (the reference ran second).
    assert sorted(p.name for p in sweep_dir.iterdir()) == sorted(folders)


def _point(run_dir: Path, resume: bool = True) -> Point:
    empty = OmegaConf.create({})
    return Point(num=0, overrides=[], raw={"resume": resume}, run_dir=run_dir, task_cfg=empty, hydra_cfg=empty)


def test_resume_mark_is_the_newest_complete_checkpoint(tmp_path: Path) -> None:
    run = tmp_path / "run"
    for name in ("step-000000000100", "step-000000001000", "step-000000000300", ".partial-000000002000-4242"):
        (run / "checkpoints" / name).mkdir(parents=True)
    (run / "checkpoints" / "replay").mkdir()
    # By hand: the largest step among the complete ones (a partial one is not a checkpoint yet).
    assert resume_mark(_point(run)) == "step-000000001000"


def test_no_mark_for_a_fresh_a_finished_or_a_restarted_run(tmp_path: Path) -> None:
    assert resume_mark(_point(tmp_path / "never_made")) == ""
    run = tmp_path / "run"
    (run / "checkpoints" / "step-000000000100").mkdir(parents=True)
    assert resume_mark(_point(run, resume=False)) == ""  # resume=false starts over
    (run / "result.json").write_text("{}")
    assert resume_mark(_point(run)) == ""  # finished: skipped, whatever its checkpoints


def test_a_folder_that_cannot_be_read_gets_no_mark(tmp_path: Path) -> None:
    # A name over the 255-byte limit of a Linux file name: looking at it fails with an OSError.
    assert resume_mark(_point(tmp_path / ("x" * 300))) == ""
