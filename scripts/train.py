"""Train a soft actor-critic agent from the Hydra config ``configs/train.yaml``.

    python scripts/train.py                       # default task (Pendulum-v1)
    python scripts/train.py env=hopper seed=3     # another preset and seed
    python scripts/train.py -m seed=0,1,2         # a sweep (see configs/sweep/)

Caution: a policy trained in simulation is not safe to run on physical equipment by itself.
"""

from __future__ import annotations

import sys
from pathlib import Path

import hydra
from hydra.core.hydra_config import HydraConfig
from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.errors import HydraException
from hydra_plugins.kiln_launchers import register as register_launchers
from omegaconf import DictConfig, OmegaConf

from kiln.cli.common import check_overrides, expand_overrides, guarded, stop_politely_on_sigterm, user_folder_importable
from kiln.config.presets import CONFIG_DIR, compose_node
from kiln.launchers.launcher_settings import TARGET as POPULATION_LAUNCHER
from kiln.launchers.launcher_settings import check_n_jobs, worker_count
from kiln.storage.run_folder import RunResult
from kiln.storage.run_summary import describe_run
from kiln.storage.writable import check_writable
from kiln.training.trainer import check_run, train


def check_output_folder(args: list[str]) -> None:
    """Refuse a run (or sweep) folder that cannot be created or written, before Hydra makes it.

    Raises:
        KilnError: One line naming the folder and the cause.
    """
    if any(a in ("--help", "-h", "--hydra-help", "--info") or a.startswith("--cfg") or a == "-c" for a in args):
        return
    plain = [a for a in args if not a.startswith("-")]
    # The first value of every sweep, plus the output folders (expand_overrides leaves hydra.* out).
    folders = [a for a in plain if a.startswith(("hydra.run.dir=", "hydra.sweep.dir=", "hydra.sweep.subdir="))]
    overrides = expand_overrides(plain)[0] + folders
    hydra_node = compose_node("train", overrides, with_hydra=True).hydra
    sweeping = "-m" in args or "--multirun" in args or str(hydra_node.mode) == "RunMode.MULTIRUN"
    folder = Path(str(hydra_node.sweep.dir if sweeping else hydra_node.run.dir))
    check_writable(folder, "choose a writable place, e.g. hydra.run.dir=<folder> (hydra.sweep.dir= for a sweep)")


def check_launcher_settings(args: list[str]) -> None:
    """Refuse launcher settings (``hydra.launcher.*``) that Hydra or the launcher would refuse mid-start.

    Hydra reports them with a traceback after writing the sweep's folder; here they end with one line
    before anything is written.

    Raises:
        KilnError: One line naming the setting and the fix.
    """
    if any(a in ("--help", "-h", "--hydra-help", "--info") or a.startswith("--cfg") or a == "-c" for a in args):
        return
    plain = [a for a in args if not a.startswith("-")]
    launcher = [a for a in plain if a.lstrip("+~").startswith(("hydra.launcher.", "hydra/launcher="))]
    for arg in launcher:
        if arg.startswith("hydra.launcher.n_jobs="):
            try:
                value = OverridesParser.create().parse_overrides([arg])[0].value()
            except HydraException:
                value = arg.split("=", 1)[1]
            check_n_jobs(value)  # before Hydra's own type error, which names no fix
    node = compose_node("train", expand_overrides(plain)[0] + launcher, with_hydra=True).hydra.launcher
    if node.get("_target_") == POPULATION_LAUNCHER:
        worker_count(node)


def report(run_dir: Path, result: RunResult) -> None:
    """Tell the user where everything is and how the final evaluation went."""
    print(describe_run(run_dir, result))


@hydra.main(config_path=str(CONFIG_DIR), config_name="train", version_base="1.3")
def _hydra_entry(cfg: DictConfig) -> float:
    run_dir = Path(HydraConfig.get().runtime.output_dir)
    raw = OmegaConf.to_container(cfg, resolve=True)
    result = guarded(lambda: train(raw, run_dir))
    report(run_dir, result)
    return float(result.final.return_eval)


def main() -> None:
    """Check the command line, then hand it to Hydra."""
    stop_politely_on_sigterm()
    user_folder_importable()  # env.id=<module>:<TaskId> with the user's module in this folder
    register_launchers()  # launcher=population and launcher=slurm: an editable install hides them from Hydra's scan
    args = sys.argv[1:]
    guarded(lambda: (check_overrides("train", args, check_run), check_output_folder(args), check_launcher_settings(args),
                     _hydra_entry()))  # fmt: skip


if __name__ == "__main__":
    main()
