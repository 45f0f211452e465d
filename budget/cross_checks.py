"""Cross-checks that need the whole budget: run by the engine after propagation.

* **Effect of flagged glitches on U.** A ``cycles`` input that keeps cycles its robust screen
  flags (``cycles.glitch``, :mod:`budget.inputs.glitches`) states in its diagnostics the mean,
  u and ν without them (``glitches.if_rejected``). The budget is propagated once more (the
  same linear propagation, options and correlations) with that input replaced by a scaled and
  shifted t with those values, and the warning is extended with each measurand's value and
  expanded uncertainty U with and without the flagged cycles.
* **Plateau against n.** A ``pump`` input characterises the pump on one plateau (its
  ``plateau``, diagnostics ``plateau``); the spec's constant ``n`` is the electrons per cycle
  of the model I = n·e·f. When they differ the pump term belongs to another plateau than the
  current computed, and the result has no meaning: the warning ``pump.plateau_mismatch`` of
  severity ``"error"`` (``budget sign`` refuses it unless ``--accept-warnings``).
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import TYPE_CHECKING, Any

from .distributions import Distribution
from .errors import BudgetError
from .propagate import propagate_linear
from .warnings import Warning, warn

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from .model import Model
    from .quantity import Quantity
    from .result import Measurand
    from .spec import Spec

__all__ = ["after_propagation"]


def after_propagation(warnings: list[Warning], spec: Spec, model: Model, qs: list[Quantity],
                      resolved: Any, measurands: tuple[Measurand, ...]
                      ) -> list[Warning]:
    """The warnings with the glitch effects added and the plateau check appended.

    ``resolved`` is the engine's ResolvedInputs (not imported here: the engine imports this
    module).
    """
    out = [_with_glitch_effect(w, spec, model, qs, resolved, measurands)
           if w.code == "cycles.glitch" else w for w in warnings]
    return out + _plateau_check(spec, resolved.modules)


def _diag(modules: dict[str, Any], name: str) -> dict[str, Any]:
    mod = modules.get(name)
    d = mod.get("diagnostics") if isinstance(mod, dict) else None
    return d if isinstance(d, dict) else {}


def _with_glitch_effect(w: Warning, spec: Spec, model: Model, qs: list[Quantity],
                        resolved: Any, measurands: tuple[Measurand, ...]) -> Warning:
    alt = (_diag(resolved.modules, w.input).get("glitches") or {}).get("if_rejected")
    if not alt or "value_si" not in alt:
        return w
    value, u, dof = float(alt["value_si"]), float(alt["u_si"]), float(alt["dof"])
    swapped = [replace(q, value=value, standard_uncertainty=u, dof=dof,
                       distribution=Distribution.student_t(value, u, dof))
               if q.name == w.input else q for q in qs]
    try:
        lin, _ = propagate_linear(model, swapped, resolved.corr,
                                  coverage_probability=spec.coverage_probability,
                                  order=spec.propagation_order, dof_rounding=spec.dof_rounding,
                                  fixed_k=spec.coverage_factor, dof_groups=resolved.dof_groups)
    except BudgetError:
        return w
    parts = []
    for m in measurands:
        if w.input not in {t.name for t in m.terms} or m.name not in lin:
            continue
        r = lin[m.name]
        unit = f" {m.unit}" if m.unit and m.unit != "1" else ""
        parts.append(f"{m.name} = {m.value:.6g} with U = {m.expanded_uncertainty:.2g}{unit} "
                     f"(k = {m.coverage_factor:.3g}) with them, {r.value:.6g} with U = "
                     f"{r.expanded_uncertainty:.2g}{unit} (k = {r.coverage_factor:.3g}) "
                     "without them")
    if not parts:
        return w
    return replace(w, message=w.message + "; effect on the result: " + "; ".join(parts))


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
