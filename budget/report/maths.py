"""The measurement model typeset as mathematics: the parsed expression tree → matplotlib's
mathtext (its own TeX-like parser and STIX fonts; no LaTeX installation) → an SVG whose glyphs
are paths, so the PDF needs no font for it.

Typesetting follows ISO 80000-1 §7 and the SI Brochure §5.4 (common practice): quantity
symbols in italic, descriptive subscripts upright, functions upright (exp, ln, sin …), a
product of symbols written by juxtaposition with a thin space, a quotient as a fraction, a
number times a power of ten as ``1.6 × 10⁻¹⁹``.
"""

from __future__ import annotations

import io
import math
import re
from collections.abc import Mapping

from .. import expression as ex
from ..measurands import SYMBOL_RE

__all__ = ["symbol_tex", "tree_tex", "equation_tex", "equation_svg", "MAX_NODES"]

#: Larger models are shown as text only (a typeset line of hundreds of symbols helps no-one).
MAX_NODES = 120

_GREEK = ("alpha", "beta", "gamma", "delta", "epsilon", "zeta", "eta", "theta", "iota",
          "kappa", "lambda", "mu", "nu", "xi", "pi", "rho", "sigma", "tau", "upsilon", "phi",
          "chi", "psi", "omega")
_GREEK_WORDS = {**{g: "\\" + g for g in _GREEK},
                **{g.capitalize(): "\\" + g.capitalize() for g in
                   ("gamma", "delta", "theta", "lambda", "xi", "pi", "sigma", "upsilon", "phi",
                    "psi", "omega")},
                "eps": r"\epsilon"}
_GREEK_CHARS = {chr(0x3b1 + i): "\\" + g for i, g in enumerate(
    ("alpha", "beta", "gamma", "delta", "epsilon", "zeta", "eta", "theta", "iota", "kappa",
     "lambda", "mu", "nu", "xi", "omicron", "pi", "rho", "varsigma", "sigma", "tau", "upsilon",
     "phi", "chi", "psi", "omega"))}
_GREEK_CHARS.update({"Δ": r"\Delta", "Ω": r"\Omega", "Φ": r"\Phi", "Σ": r"\Sigma",
                     "Γ": r"\Gamma", "Θ": r"\Theta", "Λ": r"\Lambda", "Π": r"\Pi",
                     "Ψ": r"\Psi"})
_GREEK_CHARS.pop("ο")
_FUNCS = {"exp": r"\exp", "log": r"\ln", "ln": r"\ln", "log10": r"\log_{10}",
          "sin": r"\sin", "cos": r"\cos", "tan": r"\tan", "arcsin": r"\arcsin",
          "arccos": r"\arccos", "arctan": r"\arctan", "sinh": r"\sinh", "cosh": r"\cosh",
          "tanh": r"\tanh", "sign": r"\mathrm{sgn}"}


def _word(text: str, *, upright: bool) -> str:
    """One letter in italic (upright when ``upright``), a Greek name as its letter, a word of
    Latin letters upright ("ratio" is not r·a·t·i·o), Greek letters mapped (ΔV → \\Delta V)."""
    if text in _GREEK_WORDS:
        return _GREEK_WORDS[text]
    mapped = "".join(_GREEK_CHARS[c] + " " if c in _GREEK_CHARS else c for c in text).strip()
    if len(text) == 1:
        return r"\mathrm{" + mapped + "}" if upright and mapped == text else mapped
    if re.fullmatch(r"[A-Za-z0-9]+", text):
        return r"\mathrm{" + text + "}"
    return mapped


def symbol_tex(symbol: str) -> str:
    """Mathtext of a symbol ``"I_P"`` → ``I_{\\mathrm{P}}``; a name that is not of that form
    (``"dV"``, ``"x_1_a"``) is set upright as written, underscores kept as subscripts."""
    m = SYMBOL_RE.fullmatch(symbol)
    if m is None:
        parts = symbol.split("_")
        return _word(parts[0], upright=True) + "".join(
            "_{" + _word(p, upright=True) + "}" for p in parts[1:] if p)
    base, sub = m.group(1), m.group(2)
    if sub is None and (d := re.fullmatch(r"([^\W\d_]+)(\d+)", base)):
        base, sub = d.group(1), d.group(2)          # f0 → f_0, x12 → x_12
    primes = len(base) - len(base.rstrip("'"))
    core = base.rstrip("'")
    text = _word(core, upright=False) + ("^{" + "\\prime" * primes + "}" if primes else "")
    if sub:
        text += "_{" + ",".join(_word(s, upright=True) for s in sub.split(",")) + "}"
    return text


def _number(v: float) -> str:
    if v == 0:
        return "0"
    k = math.floor(math.log10(abs(v)))
    if abs(k) >= 4:
        mant = v / 10.0 ** k
        if abs(mant - round(mant)) < 1e-12 and round(mant) == 1:
            return f"10^{{{k}}}"
        m = f"{mant:.12g}"
        return rf"{m} \times 10^{{{k}}}"
    return f"{v:.12g}"


_PREC = {"+": 1, "-": 1, "*": 2, "/": 3, "neg": 2, "**": 4}


def _prec(node: ex.Node) -> int:
    if isinstance(node, ex.Bin):
        return _PREC[node.op]
    if isinstance(node, ex.Neg):
        return _PREC["neg"]
    if isinstance(node, ex.Num) and node.value < 0:
        return _PREC["neg"]
    return 9


def _paren(text: str) -> str:
    return r"\left(" + text + r"\right)"


def tree_tex(node: ex.Node, symbols: Mapping[str, str]) -> str:
    """Mathtext of an expression tree; ``symbols`` maps names to symbols (``dV`` → ``ΔV``)."""
    def go(n: ex.Node) -> str:
        if isinstance(n, ex.Num):
            return _number(n.value)
        if isinstance(n, ex.Var):
            return symbol_tex(symbols.get(n.name, n.name))
        if isinstance(n, ex.Neg):
            inner = go(n.a)
            return "-" + (_paren(inner) if _prec(n.a) <= 2 else inner)
        if isinstance(n, ex.Call):
            arg = go(n.arg)
            if n.fn == "sqrt":
                return r"\sqrt{" + arg + "}"
            if n.fn == "abs":
                return r"\left|" + arg + r"\right|"
            return _FUNCS[n.fn] + _paren(arg)
        assert isinstance(n, ex.Bin)
        a, b = go(n.a), go(n.b)
        if n.op == "/":
            return r"\dfrac{" + a + "}{" + b + "}"
        if n.op == "**":
            base = a if isinstance(n.a, ex.Var) or (isinstance(n.a, ex.Num) and n.a.value >= 0
                                                     and "times" not in a) else _paren(a)
            return base + "^{" + b + "}"
        if n.op == "*":
            a = _paren(a) if _prec(n.a) < 2 else a
            b = _paren(b) if _prec(n.b) <= 2 and not isinstance(n.b, ex.Bin) or \
                _prec(n.b) < 2 else b
            dot = isinstance(n.b, ex.Num) or (isinstance(n.a, ex.Num) and "times" in a)
            return a + (r" \cdot " if dot else r"\,") + b
        if n.op == "-":
            b = _paren(b) if _prec(n.b) <= 1 or (isinstance(n.b, ex.Num) and n.b.value < 0) \
                else b
            return a + " - " + b
        b = _paren(b) if isinstance(n.b, ex.Num) and n.b.value < 0 else b
        return a + " + " + b
    return go(node)


def equation_tex(lhs: str, expression: str, symbols: Mapping[str, str]) -> str | None:
    """``$lhs = …$`` for mathtext, or None when the model is too large to typeset."""
    tree = ex.parse(expression)
    if ex.size(tree) > MAX_NODES:
        return None
    return "$" + symbol_tex(lhs) + " = " + tree_tex(tree, symbols) + "$"


_RC = {"svg.fonttype": "path", "svg.hashsalt": "qcs-budget-maths", "mathtext.fontset": "stix",
       "font.size": 12.5}


def equation_svg(tex: str) -> str | None:
    """The SVG text of one mathtext line (glyphs as paths, no time stamp), or None when
    mathtext cannot typeset it (the caller then shows the expression as text)."""
    import matplotlib
    from matplotlib.figure import Figure
    with matplotlib.rc_context(_RC):
        fig = Figure(figsize=(0.1, 0.1))
        fig.text(0, 0, tex)
        buf = io.StringIO()
        try:
            fig.savefig(buf, format="svg", metadata={"Date": None}, bbox_inches="tight",
                        pad_inches=0.02, transparent=True)
        except ValueError:     # mathtext's ParseFatalException is a ValueError
            return None
    return buf.getvalue()
