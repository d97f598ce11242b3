"""Compose a run config from Kiln's Hydra presets (``configs/``) into plain data.

Used by the scripts before Hydra starts (to check the command line) and by library code and tests
that need a config exactly as the command line would build it, without running Hydra's app.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from hydra import compose, initialize_config_dir
from hydra.core.global_hydra import GlobalHydra
from hydra.errors import HydraException
from omegaconf import OmegaConf
from omegaconf.errors import OmegaConfBaseException

from agents.errors import KilnError
from agents.renamed import renamed_message, renamed_preset_message

CONFIG_DIR = Path(__file__).resolve().parent.parent / "configs"


def hydra_message(err: Exception, script: str) -> str:
    """One line for a Hydra composition error, with the fix."""
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
        return f"unknown config key {key!r}: check the spelling; `python scripts/{script}.py --cfg job` prints every key"
    if "Could not find" in text or "Could not load" in text:
        return f"{first.rstrip('.')}: the preset does not exist; see the files under configs/ for the choices"
    return f"{first} (see `python scripts/{script}.py --help`)"


def compose_config(config_name: str, overrides: list[str]) -> dict[str, Any]:
    """Compose ``configs/<config_name>.yaml`` with ``overrides`` into plain resolved data.

    Raises:
        KilnError: With a one-line message when an override names an unknown key or preset.
    """
    GlobalHydra.instance().clear()
    try:
        with initialize_config_dir(config_dir=str(CONFIG_DIR), version_base="1.3"):
            cfg = compose(config_name=config_name, overrides=overrides)
        return OmegaConf.to_container(cfg, resolve=True)  # type: ignore[return-value]
    except (HydraException, OmegaConfBaseException) as err:
        raise KilnError(hydra_message(err, config_name)) from None
    finally:
        GlobalHydra.instance().clear()
