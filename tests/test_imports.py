"""Every module of the installed package imports, every store kind opens its class, and every
third-party module that the package, its tests or its benchmarks import is declared in
pyproject.toml: a runtime dependency for the package, an extra for the tests and benchmarks.

A clean virtual environment (as `.ci/run` builds) has only what is declared; these tests make an
undeclared import fail there even where no server is running, and on a machine whose Python
happens to carry the module, the declaration check still finds it.
"""

from __future__ import annotations

import ast
import importlib
import importlib.metadata as metadata
import pkgutil
import re
import sys
import tomllib
from pathlib import Path

import pytest

import isentrope.calc
import isentrope.daemon
from isentrope.daemon.stores import STORE_KINDS, Store

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]

#: Files of the package whose (lazy) imports need an extra: path -> the extra that brings them.
NEEDS_EXTRA = {
    "daemon/commands/fleet.py": "fleet",
}


def _modules(package) -> list[str]:
    return sorted(
        info.name for info in pkgutil.walk_packages(package.__path__, prefix=package.__name__ + ".")
    )


ALL_MODULES = _modules(isentrope.calc) + _modules(isentrope.daemon)


def _normalise(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def _declared(requirements) -> set[str]:
    return {_normalise(re.split(r"[\s\[<>=!~;]", r, maxsplit=1)[0]) for r in requirements}


def _third_party_imports(paths) -> dict[str, list[str]]:
    """Top-level names of the modules imported by the files in ``paths`` -> where, stdlib and own
    modules left out."""
    local = {p.stem for p in ROOT.rglob("*.py")} | {"isentrope", "calc", "daemon", "tests", "conftest"}
    found: dict[str, list[str]] = {}
    for path in paths:
        tree = ast.parse(path.read_text(), filename=str(path))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            else:
                continue
            for name in names:
                top = name.split(".")[0]
                if top not in sys.stdlib_module_names and top not in local:
                    found.setdefault(top, []).append(f"{path.relative_to(ROOT)}:{node.lineno}")
    return found


def _undeclared(found: dict[str, list[str]], declared: set[str]) -> list[str]:
    dists = metadata.packages_distributions()
    missing = []
    for module, where in sorted(found.items()):
        names = {_normalise(d) for d in dists.get(module, [])} or {_normalise(module)}
        if not names & declared:
            missing.append(f"{module} (distribution {', '.join(sorted(names))}) imported at {where[0]}")
    return missing


@pytest.mark.parametrize("module", ALL_MODULES)
def test_every_module_of_the_package_imports(module):
    # the extras' libraries are imported where they are used, so every module imports without them
    importlib.import_module(module)


def test_the_module_list_is_not_empty_and_holds_every_store_and_command():
    from isentrope.daemon.commands import COMMAND_MODULES

    assert len(ALL_MODULES) >= 30
    for path in STORE_KINDS.values():
        assert path.split(":")[0] in ALL_MODULES
    assert set(COMMAND_MODULES) <= set(ALL_MODULES)


@pytest.mark.parametrize("kind", sorted(STORE_KINDS))
def test_each_store_kind_opens_its_class(kind):
    module, name = STORE_KINDS[kind].split(":")
    cls = getattr(importlib.import_module(module), name)
    assert isinstance(cls, type) and issubclass(cls, Store)
    assert not getattr(cls, "__abstractmethods__", None), f"{name} leaves abstract methods open"


def test_every_command_module_has_its_entry_points():
    from isentrope.daemon.commands import COMMAND_MODULES

    for module in COMMAND_MODULES:
        mod = importlib.import_module(module)
        assert isinstance(mod.NAME, str) and mod.NAME and isinstance(mod.HELP, str)
        assert callable(mod.add_arguments) and callable(mod.run)


def test_the_package_imports_only_its_declared_runtime_dependencies():
    runtime = _declared(PYPROJECT["dependencies"])
    files = [p for folder in ("calc", "daemon") for p in (ROOT / folder).rglob("*.py")]
    plain = [p for p in files if p.relative_to(ROOT).as_posix() not in NEEDS_EXTRA]
    found = _third_party_imports(plain)
    missing = _undeclared(found, runtime)
    assert not missing, "declare these in [project] dependencies:\n" + "\n".join(missing)
    assert {"numpy", "pandas", "iapws", "influxdb_client", "requests", "apscheduler"} <= set(found)
    for path, extra in NEEDS_EXTRA.items():
        declared = runtime | _declared(PYPROJECT["optional-dependencies"][extra])
        missing = _undeclared(_third_party_imports([ROOT / path]), declared)
        assert not missing, f"declare these in the {extra!r} extra:\n" + "\n".join(missing)


def test_tests_and_benchmarks_import_only_what_is_declared():
    files = list((ROOT / "tests").rglob("*.py")) + list((ROOT / "fixtures").rglob("*.py"))
    files += [p for folder in ("calc", "daemon") for p in (ROOT / folder).rglob("*.py")]
    declared = _declared(PYPROJECT["dependencies"])
    for extra in PYPROJECT["optional-dependencies"].values():
        declared |= _declared(extra)
    missing = _undeclared(_third_party_imports(files), declared)
    assert not missing, "declare these in an extra of pyproject.toml:\n" + "\n".join(missing)
