"""Cross-checks that need the whole budget: run by the engine after propagation.

* **Effect of flagged glitches on U.** A ``cycles`` input that keeps cycles its robust screen
  flags (``cycles.glitch``, :mod:`budget.inputs.glitches`) states in its diagnostics the mean,
  u and ν without them (``glitches.if_rejected``). The budget is propagated once more (the
  same linear propagation, options and correlations) with that input replaced by a scaled and
  shifted t with those values, and the warning is extended with each measurand's value and
  expanded uncertainty U with and without the flagged cycles. Where that cannot be done (the
  module could not evaluate the cycles left, or the propagation without them fails, e.g. the
  model is undefined there) the warning says that the effect is unknown and why; it is never
  silently left out.
* **Plateau against n.** A ``pump`` input characterises the pump on one plateau (its
  ``plateau``, diagnostics ``plateau``); the spec's constant ``n`` is the electrons per cycle
  of the model I = n·e·f. When they differ the pump term belongs to another plateau than the
  current computed, and the result has no meaning: the warning ``pump.plateau_mismatch`` of
  severity ``"error"`` (``budget sign`` refuses it unless ``--accept-warnings``).
* **Current against n·e·f.** In a pump budget (:func:`pump_budget`: a chain, a ``pump``
  input, or a free-form model using the exact e and an integer n — never by input names
  alone) every measurand in a unit of current, and the current a chain reads (the
  ammeter-under-test's ``I_read``), is compared with the nominal n·e·f (:mod:`budget.nominal`:
  n and e from the constants, f from the frequency module's nominal value, a constant
  ``f0``/``f`` or the input ``f``). A relative deviation
  beyond :data:`PLAUSIBLE_DEVIATION` (1e-3, project convention: a pump on its plateau is within
  ~1e-5) is the warning ``pump.implausible_current`` of severity ``"error"``, naming the likely
  cause: a ratio I/(n·e·f) near −1 (deviation −2) is a reversed sign (pump column labels
  swapped, leads or polarity reversed), near m/n a record on plateau m (n = 2 on an n = 1
  record: deviation −1/2 = −(1 − 1/n)), near 10^(3k) a unit prefix (``unit = "mV"`` on a file
  in volts: deviation −0.999); otherwise it lists them all.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from .distributions import Distribution
from .errors import BudgetError
from .propagate import propagate_linear
from .warnings import Warning, warn

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from .model import Model
    from .quantity import Quantity
    from .result import Measurand
    from .spec import Spec

__all__ = ["after_propagation", "pump_budget", "PLAUSIBLE_DEVIATION", "ELEMENTARY_CHARGE"]


def after_propagation(warnings: list[Warning], spec: Spec, model: Model, qs: list[Quantity],
                      resolved: Any, measurands: tuple[Measurand, ...]
                      ) -> list[Warning]:
    """The warnings with the glitch effects added and the plateau check appended.

    ``resolved`` is the engine's ResolvedInputs (not imported here: the engine imports this
    module).
    """
    out = [_with_glitch_effect(w, spec, model, qs, resolved, measurands)
           if w.code == "cycles.glitch" else w for w in warnings]
    return (out + _plateau_check(spec, resolved.modules)
            + _plausibility(spec, model, qs, resolved, measurands))


def _diag(modules: dict[str, Any], name: str) -> dict[str, Any]:
    mod = modules.get(name)
    d = mod.get("diagnostics") if isinstance(mod, dict) else None
    return d if isinstance(d, dict) else {}


def _with_glitch_effect(w: Warning, spec: Spec, model: Model, qs: list[Quantity],
                        resolved: Any, measurands: tuple[Measurand, ...]) -> Warning:
    g = _diag(resolved.modules, w.input).get("glitches") or {}
    alt = g.get("if_rejected")
    if not alt:
        # the module's warning already says why the result without them is unknown
        return w if g.get("if_rejected_unavailable") else _unknown_effect(
            w, "the module gave no result without the flagged cycles")
    try:
        value, u, dof = float(alt["value_si"]), float(alt["u_si"]), float(alt["dof"])
        swapped = [replace(q, value=value, standard_uncertainty=u, dof=dof,
                           distribution=Distribution.student_t(value, u, dof))
                   if q.name == w.input else q for q in qs]
        lin, _ = propagate_linear(model, swapped, resolved.corr,
                                  coverage_probability=spec.coverage_probability,
                                  order=spec.propagation_order, dof_rounding=spec.dof_rounding,
                                  fixed_k=spec.coverage_factor, dof_groups=resolved.dof_groups)
    except (BudgetError, KeyError, TypeError, ValueError) as e:
        why = e.one_line() if isinstance(e, BudgetError) else f"{type(e).__name__}: {e}"
        return _unknown_effect(w, f"the budget propagated without them failed: {why}")
    parts, missing = [], []
    for m in measurands:
        if w.input not in {t.name for t in m.terms}:
            continue
        if m.name not in lin:
            missing.append(m.name)
            continue
        r = lin[m.name]
        unit = f" {m.unit}" if m.unit and m.unit != "1" else ""
        parts.append(f"{m.name} = {m.value:.6g} with U = {m.expanded_uncertainty:.2g}{unit} "
                     f"(k = {m.coverage_factor:.3g}) with them, {r.value:.6g} with U = "
                     f"{r.expanded_uncertainty:.2g}{unit} (k = {r.coverage_factor:.3g}) "
                     "without them")
    if missing:
        return _unknown_effect(w, "the propagation without them gave no result for "
                               + ", ".join(missing))
    if not parts:
        return replace(w, message=w.message + f"; no measurand depends on {w.input}")
    return replace(w, message=w.message + "; effect on the result: " + "; ".join(parts))


def _unknown_effect(w: Warning, why: str) -> Warning:
    """The glitch warning saying that the effect on the result is unknown, and why."""
    return replace(w, message=w.message + f"; effect on the result and its U NOT computed: "
                   f"{why} — the size of the flagged cycles' effect is unknown")


def _plateau_check(spec: Spec, modules: dict[str, Any]) -> list[Warning]:
    n = spec.constants.get("n")
    if isinstance(n, bool) or not isinstance(n, (int, float)) or not math.isfinite(n):
        return []
    out = []
    for name, mod in modules.items():
        if not isinstance(mod, dict) or mod.get("module") != "pump":
            continue
        plateau = _diag(modules, name).get("plateau")
        if isinstance(plateau, (int, float)) and not isinstance(plateau, bool) \
                and float(plateau) != float(n):
            out.append(warn("pump.plateau_mismatch",
                            f"plateau/n mismatch: the pump term is for plateau {plateau:g} "
                            f"([inputs.{name}] plateau) but the spec's constant n = {n:g}; "
                            "the model's n·e·f and the pump's δ then describe different "
                            "currents — set n to the plateau the pump ran on",
                            severity="error", input=name))
    return out


#: Project convention: a current further than this from n·e·f (relative) is not a pump on its
#: plateau. A quantized pump on its plateau is within ~1e-5 of n·e·f and the chain's
#: calibrated instruments within ~1e-5 of nominal, so 1e-3 is a hundred times beyond any
#: plausible pump or chain error and ten times below the smallest blunder it screens for
#: (a wrong n is off by ≥ 1/n − 1/(n+1) of n·e·f, a unit prefix by a factor 1000).
PLAUSIBLE_DEVIATION = 1e-3
#: How close (relative, on the ratio I/(n·e·f)) the ratio must come to a blunder's ratio to
#: be named as that blunder: 1 %, ten times the plausibility bound (project convention).
_BLUNDER_MATCH = 1e-2


def _blunders(ratio: float, n: float) -> list[str]:
    """Likely causes of I/(n·e·f) = ``ratio``, most specific first (empty: none recognised)."""
    out = []
    sign = -1.0 if ratio < 0 else 1.0
    mag = abs(ratio)
    flip = ("the sign is reversed: pump column labels on/off swapped, or the leads or the "
            "polarity reversed" if sign < 0 else "")
    # a unit prefix: |ratio| ≈ 10^(3k), k ≠ 0 (e.g. unit = "mV" on a file in volts: 10⁻³)
    k = round(math.log10(mag) / 3) if mag > 0 else 0
    if k and abs(mag / 10.0 ** (3 * k) - 1) < _BLUNDER_MATCH:
        out.append(f"the magnitude is off by 10^{3 * k}: a unit prefix (e.g. unit = \"mV\" "
                   "for readings in V, or the resistor in kΩ for Ω)")
    # another plateau: |ratio| ≈ m/n (integer m ≠ n, 1 ≤ m ≤ 2n)
    if n > 0 and not out:
        m = round(mag * n)
        if m >= 1 and m != round(n) and abs(mag * n / m - 1) < _BLUNDER_MATCH:
            out.append(f"the current is {m}/{n:g} of n·e·f: the record looks like plateau "
                       f"n = {m}, not the spec's n = {n:g}")
    if flip and (out or abs(mag - 1) < _BLUNDER_MATCH):
        out.insert(0, flip)
    return out


#: The elementary charge, C (exact since the 2019 SI; SI Brochure, 9th ed.).
ELEMENTARY_CHARGE = 1.602176634e-19


def pump_budget(spec: Spec, model: Model, modules: dict[str, Any]) -> str:
    """Why the budget is one of a pump's current (judged against n·e·f), or "" when not.

    By what the budget *is*, never by input names alone: a traceability chain
    (``[model] chain``, all of them pump chains), a ``pump`` input module, or a free-form model
    that states the relation itself — one output uses both the constant ``e`` equal to the
    exact elementary charge and the constant ``n``, a positive integer. A budget that merely
    has inputs or constants named n, e and f (e = 0.002 an error term, n a count of
    readings) is not one.
    """
    if spec.chain:
        return f"chain {spec.chain}"
    for name, mod in modules.items():
        if isinstance(mod, dict) and mod.get("module") == "pump":
            return f"pump input {name}"
    n, e = model.constants.get("n"), model.constants.get("e")
    if e == ELEMENTARY_CHARGE and isinstance(n, (int, float)) and not isinstance(n, bool) \
            and n >= 1 and float(n).is_integer() \
            and any({"n", "e"} <= model.uses(o) for o in model.outputs):
        return "the model's n·e"
    return ""


def _currents(spec: Spec, model: Model, qs: list[Quantity], resolved: Any,
              measurands: tuple[Measurand, ...]) -> list[tuple[str, float, str]]:
    """(name, value in A, input or "") of each current to judge: every current-valued
    measurand and, for a chain, each current it reads (the ammeter's ``I_read``)."""
    from . import expression as ex
    from .measurands import CHAIN_INPUTS
    from .result import display_scale
    from .units import UnitError, parse_unit
    out = []
    for m in measurands:
        try:
            unit = parse_unit(m.unit or "1")
        except UnitError:
            continue
        if unit.si != "A" or unit.is_offset:
            continue
        conv = display_scale(m.unit)
        out.append((m.name, m.value * (conv[0] if conv else 1.0), ""))
    if spec.chain:
        values = {q.name: q.value for q in qs}
        for name, info in spec.input_info.items():
            if tuple(info[:2]) != CHAIN_INPUTS["I_read"]:
                continue
            if name in values:
                out.append((name, values[name], name))
            elif name in resolved.inlined:     # a module's combining expression
                env = {**model.constants, **values}
                with np.errstate(all="ignore"):
                    v = float(ex.compile_node(resolved.inlined[name])(env))
                out.append((name, v, name))
    return out


def _plausibility(spec: Spec, model: Model, qs: list[Quantity], resolved: Any,
                  measurands: tuple[Measurand, ...]) -> list[Warning]:
    """Each current of a pump budget against the nominal n·e·f (module docstring)."""
    from .nominal import nominal_from
    if not pump_budget(spec, model, resolved.modules):
        return []
    point = nominal_from(model.constants, resolved.modules, qs)
    if point is None or not point.current_a or not math.isfinite(point.current_a):
        return []
    out = []
    for name, value, input_name in _currents(spec, model, qs, resolved, measurands):
        ratio = value / point.current_a
        dev = ratio - 1.0
        if not math.isfinite(dev) or abs(dev) <= PLAUSIBLE_DEVIATION:
            continue
        causes = _blunders(ratio, point.n)
        why = ("likely cause: " + "; ".join(causes)) if causes else (
            "check the sign and polarity (pump column labels, leads), n, the reading's unit "
            "and the frequency and resistor values")
        out.append(warn("pump.implausible_current",
                        f"{name} = {value:.7g} A is {dev:+.6g} (relative) from the nominal "
                        f"n·e·f = {point.current_a:.7g} A (n = {point.n:g}, f = "
                        f"{point.frequency_hz:.9g} Hz, {point.frequency_source}); a pump on "
                        f"its plateau is within ~1e-5, the bound is {PLAUSIBLE_DEVIATION:g}: "
                        f"{why}", severity="error", input=input_name))
    return out
