"""Export a saved policy to ONNX: the controller observation → action in the task's units.

    kiln export runs/pendulum/<run> --out pendulum.onnx                  # deterministic: a = tanh(mean)
    kiln export runs/pendulum/<run>/policy --out sampler.onnx --stochastic --opset 13

The stochastic controller takes its standard normal noise as an input, so a run is reproducible.
Exit codes: 0 written, 2 bad input (nothing written).

Caution: an exported controller is not safe to run on physical equipment by itself.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from kiln.cli.common import OneLineParser, guarded
from kiln.onnx_export import (
    CAUTION,
    DEFAULT_OPSET,
    SUPPORTED_OPSETS,
    ExportReport,
    export_policy,
)


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    """The arguments; a bad one ends the command with one ``kiln: error:`` line (exit 2)."""
    parser = OneLineParser(prog="kiln export", description=__doc__.splitlines()[0], epilog=CAUTION)
    parser.add_argument("policy", type=Path, metavar="POLICY",
                        help="a run folder holding policy/, or the policy folder itself")
    parser.add_argument("--out", type=Path, required=True, metavar="FILE", help="the ONNX file to write")
    parser.add_argument("--stochastic", action="store_true",
                        help="export the sampling controller (extra input: noise [batch, action size] ~ N(0, I))")
    parser.add_argument("--opset", type=int, default=DEFAULT_OPSET, metavar="N",
                        help=f"ONNX opset, {SUPPORTED_OPSETS.start} to {SUPPORTED_OPSETS.stop - 1} "
                             f"(default {DEFAULT_OPSET})")
    parser.add_argument("--overwrite", action="store_true", help="replace --out if it exists")
    return parser.parse_args(argv)  # fmt: skip


def summary(report: ExportReport) -> str:
    """What was written, the parity check, and the caution, as printed."""
    mode = "stochastic" if report.stochastic else "deterministic"
    inputs = "observation, noise" if report.stochastic else "observation"
    return "\n".join([
        f"policy   {report.policy_folder}",
        (f"wrote    {report.out}  ({report.size_bytes / 1024:.1f} KiB, ONNX opset {report.opset}, {mode}: "
         f"{inputs} -> action in the task's units)"),
        (f"checked  onnxruntime vs Kiln on {report.checked_observations} observations: "
         f"max |difference| {report.max_difference:.2e}"),
        f"caution  {CAUTION}",
    ])  # fmt: skip


def main(argv: list[str] | None = None) -> None:
    """Export as the arguments say (without the program name; default: the command line) and report."""
    args = parse_args(argv)
    report = guarded(lambda: export_policy(args.policy, args.out, args.stochastic, args.opset, args.overwrite))
    print(summary(report))


if __name__ == "__main__":
    main()
