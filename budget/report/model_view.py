"""The measurement model as the report and certificate show it: each output's equation typeset
(:mod:`budget.report.maths`) and a table of the symbols in it with their units and meanings.

Read from the record alone: ``run.model`` (output -> expression as written), ``run.outputs``
(symbol, name, definition of each output; :mod:`budget.measurands`), ``run.input_symbols``
(a chain's symbol, meaning and unit of its inputs), ``run.constants`` and the inputs.
Records written before these keys existed get the names as symbols and blank meanings.
"""

from __future__ import annotations

from typing import Any

from markupsafe import Markup, escape

from .. import expression as ex
from ..measurands import CONSTANT_MEANINGS, SYMBOL_RE
from ..result import Budget
from . import maths
from .figures import svg_data_uri

__all__ = ["model_view", "symbol_html"]


def symbol_html(symbol: str) -> Markup:
    """``I_P`` → ``<i>I</i><sub>P</sub>`` (a one-letter base in italic, ISO 80000-1 §7.1)."""
    m = SYMBOL_RE.fullmatch(symbol)
    base, sub = (m.group(1), m.group(2)) if m else (symbol, None)
    core = base.rstrip("'")
    if len(core) == 1:
        head = Markup("<i>{}</i>").format(core)
    elif len(core) == 2 and core[0] == "Δ":          # ΔV: the operator upright, V italic
        head = Markup("Δ<i>{}</i>").format(core[1])
    else:
        head = escape(core)
    head += escape(base[len(core):].replace("'", "′"))
    return head + (Markup("<sub>{}</sub>").format(sub) if sub else Markup(""))


def _input_unit(b: Budget, name: str) -> str:
    """The unit of an input as the model names it: the quantity's own, else the one unit other
    than 1 among its module's quantities ("" when that is not certain)."""
    for q in b.inputs:
        if q.name == name:
            return q.unit
    mod = (b.run.get("modules") or {}).get(name)
    if not isinstance(mod, dict) or not mod.get("expression"):
        return ""
    try:
        parts = ex.names(ex.parse(str(mod["expression"])))
    except Exception:  # noqa: BLE001 - an unreadable stored expression: say nothing
        return ""
    units = {q.unit for q in b.inputs if q.name in parts and q.unit not in ("", "1")}
    return units.pop() if len(units) == 1 else ""


_ORIGINS = {"spec": "typed in (Type B)", "observations": "typed-in observations (Type A)",
            "constant": "typed in, no uncertainty"}


def _origin(b: Budget, name: str) -> str:
    for q in b.inputs:
        if q.name == name:
            o = q.provenance.origin
            return (f"from the {o[7:]} module" if o.startswith("module:")
                    else _ORIGINS.get(o, o))
    mod = (b.run.get("modules") or {}).get(name)
    if isinstance(mod, dict) and mod.get("module"):
        return f"from the {mod['module']} module"
    return ""


def _in_order(node: ex.Node) -> list[str]:
    """The names of a tree in the order they are written (left to right), each once."""
    out: list[str] = []
    stack = [node]
    while stack:
        n = stack.pop()
        if isinstance(n, ex.Var):
            if n.name not in out:
                out.append(n.name)
        elif isinstance(n, ex.Bin):
            stack += [n.b, n.a]
        elif isinstance(n, (ex.Neg, ex.Call)):
            stack.append(n.a if isinstance(n, ex.Neg) else n.arg)
    return out


def model_view(b: Budget) -> dict[str, Any]:
    """``{"equations": [...], "symbols": [...]}`` for the templates.

    equations : list of dict
        ``output``, ``text`` (``name = expression`` as written), ``image`` (an SVG data URI,
        or "" when the model is too large or cannot be typeset: the text is then shown).
    symbols : list of tuple
        (symbol as HTML, quantity, unit, meaning or origin) for the outputs, then every input
        and constant the written model uses.
    """
    run = b.run
    model = {str(k): str(v) for k, v in (run.get("model") or {}).items()}
    outputs = run.get("outputs") or {}
    chain_inputs = run.get("input_symbols") or {}
    sym = {k: str(v.get("symbol") or k) for k, v in outputs.items() if isinstance(v, dict)}
    sym.update({k: str(v[0]) for k, v in chain_inputs.items() if v})
    equations, used = [], []
    for name, text in model.items():
        try:
            tree = ex.parse(text)
        except Exception:  # noqa: BLE001 - shown as text
            tree = None
        image = ""
        if tree is not None:
            used += [n for n in _in_order(tree) if n not in used]
            tex = maths.equation_tex(sym.get(name, name), text, sym)
            svg = maths.equation_svg(tex) if tex else None
            image = svg_data_uri(svg) if svg else ""
        equations.append({"output": name, "text": f"{name} = {text}", "image": image})
    units = {m.name: m.unit for m in b.measurands}
    rows = []
    for name in model:
        d = outputs.get(name) if isinstance(outputs.get(name), dict) else {}
        rows.append((symbol_html(sym.get(name, name)), d.get("name", ""), units.get(name, ""),
                     d.get("definition", "") or "output of the model"))
    constants = run.get("constants") or {}
    used = [n for n in used if n not in constants] + [n for n in used if n in constants]
    for name in used:
        if name in model:
            continue
        if name in constants:
            meaning, unit = CONSTANT_MEANINGS.get(name, ("constant", ""))
            rows.append((symbol_html(sym.get(name, name)), meaning, unit,
                         "constant, " + f"{float(constants[name]):.10g}"))
            continue
        chain = chain_inputs.get(name) or []
        meaning = str(chain[1]) if len(chain) > 1 else next(
            (q.description for q in b.inputs if q.name == name), "")
        unit = (str(chain[2]) if len(chain) > 2 and chain[2] else _input_unit(b, name))
        rows.append((symbol_html(sym.get(name, name)), meaning, unit,
                     "input, " + (_origin(b, name) or "see the input details")))
    chain = [{"symbol": r[0], "meaning": r[1], "unit": r[2],
              "origin": r[3].removeprefix("input, "),
              "files": _files_of(b, name)}
             for name, r in zip([n for n in used if n not in model and n not in constants],
                                [r for r in rows[len(model):] if not
                                 str(r[3]).startswith("constant")])]
    return {"equations": equations, "symbols": rows, "chain": chain}


def _files_of(b: Budget, name: str) -> str:
    """The data files an input was read from (by name), for the chain diagram."""
    mod = (b.run.get("modules") or {}).get(name)
    names = set(mod.get("quantities") or []) if isinstance(mod, dict) else {name}
    files = []
    for q in b.inputs:
        if q.name in names or q.name == name:
            files += [f.path.rsplit("/", 1)[-1] for f in q.provenance.files
                      if f.path.rsplit("/", 1)[-1] not in files]
    return ", ".join(files)
