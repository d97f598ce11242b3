"""TensorBoard output of a run: scalars under Kiln's tags, and the hyper-parameter record."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

from torch.utils.tensorboard import SummaryWriter
from torch.utils.tensorboard.summary import hparams

# Final numbers that TensorBoard's hyper-parameter view shows per run (logged at the last step).
FINAL_METRICS = ("final/return_eval", "final/entropy", "final/alpha")


class RunLog:
    """Writes event files directly into the run folder, so that a sweep folder given to
    ``tensorboard --logdir`` lists every run under its folder name."""

    def __init__(self, run_dir: Path, resume_after: int | None = None) -> None:
        """Open the run's event log.

        Args:
            run_dir: The run folder.
            resume_after: For a resumed run, the step of its checkpoint: TensorBoard then drops what
                the killed attempt logged after that step (a purge marker), so no step shows twice.
        """
        purge = None if resume_after is None else resume_after + 1
        self.writer = SummaryWriter(log_dir=str(run_dir), flush_secs=10, purge_step=purge)

    def scalars(self, values: Mapping[str, float], step: int) -> None:
        """Log each ``tag: value`` at env step ``step``."""
        for tag, value in values.items():
            self.writer.add_scalar(tag, float(value), global_step=step)

    def hyperparameters(self, values: Mapping[str, float | int | str | bool]) -> None:
        """Record this run's hyper-parameters, tied to :data:`FINAL_METRICS` as metrics.

        Written into the run's own event file (not a sub-folder, as ``add_hparams`` would) so the
        hyper-parameter view shows one row per run folder.
        """
        exp, ssi, sei = hparams(dict(values), {tag: 0.0 for tag in FINAL_METRICS})
        for summary in (exp, ssi, sei):
            self.writer.file_writer.add_summary(summary)

    def flush(self) -> None:
        self.writer.flush()

    def close(self) -> None:
        self.writer.close()
