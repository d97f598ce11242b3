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
from hydra_plugins.kiln_population_launcher import register as register_population_launcher
from hydra_plugins.kiln_population_launcher.settings import TARGET as POPULATION_LAUNCHER
from hydra_plugins.kiln_population_launcher.settings import check_n_jobs, worker_count
from hydra_plugins.kiln_slurm_launcher import register as register_slurm_launcher
from omegaconf import DictConfig, OmegaConf

from agents.presets import CONFIG_DIR
from agents.run_folder import RunFolder, RunResult
from agents.trainer import check_run, train
from agents.presets import compose_node
from agents.writable import check_writable
from kiln_cli._cli import check_overrides, expand_overrides, guarded, stop_politely_on_sigterm


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
    if result.skipped:
        print(f"{run_dir} already holds a finished run (result.json); left as it is.")
        return
    ev, seeds = result.evaluation, result.evaluation_seeds
    det = "deterministic" if result.eval_deterministic else "stochastic"
    episodes = f"{len(seeds)} {det} episode{'s' if len(seeds) != 1 else ''}"
    print(f"\nrun folder   {run_dir}")
    print(f"TensorBoard  tensorboard --logdir {run_dir}")
    print(f"policy       {RunFolder(run_dir).policy_path}")
    print(
        f"evaluation   {episodes} of {result.env_id} after {result.steps} steps (reset seeds "
        f"{seeds[0]}..{seeds[-1]}): return {ev['return_mean']:.1f} ± {ev['return_std']:.1f} "
        f"(min {ev['return_min']:.1f}, max {ev['return_max']:.1f})"
    )
    mode = "" if result.eval_deterministic else " deterministic=false"
    print(f"reproduce    kiln evaluate policy={run_dir}{mode}   (same reset seeds, same sampling)")
    ups = result.updates_per_s
    print(f"time         {result.wall_time_s:.0f} s wall, {result.updates} updates" + (f" at {ups:.0f}/s" if ups else ""))


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
    register_slurm_launcher()  # launcher=slurm; an editable install hides it from Hydra's plugin scan
    register_population_launcher()  # launcher=population; the same
    args = sys.argv[1:]
    guarded(lambda: (check_overrides("train", args, check_run), check_output_folder(args), check_launcher_settings(args),
                     _hydra_entry()))  # fmt: skip


if __name__ == "__main__":
    main()
