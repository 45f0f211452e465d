"""The pump's operating point beside the result: plateau n, drive frequency f, nominal n·e·f.

A quantized current source is judged against I = n·e·f (e exact in the SI since 2019); a
reader of a result needs n, f and the nominal current beside it. They are read from the
budget: ``n`` and ``e`` from the constants, f from the frequency input module's nominal
value (``nominal_Hz``), else from a constant ``f0`` or ``f``, else from an input named ``f``;
the plateau and the operating point from a pump input module's diagnostics.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from .result import Budget

__all__ = ["NominalPoint", "nominal_point", "nominal_from", "nominal_text"]


@dataclass(frozen=True)
class NominalPoint:
    """n, f and n·e·f of a pump budget.

    Attributes
    ----------
    n : float
        Electrons per cycle (the plateau).
    frequency_hz : float
        Drive frequency f in Hz (nominal where the budget states one).
    frequency_source : str
        Where f was read (``"nominal value of the input f"``, ``"constant f0"``, ...).
    current_a : float
        n·e·f in A.
    operating_point : dict
        The pump module's operating point (e.g. ``{"gate_voltage": -0.558}``), else empty.
    """

    n: float
    frequency_hz: float
    frequency_source: str
    current_a: float
    operating_point: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"n": self.n, "frequency_hz": self.frequency_hz,
                "frequency_source": self.frequency_source, "current_a": self.current_a,
                "operating_point": dict(self.operating_point)}


def _number(x: Any) -> float | None:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return None
    return float(x)


def nominal_point(b: Budget) -> NominalPoint | None:
    """The operating point of ``b``, or None when the budget has no n, e and f.

    Parameters
    ----------
    b : Budget

    Returns
    -------
    NominalPoint or None
    """
    modules = b.run.get("modules") if isinstance(b.run.get("modules"), dict) else {}
    return nominal_from(b.run.get("constants") or {}, modules, b.inputs)


def nominal_from(const: dict[str, Any], modules: dict[str, Any],
                 inputs: Any) -> NominalPoint | None:
    """The operating point from a budget's parts (before the Budget is made).

    Parameters
    ----------
    const : dict
        The model's constants (``n``, ``e``, ``f0`` or ``f``), SI.
    modules : dict
        The input modules' entries (``module``, ``diagnostics``), as in the record's run.
    inputs : iterable of Quantity
        The input quantities (an input ``f`` in Hz is the last resort for f).

    Returns
    -------
    NominalPoint or None
    """
    n, e = _number(const.get("n")), _number(const.get("e"))
    if n is None or e is None:
        return None
    f = source = None
    point: dict[str, Any] = {}
    for name, mod in modules.items():
        if not isinstance(mod, dict):
            continue
        diag = mod.get("diagnostics") if isinstance(mod.get("diagnostics"), dict) else {}
        if mod.get("module") == "frequency" and _number(diag.get("nominal_Hz")) is not None:
            f, source = _number(diag["nominal_Hz"]), f"nominal value of the input {name}"
        if mod.get("module") == "pump":
            plateau = _number(diag.get("plateau"))
            if plateau is not None:
                n = plateau
            op = diag.get("operating_point")
            if isinstance(op, dict):
                point = {str(k): v for k, v in op.items() if _number(v) is not None}
    for key in ("f0", "f"):
        if f is None and _number(const.get(key)) is not None:
            f, source = _number(const[key]), f"constant {key}"
    if f is None:
        for q in inputs:
            if q.name == "f" and q.unit == "Hz":
                f, source = q.value, "estimate of the input f"
    if f is None:
        return None
    return NominalPoint(n=n, frequency_hz=f, frequency_source=source or "",
                        current_a=n * e * f, operating_point=point)


def nominal_text(p: NominalPoint) -> str:
    """One plain-text line: ``plateau n = 1, drive frequency f = 600 MHz (...), n·e·f = ... A``.

    n·e·f is given to 10 significant digits (e is exact, f as stated), f in MHz from 1 MHz
    up, otherwise in Hz; renderers typeset the exponent.
    """
    from .fmt import fmt_num
    f = p.frequency_hz
    f_text = f"{f / 1e6:.12g} MHz" if abs(f) >= 1e6 else f"{f:.12g} Hz"
    n_text = f"{p.n:g}"
    out = (f"plateau n = {n_text}, drive frequency f = {f_text} ({p.frequency_source}), "
           f"nominal current n·e·f = {fmt_num(p.current_a, 10)} A")
    if p.operating_point:
        out += "; operating point " + ", ".join(f"{k} = {fmt_num(float(v), 4)}"
                                                for k, v in p.operating_point.items())
    return out
