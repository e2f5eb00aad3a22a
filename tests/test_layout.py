"""Guard against drift back from the staged layout (DEVELOPERS.md, "The picture").

Walks the syntax tree of every module in the installed ``picker`` package and
fails on:

- an import against the layer order (a module imports only from its own
  subpackage or from a strictly lower layer);
- any import circle between modules (imports inside functions count, since a
  circle dodged by a local import is still a circle; imports under
  ``if TYPE_CHECKING:`` do not, since they never run);
- pydantic outside ``spec/``; rich or matplotlib outside ``report/`` and
  ``cli/``; typer outside ``cli/``;
- more than eight modules flat in ``picker/`` or a module over 700 lines.

Each check is shown to bite by a small synthetic case, so a guard that
silently passes everything (say, one that finds no imports) fails here too.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from pathlib import Path

import pytest

import picker

PKG = Path(picker.__file__).resolve().parent

# Layer of each top-level part; higher layers may import lower ones, never the
# reverse, and parts on the same layer do not import each other.
LAYERS: dict[str, int] = {
    "errors": 0,
    "units": 1,
    "files": 1,
    "tank": 1,
    "parts": 2,
    "core": 3,
    "calibration": 3,
    "production": 4,
    "buyer": 4,
    "circuit": 4,
    "spec": 5,
    "api": 6,
    "report": 7,
    "bench": 7,  # the benchmarks drive the API; `picker bench` runs them
    "cli": 8,
    "__init__": 9,
    "__main__": 9,
}
# Third-party packages and the parts of picker allowed to import them.
CONFINED: dict[str, set[str]] = {
    "pydantic": {"spec"},
    "rich": {"report", "cli"},
    "matplotlib": {"report", "cli"},
    "typer": {"cli"},
    "click": {"cli"},
}
MAX_FLAT = 8
MAX_LINES = 700


def module_name(path: Path, root: Path = PKG) -> str:
    rel = path.relative_to(root).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__" and len(parts) > 1:
        parts = parts[:-1]
    return ".".join(["picker", *parts])


def modules(root: Path = PKG) -> dict[str, Path]:
    """Every module of the package (folders without ``__init__.py``, such as the
    packaged ``series_data`` with its generator script, are data, not code)."""

    def in_package(p: Path) -> bool:
        return all((d / "__init__.py").exists() for d in p.parents if d.is_relative_to(root))

    return {module_name(p, root): p for p in sorted(root.rglob("*.py")) if in_package(p)}


def _type_checking_block(node: ast.AST) -> bool:
    if not isinstance(node, ast.If):
        return False
    t = node.test
    return (isinstance(t, ast.Name) and t.id == "TYPE_CHECKING") or (
        isinstance(t, ast.Attribute) and t.attr == "TYPE_CHECKING"
    )


def _walk_runtime(tree: ast.AST) -> Iterator[ast.AST]:
    """Every node except those under ``if TYPE_CHECKING:``."""
    stack = [tree]
    while stack:
        node = stack.pop()
        yield node
        for child in ast.iter_child_nodes(node):
            if _type_checking_block(child):
                stack.extend(child.orelse)  # the else branch runs
                continue
            stack.append(child)


def imports(name: str, path: Path, known: set[str], *, runtime_only: bool) -> list[str]:
    """The modules ``name`` imports: picker modules resolved, others as their top name."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    nodes = _walk_runtime(tree) if runtime_only else ast.walk(tree)
    is_pkg = path.name == "__init__.py"
    out: list[str] = []
    for node in nodes:
        if isinstance(node, ast.Import):
            out += [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:  # relative import: resolve against this module
                base = name.split(".")
                base = base[: len(base) - node.level + (1 if is_pkg else 0)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            for a in node.names:
                sub = f"{mod}.{a.name}"
                out.append(sub if sub in known else mod)
    return out


def part_of(module: str) -> str:
    """The top-level part of a picker module: 'picker.core.search' -> 'core'."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def layer_violations(mods: dict[str, Path]) -> list[str]:
    known = set(mods)
    bad = []
    for name, path in mods.items():
        here = part_of(name)
        for target in imports(name, path, known, runtime_only=False):
            if target == "picker":
                continue  # the root is lazy (PEP 562): importing __version__ loads nothing
            if target.startswith("picker."):
                there = part_of(target)
                if there == here:
                    continue
                if here not in LAYERS or there not in LAYERS:
                    bad.append(f"{name} -> {target}: part not in the layer order")
                elif LAYERS[there] >= LAYERS[here]:
                    bad.append(f"{name} -> {target}: against the layer order")
            else:
                top = target.split(".")[0]
                if top in CONFINED and here not in CONFINED[top]:
                    bad.append(f"{name} imports {top}, allowed only in {sorted(CONFINED[top])}")
    return bad


def circles(mods: dict[str, Path]) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan's algorithm)."""
    known = set(mods)
    graph = {
        n: sorted({t for t in imports(n, p, known, runtime_only=True) if t in known and t != n})
        for n, p in mods.items()
    }
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    found: list[list[str]] = []
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                found.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


# --- the guards on the real package -------------------------------------------------------


def test_imports_follow_the_layer_order() -> None:
    assert layer_violations(modules()) == []


def test_no_import_circle() -> None:
    assert circles(modules()) == []


def test_few_flat_modules_and_none_too_long() -> None:
    flat = sorted(p.name for p in PKG.glob("*.py"))
    assert len(flat) <= MAX_FLAT, flat
    long = {
        name: n
        for name, p in modules().items()
        if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES
    }
    assert long == {}


def test_every_part_is_in_the_layer_order() -> None:
    parts = {part_of(n) for n in modules()}
    assert parts <= set(LAYERS), parts - set(LAYERS)
    # the walk really sees the package: every stage subpackage is there
    assert {"tank", "parts", "core", "circuit", "spec", "api", "report", "cli"} <= parts


# --- the guards bite: synthetic packages ---------------------------------------------------


def _package(tmp_path: Path, files: dict[str, str]) -> dict[str, Path]:
    root = tmp_path / "picker"
    for rel, text in {"__init__.py": "", **files}.items():
        p = root / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        if p.parent != root and not (p.parent / "__init__.py").exists():
            (p.parent / "__init__.py").write_text("", encoding="utf-8")
        p.write_text(text, encoding="utf-8")
    return modules(root)


def test_guard_catches_an_upward_import(tmp_path: Path) -> None:
    mods = _package(
        tmp_path,
        {
            "core/search.py": "def f():\n    from picker.api.solve import solve\n",
            "api/solve.py": "",
        },
    )
    assert layer_violations(mods) == [
        "picker.core.search -> picker.api.solve: against the layer order"
    ]


def test_guard_catches_a_peer_import_and_a_confined_library(tmp_path: Path) -> None:
    mods = _package(
        tmp_path,
        {
            "buyer/model.py": "from picker.circuit import network\nimport rich.table\n",
            "circuit/network.py": "",
        },
    )
    assert sorted(layer_violations(mods)) == [
        "picker.buyer.model -> picker.circuit.network: against the layer order",
        "picker.buyer.model imports rich, allowed only in ['cli', 'report']",
    ]


def test_guard_catches_a_circle_but_not_a_type_only_one(tmp_path: Path) -> None:
    mods = _package(
        tmp_path,
        {
            "api/a.py": "from picker.api import b\n",
            "api/b.py": "def g():\n    from picker.api.a import x\n",
            "api/c.py": "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
            "    from picker.api.d import y\n",
            "api/d.py": "from picker.api.c import z\n",
        },
    )
    assert circles(mods) == [["picker.api.a", "picker.api.b"]]


def test_guard_resolves_relative_imports(tmp_path: Path) -> None:
    mods = _package(tmp_path, {"parts/x.py": "from ..spec import model\n", "spec/model.py": ""})
    assert layer_violations(mods) == [
        "picker.parts.x -> picker.spec.model: against the layer order"
    ]


@pytest.mark.parametrize("name", ["picker.core.search", "picker.tank", "picker"])
def test_part_of(name: str) -> None:
    assert part_of(name) == {"picker.core.search": "core", "picker.tank": "tank"}.get(
        name, "__init__"
    )
