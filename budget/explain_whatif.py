"""What-if scenarios for the auditor beyond "u halved" and "term removed", from the record alone.

* :func:`recalibrated` — input X recalibrated to a new standard uncertainty u (in X's unit);
  its ν is kept as recorded (a new certificate states its own; say so when it differs).
* :func:`measured_longer` — the on/off record T hours longer: each Type A row of a ``cycles``
  module scales from the record's own noise analysis. With N cycles of period P used and
  N' = N + T·3600 s/P, white noise gives u' = u·√(N/N') and ν' = ν·N'/N (JCGM 100 §4.2.3:
  s/√n); the Allan-variance model fitted in the record, σ²(N) = S²/N + floor (white plus a
  flicker floor, IEEE Std 1139 (memory)), gives u' = u·√(σ²(N')/σ²(N)). Both are stated;
  the record's whiteness test says which applies.

u_c, ν_eff, k and U are recombined by :func:`budget.explain.combine_terms` (the same law of
propagation as the engine).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from .errors import UsageError, did_you_mean
from .explain import Recomputed, combine_terms
from .result import Budget, Measurand

__all__ = ["Scenario", "recalibrated", "measured_longer", "scenarios"]


@dataclass(frozen=True)
class Scenario:
    """One what-if line: the measurand, the recombined result and how it was obtained."""

    measurand: str
    unit: str
    result: Recomputed
    basis: str

    def to_dict(self) -> dict[str, Any]:
        return {"measurand": self.measurand, "unit": self.unit, **self.result.to_dict(),
                "basis": self.basis}


def _changed(m: Measurand, w: Recomputed) -> Recomputed:
    ch = ((w.expanded_uncertainty - m.expanded_uncertainty) / m.expanded_uncertainty
          if m.expanded_uncertainty > 0 else None)
    return Recomputed(w.label, w.standard_uncertainty, w.effective_dof, w.coverage_factor,
                      w.expanded_uncertainty, ch)


def recalibrated(budget: Budget, m: Measurand, name: str, u_new: float) -> Scenario:
    """Input ``name`` recalibrated to standard uncertainty ``u_new`` (its own unit).

    Raises
    ------
    UsageError
        ``name`` is not a term of ``m`` (with a did-you-mean), or ``u_new`` is negative or
        not finite.
    """
    terms = {t.name: t for t in m.terms}
    if name not in terms:
        raise UsageError(f"no term '{name}' in the budget of {m.name}"
                         f"{did_you_mean(name, terms)}", field="--recalibrate")
    if not (math.isfinite(u_new) and u_new >= 0):
        raise UsageError(f"the new u of {name} must be a finite number >= 0; got {u_new!r}",
                         field="--recalibrate")
    t = terms[name]
    factor = u_new / t.standard_uncertainty if t.standard_uncertainty > 0 else 0.0
    unit = f" {t.unit}" if t.unit not in ("", "1") else ""
    w = combine_terms(budget, m, {name: factor}, f"{name} recalibrated to u = {u_new:.3g}{unit}")
    return Scenario(m.name, m.unit, _changed(m, w),
                    f"u({name}) {t.standard_uncertainty:.3g} → {u_new:.3g}{unit}; ν = "
                    f"{'∞' if math.isinf(t.dof) else f'{t.dof:.4g}'} kept as recorded")


def _number(d: Mapping[str, Any], *path: str) -> float | None:
    x: Any = d
    for p in path:
        x = x.get(p) if isinstance(x, Mapping) else None
    return float(x) if isinstance(x, (int, float)) and not isinstance(x, bool) and \
        math.isfinite(x) else None


def measured_longer(budget: Budget, m: Measurand, hours: float) -> tuple[Scenario, ...]:
    """The on/off record ``hours`` longer (see the module docstring for the two laws).

    Raises
    ------
    UsageError
        ``hours`` not positive, or no Type A row of a ``cycles`` module in ``m`` whose record
        states the cycles used and the cycle period.
    """
    if not (math.isfinite(hours) and hours > 0):
        raise UsageError(f"must be a positive number of hours; got {hours!r}", field="--longer")
    white_f: dict[str, float] = {}
    floor_f: dict[str, float] = {}
    dofs: dict[str, float] = {}
    words, white_said = [], []
    for spec_name, mod in (budget.run.get("modules") or {}).items():
        if not isinstance(mod, dict) or mod.get("module") != "cycles":
            continue
        d = mod.get("diagnostics") or {}
        n, period = _number(d, "cycles_used"), _number(d, "cycle_period_s")
        rows = [t for t in m.terms if t.name in (mod.get("quantities") or [])
                and t.evaluation == "A"]
        if not rows or not n or not period:
            continue
        n_new = n + hours * 3600.0 / period
        s2, floor = _number(d, "allan", "fit", "white_scale_S2"), \
            _number(d, "allan", "fit", "floor_avar")
        for t in rows:
            white_f[t.name] = math.sqrt(n / n_new)
            dofs[t.name] = t.dof * n_new / n if math.isfinite(t.dof) else t.dof
            if s2 is not None and floor is not None and s2 / n + floor > 0:
                floor_f[t.name] = math.sqrt((s2 / n_new + floor) / (s2 / n + floor))
        words.append(f"{spec_name}: {n:.0f} → {n_new:.0f} cycles of {period:g} s")
        white = (d.get("white_noise") or {}).get("white")
        white_said.append(f"{spec_name}: the record's whiteness test "
                          + ("finds white noise" if white is True else
                             "rejects white noise" if white is False else "was not run"))
    if not white_f:
        raise UsageError("--longer needs a Type A row of a cycles module (an on/off record "
                         f"with its cycles and cycle period) in the budget of {m.name}; it "
                         "has none", field="--longer")
    out = [Scenario(m.name, m.unit, _changed(m, combine_terms(
        budget, m, white_f, f"{hours:g} h longer, white noise", dofs)),
        "; ".join(words) + "; u·√(N/N'), ν·N'/N; " + "; ".join(white_said))]
    if floor_f:
        out.append(Scenario(m.name, m.unit, _changed(m, combine_terms(
            budget, m, floor_f, f"{hours:g} h longer, fitted floor", dofs)),
            "the record's Allan fit σ²(N) = S²/N + floor: u·√(σ²(N')/σ²(N)); ν·N'/N"))
    return tuple(out)


def scenarios(budget: Budget, measurands: tuple[Measurand, ...],
              recalibrate: Mapping[str, float], longer_h: float | None) -> tuple[Scenario, ...]:
    """Every asked scenario for each measurand that has the terms it needs."""
    out: list[Scenario] = []
    for m in measurands:
        names = {t.name for t in m.terms}
        for name, u in recalibrate.items():
            if name in names or len(measurands) == 1:
                out.append(recalibrated(budget, m, name, u))
        if longer_h is not None:
            try:
                out += measured_longer(budget, m, longer_h)
            except UsageError:
                if len(measurands) == 1:
                    raise
    if recalibrate and not any(s.result.label.split(" ")[0] in recalibrate for s in out):
        name = next(iter(recalibrate))
        recalibrated(budget, measurands[0], name, recalibrate[name])   # raises, located
    if longer_h is not None and not any("longer" in s.result.label for s in out):
        measured_longer(budget, measurands[0], longer_h)                # raises, located
    return tuple(out)
