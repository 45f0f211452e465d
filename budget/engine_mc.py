"""The Monte Carlo outcome of each measurand: the JCGM 101 §8 verdict with the Monte Carlo's
own numerical accuracy, and the notes and warnings that go with it (part of the engine)."""

from __future__ import annotations

import math
from collections.abc import Sequence

from .propagate import compare_lpu_mcm
from .propagate.mcm import McmResult, infinite_variance_inputs
from .propagate.mcm_notes import inconclusive_message, mc_accuracy_notes
from .quantity import Quantity
from .result import Measurand, MonteCarlo
from .spec import Spec
from .warnings import Warning, warn

__all__ = ["monte_carlo_outcomes"]


def monte_carlo_outcomes(spec: Spec, measurands: Sequence[Measurand], mres: dict[str, McmResult],
                         qs: list[Quantity]) -> tuple[list[MonteCarlo], list[str], list[Warning]]:
    """The record's Monte Carlo entries, notes and warnings for ``measurands``.

    Parameters
    ----------
    spec : Spec
        Gives the reported interval, ndig, max_trials and t_for_finite_dof.
    measurands : sequence of Measurand
        The linear results, in the model's order.
    mres : dict
        :func:`budget.propagate.mcm.monte_carlo` results by output name.
    qs : list of Quantity
    """
    notes: list[str] = []
    warnings: list[Warning] = []
    out = []
    infinite = infinite_variance_inputs(qs, spec.t_for_finite_dof)
    for m in measurands:
        r = mres[m.name]
        lo, hi = r.symmetric if spec.interval == "symmetric" else r.shortest
        s_lo, s_hi = (math.nan, math.nan) if r.accuracy is None else \
            r.accuracy.interval(spec.interval)
        v = compare_lpu_mcm(m.value, m.expanded_uncertainty, m.standard_uncertainty, lo, hi,
                            spec.significant_digits, s_lo, s_hi)
        acc = None if r.accuracy is None else {
            "batches": r.accuracy.batches, "value": r.accuracy.value,
            "standard_uncertainty": r.accuracy.standard_uncertainty,
            "symmetric_interval": r.accuracy.symmetric,
            "shortest_interval": r.accuracy.shortest}
        out.append(MonteCarlo(measurand=m.name, trials=r.trials, value=r.value,
                              standard_uncertainty=r.standard_uncertainty, interval_low=lo,
                              interval_high=hi, interval_kind=spec.interval,
                              validated=v.validated, tolerance=v.tolerance, d_low=v.d_low,
                              d_high=v.d_high, symmetric_interval=r.symmetric,
                              shortest_interval=r.shortest,
                              histogram_counts=r.histogram_counts,
                              histogram_edges=r.histogram_edges, adaptive=r.adaptive,
                              stabilised=r.stabilised,
                              linear_interval_probability=r.interval_probabilities.get(
                                  m.name), verdict=v.verdict, accuracy=acc,
                              stop_tolerance=r.stop_tolerance))
        heavy = [t.name for t in m.terms if t.sensitivity != 0.0 and t.name in infinite]
        if heavy:
            # a t distribution with ν ≤ 2 has no finite variance (JCGM 101 §6.4.9, memory):
            # the trials' standard deviation estimates nothing and never settles
            warnings.append(warn(
                "monte_carlo.u_undefined",
                f"{m.name}: the Monte Carlo standard uncertainty is not defined: "
                f"{', '.join(heavy)} is sampled from a t distribution with ν ≤ 2, which has "
                "no finite variance; the printed u is only the spread of these trials (and the "
                "adaptive procedure cannot stabilise it) — "
                "the coverage interval is meaningful, u is not", input=heavy[0]))
        notes.extend(mc_accuracy_notes(m, r, spec.interval, s_lo, s_hi,
                                       spec.significant_digits))
        if r.adaptive and not r.stabilised:
            notes.append(f"{m.name}: the adaptive Monte Carlo procedure stopped at "
                         f"max_trials = {spec.max_trials:,} before stabilising"
                         + ("; the Monte Carlo interval is the result stated, so signing "
                            "needs --accept-warnings" if v.verdict == "not_validated"
                            else ""))
            # the certificate then states an interval that did not stabilise: signing it
            # needs an explicit acknowledgement (budget sign --accept-warnings)
            warnings.append(warn("monte_carlo.not_stabilised", notes[-1],
                                 severity="error" if v.verdict == "not_validated"
                                 else "warning"))
        elif r.adaptive and spec.interval == "shortest":
            notes.append(f"{m.name}: the adaptive procedure stabilised the ends of the "
                         "shortest interval, the one reported (JCGM 101 §7.9.4)")
        if v.verdict == "not_validated":
            warnings.append(warn(
                "monte_carlo.not_validated",
                f"{m.name}: the Monte Carlo interval does not validate the linear result "
                f"(JCGM 101 §8: d_low = {v.d_low:.2g}, d_high = {v.d_high:.2g} > δ = "
                f"{v.tolerance:.2g}); quote the Monte Carlo interval or find out why"))
        elif v.verdict == "inconclusive":
            warnings.append(warn("monte_carlo.inconclusive",
                                 inconclusive_message(m.name, v, s_lo, s_hi, r.adaptive,
                                                      r.stabilised)))
    return out, notes, warnings
