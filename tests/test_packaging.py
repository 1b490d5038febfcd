"""What a built wheel needs: every imported distribution declared with a lower bound in pyproject.toml,
and the files olibra reads at run time (migrations, seed catalogue) inside the package as package data.

The outside reference is the installed distributions' own metadata (importlib.metadata maps each
importable top-level module to the distribution that provides it). `.ci/wheel-smoke` checks the rest:
it builds the wheel, installs it into a fresh virtual environment outside the source tree and runs it.
"""

from __future__ import annotations

import ast
import fnmatch
import importlib.metadata
import re
import sys
import tomllib
from pathlib import Path

import pytest

import library
from library.catalogue.database import MIGRATIONS_DIR, head_revision
from library.seed_catalog import MATERIALS_FILE, SEED_DIR, VOCABULARY_FILE

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
FIRST_PARTY = {"library", "webui", "benchmarks"}
# Imported only where their absence is handled with a clear message: module -> (extra, distribution).
OPTIONAL = {"tblite": ("xtb", "tblite"), "ase": ("test", "ase"), "distributed": ("cluster", "distributed")}


def _normalized(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def _requirements(entries: list[str]) -> dict[str, str]:
    """{normalized distribution name: version specifier} of requirement strings like 'psycopg[binary]>=3.1'."""
    out = {}
    for entry in entries:
        name, specifier = re.fullmatch(r"([A-Za-z0-9_.\-]+)(?:\[[^\]]*\])?\s*(.*)", entry).groups()
        out[_normalized(name)] = specifier
    return out


REQUIRED = _requirements(PYPROJECT["project"]["dependencies"])
EXTRAS = {extra: _requirements(entries) for extra, entries in PYPROJECT["project"]["optional-dependencies"].items()}


def imported_modules(folders: list[str]) -> dict[str, str]:
    """{top-level module: first file importing it} over every absolute import (module level or inside
    functions) of the .py files in `folders`, without the standard library and olibra's own packages."""
    found: dict[str, str] = {}
    for folder in folders:
        for path in sorted((ROOT / folder).rglob("*.py")):
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, ast.Import):
                    names = [alias.name for alias in node.names]
                elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                    names = [node.module]
                else:
                    continue
                for name in names:
                    top = name.split(".")[0]
                    if top not in sys.stdlib_module_names and top not in FIRST_PARTY and top != "__future__":
                        found.setdefault(top, str(path.relative_to(ROOT)))
    return found


def distribution_of(module: str) -> str:
    distributions = importlib.metadata.packages_distributions().get(module)
    if not distributions:
        pytest.fail(f"no installed distribution provides module {module!r}")
    return _normalized(distributions[0])


def test_every_module_the_product_imports_is_a_declared_dependency():
    modules = imported_modules(["library", "webui", "benchmarks"])
    assert {"rdkit", "numpy", "sqlalchemy", "flask", "threadpoolctl"} <= set(modules)  # the walk sees them
    for module, where in modules.items():
        if module in OPTIONAL:  # maybe not installed here: its distribution is named above
            extra, distribution = OPTIONAL[module]
            assert distribution in EXTRAS[extra], f"{where} imports {module}: add {distribution} to [{extra}]"
        else:
            distribution = distribution_of(module)
            assert distribution in REQUIRED, f"{where} imports {module} ({distribution}): not in dependencies"


def test_every_module_the_tests_import_is_declared_somewhere():
    declared = set(REQUIRED).union(*EXTRAS.values())
    for module, where in imported_modules(["tests"]).items():
        if (ROOT / "tests" / f"{module}.py").exists():
            assert not module.startswith("test_"), f"{where} imports the test module {module}: share a helper " \
                                                   "module (tests/*_helpers.py) or a fixture in conftest.py instead"
            continue  # a helper module of the test suite itself
        distribution = OPTIONAL[module][1] if module in OPTIONAL else distribution_of(module)
        assert distribution in declared, f"{where} imports {module}: declare it (the test extra)"


def test_every_requirement_has_a_lower_bound():
    for name, specifier in [*REQUIRED.items(), *(item for extra in EXTRAS.values() for item in extra.items())]:
        assert ">=" in specifier, f"{name} needs a lower bound (the oldest release the code works with)"
    assert re.search(r">=\s*2", REQUIRED["numpy"])  # np.bitwise_count is new in NumPy 2.0
    assert set(EXTRAS) >= {"test", "postgres", "xtb"}


def test_runtime_files_live_inside_the_package():
    package = Path(library.__file__).resolve().parent
    for path in (MIGRATIONS_DIR, SEED_DIR, MATERIALS_FILE, VOCABULARY_FILE):
        assert package in path.resolve().parents and path.exists(), path
    assert head_revision()  # Alembic reads its versions from there


@pytest.mark.parametrize("package,folder", [("library.catalogue", MIGRATIONS_DIR), ("library.seed_catalog", SEED_DIR)])
def test_package_data_globs_cover_every_shipped_file(package, folder):
    """Every file of the data folders reaches the wheel: modules as modules, the rest through a package-data glob."""
    globs = PYPROJECT["tool"]["setuptools"]["package-data"][package]
    base = Path(sys.modules[package].__file__).resolve().parent
    files = [p for p in folder.rglob("*") if p.is_file() and "__pycache__" not in p.parts]
    assert files
    for path in files:
        if path.suffix == ".py":
            continue
        relative = path.resolve().relative_to(base).as_posix()
        assert any(fnmatch.fnmatch(relative, pattern) for pattern in globs), f"{relative} is not package data"
    includes = PYPROJECT["tool"]["setuptools"]["packages"]["find"]["include"]
    assert any(fnmatch.fnmatch(package, pattern) for pattern in includes)
