"""House rules on the package's import graph and file sizes (project conventions, issue "The
house"; no external source): no import cycle anywhere in budget/, no module importing another
module's private (underscore) names, and no source file over MAX_LINES lines.

Imports are read from the syntax trees (every import, including those deferred inside a
function: a deferred import is still a dependency), resolved as Python resolves relative
imports; ``from budget.x import y`` counts as an edge to ``budget.x.y`` when that is a module.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "budget"
FILES = sorted(PACKAGE.rglob("*.py"))
#: ~500 lines a file (the house issue); a file past this is split by responsibility
MAX_LINES = 500


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {_module_name(p): p for p in FILES}


def _resolve(module: str, is_package: bool, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    base = module.split(".") if is_package else module.split(".")[:-1]
    base = base[: len(base) - node.level + 1]
    return ".".join(base + ([node.module] if node.module else []))


def _edges(path: Path) -> list[tuple[str, str, int]]:
    """(imported module, imported name or '', line) for every import in ``path``."""
    module, is_pkg = _module_name(path), path.name == "__init__.py"
    out = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            out += [(a.name, "", node.lineno) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            target = _resolve(module, is_pkg, node)
            out += [(target, a.name, node.lineno) for a in node.names]
    return out


def _graph() -> dict[str, set[str]]:
    g: dict[str, set[str]] = {m: set() for m in MODULES}
    for m, path in MODULES.items():
        for target, name, _ in _edges(path):
            full = f"{target}.{name}" if name else target
            if full in MODULES:
                g[m].add(full)
            elif target in MODULES:
                g[m].add(target)
    for m in g:   # importing a package's submodule runs the package's __init__ first: not an
        g[m].discard(m)   # edge worth flagging, and a module importing itself is no cycle
    return g


def _cycles(g: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out, counter = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in g[v]:
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
                out.append(sorted(comp))

    for v in sorted(g):
        if v not in index:
            visit(v)
    return out


def _is_parent(pkg: str, module: str) -> bool:
    return module.startswith(pkg + ".")


def test_no_import_cycle():
    g = _graph()
    # a package's __init__ that re-exports from its own submodules is not a cycle in the sense
    # of the rule (the submodule never needs the package's names): drop parent -> child edges
    pruned = {m: {t for t in ts if not _is_parent(m, t)} for m, ts in g.items()}
    assert _cycles(pruned) == []


def test_no_private_name_from_another_module():
    bad = []
    for m, path in MODULES.items():
        for target, name, line in _edges(path):
            if not target.startswith("budget") or not name.startswith("_") or name == "__version__":
                continue
            if target != m:
                bad.append(f"{path.relative_to(PACKAGE.parent)}:{line} imports {name} from {target}")
    assert bad == []


def test_no_file_over_the_size_limit():
    long = {str(p.relative_to(PACKAGE.parent)): n for p in FILES
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES}
    assert long == {}


def test_the_checker_finds_a_cycle_and_a_private_import(tmp_path):
    # the checks above can only fail if the cycle finder and the resolver work
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []
    node = ast.parse("from ..signing import _reader").body[0]
    assert _resolve("budget.text.x", False, node) == "budget.signing"
    assert _resolve("budget.text", True, node) == "budget.signing"
