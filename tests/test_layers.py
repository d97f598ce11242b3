"""The package's shape: imports point down the layers, no import circles, no repeated module names,
every sub-package packaged, and a test file beside every module with logic.

Project rule, no outside source: DEVELOPERS.md, Layout (one import root ``kiln``; sub-packages are
layers, lowest first; a module imports only its own layer or lower ones; tests mirror the package at
``tests/<sub-package>/test_<module>.py``). The modules are read with :mod:`ast`, never imported, so a
broken module cannot hide an import and nothing of Kiln runs while this test looks at it.
"""

from __future__ import annotations

import ast
import itertools
import tomllib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]

# Checkout folder → the package it installs as (pyproject.toml, [tool.setuptools.package-dir]).
# Longest folder first, so scripts/hydra_launchers/ is not taken for a part of kiln.cli.
ROOTS = (
    ("scripts/hydra_launchers", "hydra_plugins.kiln_launchers"),
    ("scripts", "kiln.cli"),
    ("envs", "kiln.envs"),
    ("configs", "kiln.configs"),
    ("agents", "kiln"),
)

# The layers, lowest first (DEVELOPERS.md, Layout). A unit is a module or sub-package; a module
# belongs to the unit that is the longest prefix of its name ("kiln" alone is the face,
# agents/__init__.py, and holds no other module).
LAYERS: tuple[frozenset[str], ...] = (
    # The presets: data files behind an __init__.py that only locates them (kiln.config.presets
    # finds the folder through it), so any layer may name it.
    frozenset({"kiln.configs"}),
    frozenset({"kiln.envs"}),
    frozenset({"kiln.errors", "kiln.version"}),
    frozenset({"kiln.config"}),
    frozenset({"kiln.learner"}),
    frozenset({"kiln.storage"}),
    frozenset({"kiln.evaluation"}),
    frozenset({"kiln.training"}),
    frozenset({"kiln.comparison", "kiln.exact", "kiln.onnx_export", "kiln.benchmark"}),
    frozenset({"kiln.launchers"}),
    frozenset({"kiln.api", "kiln"}),
    frozenset({"kiln.cli", "hydra_plugins.kiln_launchers"}),
)

# Imports between two units of one layer, (importer, imported). Anything not listed is refused.
SIDEWAYS = {
    # The fourth group (comparison, exact, onnx_export, benchmark): today none of its sub-packages
    # imports another, so the table has no entry for it. What they share comes from lower layers:
    # kiln.benchmark measures the training loop (kiln.training), kiln.exact trains and rolls out
    # agents (kiln.training, kiln.evaluation), kiln.comparison and kiln.onnx_export read run and
    # policy folders (kiln.storage). An edge added here needs its reason beside it.
    #
    # kiln.errors and kiln.version are independent of each other: no entry.
    #
    # The face names the API lazily (PEP 562): kiln/__init__ → kiln.api, never the other way.
    ("kiln", "kiln.api"),
    # The Hydra shims turn library errors into the commands' one line through kiln.cli.common.guarded,
    # and `kiln train` registers the shims itself (an editable install hides them from Hydra's scan).
    ("hydra_plugins.kiln_launchers", "kiln.cli"),
    ("kiln.cli", "hydra_plugins.kiln_launchers"),
}

# Where a module's tests live: tests/<sub-package>/test_<module>.py, with the sub-package's own
# name (kiln.training → tests/training, kiln.envs → tests/envs, kiln.cli → tests/cli); root modules
# of kiln (agents/errors.py = kiln.errors) → tests/test_<module>.py.
SPECIAL_TEST_FILES = {
    # The face only resolves the API's names: tests/test_api.py tests both through `import kiln`.
    "kiln": "tests/test_api.py",
    # The Hydra shims' package is its __init__.py: its tests sit with the other command tests.
    "hydra_plugins.kiln_launchers": "tests/cli/test_hydra_launchers.py",
}
# Modules that define a class or function but hold no logic of their own to test.
NO_TEST_FILE = {
    # Only the exception class; its one-line printing is tested through USER_ERRORS in tests/test_errors.py.
    "kiln.envs.task_error": "an exception class and its docstring only",
}


@dataclass(frozen=True)
class Module:
    """One .py file of the package."""

    name: str  # the installed dotted name
    path: Path
    is_package: bool  # an __init__.py
    tree: ast.Module

    @property
    def where(self) -> str:
        return str(self.path.relative_to(REPO))


@dataclass(frozen=True)
class Import:
    """One import of a Kiln module: where it is written and what it names."""

    importer: Module
    line: int
    text: str  # as written, for the message
    target: str  # the Kiln module it resolves to

    def __str__(self) -> str:
        return f"{self.importer.where}:{self.line}: {self.text} (→ {self.target})"


def _module_name(path: Path) -> str:
    """agents/training/replay.py → kiln.training.replay; a package's __init__.py → the package."""
    relative = path.relative_to(REPO).with_suffix("").as_posix()
    for folder, package in ROOTS:
        if relative.startswith(folder + "/"):
            rest = relative[len(folder) + 1 :].split("/")
            if rest[-1] == "__init__":
                rest = rest[:-1]
            return ".".join([package, *rest])
    raise AssertionError(f"{path} is outside the package's folders")


def _modules() -> dict[str, Module]:
    found = {}
    for folder, _ in ROOTS[1:]:  # scripts/ includes scripts/hydra_launchers/
        for path in sorted((REPO / folder).rglob("*.py")):
            if "__pycache__" in path.parts:
                continue
            name = _module_name(path)
            found[name] = Module(name, path, path.name == "__init__.py", ast.parse(path.read_text(), str(path)))
    return found


MODULES = _modules()


def _is_kiln(dotted: str) -> bool:
    return dotted in ("kiln", "hydra_plugins.kiln_launchers") or dotted.startswith(("kiln.", "hydra_plugins.kiln_launchers."))


def _package_of(module: Module) -> str:
    return module.name if module.is_package else module.name.rpartition(".")[0]


def _absolute(module: Module, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    base = _package_of(module).split(".")
    base = base[: len(base) - (node.level - 1)]
    return ".".join([*base, *([node.module] if node.module else [])])


def _named_by_string(module: Module, text: str) -> str | None:
    """The Kiln module a string names (``kiln.x``, ``.x`` relative to the module's package, or in the
    face a bare ``x`` of ``kiln.x``), or None when it names no Kiln module."""
    if text.startswith("."):
        text = _package_of(module) + text
    elif module.name == "kiln" and f"kiln.{text}" in MODULES:
        text = f"kiln.{text}"  # a bare sub-module name in the face's table ("api")
    return text if _is_kiln(text) else None


def _imports(module: Module) -> Iterator[Import]:
    """Every import of a Kiln module in ``module``: top level, inside functions, under TYPE_CHECKING;
    ``importlib.import_module("...")`` with a constant; and the face's lazy table (every string of
    agents/__init__.py that names a Kiln module). The target is the module as Python resolves it:
    ``import a.b.c`` names module a.b.c; ``from a.b import c`` names module a.b.c if there is one,
    else a.b (c is then a name inside it). A target that is no module of the package is kept as
    written, for the test that reports it."""
    for node in ast.walk(module.tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if _is_kiln(alias.name):
                    yield Import(module, node.lineno, f"import {alias.name}", alias.name)
        elif isinstance(node, ast.ImportFrom):
            source = _absolute(module, node)
            if not _is_kiln(source):
                continue
            for alias in node.names:
                target = f"{source}.{alias.name}" if f"{source}.{alias.name}" in MODULES else source
                yield Import(module, node.lineno, f"from {'.' * node.level}{node.module or ''} import {alias.name}", target)
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute | ast.Name):
            called = node.func.attr if isinstance(node.func, ast.Attribute) else node.func.id
            if called == "import_module" and node.args and isinstance(node.args[0], ast.Constant):
                text = node.args[0].value
                target = _named_by_string(module, text) if isinstance(text, str) else None
                if target:
                    yield Import(module, node.lineno, f"import_module({text!r})", target)
        elif module.name == "kiln" and isinstance(node, ast.Constant) and isinstance(node.value, str):
            # Only whole strings that are module names: the docstring and the public names are not.
            target = _named_by_string(module, node.value)
            if target in MODULES and target != "kiln":
                yield Import(module, node.lineno, f"lazy name {node.value!r}", target)


IMPORTS = [i for m in MODULES.values() for i in _imports(m)]


def _unit(name: str) -> str:
    units = [u for layer in LAYERS for u in layer if name == u or (u != "kiln" and name.startswith(u + "."))]
    if not units:
        raise AssertionError(f"{name} belongs to no layer: add its sub-package to LAYERS in tests/test_layers.py")
    return max(units, key=len)


def _layer(unit: str) -> int:
    return next(i for i, layer in enumerate(LAYERS) if unit in layer)


def _unit_or_none(name: str) -> str | None:
    try:
        return _unit(name)
    except AssertionError:
        return None


def test_every_module_belongs_to_a_layer():
    assert len(MODULES) > 50  # the walk found the package (a wrong REPO would find nothing)
    homeless = [m.where for m in MODULES.values() if _unit_or_none(m.name) is None]
    assert not homeless, f"modules in no layer of LAYERS: {homeless}"


def test_every_kiln_import_names_a_module_of_the_package():
    unknown = [str(i) for i in IMPORTS if i.target not in MODULES]
    assert not unknown, "imports of Kiln names that are no module of the package:\n" + "\n".join(unknown)


def _against_layers(imports: list[Import]) -> list[str]:
    """The imports that go up a layer, or sideways without an entry in SIDEWAYS."""
    wrong = []
    for i in imports:
        if i.target not in MODULES:
            continue  # reported by test_every_kiln_import_names_a_module_of_the_package
        mine, theirs = _unit(i.importer.name), _unit(i.target)
        if mine == theirs:
            continue
        if _layer(theirs) > _layer(mine):
            wrong.append(f"{i}: {mine} may not import {theirs}, a higher layer")
        elif _layer(theirs) == _layer(mine) and (mine, theirs) not in SIDEWAYS:
            wrong.append(f"{i}: {mine} and {theirs} share a layer and SIDEWAYS does not allow this edge")
    return wrong


def test_imports_go_down_the_layers():
    wrong = _against_layers(IMPORTS)
    assert not wrong, "imports against the layer order (DEVELOPERS.md, Layout):\n" + "\n".join(wrong)


def _written(name: str, where: str, source: str, is_package: bool = False) -> Module:
    return Module(name, REPO / where, is_package, ast.parse(source))


def test_every_form_of_import_is_read_and_judged():
    # A module written here by hand, as agents/training/made_up.py would be: each line's target is
    # resolved as Python's import system resolves it (relative to the package kiln.training).
    made_up = _written(
        "kiln.training.made_up",
        "agents/training/made_up.py",
        """
from __future__ import annotations
import importlib
import typing
from . import replay
from .collector import Collector
from ..errors import KilnError
import kiln.storage.run_folder as folder
from kiln.cli import common
if typing.TYPE_CHECKING:
    from kiln.learner.sac import SoftActorCritic
def later():
    from kiln.evaluation import rollout
    return importlib.import_module("kiln.onnx_export.graph")
NOT_AN_IMPORT = "kiln.comparison.report"
""",
    )
    found = sorted(_imports(made_up), key=lambda i: i.line)
    assert [(i.line, i.target) for i in found] == [
        (5, "kiln.training.replay"), (6, "kiln.training.collector"), (7, "kiln.errors"),
        (8, "kiln.storage.run_folder"), (9, "kiln.cli.common"), (11, "kiln.learner.sac"),
        (13, "kiln.evaluation.rollout"), (14, "kiln.onnx_export.graph"),
    ]  # fmt: skip
    # Training sits below the commands and below kiln.onnx_export's group: those two lines are refused,
    # each message naming the file, the line and the import.
    assert _against_layers(found) == [
        (
            "agents/training/made_up.py:9: from kiln.cli import common (→ kiln.cli.common): "
            "kiln.training may not import kiln.cli, a higher layer"
        ),
        (
            "agents/training/made_up.py:14: import_module('kiln.onnx_export.graph') (→ kiln.onnx_export.graph): "
            "kiln.training may not import kiln.onnx_export, a higher layer"
        ),
    ]
    # A name that is no module of the package is kept as written, for the check that reports it.
    typo = _written("kiln.training.made_up", "agents/training/made_up.py", "import kiln.training.replays\n")
    assert [i.target for i in _imports(typo)] == ["kiln.training.replays"] and "kiln.training.replays" not in MODULES
    # Two sub-packages of the fourth group without an entry in SIDEWAYS.
    sideways = _written("kiln.benchmark.made_up", "agents/benchmark/made_up.py", "from kiln.comparison import stats\n")
    (problem,) = _against_layers(list(_imports(sideways)))
    assert "kiln.benchmark and kiln.comparison share a layer" in problem


def test_the_faces_lazy_table_counts_as_imports():
    # The face (agents/__init__.py) names what it resolves lazily as strings: absolute, relative or bare.
    face = _written(
        "kiln",
        "agents/__init__.py",
        """
_LAZY = {"load_policy": ("kiln.storage.policy_io", "load_policy"), "KilnError": (".errors", "KilnError")}
_MODULES = ["version"]
__all__ = ["load_policy", "KilnError"]
""",
        is_package=True,
    )
    assert sorted(i.target for i in _imports(face)) == ["kiln.errors", "kiln.storage.policy_io", "kiln.version"]


def test_envs_import_nothing_of_kiln_outside_envs():
    wrong = [str(i) for i in IMPORTS if _unit(i.importer.name) == "kiln.envs" and not i.target.startswith("kiln.envs")]
    assert not wrong, "kiln.envs must stand alone:\n" + "\n".join(wrong)


def test_sideways_table_lists_only_edges_that_exist():
    # A stale entry would allow an import nobody needs any more (an edge to a unit not written yet,
    # such as kiln.api before the API exists, waits).
    used = {(_unit(i.importer.name), _unit(i.target)) for i in IMPORTS if i.target in MODULES}
    units = {_unit(name) for name in MODULES}
    stale = sorted(edge for edge in SIDEWAYS if set(edge) <= units and edge not in used)
    assert not stale, f"SIDEWAYS allows edges no module uses: {stale}"


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import circle of ``graph`` as a list of modules (first = last), or None (depth-first search)."""
    state: dict[str, int] = {}  # 1 on the current path, 2 done
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                return path[path.index(nxt) :] + [nxt]
            if nxt not in state and (found := visit(nxt)):
                return found
        path.pop()
        state[node] = 2
        return None

    for start in sorted(graph):
        if start not in state and (found := visit(start)):
            return found
    return None


def test_cycle_search_finds_a_circle_and_accepts_a_tree():
    # Hand-made graphs: a → b → c → a is a circle; a → b, a → c, b → c is not.
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b", "c"}, "b": {"c"}}) is None


def test_no_import_circle():
    graph: dict[str, set[str]] = {}
    lines: dict[tuple[str, str], str] = {}
    for i in IMPORTS:
        if i.target in MODULES and i.target != i.importer.name:
            graph.setdefault(i.importer.name, set()).add(i.target)
            lines.setdefault((i.importer.name, i.target), str(i))
    circle = _cycle(graph)
    assert circle is None, "import circle:\n" + "\n".join(lines[edge] for edge in itertools.pairwise(circle))


def test_no_module_or_folder_name_repeats():
    # A file's stem (other than __init__) and a package's folder name, and the name it installs as
    # (scripts/ is kiln.cli, scripts/hydra_launchers/ is hydra_plugins.kiln_launchers): all distinct.
    names: dict[str, list[str]] = {}
    for m in MODULES.values():
        if m.is_package:
            for name in {m.path.parent.name, m.name.rpartition(".")[2]}:
                names.setdefault(name, []).append(str(m.path.parent.relative_to(REPO)) + "/")
        else:
            names.setdefault(m.path.stem, []).append(m.where)
    repeated = {name: where for name, where in names.items() if len(where) > 1}
    assert not repeated, f"names used more than once in the package: {repeated}"


def test_every_sub_package_is_listed_in_pyproject():
    setuptools = tomllib.loads((REPO / "pyproject.toml").read_text())["tool"]["setuptools"]
    listed = set(setuptools["packages"])
    missing = sorted(m.name for m in MODULES.values() if m.is_package and m.name not in listed)
    assert not missing, f"sub-packages missing from pyproject.toml's [tool.setuptools] packages: {missing}"
    # And each listed package is a folder the package-dir mapping finds.
    folders = setuptools["package-dir"]
    for package in listed:
        root = max((p for p in folders if package == p or package.startswith(p + ".")), key=len)
        folder = REPO / folders[root] / package[len(root) :].strip(".").replace(".", "/")
        assert folder.is_dir(), f"pyproject.toml lists {package}, but {folder} does not exist"


def _defines_logic(module: Module) -> bool:
    return any(isinstance(n, ast.FunctionDef | ast.AsyncFunctionDef | ast.ClassDef) for n in ast.walk(module.tree))


def expected_test_file(name: str) -> str:
    """tests/<sub-package>/test_<module>.py for a Kiln module; a module of the root (kiln.errors) or
    a sub-package's own __init__.py with logic → tests/test_<name>.py beside the sub-packages'
    folders (SPECIAL_TEST_FILES for the face and the Hydra shims)."""
    if name in SPECIAL_TEST_FILES:
        return SPECIAL_TEST_FILES[name]
    package, _, leaf = name.rpartition(".")
    folder = "tests" if package == "kiln" else "tests/" + package.removeprefix("kiln.").replace(".", "/")
    return f"{folder}/test_{leaf}.py"


def test_expected_test_paths_by_hand():
    # Written out from DEVELOPERS.md, Layout's rule.
    assert expected_test_file("kiln.training.replay") == "tests/training/test_replay.py"
    assert expected_test_file("kiln.errors") == "tests/test_errors.py"
    assert expected_test_file("kiln.envs.make") == "tests/envs/test_make.py"
    assert expected_test_file("kiln.cli.train") == "tests/cli/test_train.py"
    assert expected_test_file("hydra_plugins.kiln_launchers") == "tests/cli/test_hydra_launchers.py"
    assert expected_test_file("kiln.api") == expected_test_file("kiln") == "tests/test_api.py"


def test_no_test_file_list_names_modules_that_exist():
    stale = sorted(name for name in NO_TEST_FILE if name not in MODULES)
    assert not stale, f"NO_TEST_FILE names modules that are gone: {stale}"


@pytest.mark.parametrize("name", sorted(n for n, m in MODULES.items() if _defines_logic(m) and n not in NO_TEST_FILE))
def test_every_module_with_logic_has_its_test_file(name):
    expected = expected_test_file(name)
    assert (REPO / expected).is_file(), f"{MODULES[name].where} defines functions or classes but {expected} does not exist"
