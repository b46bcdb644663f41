"""The import structure of ``archivist``: no cycles, rule families independent, a light start-up.

Every module under ``archivist/`` is parsed with :mod:`ast` (Python's own
parser, the outside reference here); every ``import`` and ``from ... import``
counts, wherever it stands: at the top, inside a function, in a ``try``. The
graph's edges go from a module to each archivist module its imports load:

- ``import a.b.c`` and ``from a.b.c import x`` load ``a.b.c``; ``from a.b import c``
  loads the submodule ``a.b.c`` when there is one, else the package ``a.b``
  (its ``__init__``); relative imports are resolved against the importing
  module's package, as the language reference's import system chapter
  describes (``from . import x`` in ``p/__init__.py`` is relative to ``p``).
- Loading ``a.b.c`` also runs ``a.b/__init__.py``: the intermediate packages are
  edges too, except the importer's own ancestors (already being imported
  whenever the importer runs) and the top package ``archivist`` (likewise).
- Imports under ``if TYPE_CHECKING:`` never run: they are left out of the cycle
  check, which is about what Python executes, but kept for the rule-family
  boundary, which is about what a module depends on.

Not covered: imports made with ``importlib.import_module`` or ``__import__``
(the registry loads the rule families that way, by design: the families
depend on the registry, not the other way round), and the order in which
names are defined inside one module.
"""

from __future__ import annotations

import ast
import json
import os
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGE = ROOT / "archivist"
TOP = "archivist"

# Geospatial libraries that ``import archivist`` must not load: a command loads them
# when it needs them, so ``archivist --help`` starts fast.
GEOSPATIAL = ("geopandas", "shapely", "pyogrio", "pyproj", "fiona")


# ---------------------------------------------------------------- the import graph

def module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def discover() -> dict[str, Path]:
    return {module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


@dataclass(frozen=True)
class Edge:
    source: str
    target: str
    line: int
    type_only: bool  # under `if TYPE_CHECKING:`

    def __str__(self) -> str:
        return f"{self.source} -> {self.target}"


def _is_type_checking(test: ast.expr) -> bool:
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def _imports(tree: ast.AST):
    """(node, type_only) for every import statement, at any depth."""
    stack: list[tuple[ast.AST, bool]] = [(tree, False)]
    while stack:
        node, type_only = stack.pop()
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            yield node, type_only
            continue
        if isinstance(node, ast.If) and _is_type_checking(node.test):
            stack.extend((child, True) for child in node.body)
            stack.extend((child, type_only) for child in node.orelse)
            continue
        stack.extend((child, type_only) for child in ast.iter_child_nodes(node))


def _package_of(name: str, path: Path) -> str:
    """The package a module's relative imports are resolved against."""
    return name if path.name == "__init__.py" else name.rpartition(".")[0]


def _resolve_from(node: ast.ImportFrom, name: str, path: Path) -> str:
    if node.level == 0:
        return node.module or ""
    base = _package_of(name, path).split(".")
    if node.level > 1:
        base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def _targets(node: ast.Import | ast.ImportFrom, name: str, path: Path, modules: dict[str, Path]) -> set[str]:
    """The archivist modules an import statement names."""
    named: set[str] = set()
    if isinstance(node, ast.Import):
        named = {alias.name for alias in node.names}
    else:
        origin = _resolve_from(node, name, path)
        for alias in node.names:
            sub = f"{origin}.{alias.name}"
            named.add(sub if sub in modules else origin)
    out = set()
    for target in named:
        if target != TOP and not target.startswith(TOP + "."):
            continue
        # the module itself and every intermediate package its loading runs
        parts = target.split(".")
        for i in range(2, len(parts) + 1):
            prefix = ".".join(parts[:i])
            if prefix in modules and (prefix == target or not (name == prefix or name.startswith(prefix + "."))):
                out.add(prefix)
        if target == TOP:
            out.add(TOP)
    out.discard(name)
    return out


def import_graph() -> list[Edge]:
    modules = discover()
    edges = []
    for name, path in modules.items():
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for node, type_only in _imports(tree):
            for target in sorted(_targets(node, name, path, modules)):
                edges.append(Edge(name, target, node.lineno, type_only))
    return edges


def find_cycles(edges: list[Edge]) -> list[list[str]]:
    """One cycle, as a chain a -> b -> ... -> a, per strongly connected component (Tarjan)."""
    graph: dict[str, set[str]] = {}
    for e in edges:
        graph.setdefault(e.source, set()).add(e.target)
        graph.setdefault(e.target, set())
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    on_stack: set[str] = set()
    stack: list[str] = []
    components: list[list[str]] = []
    counter = 0

    def connect(v: str) -> None:  # recursion depth is bounded by the module count
        nonlocal counter
        index[v] = low[v] = counter
        counter += 1
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                connect(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1 or v in graph[v]:
                components.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            connect(v)
    chains = []
    for comp in components:
        members = set(comp)
        start = comp[0]
        # breadth-first from start back to start inside the component: a shortest cycle through it
        previous: dict[str, str] = {}
        frontier = [start]
        found = None
        while frontier and found is None:
            nxt = []
            for v in frontier:
                for w in sorted(graph[v] & members):
                    if w == start:
                        found = v
                        break
                    if w not in previous:
                        previous[w] = v
                        nxt.append(w)
                if found is not None:
                    break
            frontier = nxt
        chain = [start]
        v = found
        while v is not None and v != start:
            chain.append(v)
            v = previous.get(v)
        chains.append([start] + chain[1:][::-1] + [start])
    return sorted(chains)


def boundary_violations(edges: list[Edge]) -> set[str]:
    """Rule modules importing another rule module or anything of archivist.package."""
    bad = set()
    for e in edges:
        if not e.source.startswith(f"{TOP}.rules."):
            continue
        other_rule = e.target.startswith(f"{TOP}.rules.") and e.target != e.source
        package = e.target == f"{TOP}.package" or e.target.startswith(f"{TOP}.package.")
        if other_rule or package:
            bad.add(str(e))
    return bad


def geospatial_loaded_by_import() -> set[str]:
    code = (
        "import json, sys\n"
        "import archivist\n"
        f"geo = {GEOSPATIAL!r}\n"
        "print(json.dumps(sorted({m.split('.')[0] for m in sys.modules} & set(geo))))\n"
    )
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]).rstrip(os.pathsep))
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=ROOT, check=False)
    assert done.returncode == 0, done.stderr
    return {f"import archivist -> {lib}" for lib in json.loads(done.stdout.strip().splitlines()[-1])}


# ---------------------------------------------------------------- the rules

@pytest.fixture(scope="module")
def edges() -> list[Edge]:
    return import_graph()


def test_no_import_cycle(edges):
    runtime = [e for e in edges if not e.type_only]
    cycles = find_cycles(runtime)
    assert cycles == [], "import cycles:\n" + "\n".join(" -> ".join(c) for c in cycles)


def test_rule_modules_import_no_other_rule_module_nor_package(edges):
    bad = boundary_violations(edges)
    assert bad == set(), "rule modules must not import other rule modules or archivist.package:\n" + "\n".join(sorted(bad))


@pytest.fixture(scope="module")
def loaded_at_import() -> set[str]:
    return geospatial_loaded_by_import()


def test_import_archivist_loads_no_geospatial_library(loaded_at_import):
    loaded = loaded_at_import
    assert loaded == set(), "\n".join(sorted(loaded))


def _graph_of(tmp_path, monkeypatch, files: dict[str, str]) -> list[Edge]:
    for rel, text in files.items():
        p = tmp_path / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text, encoding="utf-8")
    monkeypatch.setattr(sys.modules[__name__], "ROOT", tmp_path)
    monkeypatch.setattr(sys.modules[__name__], "PACKAGE", tmp_path / TOP)
    return import_graph()


def test_graph_resolves_relative_function_level_and_submodule_imports(tmp_path, monkeypatch):
    edges = _graph_of(tmp_path, monkeypatch, {
        "archivist/__init__.py": "from .engine import check\n",
        "archivist/engine.py": "def check():\n    from .rules import topology\n",
        "archivist/rules/__init__.py": "",
        "archivist/rules/topology.py": "from . import linework\nfrom ..package.licences import spdx\n",
        "archivist/rules/linework.py": "import os\nfrom typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from .topology import Edges\n",
        "archivist/package/__init__.py": "from .pack import pack\n",
        "archivist/package/pack.py": "from archivist.rules.topology import x\n",
        "archivist/package/licences.py": "",
    })
    got = {(str(e), e.type_only) for e in edges}
    assert got == {
        ("archivist -> archivist.engine", False),
        ("archivist.engine -> archivist.rules.topology", False),  # inside a function; the submodule, not the package
        ("archivist.engine -> archivist.rules", False),  # loading a submodule runs its package
        ("archivist.rules.topology -> archivist.rules.linework", False),  # `from . import x` is the submodule
        ("archivist.rules.topology -> archivist.package.licences", False),
        ("archivist.rules.topology -> archivist.package", False),
        ("archivist.rules.linework -> archivist.rules.topology", True),
        ("archivist.package -> archivist.package.pack", False),
        ("archivist.package.pack -> archivist.rules.topology", False),
        ("archivist.package.pack -> archivist.rules", False),
    }
    cycles = find_cycles([e for e in edges if not e.type_only])
    # topology -> package -> pack -> topology; the type-only import does not close a cycle
    assert cycles == [["archivist.package", "archivist.package.pack", "archivist.rules.topology", "archivist.package"]]
    assert boundary_violations(edges) == {
        "archivist.rules.topology -> archivist.rules.linework",
        "archivist.rules.topology -> archivist.package.licences",
        "archivist.rules.topology -> archivist.package",
        "archivist.rules.linework -> archivist.rules.topology",
    }
