"""The stated result of a measurand: which interval a report or certificate gives, and the words.

A document states the interval that is *validated* (JCGM 101 §8):

* the Monte Carlo method ran and validates the law of propagation, or did not run: the GUM
  result y ± U with U = k·u_c (JCGM 100 §7.2.4, §7.2.3);
* the Monte Carlo method ran and does **not** validate it: the Monte Carlo coverage interval
  (probabilistically symmetric or shortest, as the run chose) is the result, with the Monte
  Carlo estimate and standard uncertainty (JCGM 101 §5.5, §7.7, §8.1 c), and the wording
  names the method. No k is stated: the interval does not come from one.

* the comparison is *inconclusive* (the Monte Carlo's own numerical uncertainty of the interval
  ends is too large to say whether they lie within δ; :mod:`budget.propagate.validate`): the
  GUM result y ± U, with a sentence that the Monte Carlo check is inconclusive — validation is
  never claimed.

A Monte Carlo result obtained by randomized quasi-Monte Carlo (``sampling = "sobol"``) says so:
JCGM 101 describes pseudo-random sampling, and RQMC is a deviation from the method that a
certificate states (ISO/IEC 17025 §7.8.2.1 m).

The sentence about the normal distribution is written only when it holds: ν_eff is infinite
and the Monte Carlo method validates the result. Without a Monte Carlo check it says the
normal distribution was assumed and not checked.

With a coverage factor k fixed in the spec, the coverage probability stated is the one k gives
at ν_eff, P(|t_ν| ≤ k) (JCGM 100 G.3): the record's ``coverage_probability_of_k`` (recomputed
with :func:`budget.coverage.coverage_probability_of` for older records), and the fraction of
Monte Carlo trials inside y ± U when the record has it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..coverage import coverage_probability_of
from ..fmt import fmt_dof, fmt_num, fmt_u
from ..result import Budget, Measurand, MonteCarlo
from .text import sci, unit_suffix, value_u

__all__ = ["StatedResult", "stated_result", "result_line", "coverage_statement",
           "fixed_k_probability", "pct", "pct_of_k", "monte_carlo_method", "RQMC_DEVIATION"]


#: record's interval_kind -> the JCGM 101 §5.3 name
_KIND = {"symmetric": "probabilistically symmetric", "shortest": "shortest"}


def _count(n: int) -> str:
    """``200000`` -> ``200 000`` (SI digit groups, thin space)."""
    return f"{n:,}".replace(",", "\u2009")


def pct(p: float) -> str:
    """A nominal coverage probability as the spec gives it: ``95 %``, ``95.45 %``."""
    return f"{100 * p:g} %"


def pct_of_k(p: float) -> str:
    """A computed coverage probability to three significant digits: ``86.1 %``."""
    return f"{100 * p:.3g} %"


def fixed_k_probability(m: Measurand) -> float:
    """P(|t_ν| ≤ k) at ν = ν_eff: the coverage probability that m's coverage factor gives.

    The record's ``coverage_probability_of_k``; recomputed for records written before it."""
    if m.coverage_probability_of_k is not None:
        return m.coverage_probability_of_k
    return coverage_probability_of(m.coverage_factor, m.effective_dof)


@dataclass(frozen=True)
class StatedResult:
    """What a document states for one measurand (all display text, already rounded).

    ``method`` is ``"JCGM 100"`` (law of propagation) or ``"JCGM 101"`` (Monte Carlo).
    ``k`` is empty for a Monte Carlo interval; ``interval`` is the stated coverage interval.
    """

    method: str
    line: str
    value: str
    uncertainty: str       # "U = …" column text, or the interval for a Monte Carlo result
    k: str
    probability: str
    interval: str
    statement: str
    linear_note: str = ""  # the unvalidated GUM result, for the report (never the certificate)


def result_line(m: Measurand) -> str:
    """``R_X = (10000.178 ± 0.017) Ω`` — the complete GUM result (JCGM 100 §7.2.4 form)."""
    y = value_u(m.value, m.expanded_uncertainty)
    big_u = sci(fmt_u(m.expanded_uncertainty))
    return f"{m.name} = ({y} ± {big_u}){unit_suffix(m.unit)}"


RQMC_DEVIATION = ("randomized quasi-Monte Carlo sampling (scrambled Sobol points) in place of "
                  "the pseudo-random sampling that JCGM 101:2008 describes")


def monte_carlo_method(b: Budget) -> str:
    """``the Monte Carlo method of JCGM 101:2008``, naming RQMC as a deviation when used."""
    if b.run.get("sampling") == "sobol":
        return f"the Monte Carlo method of JCGM 101:2008, with {RQMC_DEVIATION} (a deviation " \
               "from the method)"
    return "the Monte Carlo method of JCGM 101:2008"


def _validation_clause(mc: MonteCarlo) -> str:
    return (f"d_low = {sci(fmt_num(mc.d_low, 2))}, d_high = {sci(fmt_num(mc.d_high, 2))} "
            f"against δ = {sci(fmt_num(mc.tolerance, 2))}")


def coverage_statement(m: Measurand, *, fixed_k: bool, mc: MonteCarlo | None = None,
                       mc_probability: float | None = None) -> str:
    """The sentence that says what U means (own wording of JCGM 100 §7.2.3 / EA-4/02 §5).

    Parameters
    ----------
    m : Measurand
    fixed_k : bool
        k was fixed in the spec: the probability stated is P(|t_ν| ≤ k) at ν_eff.
    mc : MonteCarlo or None
        The Monte Carlo check of m, if it ran; the normal-distribution wording needs it.
    mc_probability : float or None
        Fraction of Monte Carlo trials inside y ± U; default: the one ``mc`` carries.
    """
    if mc_probability is None and mc is not None:
        mc_probability = mc.linear_interval_probability
    unit = unit_suffix(m.unit)
    k = f"{m.coverage_factor:.2f}"
    head = (f"The expanded uncertainty U = {sci(fmt_u(m.expanded_uncertainty))}{unit} is the "
            f"combined standard uncertainty u_c = {sci(fmt_u(m.standard_uncertainty))}{unit} "
            f"multiplied by the coverage factor k = {k}")
    infinite = math.isinf(m.effective_dof)
    if fixed_k:
        p = pct_of_k(fixed_k_probability(m))
        head += (", a value fixed in the budget spec rather than derived from the degrees of "
                 "freedom")
        if infinite:
            body = f"; for a normal distribution this k gives a coverage probability of {p}"
        else:
            body = (f"; with ν_eff = {fmt_dof(m.effective_dof)} effective degrees of freedom "
                    f"(Welch–Satterthwaite) this k gives a coverage probability of "
                    f"P(|t_ν| ≤ k) = {p}")
        if mc_probability is not None:
            body += f"; {pct_of_k(mc_probability)} of the Monte Carlo trials lie within y ± U"
    else:
        p = pct(m.coverage_probability)
        if infinite and mc is not None and mc.validated:
            body = (f"; for the normal distribution that the measurand is taken to follow, "
                    f"this gives a coverage probability of approximately {p}")
        elif infinite:
            checked = ("could not confirm here" if mc is not None and mc.verdict == "inconclusive"
                       else "did not check here")
            body = (f"; if the measurand follows a normal distribution, which the Monte Carlo "
                    f"method (JCGM 101) {checked}, this gives a coverage probability "
                    f"of approximately {p}")
        else:
            body = (f"; for a t-distribution with ν_eff = {fmt_dof(m.effective_dof)} effective "
                    f"degrees of freedom (Welch–Satterthwaite) this gives a coverage "
                    f"probability of approximately {p}")
    tail = ""
    if mc is not None and mc.validated:
        tail = (f" The Monte Carlo method (JCGM 101 §8) validates this interval "
                f"({_validation_clause(mc)}).")
    elif mc is not None and mc.verdict == "inconclusive":
        tail = (f" The Monte Carlo check of this interval (JCGM 101 §8: {_validation_clause(mc)}) "
                f"is inconclusive: the numerical accuracy of the {_count(mc.trials)} Monte Carlo "
                "trials is not enough to decide whether the interval is validated, and it is "
                "not claimed to be.")
    return head + body + "." + tail


def _not_stabilised(mc: MonteCarlo) -> str:
    """Clause for a Monte Carlo interval that the adaptive procedure did not stabilise."""
    if mc.adaptive and not mc.stabilised:
        return (" (where the adaptive procedure of JCGM 101 §7.9 stopped before its results "
                "stabilised)")
    if not mc.adaptive and mc.accuracy:
        return " (a fixed number, not stabilised by the adaptive procedure of JCGM 101 §7.9)"
    return ""


def stated_result(b: Budget, m: Measurand) -> StatedResult:
    """The result a report or certificate states for ``m``: see the module docstring."""
    mc = b.mc(m.name)
    fixed = b.run.get("coverage_factor_fixed") is not None
    unit = unit_suffix(m.unit)
    if mc is not None and mc.verdict == "not_validated":
        u = mc.standard_uncertainty
        p = pct(m.coverage_probability)
        lo, hi = value_u(mc.interval_low, u), value_u(mc.interval_high, u)
        interval = f"[{lo}, {hi}]{unit}"
        kind = _KIND.get(mc.interval_kind, mc.interval_kind)
        statement = (
            f"The estimate, the standard uncertainty u = {sci(fmt_u(u))}{unit} and the {p} "
            f"coverage interval ({kind}) were determined with {_count(mc.trials)} trials"
            f"{_not_stabilised(mc)} by {monte_carlo_method(b)}. This coverage interval is stated as "
            f"the result because the law of propagation of uncertainty (JCGM 100) is not "
            f"validated for {m.name} (JCGM 101 §8: {_validation_clause(mc)}); no coverage "
            f"factor is stated, since the interval does not come from one.")
        value = value_u(mc.value, u) + unit
        return StatedResult(
            method="JCGM 101", line=f"{m.name} = {value_u(mc.value, u)}{unit}, {p} coverage "
            f"interval {interval}", value=value, uncertainty=interval, k="–",
            probability=p, interval=interval, statement=statement,
            linear_note=(f"For comparison, the law of propagation gives {result_line(m)} with "
                         f"k = {m.coverage_factor:.2f}; this result is not validated and is "
                         f"not the one stated."))
    p = pct_of_k(fixed_k_probability(m)) if fixed else pct(m.coverage_probability)
    lo = value_u(m.value - m.expanded_uncertainty, m.standard_uncertainty)
    hi = value_u(m.value + m.expanded_uncertainty, m.standard_uncertainty)
    return StatedResult(
        method="JCGM 100", line=result_line(m),
        value=value_u(m.value, m.expanded_uncertainty) + unit,
        uncertainty=sci(fmt_u(m.expanded_uncertainty)) + unit, k=f"{m.coverage_factor:.2f}",
        probability=p, interval=f"[{lo}, {hi}]{unit}",
        statement=coverage_statement(m, fixed_k=fixed, mc=mc))
