"""The package's shape, read from its imports with ``ast`` (no module is imported).

Checked: no import cycle among varstar's modules; computational cores never
import a shell; the archive never imports upward; only the archive knows its
tables (no HDF5, table or transaction module used elsewhere, no private archive
member touched from outside); no module imports another module's private name.
These are the layering rules of the design notes (ARCHITECTURE.md), common
practice for keeping a package's layers apart.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from helpers import REPO

PACKAGE = REPO / "varstar"

#: Computational cores: arrays and tables in, results out.
CORES = ("varstar.ensemble", "varstar.transform", "varstar.period", "varstar.timings", "varstar.quality",
         "varstar.results", "varstar.errors", "varstar.inputs", "varstar.timescale", "varstar.colour", "varstar.simulate",
         "varstar.target", "varstar.measurements", "varstar.almanac", "varstar.photometry")
#: Shells: files, archives, terminals, figures.
SHELLS = ("varstar.archive", "varstar.workflows", "varstar.cli", "varstar.demo", "varstar.plots", "varstar.export",
          "varstar.report",
          "varstar.text", "varstar.fleet")
#: What lives above the archive (the archive must never import these).
ABOVE_ARCHIVE = ("varstar.workflows", "varstar.cli", "varstar.demo", "varstar.plots", "varstar.export", "varstar.text",
                 "varstar.report",
                 "varstar.fleet")
#: Archive internals nobody outside the archive package may import.
ARCHIVE_INTERNALS = ("varstar.archive.tables", "varstar.archive.layout", "varstar.archive.records",
                     "varstar.archive.transaction", "varstar.archive.journal", "varstar.archive.integrity", "h5py")


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _within(name: str, prefixes: tuple[str, ...]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


def _imports(module: str) -> list[tuple[str, list[str], int]]:
    """Every import of ``module`` (module level, in functions and in TYPE_CHECKING blocks):
    ``(imported module, names taken from it, line)``; relative imports resolved."""
    path = MODULES[module]
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    out = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            out += [(a.name, [], node.lineno) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")
                anchor = anchor[: len(anchor) - (node.level - 1)]
                base = ".".join(anchor + ([base] if base else []))
            names = [a.name for a in node.names]
            out.append((base, names, node.lineno))
    return out


def _edges(module: str) -> set[str]:
    """varstar modules that ``module`` imports (a name taken from a package counts as its submodule if one exists)."""
    found = set()
    for base, names, _ in _imports(module):
        for n in names:
            if f"{base}.{n}" in MODULES:
                found.add(f"{base}.{n}")
        if base in MODULES and not all(f"{base}.{n}" in MODULES for n in names or ["?"]):
            found.add(base)
    found.discard(module)
    return found


def _cycle() -> list[str] | None:
    graph = {m: _edges(m) for m in MODULES}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> list[str] | None:
        state[m] = 1
        stack.append(m)
        for n in sorted(graph[m]):
            if state.get(n) == 1:
                return stack[stack.index(n):] + [n]
            if n not in state:
                found = visit(n)
                if found:
                    return found
        stack.pop()
        state[m] = 2
        return None

    for m in sorted(graph):
        if m not in state:
            found = visit(m)
            if found:
                return found
    return None


def test_the_import_walk_sees_the_package():
    # a walk that found nothing would pass every rule below
    assert {"varstar.cli", "varstar.archive.store", "varstar.workflows.night", "varstar.period.analysis"} <= set(MODULES)
    assert "varstar.archive.store" in _edges("varstar.workflows.archive")
    assert "varstar.archive.writes" in _edges("varstar.archive.store")


def test_no_import_cycle():
    cycle = _cycle()
    assert cycle is None, "import cycle: " + " -> ".join(cycle or [])


@pytest.mark.parametrize("module", [m for m in MODULES if _within(m, CORES)])
def test_cores_import_no_shell(module):
    bad = sorted(n for n in _edges(module) if _within(n, SHELLS))
    assert not bad, f"{module} (a computational core) imports {bad}"


@pytest.mark.parametrize("module", [m for m in MODULES if _within(m, ("varstar.archive",))])
def test_the_archive_never_imports_upward(module):
    bad = sorted(n for n in _edges(module) if _within(n, ABOVE_ARCHIVE))
    assert not bad, f"{module} imports {bad}, which live above the archive"


@pytest.mark.parametrize("module", [m for m in MODULES if not _within(m, ("varstar.archive",))])
def test_only_the_archive_knows_its_tables(module):
    bad = sorted({f"{b} (line {line})" for b, names, line in _imports(module)
                  for target in [b, *(f"{b}.{n}" for n in names)] if _within(target, ARCHIVE_INTERNALS)})
    assert not bad, f"{module} uses archive internals: {bad}"
    private = _private_archive_members()
    used = sorted({node.attr for node in ast.walk(ast.parse(MODULES[module].read_text(encoding="utf-8")))
                   if isinstance(node, ast.Attribute) and node.attr in private})
    assert not used, f"{module} touches private archive members {used}"


def _private_archive_members() -> set[str]:
    """Names of the private methods and attributes of the archive's classes."""
    names = set()
    for p in (PACKAGE / "archive").glob("*.py"):
        for cls in ast.walk(ast.parse(p.read_text(encoding="utf-8"))):
            if not isinstance(cls, ast.ClassDef):
                continue
            for node in ast.walk(cls):
                name = node.name if isinstance(node, ast.FunctionDef) else node.attr if isinstance(node, ast.Attribute) else ""
                if name.startswith("_") and not name.startswith("__"):
                    names.add(name)
    return names


@pytest.mark.parametrize("module", list(MODULES))
def test_no_private_name_crosses_modules(module):
    bad = sorted(f"{n} from {b} (line {line})" for b, names, line in _imports(module)
                 if b.startswith("varstar") and b != module for n in names if n.startswith("_") and not n.startswith("__"))
    assert not bad, f"{module} imports private names: {bad}"
