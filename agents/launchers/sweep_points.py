"""One sweep point composed as Hydra composes a job: its config, its run folder, its job record.

Hydra's joblib launcher composes each job inside its worker (``load_sweep_config``, then
``hydra.job.num`` / ``hydra.job.id``, then ``run_job`` joins ``hydra.sweep.dir`` and
``hydra.sweep.subdir`` into the job's output folder). The population launcher must group the points
before it starts any worker, so it does the same steps here, in the launching process, in the same
order: each member gets the folder and the resolved config a joblib job would have had.
"""

from __future__ import annotations

import copy
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from hydra.core.hydra_config import HydraConfig
from hydra.core.utils import JobReturn, JobStatus
from hydra.types import HydraContext
from omegaconf import DictConfig, OmegaConf, open_dict, read_write

from kiln.storage.run_folder import RunFolder
from kiln.training.checkpoint import CheckpointStore


@dataclass
class Point:
    """A sweep point ready to train: what the member needs, and what Hydra's record of it needs."""

    num: int  # hydra.job.num
    overrides: list[str]  # the job's own overrides (sweep values included)
    raw: dict[str, Any]  # the resolved run config, as the task function would pass it to train()
    run_dir: Path  # hydra.runtime.output_dir of the job
    task_cfg: DictConfig  # the job's config without its hydra node (JobReturn.cfg)
    hydra_cfg: DictConfig  # the job's whole config, hydra node included (JobReturn.hydra_cfg)

    def job_return(self, status: JobStatus, value: Any) -> JobReturn:
        """Hydra's record of this job, as ``hydra.core.utils.run_job`` fills it."""
        ret = JobReturn()
        ret.cfg = self.task_cfg
        ret.hydra_cfg = self.hydra_cfg
        ret.overrides = OmegaConf.to_container(self.hydra_cfg.hydra.overrides.task)
        chdir = bool(self.hydra_cfg.hydra.job.chdir)
        ret.working_dir = str(self.run_dir) if chdir else os.getcwd()
        ret.task_name = str(self.hydra_cfg.hydra.job.name)
        ret.status = status
        ret.return_value = value
        return ret


def compose_point(hydra_context: HydraContext, master: DictConfig, overrides: Sequence[str], num: int) -> Point:
    """Compose one sweep point exactly as Hydra's joblib launcher and ``run_job`` would.

    Leaves :class:`HydraConfig` set to the point's config; the caller restores the launcher's own.

    Args:
        hydra_context: The launcher's Hydra context (its config loader composes the point).
        master: The sweep's config (the launcher's ``config``).
        overrides: The point's overrides, as the sweeper hands them to the launcher.
        num: The job's number (``initial_job_idx`` + its place in the batch).
    """
    config = hydra_context.config_loader.load_sweep_config(master, list(overrides))
    with open_dict(config):
        config.hydra.job.id = f"{config.hydra.job.name}_{num}"
        config.hydra.job.num = num
    HydraConfig.instance().set_config(config)
    # run_job: the subdir is resolved only now, when hydra.job.* of this point are set.
    output_dir = str(OmegaConf.select(config, "hydra.sweep.dir"))
    output_dir = os.path.join(output_dir, str(OmegaConf.select(config, "hydra.sweep.subdir")))
    with read_write(config.hydra.runtime), open_dict(config.hydra.runtime):
        config.hydra.runtime.output_dir = os.path.abspath(output_dir)
    HydraConfig.instance().set_config(config)
    task_cfg = copy.deepcopy(config)
    with read_write(task_cfg), open_dict(task_cfg):
        del task_cfg["hydra"]
    # As scripts/train.py's task function does, while HydraConfig holds this job (${hydra:...} resolves).
    raw = OmegaConf.to_container(task_cfg, resolve=True)
    assert isinstance(raw, dict)
    return Point(
        num=num, overrides=list(overrides), raw=raw, run_dir=Path(config.hydra.runtime.output_dir),
        task_cfg=task_cfg, hydra_cfg=copy.deepcopy(HydraConfig.instance().cfg),
    )  # fmt: skip


def resume_mark(point: Point) -> str:
    """The checkpoint the point's run would continue from (its name), or ``""`` if it starts afresh
    or is finished.

    A population resumes all its members from one common step, so members stopped at different
    steps (or stopped beside members not yet begun, as a sweep stopped under another launcher
    leaves them) must not share a population: the launcher groups points by this mark too.
    """
    folder = RunFolder(point.run_dir)
    try:
        if not point.raw.get("resume", True) or folder.is_finished():
            return ""
        latest = CheckpointStore(folder.checkpoints_path, keep=1).latest()  # read only: keep is not used
    except OSError:  # a folder that cannot be read: the run itself will say why
        return ""
    return latest.name if latest is not None else ""
