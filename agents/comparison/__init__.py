"""Comparing training runs with honest statistics: IQM, stratified bootstrap CIs, performance
profiles and probability of improvement (Agarwal et al. 2021, NeurIPS), read from TensorBoard
event files and written as a report folder.

Typical use::

    sweep = Path("sweeps/pendulum_target_entropy")  # made by `kiln train sweep=target_entropy`
    comparison = summarise(load_runs([sweep]), group_by="agent.temperature.target_entropy")
    write_report(comparison, sweep / "report", runs_root=sweep)
"""

from kiln.comparison.bootstrap import (
    Interval,
    bootstrap_distribution,
    iqm_interval,
    percentile_interval,
)
from kiln.comparison.events import ScalarSeries, read_scalars
from kiln.comparison.report import (
    check_out_dir,
    default_out_dir,
    terminal_summary,
    write_report,
)
from kiln.comparison.runs import Run, find_run_dirs, load_run, load_runs
from kiln.comparison.stats import iqm, performance_profile, probability_of_improvement
from kiln.comparison.summary import Comparison, summarise
from kiln.errors import CompareInputError

__all__ = [
    "CompareInputError",
    "Comparison",
    "Interval",
    "Run",
    "ScalarSeries",
    "bootstrap_distribution",
    "check_out_dir",
    "default_out_dir",
    "find_run_dirs",
    "iqm",
    "iqm_interval",
    "load_run",
    "load_runs",
    "percentile_interval",
    "performance_profile",
    "probability_of_improvement",
    "read_scalars",
    "summarise",
    "terminal_summary",
    "write_report",
]
