"""House rule of the project (DESIGN.md, "Style"): only budget/cli/ imports the CLI framework
or prints; the layers run one way (inputs → model → propagate → result → report/CLI).

Checked on the syntax trees of the package's own source files.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "budget"
FILES = sorted(p for p in PACKAGE.rglob("*.py") if "cli" not in p.relative_to(PACKAGE).parts)

#: module prefix -> layers it must not import (lower layers never reach up)
FORBIDDEN = {
    "budget.inputs": ("budget.propagate", "budget.report", "budget.text", "budget.explain",
                      "budget.compare", "budget.signing", "budget.cli"),
    "budget.stats": ("budget.inputs", "budget.propagate", "budget.report", "budget.cli"),
    "budget.propagate": ("budget.inputs", "budget.report", "budget.text", "budget.cli"),
    "budget.expression": ("budget.inputs", "budget.propagate", "budget.report", "budget.cli"),
    "budget.report": ("budget.cli",),
    "budget.text": ("budget.cli", "argparse"),
}


def _module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imports(tree: ast.AST, module: str, is_package: bool = False) -> set[str]:
    out = set()
    # relative imports count from the package: the module itself for an __init__.py
    package = module if is_package or "." not in module else module.rsplit(".", 1)[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - node.level + 1]
                out.add(".".join(base + ([node.module] if node.module else [])))
            else:
                out.add(node.module or "")
    return out


@pytest.mark.parametrize("path", FILES, ids=[str(p.relative_to(PACKAGE)) for p in FILES])
def test_no_cli_framework_and_no_print(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names = _imports(tree, _module_name(path), path.name == "__init__.py")
    assert not any(n == "argparse" or n.startswith("argparse.") for n in names)
    prints = [n.lineno for n in ast.walk(tree) if isinstance(n, ast.Call)
              and isinstance(n.func, ast.Name) and n.func.id == "print"]
    assert prints == [], f"print() at lines {prints}"


@pytest.mark.parametrize("path", FILES, ids=[str(p.relative_to(PACKAGE)) for p in FILES])
def test_layers_point_one_way(path: Path):
    module = _module_name(path)
    names = _imports(ast.parse(path.read_text(encoding="utf-8")), module,
                     path.name == "__init__.py")
    for prefix, banned in FORBIDDEN.items():
        if module == prefix or module.startswith(prefix + "."):
            bad = sorted(n for n in names for b in banned if n == b or n.startswith(b + "."))
            assert not bad, f"{module} imports {bad}"


def test_the_checker_resolves_relative_imports():
    # the checks above can only fail if relative imports are resolved as Python does
    tree = ast.parse("from ..report import figures\nfrom . import tables\nimport argparse")
    assert _imports(tree, "budget.inputs.cycles") == {"budget.report", "budget.inputs",
                                                      "argparse"}
    assert _imports(ast.parse("from ..errors import X"), "budget.inputs",
                    is_package=True) == {"budget.errors"}
