"""Kiln's Hydra presets (``configs/``) plus the user's own preset folders, composed into plain data.

Used by the commands before Hydra starts (to check the command line) and by library code and tests
that need a config exactly as the command line would build it, without running Hydra's app.

User presets: the folders named in the environment variable ``KILN_PRESETS`` (separated like
``PATH``; ``kiln --presets DIR`` adds to it) are searched before ``configs/``, by the pre-Hydra
check and by Hydra's app alike, so a user's ``env/<name>.yaml`` adds a preset or replaces Kiln's
preset of that name.
"""

from __future__ import annotations

import os
import re
import secrets
from pathlib import Path
from typing import Any

from hydra import compose, initialize_config_dir
from hydra.core.config_search_path import ConfigSearchPath, SearchPathQuery
from hydra.core.global_hydra import GlobalHydra
from hydra.core.plugins import Plugins
from hydra.errors import HydraException
from hydra.plugins.search_path_plugin import SearchPathPlugin
from omegaconf import DictConfig, OmegaConf
from omegaconf.errors import OmegaConfBaseException

import kiln.configs
from kiln.config.renamed import renamed_message, renamed_preset_message
from kiln.errors import KilnError

# ${kiln_token:} in a run folder's name: a few random hex digits, so runs launched in the same second
# (or by two sweeps at once) never share a folder by accident. Cached per config, so a run's folder
# name is stable once composed.
if not OmegaConf.has_resolver("kiln_token"):
    OmegaConf.register_new_resolver("kiln_token", lambda: secrets.token_hex(3), use_cache=True)

# The presets travel inside the package (kiln.configs), so an installed Kiln finds them from any folder.
CONFIG_DIR = Path(kiln.configs.__file__).resolve().parent
PRESETS_ENV = "KILN_PRESETS"


def user_preset_dirs() -> list[Path]:
    """The user's preset folders from ``KILN_PRESETS``, first one searched first.

    Raises:
        KilnError: If an entry is not an existing folder.
    """
    dirs = []
    for entry in os.environ.get(PRESETS_ENV, "").split(os.pathsep):
        if not entry:
            continue
        path = Path(entry).expanduser().resolve()
        if not path.is_dir():
            raise KilnError(
                f"preset folder {entry} (from {PRESETS_ENV} or --presets) is not a folder: "
                f"create it or name an existing folder that holds env/, agent/ or sweep/ presets"
            )
        dirs.append(path)
    return dirs


class _UserPresets(SearchPathPlugin):
    """Puts the user's preset folders in front of Kiln's ``configs/`` in Hydra's search path."""

    def manipulate_search_path(self, search_path: ConfigSearchPath) -> None:
        """Prepend every user folder before Kiln's own folder (Hydra takes the first match)."""
        mains = [e.path for e in search_path.get_path() if e.provider == "main" and e.path]
        # Only Kiln's own apps get user presets; the plugin is registered process-wide.
        if not mains or Path(mains[0].removeprefix("file://")).resolve() != CONFIG_DIR:
            return
        for folder in user_preset_dirs():
            search_path.prepend("kiln-user-presets", f"file://{folder}", anchor=SearchPathQuery(provider="main"))


def use_user_presets() -> None:
    """Make every Hydra composition in this process search the user's preset folders first.

    Raises:
        KilnError: If ``KILN_PRESETS`` names something that is not a folder.
    """
    user_preset_dirs()  # refuse a bad folder here, in one line, before Hydra sees it
    Plugins.instance().register(_UserPresets)


def _available(text: str, group: str) -> list[str]:
    """The options Hydra lists for ``group`` in its not-found message (every search folder's)."""
    block = text.split(f"Available options in '{group}':", 1)
    if len(block) < 2:
        return []
    names = []
    for line in block[1].splitlines()[1:]:
        if not line.startswith("\t"):
            break
        names.append(line.strip())
    return names


def hydra_message(err: Exception, command: str) -> str:
    """One line for a Hydra composition error, with the fix.

    Args:
        err: The error Hydra or OmegaConf raised.
        command: The Kiln command (``train``, ``evaluate``) named in the fix.
    """
    text = f"{err} {err.__cause__ or ''}"
    first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
    renamed = renamed_preset_message(text)
    if renamed is not None:
        return renamed
    if "not in struct" in text or "Could not override" in text:
        key = first.split("'")[1] if "'" in first else first
        renamed = renamed_message(key)
        if renamed is not None:
            return renamed
        return f"unknown config key {key!r}: check the spelling; `kiln {command} --cfg job` prints every key"
    missing = re.search(r"Could not find '([^']+)/([^'/]+)'", text)
    if missing:
        group, name = missing.groups()
        options = _available(text, group)
        where = ", ".join(str(d) for d in [*user_preset_dirs(), CONFIG_DIR])
        choices = f"choose one of {', '.join(options)}" if options else "no presets of that group exist"
        return f"unknown {group} preset {name!r} ({group}/{name}): {choices} (preset folders: {where})"
    if "Could not find" in text or "Could not load" in text:
        return f"{first.rstrip('.')}: the preset does not exist; see the files under configs/ for the choices"
    return f"{first} (see `kiln {command} --help`)"


def compose_node(config_name: str, overrides: list[str], with_hydra: bool = False) -> DictConfig:
    """Compose ``<config_name>.yaml`` from the user's and Kiln's presets, unresolved.

    Args:
        config_name: The primary config (``train`` or ``evaluate``).
        overrides: Hydra overrides, as on the command line.
        with_hydra: Keep the ``hydra`` node (sweep parameters, output folders).

    Raises:
        KilnError: With a one-line message when an override names an unknown key or preset.
    """
    use_user_presets()
    GlobalHydra.instance().clear()
    try:
        with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
            return compose(config_name=config_name, overrides=overrides, return_hydra_config=with_hydra)
    except (HydraException, OmegaConfBaseException) as err:
        raise KilnError(hydra_message(err, config_name)) from None
    finally:
        GlobalHydra.instance().clear()


def compose_config(config_name: str, overrides: list[str]) -> dict[str, Any]:
    """Compose ``<config_name>.yaml`` with ``overrides`` into plain resolved data.

    Raises:
        KilnError: With a one-line message when an override names an unknown key or preset.
    """
    cfg = compose_node(config_name, overrides)
    try:
        return OmegaConf.to_container(cfg, resolve=True)  # type: ignore[return-value]
    except OmegaConfBaseException as err:
        raise KilnError(hydra_message(err, config_name)) from None
