"""Every package folder of the checkout installs under the one import root ``kiln`` (pyproject maps
the fixed top-level folders into it and lists the packages by hand). Project requirement
(DEVELOPERS.md, "Layout"), no outside source."""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SETUPTOOLS = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]


def _installed_name(folder: Path) -> str:
    """The import name pyproject's package-dir mapping gives a folder of the checkout."""
    relative = folder.relative_to(ROOT).as_posix()
    best = max((d for d in SETUPTOOLS["package-dir"].values() if relative == d or relative.startswith(d + "/")), key=len)
    name = next(n for n, d in SETUPTOOLS["package-dir"].items() if d == best)
    rest = relative[len(best):].strip("/")
    return ".".join([name, *rest.split("/")]) if rest else name


def test_every_package_folder_is_installed():
    listed = set(SETUPTOOLS["packages"])
    found = {
        _installed_name(p.parent)
        for top in ("agents", "envs", "configs")
        for p in (ROOT / top).rglob("__init__.py")
    } | {_installed_name(ROOT / "scripts"), _installed_name(ROOT / "scripts" / "hydra_launchers")}
    assert found <= listed, f"add to pyproject's packages: {sorted(found - listed)}"


def test_only_kiln_and_the_hydra_plugin_namespace_are_top_level_names():
    tops = {name.split(".")[0] for name in SETUPTOOLS["packages"]}
    assert tops == {"kiln", "hydra_plugins"}
    assert all(name == "hydra_plugins.kiln_launchers" for name in SETUPTOOLS["packages"] if name.startswith("hydra_plugins"))
