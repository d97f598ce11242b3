"""The ``kiln`` command: one entry point for every Kiln command, usable from any folder.

    kiln train env=inverted_pendulum seed=3
    kiln --presets my_presets train env=my_task
    kiln compare sweeps/pendulum_target_entropy --group-by agent.temperature.target_entropy

Each subcommand takes exactly the options of its script (``scripts/<name>.py``).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence

from kiln.cli.common import OneLineParser
from kiln.config.presets import PRESETS_ENV

# name → (module, one-line summary, whether it is a Hydra app that reads sys.argv itself)
COMMANDS: dict[str, tuple[str, str, bool]] = {
    "train": ("kiln.cli.train", "train an agent from configs/train.yaml (key=value overrides, -m for sweeps)", True),
    "evaluate": ("kiln.cli.evaluate", "run evaluation episodes of a saved policy (policy=<run folder>)", True),
    "compare": ("kiln.cli.compare", "compare runs grouped by a config key and write a report (DIR ...)", False),
    "verify": ("kiln.cli.verify", "check Kiln against exact answers (--quick: seconds)", False),
    "bench": ("kiln.cli.bench", "measure update speed on this CPU", False),
    "export": ("kiln.cli.export", "write a saved policy as an ONNX controller (POLICY --out FILE)", False),
}


def _parser() -> OneLineParser:
    listing = "\n".join(f"  {name:<10}{summary}" for name, (_, summary, _) in COMMANDS.items())
    parser = OneLineParser(
        prog="kiln",
        usage="kiln [--presets DIR] COMMAND [options of the command]",
        description="Soft actor-critic on CPU: train, evaluate and compare stochastic controllers.",
        epilog=f"commands:\n{listing}\n\n"
        "`kiln COMMAND --help` lists the options of a command.\n"
        "Preset folders are searched before Kiln's own configs/: their env/, agent/ and sweep/ presets\n"
        f"add to Kiln's or replace those of the same name. {PRESETS_ENV} names more such folders\n"
        f"(separated by {os.pathsep!r}); --presets folders come first.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--presets", action="append", default=[], metavar="DIR",
                        help=f"a folder of your own presets (repeatable; searched before {PRESETS_ENV})")
    parser.add_argument("--version", action="store_true", help="print Kiln's version and exit")
    return parser


def split_global(argv: Sequence[str]) -> tuple[list[str], str | None, list[str]]:
    """Split ``kiln``'s own options from the command and the command's arguments.

    Returns:
        Kiln's options, the command name (None when there is none), the command's arguments.
    """
    argv = list(argv)
    i = 0
    while i < len(argv) and argv[i].startswith("-"):
        i += 2 if argv[i] == "--presets" else 1  # --presets takes the next word as its folder
    if i >= len(argv):
        return argv, None, []
    return argv[:i], argv[i], argv[i + 1 :]


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``kiln [--presets DIR] COMMAND ...``; returns the command's exit status."""
    own, name, rest = split_global(sys.argv[1:] if argv is None else argv)
    parser = _parser()
    args = parser.parse_args(own)
    if args.version:
        from kiln.version import KILN_VERSION

        print(f"kiln {KILN_VERSION}")
        return 0
    if name is None:
        parser.error(f"no command given: choose one of {', '.join(COMMANDS)}")
    if name not in COMMANDS:
        parser.error(f"unknown command {name!r}: choose one of {', '.join(COMMANDS)}")
    if args.presets:
        # The environment carries the folders to every place that composes presets: the pre-Hydra
        # check, Hydra's app and the parallel jobs of a sweep.
        given = [os.path.abspath(os.path.expanduser(p)) for p in args.presets]
        os.environ[PRESETS_ENV] = os.pathsep.join([*given, *filter(None, [os.environ.get(PRESETS_ENV)])])
    module_name, _, reads_argv = COMMANDS[name]
    module = importlib.import_module(module_name)
    # Like `python -m`, make the user's folder importable so that env.id=<their_module>:<TaskId>
    # finds their task. Kiln's own packages are imported above, so a folder of the user's that is
    # named like one of them cannot replace it.
    sys.path.insert(0, os.getcwd())
    if reads_argv:
        sys.argv = [f"kiln {name}", *rest]
        module.main()
        return 0
    return int(module.main(rest) or 0)


if __name__ == "__main__":
    sys.exit(main())
