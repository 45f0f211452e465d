"""Inputs typed into the spec: Type B values from a certificate or specification, and Type A
from repeated ``observations``.

Keys of a typed-in ``[inputs.NAME]`` table:

* ``value`` and ``standard_uncertainty`` (normal by default), or ``expanded_uncertainty`` with
  ``coverage_factor`` (u = U/k, as a certificate states it) and optional
  ``coverage_probability`` (the p the certificate states k for, default 0.95): unless ``dof`` is
  given, ν follows from k = t_p(ν) (:func:`budget.coverage.dof_from_coverage_factor`, JCGM 100
  G.4–G.6), so that k = 2.87 at 95 % gives ν = 3.7; k below 1 is refused;
* ``distribution`` = normal, rectangular, triangular, arcsine, trapezoidal or student-t;
  bounded ones take ``low``/``high`` or ``value`` + ``half_width``; a triangular's ``value`` (or
  ``mode``) is its mode c, so its estimate is the expectation (a + b + c)/3 (JCGM 101 §6.4.5);
  trapezoidal needs ``beta`` (top width / base width); student-t takes ``value``,
  ``standard_uncertainty`` (its scale) and ``dof``;
* ``observations = [...]``: mean, u = s/√n, ν = n − 1, Type A (JCGM 100 §4.2); at least two
  readings, not all equal (equal readings carry no scatter to evaluate);
* optional ``dof``, ``unit``, ``description``, ``reason`` (why this distribution),
  ``source`` (certificate or document reference), ``evaluation`` ("A" or "B"),
  ``shared_as`` (a label naming the input's common cause across runs, e.g. a certificate
  number: ``budget compare`` treats the input as the same error in two records only when their
  labels match).

A zero standard uncertainty makes the input a constant (it appears in the model, not the budget).
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as np

from ..coverage import DEFAULT_CERTIFICATE_PROBABILITY, describe_inference, dof_from_coverage_factor
from ..distributions import KINDS, Distribution
from ..errors import BudgetError, SpecError, did_you_mean
from ..numbers import NumberError, checked, overflow_checked
from ..quantity import Provenance, Quantity
from .context import InputContext

__all__ = ["KEYS", "evaluate_direct", "observations_of"]

KEYS = frozenset({"value", "standard_uncertainty", "expanded_uncertainty", "coverage_factor",
                  "coverage_probability",
                  "distribution", "low", "high", "half_width", "mode", "beta", "dof", "unit",
                  "description", "reason", "source", "evaluation", "observations", "shared_as"})

_REASONS = {
    "normal": "normal: stated as a standard uncertainty (or U with k), as from a calibration "
              "certificate (JCGM 100 §4.3.3-4.3.4)",
    "rectangular": "rectangular: only bounds are known, any value between them equally likely "
                   "(JCGM 100 §4.3.7)",
    "triangular": "triangular: bounds known and values near the centre more likely "
                  "(JCGM 100 §4.3.9)",
    "arcsine": "arcsine (U-shaped): a quantity varying sinusoidally between its bounds "
               "(JCGM 101 §6.4.6)",
    "trapezoidal": "trapezoidal: bounds themselves inexactly known (JCGM 101 §6.4.4)",
    "student-t": "scaled and shifted Student t: a Type A result with few degrees of freedom "
                 "(JCGM 101 §6.4.9)",
}


def observations_of(ctx: InputContext) -> np.ndarray | None:
    """The ``observations`` list as a float array (None when absent)."""
    if "observations" not in ctx.table:
        return None
    obs = ctx.table["observations"]
    if not isinstance(obs, list):
        raise ctx.spec_error("observations", "must be a list of numbers")
    for i, v in enumerate(obs):
        try:
            checked(v)
        except NumberError as exc:
            raise ctx.spec_error("observations", f"entry {i + 1} {exc}") from None
    if len(obs) < 2:
        raise ctx.spec_error("observations", f"needs at least 2 readings; got {len(obs)}")
    arr = np.asarray(obs, dtype=float)
    # Identical readings give s = 0: s/√n = 0 would make the input an exact constant with no
    # budget row (a silent wrong number). Their uncertainty is set by the indication's
    # resolution instead (JCGM 100 F.2.2.1), which the user has to state.
    if np.ptp(arr) == 0:
        raise ctx.spec_error("observations", "all readings are equal, so s/√n = 0 is no "
                             "uncertainty; give value and standard_uncertainty instead (e.g. "
                             "from the resolution, JCGM 100 F.2.2.1)")
    return arr


def evaluate_direct(ctx: InputContext) -> Quantity:
    """Turn a typed-in table into a Quantity (see module docstring for the keys)."""
    t = ctx.table
    for key in t:
        if key not in KEYS:
            raise ctx.spec_error(key, f"unknown key{did_you_mean(key, KEYS | {'module', 'file'})}")
    ctx, unit, conv_note = in_si(ctx)
    t = ctx.table
    description = ctx.option("description", str, "")
    source = ctx.option("source", str, "")
    reason = ctx.option("reason", str, "")
    evaluation = ctx.option("evaluation", str, None)
    if evaluation is not None and evaluation not in ("A", "B"):
        raise ctx.spec_error("evaluation", f"must be \"A\" or \"B\"; got {evaluation!r}")
    obs = observations_of(ctx)
    if obs is not None:
        clash = [k for k in ("value", "standard_uncertainty", "expanded_uncertainty", "low",
                             "high", "half_width") if k in t]
        if clash:
            raise ctx.spec_error(clash[0], "give either observations or a value, not both")
        kind = ctx.choice("distribution", ("normal", "student-t"), "normal")
        n = obs.size
        mean, u = overflow_checked(lambda: (float(obs.mean()),
                                            float(obs.std(ddof=1) / math.sqrt(n))),
                                   "the mean or standard deviation of the observations",
                                   lambda msg: ctx.spec_error("observations", msg))
        dof = float(n - 1)
        if "dof" in t:
            raise ctx.spec_error("dof", "is n − 1 for observations; do not set it")
        dist = Distribution.normal(mean, u) if kind == "normal" else Distribution.student_t(
            mean, u, dof)
        prov = Provenance(
            origin="observations",
            method=f"arithmetic mean of {n} observations; u = s/√n (JCGM 100 §4.2.3)",
            distribution_reason=reason or (
                "normal: the mean of repeated observations (central limit theorem, "
                "JCGM 100 §4.2 and G.2)" if kind == "normal" else _REASONS[kind]),
            dof_reason=f"ν = n − 1 = {n - 1} (JCGM 100 §4.2.6)",
            notes=((source,) if source else ()) + conv_note)
        return _quantity(ctx, mean, u, dist, unit, dof, evaluation or "A", description, prov)

    kind = ctx.option("distribution", str, "normal")
    if kind not in KINDS:
        raise ctx.spec_error("distribution", f"unknown distribution {kind!r}"
                                             f"{did_you_mean(kind, KINDS)} (known: {', '.join(KINDS)})")
    dof = ctx.option("dof", float, math.inf, check=lambda x: x > 0, must="> 0")
    inferred = _dof_from_k(ctx)
    if inferred is not None:
        dof = inferred[0]
    try:
        dist = _distribution(ctx, kind, dof)
    except SpecError:
        raise
    except BudgetError as exc:
        raise ctx.spec_error(exc.field or "distribution", exc.message) from None
    value = dist.mean
    u = dist.std if kind != "student-t" else dist.scale
    if kind == "student-t":
        dof = dist.dof
    if inferred is not None:
        dof_reason = inferred[1]
    elif math.isfinite(dof):
        dof_reason = f"ν = {dof:g}, as stated"
    else:
        dof_reason = "ν = ∞: the uncertainty is taken as exactly known (no reliability stated)"
    notes: tuple[str, ...] = ()
    if kind == "triangular" and dist.loc != (dist.low + dist.high) / 2:
        c = dist.loc
        notes = (f"triangular: the stated {'value' if 'value' in t else 'mode'} {c!r} is the "
                 f"mode c; the estimate is the expectation (a + b + c)/3 = {value!r} and "
                 "u = √((a² + b² + c² − ab − ac − bc)/18) (JCGM 101 §6.4.5)",)
    how = f"typed in ({source})" if source else "typed in"
    prov = Provenance(origin="spec" if u > 0 else "constant",
                      method=f"{how}; u from the {kind} distribution's standard deviation"
                      if kind != "normal" else how,
                      distribution_reason=reason or _REASONS[kind], dof_reason=dof_reason,
                      notes=notes + conv_note)
    return _quantity(ctx, value, u, dist, unit, dof, evaluation or "B", description, prov)


#: Keys holding a value of the quantity (converted with scale and offset) and keys holding a
#: difference of values (scale only: an uncertainty in °C is one in K).
_ABSOLUTE = ("value", "low", "high", "mode")
_DIFFERENCE = ("standard_uncertainty", "expanded_uncertainty", "half_width")


def in_si(ctx: InputContext) -> tuple[InputContext, str, tuple[str, ...]]:
    """The input's table with its numbers in coherent SI, the SI unit and a provenance note.

    ``unit`` (default "1", dimensionless) is parsed once by :func:`budget.units.parse_unit`;
    values, bounds and observations convert as ``x * scale + offset``, uncertainties and half
    widths as ``x * scale``. An unknown unit is a SpecError at ``unit`` with a did-you-mean.
    """
    if "unit" not in ctx.table:
        return ctx, "1", ()
    text = ctx.option("unit", str)
    from ..units import UnitError, parse_unit
    try:
        unit = parse_unit(text)
    except UnitError as exc:
        raise ctx.spec_error("unit", str(exc)) from None
    shown = text.strip() if unit.dimensionless and unit.scale == 1 else unit.si
    if unit.scale == 1 and unit.offset == 0:
        return ctx, shown or "1", ()
    t = dict(ctx.table)

    def conv(v, absolute: bool):
        try:
            x = checked(v)
        except NumberError:
            return v  # left for the usual check, which names the key
        return x * unit.scale + (unit.offset if absolute else 0.0)

    for k in _ABSOLUTE + _DIFFERENCE:
        if k in t:
            t[k] = conv(t[k], k in _ABSOLUTE)
    if isinstance(t.get("observations"), list):
        t["observations"] = [conv(v, True) for v in t["observations"]]
    how = f"× {unit.scale:.17g}" + (f" + {unit.offset:.17g}" if unit.offset else "")
    note = (f"stated in {text.strip()}; converted to {shown} ({how}; uncertainties × "
            f"{unit.scale:.17g}) before propagation",)
    return replace(ctx, table=t), shown, note


def _dof_from_k(ctx: InputContext) -> tuple[float, str] | None:
    """ν from a stated coverage factor (module docstring), or None when it does not apply."""
    t = ctx.table
    if "coverage_probability" in t and "coverage_factor" not in t:
        raise ctx.spec_error("coverage_probability", "only goes with expanded_uncertainty and "
                                                     "coverage_factor")
    if "coverage_factor" not in t:
        return None
    k = ctx.number("coverage_factor", positive=True)
    if k < 1:
        raise ctx.spec_error("coverage_factor", "must be at least 1 (a smaller k would make "
                                                f"U smaller than u); got {k!r}")
    if "dof" in t:
        if "coverage_probability" in t:
            raise ctx.spec_error("coverage_probability", "give dof or coverage_probability, not "
                                                         "both (ν follows from k and p)")
        return None
    p = ctx.option("coverage_probability", float, DEFAULT_CERTIFICATE_PROBABILITY,
                   check=lambda x: 0 < x < 1, must="in (0, 1)")
    try:
        nu = dof_from_coverage_factor(k, p)
    except BudgetError as exc:
        raise ctx.spec_error(exc.field or "coverage_factor", exc.message) from None
    how = describe_inference(k, p, nu)
    if "coverage_probability" not in t:
        how += f"; p = {100 * p:g} % assumed (no coverage_probability given)"
    return nu, how


def _distribution(ctx: InputContext, kind: str, dof: float) -> Distribution:
    t = ctx.table
    if kind in ("normal", "student-t"):
        for k in ("low", "high", "half_width", "beta", "mode"):
            if k in t:
                raise ctx.spec_error(k, f"does not apply to a {kind} distribution")
        value = ctx.number("value")
        if "standard_uncertainty" in t and "expanded_uncertainty" in t:
            raise ctx.spec_error("expanded_uncertainty",
                                 "give standard_uncertainty or expanded_uncertainty, not both")
        if "expanded_uncertainty" in t:
            big_u = ctx.number("expanded_uncertainty", nonnegative=True)
            k = ctx.number("coverage_factor", positive=True)
            u = big_u / k
        else:
            if "coverage_factor" in t:
                raise ctx.spec_error("coverage_factor", "only goes with expanded_uncertainty")
            u = ctx.number("standard_uncertainty", nonnegative=True)
        if kind == "normal":
            return Distribution.normal(value, u)
        if not math.isfinite(dof):
            raise ctx.spec_error("dof", "a student-t distribution needs finite dof")
        return Distribution.student_t(value, u, dof)
    # bounded kinds
    for k in ("standard_uncertainty", "expanded_uncertainty", "coverage_factor"):
        if k in t:
            raise ctx.spec_error(k, f"a {kind} distribution is given by its bounds "
                                    "(low/high or value + half_width)")
    if "half_width" in t:
        if "low" in t or "high" in t:
            raise ctx.spec_error("half_width", "give low/high or value + half_width, not both")
        centre = ctx.number("value")
        hw = ctx.number("half_width", nonnegative=True)
        if hw == 0:
            raise ctx.spec_error("half_width", "must be > 0 (use standard_uncertainty = 0 for "
                                               "a constant)")
        low, high = centre - hw, centre + hw
    else:
        if "low" not in t or "high" not in t:
            raise ctx.spec_error("low", f"a {kind} distribution needs low and high "
                                        "(or value + half_width)")
        low, high = ctx.number("low"), ctx.number("high")
        if not low < high:
            raise ctx.spec_error("low", f"must be smaller than high; got low={low!r}, "
                                        f"high={high!r}")
        if "value" in t:
            v = ctx.number("value")
            mid = (low + high) / 2
            if kind != "triangular" and abs(v - mid) > 1e-12 * max(abs(mid), abs(high - low)):
                raise ctx.spec_error("value", f"must be the midpoint {mid!r} of low and high "
                                              f"(or leave it out); got {v!r}")
    if kind == "rectangular":
        return Distribution.rectangular(low, high)
    if kind == "triangular":
        # ``value`` with low/high names the mode c (the most likely value), not the estimate:
        # the estimate is the expectation (a + b + c)/3 (JCGM 101 §6.4.5). Ignoring it would
        # put the estimate at the midpoint without a word.
        if "mode" in t and "value" in t and "half_width" not in t:
            raise ctx.spec_error("mode", "give the mode as value or as mode, not both")
        key = "mode" if "mode" in t else ("value" if "value" in t else None)
        mode = ctx.number(key) if key else None
        try:
            return Distribution.triangular(low, high, mode)
        except BudgetError as exc:
            raise ctx.spec_error(key or "mode", exc.message) from None
    if kind == "arcsine":
        return Distribution.arcsine(low, high)
    beta = ctx.number("beta")
    return Distribution.trapezoidal(low, high, beta)


def _quantity(ctx: InputContext, value: float, u: float, dist: Distribution, unit: str,
              dof: float, evaluation: str, description: str, prov: Provenance) -> Quantity:
    # shared_as: the declared common cause across runs (``budget compare``); without it a
    # typed-in input is independent between runs, however alike its numbers
    label = ctx.option("shared_as", str, "", check=lambda v: v.strip() != "",
                       must="a non-empty label")
    prov = Provenance(**{**prov.__dict__, "shared_as": label.strip()})
    try:
        return Quantity(name=ctx.name, value=value, standard_uncertainty=u, distribution=dist,
                        unit=unit, dof=dof, evaluation=evaluation, description=description,
                        provenance=prov)
    except BudgetError as exc:
        raise ctx.spec_error("value", exc.message) from None


def table_kind(table: dict[str, Any]) -> str:
    """"module" when the table names an input module, else "direct"."""
    return "module" if "module" in table else "direct"
