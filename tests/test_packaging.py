"""Every package folder of the source tree is listed for installation (pyproject lists them by hand
because scripts/ is installed under another name). Project requirement, no outside source."""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_every_package_folder_is_installed():
    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {
        ".".join(p.parent.relative_to(ROOT).parts)
        for top in ("agents", "envs")
        for p in (ROOT / top).rglob("__init__.py")
    }
    assert found <= listed, f"add to pyproject's packages: {sorted(found - listed)}"
    assert "kiln_cli" in listed and "scripts" not in listed
