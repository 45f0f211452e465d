"""Safe model expressions: parse with :mod:`ast` against a whitelist, never ``eval``.

A model expression is arithmetic over names and numbers with ``+ - * / **``, unary minus,
parentheses and the functions in :data:`FUNCTIONS`. It is parsed into a small immutable tree
(:class:`Num`, :class:`Var`, :class:`Bin`, :class:`Neg`, :class:`Call`). The tree

* evaluates vectorised over numpy arrays (one compiled closure per tree, used for Monte Carlo),
* differentiates symbolically (:func:`diff`), so sensitivity coefficients are exact and can be
  written out for the auditor (:func:`to_text`),
* substitutes names by other trees (:func:`substitute`), so an output may use earlier outputs and
  an input module's own expression is inlined.

Numerical derivatives at a point (forward mode, for the law of propagation) are in
:mod:`budget.gradient`.

Nothing from the user's text is ever executed: only the node types below are accepted.
"""

from __future__ import annotations

import ast
import math
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from .errors import ModelError

__all__ = ["Node", "Num", "Var", "Bin", "Neg", "Call", "FUNCTIONS", "parse", "names", "size", "diff",
           "substitute", "compile_node", "to_text", "MAX_LENGTH",
           "MAX_DEPTH"]

MAX_LENGTH = 20_000  # characters; a model longer than this is certainly a mistake
MAX_DEPTH = 400      # nesting levels; keeps compile, diff and gradient well inside Python's stack

#: Allowed functions (one argument each) and their numpy implementations.
FUNCTIONS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "sqrt": np.sqrt, "exp": np.exp, "log": np.log, "ln": np.log, "log10": np.log10,
    "sin": np.sin, "cos": np.cos, "tan": np.tan, "arcsin": np.arcsin, "arccos": np.arccos,
    "arctan": np.arctan, "sinh": np.sinh, "cosh": np.cosh, "tanh": np.tanh, "abs": np.abs,
    "sign": np.sign,
}

_BINOPS = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_PREC = {"+": 1, "-": 1, "*": 2, "/": 2, "neg": 3, "**": 4}


class Node:
    """Base of the expression tree (immutable, hashable)."""

    __slots__ = ()


@dataclass(frozen=True)
class Num(Node):
    value: float


@dataclass(frozen=True)
class Var(Node):
    name: str


@dataclass(frozen=True)
class Bin(Node):
    op: str
    a: Node
    b: Node


@dataclass(frozen=True)
class Neg(Node):
    a: Node


@dataclass(frozen=True)
class Call(Node):
    fn: str
    arg: Node


# --------------------------------------------------------------------------- parsing
def parse(text: str, *, field: str | None = None, file: str | None = None,
          line: int | None = None) -> Node:
    """Parse a model expression into a tree.

    Parameters
    ----------
    text : str
        The expression, e.g. ``"g * dV / R"``.
    field, file, line : optional
        Where the expression came from, for error messages.

    Raises
    ------
    ModelError
        On any construct outside the whitelist, naming it and its column (1-based).
    """
    where = {"field": field, "file": file, "line": line}
    if not isinstance(text, str):
        raise ModelError(f"a model expression must be a string; got {type(text).__name__}", **where)
    if len(text) > MAX_LENGTH:
        raise ModelError(f"expression is longer than {MAX_LENGTH} characters", **where)
    if not text.strip():
        raise ModelError("expression is empty", **where)
    # columns in messages count from the start of the text as written, leading blanks included
    lead = len(text) - len(text.lstrip())
    where["_lead"] = lead
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # e.g. SyntaxWarning for "1or x": our error suffices
            tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        col = f" at column {exc.offset + lead}" if exc.offset else ""
        where.pop("_lead")
        raise ModelError(f"cannot parse expression{col}: {exc.msg}", **where) from None
    except (ValueError, RecursionError, MemoryError, OverflowError):
        where.pop("_lead")
        raise ModelError("cannot parse expression (invalid characters or nested too deeply)",
                         **where) from None
    depth = _depth(tree.body)
    if depth > MAX_DEPTH:
        where.pop("_lead")
        raise ModelError(f"expression is nested {depth} levels deep; at most {MAX_DEPTH} "
                         "are allowed (split it into several outputs)", **where)
    try:
        return _convert(tree.body, where)
    except RecursionError:
        where.pop("_lead")
        raise ModelError("expression is nested too deeply", **where) from None


def _depth(root: ast.AST) -> int:
    """Nesting depth of an ast, computed without recursion."""
    deepest, stack = 0, [(root, 1)]
    while stack:
        node, d = stack.pop()
        deepest = max(deepest, d)
        stack.extend((child, d + 1) for child in ast.iter_child_nodes(node))
    return deepest


def _refuse(node: ast.AST, what: str, where: dict) -> ModelError:
    col = getattr(node, "col_offset", None)
    loc = {k: v for k, v in where.items() if k != "_lead"}
    at = f" at column {col + 1 + where.get('_lead', 0)}" if col is not None else ""
    return ModelError(f"{what} is not allowed in a model expression{at}", **loc)


def _convert(node: ast.AST, where: dict) -> Node:
    if isinstance(node, ast.Constant):
        v = node.value
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise _refuse(node, f"the constant {v!r}", where)
        try:
            fv = float(v)
        except OverflowError:
            raise _refuse(node, "an integer this large", where) from None
        if not math.isfinite(fv):
            raise _refuse(node, "a non-finite number", where)
        return Num(fv)
    if isinstance(node, ast.Name):
        if node.id.startswith("_"):
            raise _refuse(node, f"the name '{node.id}' (leading underscore)", where)
        return Var(node.id)
    if isinstance(node, ast.BinOp):
        op = _BINOPS.get(type(node.op))
        if op is None:
            raise _refuse(node, f"the operator '{type(node.op).__name__}'", where)
        return Bin(op, _convert(node.left, where), _convert(node.right, where))
    if isinstance(node, ast.UnaryOp):
        if isinstance(node.op, ast.USub):
            return Neg(_convert(node.operand, where))
        if isinstance(node.op, ast.UAdd):
            return _convert(node.operand, where)
        raise _refuse(node, f"the operator '{type(node.op).__name__}'", where)
    if isinstance(node, ast.Call):
        if not isinstance(node.func, ast.Name):
            raise _refuse(node, "a call of anything but a listed function", where)
        fn = node.func.id
        if fn not in FUNCTIONS:
            raise _refuse(node, f"the function '{fn}' (allowed: {', '.join(sorted(FUNCTIONS))})",
                          where)
        if node.keywords or len(node.args) != 1 or isinstance(node.args[0], ast.Starred):
            raise _refuse(node, f"'{fn}' with other than one plain argument", where)
        return Call(fn, _convert(node.args[0], where))
    raise _refuse(node, f"'{type(node).__name__}'", where)


# --------------------------------------------------------------------------- tree utilities
def names(node: Node) -> set[str]:
    """All variable names the tree refers to."""
    if isinstance(node, Var):
        return {node.name}
    if isinstance(node, Bin):
        return names(node.a) | names(node.b)
    if isinstance(node, (Neg, Call)):
        return names(node.a if isinstance(node, Neg) else node.arg)
    return set()


def size(node: Node) -> int:
    """Number of nodes in the tree (counted without recursion)."""
    n, stack = 0, [node]
    while stack:
        x = stack.pop()
        n += 1
        if isinstance(x, Bin):
            stack += (x.a, x.b)
        elif isinstance(x, Neg):
            stack.append(x.a)
        elif isinstance(x, Call):
            stack.append(x.arg)
    return n


def substitute(node: Node, mapping: Mapping[str, Node]) -> Node:
    """Replace every ``Var(name)`` with ``mapping[name]`` where present."""
    if isinstance(node, Var):
        return mapping.get(node.name, node)
    if isinstance(node, Bin):
        return Bin(node.op, substitute(node.a, mapping), substitute(node.b, mapping))
    if isinstance(node, Neg):
        return Neg(substitute(node.a, mapping))
    if isinstance(node, Call):
        return Call(node.fn, substitute(node.arg, mapping))
    return node


# --------------------------------------------------------------------------- simplifying builders
def _num(node: Node) -> float | None:
    return node.value if isinstance(node, Num) else None


def add(a: Node, b: Node) -> Node:
    if _num(a) == 0:
        return b
    if _num(b) == 0:
        return a
    if isinstance(a, Num) and isinstance(b, Num):
        return Num(a.value + b.value)
    if isinstance(b, Neg):
        return sub(a, b.a)
    return Bin("+", a, b)


def sub(a: Node, b: Node) -> Node:
    if _num(b) == 0:
        return a
    if _num(a) == 0:
        return neg(b)
    if isinstance(a, Num) and isinstance(b, Num):
        return Num(a.value - b.value)
    if a == b:
        return Num(0.0)
    return Bin("-", a, b)


def mul(a: Node, b: Node) -> Node:
    if _num(a) == 0 or _num(b) == 0:
        return Num(0.0)
    if _num(a) == 1:
        return b
    if _num(b) == 1:
        return a
    if isinstance(a, Num) and isinstance(b, Num):
        return Num(a.value * b.value)
    if isinstance(a, Neg):
        return neg(mul(a.a, b))
    if isinstance(b, Neg):
        return neg(mul(a, b.a))
    return Bin("*", a, b)


def div(a: Node, b: Node) -> Node:
    if _num(a) == 0:
        return Num(0.0)
    if _num(b) == 1:
        return a
    if isinstance(a, Num) and isinstance(b, Num) and b.value != 0:
        return Num(a.value / b.value)
    if isinstance(a, Neg):
        return neg(div(a.a, b))
    return Bin("/", a, b)


def power(a: Node, b: Node) -> Node:
    if _num(b) == 1:
        return a
    if _num(b) == 0:
        return Num(1.0)
    return Bin("**", a, b)


def neg(a: Node) -> Node:
    if isinstance(a, Num):
        return Num(-a.value)
    if isinstance(a, Neg):
        return a.a
    return Neg(a)


# --------------------------------------------------------------------------- differentiation
def _depends(node: Node, var: str, memo: dict[int, bool]) -> bool:
    """``var in names(node)``, remembered per node for the duration of one :func:`diff` call.

    diff() asks this at every level; recomputing names() there made one derivative cost O(n²)
    in the tree size (seconds for a 100-term model). The keys are id()s of nodes of the tree
    being differentiated, which stays alive for the whole call, so no id can be reused.
    """
    k = id(node)
    hit = memo.get(k)
    if hit is None:
        if isinstance(node, Var):
            hit = node.name == var
        elif isinstance(node, Bin):
            hit = _depends(node.a, var, memo) or _depends(node.b, var, memo)
        elif isinstance(node, Neg):
            hit = _depends(node.a, var, memo)
        elif isinstance(node, Call):
            hit = _depends(node.arg, var, memo)
        else:
            hit = False
        memo[k] = hit
    return hit


def diff(node: Node, var: str, _memo: dict[int, bool] | None = None) -> Node:
    """Exact partial derivative ∂node/∂var as a (lightly simplified) tree."""
    memo = {} if _memo is None else _memo
    if isinstance(node, Num):
        return Num(0.0)
    if isinstance(node, Var):
        return Num(1.0 if node.name == var else 0.0)
    if not _depends(node, var, memo):
        return Num(0.0)
    if isinstance(node, Neg):
        return neg(diff(node.a, var, memo))
    if isinstance(node, Bin):
        a, b = node.a, node.b
        da, db = diff(a, var, memo), diff(b, var, memo)
        if node.op == "+":
            return add(da, db)
        if node.op == "-":
            return sub(da, db)
        if node.op == "*":
            return add(mul(da, b), mul(a, db))
        if node.op == "/":
            if _num(db) == 0:
                return div(da, b)
            return sub(div(da, b), div(mul(a, db), power(b, Num(2.0))))
        if node.op == "**":
            if not _depends(b, var, memo):  # a ** const
                return mul(mul(b, power(a, sub(b, Num(1.0)))), da)
            return mul(node, add(mul(db, Call("log", a)), div(mul(b, da), a)))
    if isinstance(node, Call):
        u, du = node.arg, diff(node.arg, var, memo)
        fn = node.fn
        if fn == "sqrt":
            outer: Node = div(Num(1.0), mul(Num(2.0), node))
        elif fn == "exp":
            outer = node
        elif fn in ("log", "ln"):
            outer = div(Num(1.0), u)
        elif fn == "log10":
            outer = div(Num(1.0), mul(u, Num(math.log(10.0))))
        elif fn == "sin":
            outer = Call("cos", u)
        elif fn == "cos":
            outer = neg(Call("sin", u))
        elif fn == "tan":
            outer = div(Num(1.0), power(Call("cos", u), Num(2.0)))
        elif fn == "arcsin":
            outer = div(Num(1.0), Call("sqrt", sub(Num(1.0), power(u, Num(2.0)))))
        elif fn == "arccos":
            outer = neg(div(Num(1.0), Call("sqrt", sub(Num(1.0), power(u, Num(2.0))))))
        elif fn == "arctan":
            outer = div(Num(1.0), add(Num(1.0), power(u, Num(2.0))))
        elif fn == "sinh":
            outer = Call("cosh", u)
        elif fn == "cosh":
            outer = Call("sinh", u)
        elif fn == "tanh":
            outer = sub(Num(1.0), power(node, Num(2.0)))
        elif fn == "abs":
            outer = Call("sign", u)
        elif fn == "sign":
            outer = Num(0.0)  # zero almost everywhere
        else:  # pragma: no cover - FUNCTIONS and this table are kept in step
            raise ModelError(f"no derivative known for '{fn}'")
        return mul(outer, du)
    raise ModelError(f"cannot differentiate {node!r}")  # pragma: no cover


# --------------------------------------------------------------------------- evaluation
Env = Mapping[str, "np.ndarray | float"]


def compile_node(node: Node) -> Callable[[Env], np.ndarray]:
    """Compile the tree once into a closure ``f(env)``; numpy broadcasting does the rest."""
    if isinstance(node, Num):
        v = node.value
        return lambda env: v
    if isinstance(node, Var):
        name = node.name
        return lambda env: env[name]
    if isinstance(node, Neg):
        fa = compile_node(node.a)
        return lambda env: -fa(env)
    if isinstance(node, Call):
        f, fa = FUNCTIONS[node.fn], compile_node(node.arg)
        return lambda env: f(fa(env))
    if isinstance(node, Bin):
        fa, fb = compile_node(node.a), compile_node(node.b)
        op = node.op
        if op == "+":
            return lambda env: fa(env) + fb(env)
        if op == "-":
            return lambda env: fa(env) - fb(env)
        if op == "*":
            return lambda env: fa(env) * fb(env)
        if op == "/":
            return lambda env: np.divide(fa(env), fb(env))
        if isinstance(node.b, Num) and node.b.value == 2.0:
            return lambda env: np.square(fa(env))
        return lambda env: np.power(fa(env), fb(env))
    raise ModelError(f"cannot compile {node!r}")  # pragma: no cover


# --------------------------------------------------------------------------- printing
def to_text(node: Node, _parent: int = 0) -> str:
    """Write the tree back as an expression with only the parentheses it needs."""
    if isinstance(node, Num):
        v = node.value
        s = repr(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(v)
        return f"({s})" if v < 0 and _parent > 1 else s
    if isinstance(node, Var):
        return node.name
    if isinstance(node, Call):
        return f"{node.fn}({to_text(node.arg)})"
    if isinstance(node, Neg):
        s = "-" + to_text(node.a, _PREC["neg"])
        return f"({s})" if _parent > _PREC["neg"] else s
    if isinstance(node, Bin):
        p = _PREC[node.op]
        if node.op == "**":  # right-associative
            s = f"{to_text(node.a, p + 1)}**{to_text(node.b, p)}"
        else:
            s = f"{to_text(node.a, p)} {node.op} {to_text(node.b, p + 1)}"
        return f"({s})" if _parent > p else s
    raise ModelError(f"cannot print {node!r}")  # pragma: no cover
