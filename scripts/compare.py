"""Compare training runs grouped by a config key and write a report folder.

Example (the folder `kiln train sweep=target_entropy` makes on the default task)::

    kiln compare sweeps/pendulum_target_entropy --group-by agent.temperature.target_entropy

Exit status: 0 on success, 2 for input that cannot be compared (one line on stderr saying why and
what to do).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from kiln.cli.common import OneLineParser, guarded
from kiln.comparison.bootstrap import MAX_RESAMPLES
from kiln.comparison.grouping import TARGET_ENTROPY_KEY
from kiln.comparison.report import check_out_dir, default_out_dir, input_root, terminal_summary, write_report
from kiln.comparison.runs import listed, load_runs, select_finished
from kiln.comparison.summary import Comparison, summarise


def _parser() -> OneLineParser:
    parser = OneLineParser(
        prog="kiln compare",
        description="Compare Kiln runs grouped by a config key: IQM with bootstrap CIs, learning curves, "
        "entropy and temperature, performance profiles and probability of improvement.",
        epilog="example: kiln compare sweeps/pendulum_target_entropy (the folder of "
        "`kiln train sweep=target_entropy` on the default task)",
    )
    parser.add_argument("paths", nargs="+", type=Path, metavar="DIR",
                        help="sweep directories (searched for runs) and/or run directories")
    parser.add_argument("--group-by", default=TARGET_ENTROPY_KEY, metavar="KEY",
                        help="dotted config key to group runs by (default: %(default)s, by resolved value)")
    parser.add_argument("--metric", default="return/eval", metavar="TAG",
                        help="scalar tag to compare, higher is better (default: %(default)s)")
    parser.add_argument("--step", type=int, default=None, metavar="N",
                        help="env step to compare at (default: the last step every run reached)")
    parser.add_argument("--out", type=Path, default=None, metavar="DIR",
                        help="report folder (default: report/ inside the input folder)")
    parser.add_argument("--resamples", type=int, default=2000, metavar="B",
                        help="bootstrap resamples per interval (default: %(default)s)")
    parser.add_argument("--confidence", type=float, default=0.95, metavar="C",
                        help="two-sided confidence of every interval (default: %(default)s)")
    parser.add_argument("--resample-seed", type=int, default=0, metavar="S",
                        help="seed of the bootstrap random generator (default: %(default)s)")
    parser.add_argument("--include-unfinished", action="store_true",
                        help="also compare runs without result.json (still training or killed), marked "
                             "unfinished; by default they are left out with a note naming them")
    return parser


def _compare(args: argparse.Namespace, out_dir: Path) -> Comparison:
    """Load, summarise and write the report; input problems raise CompareInputError (a KilnError)."""
    check_out_dir(out_dir)
    skipped: list[Path] = []
    runs, notes = select_finished(load_runs(args.paths, skipped), args.include_unfinished)
    if skipped:
        notes.append(f"skipped {len(skipped)} folder(s) with config.yaml but no event files or "
                     f"result.json yet: {listed(skipped)}")
    comparison = summarise(
        runs,
        group_by=args.group_by,
        metric=args.metric,
        step=args.step,
        confidence=args.confidence,
        n_resamples=args.resamples,
        seed=args.resample_seed,
        notes=notes,
    )
    write_report(comparison, out_dir, runs_root=input_root(args.paths))
    return comparison


def main(argv: Sequence[str] | None = None) -> int:
    """Runs the command.

    Args:
        argv: Arguments without the program name (default: the command line).

    Returns:
        The exit status (bad input exits 2 through :func:`kiln.cli.common.fail` instead).
    """
    parser = _parser()
    args = parser.parse_args(argv)
    if args.resamples < 1:
        parser.error("--resamples must be at least 1")
    if args.resamples > MAX_RESAMPLES:
        parser.error(f"--resamples {args.resamples} is above the cap of {MAX_RESAMPLES}: each interval keeps "
                     "resamples x runs random indices in memory; 2000 (the default) is the usual choice")
    if not 0.0 < args.confidence < 1.0:
        parser.error("--confidence must lie strictly between 0 and 1, e.g. 0.95")
    if args.step is not None and args.step < 0:
        parser.error("--step must be 0 or more")
    out_dir = args.out if args.out is not None else default_out_dir(args.paths)
    comparison = guarded(lambda: _compare(args, out_dir))
    print(terminal_summary(comparison, out_dir))
    return 0


if __name__ == "__main__":
    sys.exit(main())
