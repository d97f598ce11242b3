"""Shared command-line plumbing: config checks before Hydra starts, and one-line errors.

Hydra reports a bad override with several lines and exit code 1, after creating the run folder.
Kiln checks every override first (each value of a sweep too) by composing the config itself, so
a typo ends with one line, exit code 2, and no folder written.
"""

from __future__ import annotations

import argparse
import os
import signal
import sys
from collections.abc import Callable
from typing import Any, NoReturn, TypeVar

from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.errors import HydraException
from omegaconf import OmegaConf

from kiln.config.presets import compose_config, compose_node, use_user_presets
from kiln.errors import USER_ERRORS, KilnError

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130  # as a shell reports a process ended by SIGINT
EXIT_TERMINATED = 143  # ... and by SIGTERM
T = TypeVar("T")


def fail(message: str, code: int = EXIT_BAD_INPUT, prefix: str = "error") -> NoReturn:
    """Print ``kiln: error: <message>`` on one line and exit with ``code`` (2: bad input)."""
    print(f"kiln: {prefix}: {message}", file=sys.stderr, flush=True)
    raise SystemExit(code)


def guarded(fn: Callable[[], T]) -> T:
    """Run ``fn``; a :class:`KilnError` or a task's error becomes a one-line message and its exit code
    (2 for bad input; 3 when training diverged)."""
    try:
        return fn()
    except USER_ERRORS as err:
        if getattr(err, "orphaned", False):
            print(f"kiln: stopped: {err}", file=sys.stderr, flush=True)
            os._exit(err.exit_code)  # no launcher left to report to: end the worker process itself
        fail(str(err), getattr(err, "exit_code", EXIT_BAD_INPUT), getattr(err, "prefix", "error"))
    except KeyboardInterrupt:
        # Ctrl-C outside the training loop (which checkpoints first and stops on its own).
        fail("interrupted (SIGINT) outside training; nothing was left half-written", EXIT_INTERRUPTED, "stopped")
    except Terminated:
        fail("terminated (SIGTERM) outside training; nothing was left half-written", EXIT_TERMINATED, "stopped")


class Terminated(BaseException):
    """SIGTERM outside the training loop (which handles it itself), raised to end with one line."""


def _raise_terminated(signum: int, frame: object) -> None:
    raise Terminated()


_raise_terminated.kiln_own = True  # type: ignore[attr-defined]  # the training loop does not pass stops on to it


def user_folder_importable() -> None:
    """Make the folder the command runs from importable, so that ``env.id=<module>:<TaskId>`` finds the
    user's own module there (called at start by the commands that build tasks).

    ``python scripts/train.py`` puts scripts/ on sys.path, not the folder the command was typed in;
    the folder goes last, so a file there never shadows an installed package. (The ``kiln`` command
    has already put it first, after importing Kiln; then nothing changes here.) The library never
    touches sys.path: this is the command's process.
    """
    here = os.getcwd()
    if here not in sys.path:
        sys.path.append(here)


def stop_politely_on_sigterm() -> None:
    """Make SIGTERM end a command with one line (exit 143) instead of silently (called at start)."""
    signal.signal(signal.SIGTERM, _raise_terminated)


class OneLineParser(argparse.ArgumentParser):
    """argparse that reports a bad argument as one ``kiln: error:`` line (exit 2) instead of usage text."""

    def error(self, message: str) -> NoReturn:
        """Print the problem and where the options are listed, then exit 2."""
        fail(f"{message}; fix: see `{self.prog} --help`")


def plural(count: int, word: str) -> str:
    """``1 episode``, ``2 episodes``: the count with the word in the right number."""
    return f"{count} {word}" if count == 1 else f"{count} {word}s"


def expand_overrides(args: list[str]) -> list[list[str]]:
    """The override lists to check: the first value of every sweep, then each other value in turn.

    Hydra's own options (``-m``, ``--cfg``...) and ``hydra.*`` / ``hydra/...`` overrides are left out.
    """
    plain = [a for a in args if not a.startswith("-") and not a.startswith(("hydra.", "hydra/", "+hydra", "~hydra"))]
    try:
        parsed = OverridesParser.create().parse_overrides(plain)
    except HydraException as err:
        raise KilnError(f"cannot parse the overrides: {str(err).strip().splitlines()[0]}") from None
    base: list[str] = []
    choices: list[tuple[int, list[str]]] = []
    for i, override in enumerate(parsed):
        if override.is_sweep_override():
            prefix = override.get_key_element()
            values = [f"{prefix}={v}" for v in override.sweep_string_iterator()]
            base.append(values[0])
            choices.append((i, values[1:]))
        else:
            base.append(override.input_line or "")
    variants = [base]
    for i, rest in choices:
        for value in rest:
            variants.append(base[:i] + [value] + base[i + 1 :])
    return variants


def preset_sweep_params(config_name: str, args: list[str]) -> list[str]:
    """The ``hydra.sweeper.params`` a sweep preset adds, as overrides, minus keys the command line sets."""
    plain = [a for a in args if not a.startswith("-")]
    composable = [a for a in plain if not a.lstrip("+~").startswith(("hydra.", "hydra/"))]
    try:
        parsed = OverridesParser.create().parse_overrides(composable)
    except HydraException as err:
        raise KilnError(f"cannot parse the overrides: {str(err).strip().splitlines()[0]}") from None
    composable = [o.input_line or "" for o in parsed if not o.is_sweep_override()]
    node = compose_node(config_name, composable, with_hydra=True).hydra.sweeper.get("params")
    params = OmegaConf.to_container(node, resolve=False) if node else {}
    given = {a.split("=", 1)[0].lstrip("+~") for a in plain}
    return [f"{key}={value}" for key, value in params.items() if key not in given]


def check_overrides(config_name: str, args: list[str], check: Callable[[dict[str, Any]], None]) -> None:
    """Compose every variant of the command line (sweep presets' values included) and run ``check``
    on it; exit 2 on the first problem."""
    guarded(use_user_presets)  # before Hydra's help too: it lists the user's presets
    if any(a in ("--help", "-h", "--hydra-help", "--info") or a.startswith("--cfg") or a == "-c" for a in args):
        return  # Hydra's own informational modes: let Hydra answer them.
    args = args + guarded(lambda: preset_sweep_params(config_name, args))
    for overrides in guarded(lambda: expand_overrides(args)):
        guarded(lambda o=overrides: check(compose_config(config_name, o)))
