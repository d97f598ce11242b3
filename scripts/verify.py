"""Check Kiln against exact answers and print the table; exit 1 if any check fails.

    python scripts/verify.py                 # solver checks and short training runs (a few minutes)
    python scripts/verify.py --quick         # solver checks only (seconds)
    python scripts/verify.py --seed 3 --out verify.json

Exit codes: 0 all checks passed, 1 a check failed, 2 bad arguments or --out cannot be written.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

from kiln.cli.common import OneLineParser, fail, guarded
from kiln.config.presets import PRESETS_ENV
from kiln.storage.run_folder import write_text_atomic
from kiln.storage.writable import check_writable, reason

_OUT_FIX = "pass --out with a file in a folder you can write to"


def main(argv: list[str] | None = None) -> int:
    """Parse the arguments, run the checks, print the table; return the exit code."""
    parser = OneLineParser(prog="kiln verify", description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="solver checks only (seconds), no training")
    parser.add_argument("--seed", type=int, default=0, help="seed of the training runs (default 0)")
    parser.add_argument("--out", type=Path, help="also write the table as JSON to this file")
    args = parser.parse_args(argv)
    if args.seed < 0:
        fail(f"--seed must be ≥ 0, got {args.seed}")
    if args.out is not None and not args.out.parent.is_dir():
        # Checked before the checks run, so minutes of training are not lost to a typo.
        fail(f"--out {args.out}: folder {args.out.parent} does not exist; create it or pick another path")
    if args.out is not None and args.out.is_dir():
        fail(f"--out {args.out} is a folder; give a file name such as {args.out / 'verify.json'}")
    if args.out is not None:
        # Exit 2 now, not after minutes of checks, and not with 1, which means that a check failed.
        guarded(lambda: check_writable(args.out.parent, _OUT_FIX))

    # The checks compare Kiln's own task presets with their exact answers; a user preset of the same
    # name would change the task under test, so user preset folders are not searched here.
    os.environ.pop(PRESETS_ENV, None)
    from kiln.exact.verify_table import format_table, report_json, run_verify  # torch loads only past the checks

    # A Kiln error inside the checks (a preset that cannot be composed) is bad input: one line, exit 2.
    report = guarded(lambda: run_verify(args.quick, args.seed, say=lambda line: print(line, flush=True)))
    print(format_table(report), flush=True)
    if args.out is not None:
        try:  # atomic: a failed write leaves no half file, and an earlier table whole
            write_text_atomic(args.out, json.dumps(report_json(report, args.quick, args.seed), indent=2, ensure_ascii=False))
        except OSError as err:
            fail(f"cannot write {args.out} ({reason(err)}): {_OUT_FIX}; the table above is complete")
        print(f"wrote {args.out}")
    return 0 if report.passed else 1


if __name__ == "__main__":
    sys.exit(main())
