"""Comparison of runs: weighted mean, Birge ratio, χ² and normalised errors E_n.

All numbers are in the compared measurand's unit (a current in A, or a relative deviation from
n·e·f — any output of the model works the same way).

Normalised error (ISO 13528, ISO/IEC 17043)
-------------------------------------------
E_n = (x_1 − x_2) / U(x_1 − x_2) with k = 2, i.e. U(x_1 − x_2) = 2·u(x_1 − x_2); for independent
results this is the familiar (x_1 − x_2)/√(U_1² + U_2²). Every run enters with U = 2·u_c, so a
record stated with another k (t_p(ν_eff), or p = 95 % giving 1.96) is rescaled; the comparison
lists those records. |E_n| ≤ 1 passes.

Shared terms (runs of one laboratory)
-------------------------------------
Two records *share* a term when the same input name carries the same source in both:

* an input read from data files: the same set of file SHA-256 digests
  (``inputs[].source.files[].sha256``);
* a typed-in input (no files): the same value, standard uncertainty, distribution (kind and
  parameters), evaluation type, description and source text (``source.method``, which holds the
  certificate reference), all compared exactly.

A shared input is the same quantity in both runs (correlation 1). With signed contributions
a_i = c_i·u(x_i) of run a and b_i of run b,

    cov(x_a, x_b) = Σ_{i, j shared} a_i r_ij b_j       (r_ii = 1; r_ij from run a's record)

and u²(x_a − x_b) = u_a² + u_b² − 2 cov(x_a, x_b). When a shared term enters both runs with the
same contribution (a_i = b_i, the usual case: same resistor, same sensitivity) this is exactly
u_a² + u_b² with that term left out of both — Σ_non-shared a_i² + Σ_non-shared b_i² for
uncorrelated inputs — so shared terms are "left out of the comparison of the difference"; when
the contributions differ, the formula keeps the part that does not cancel, (a_i − b_i)².
Correlations between a shared and a non-shared input are not carried into cov (listed in notes).

Weighted mean
-------------
w_i = 1/u_i², x̄ = Σ w_i x_i / Σ w_i, internal u(x̄) = (Σ w_i)^(−1/2), χ² = Σ w_i (x_i − x̄)²
with N − 1 degrees of freedom, p = P(χ²_(N−1) ≥ χ²), Birge ratio R_B = √(χ²/(N − 1)), external
u = R_B × internal u. These are the textbook formulas for independent runs. With shared terms
the runs' covariance matrix V (V_ii = u_i², V_ab = cov above) gives the mean's variance
aᵀVa, a = w/Σw, reported alongside.

E_n against the weighted mean: the run is part of the mean, so x_i and x̄ are correlated.
var(x_i − x̄) = V_ii − 2 (V a)_i + aᵀ V a. For independent runs (V diagonal), (V a)_i = w_i u_i²/Σw
= 1/Σw = u²(x̄), so var(x_i − x̄) = u_i² − 2u²(x̄) + u²(x̄) = u_i² − u²(x̄) (never negative, since
u²(x̄) ≤ u_i²). The stated uncertainties are used (not inflated by R_B): E_n tests them.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from .errors import DataError, UsageError, did_you_mean
from .explain import correlation_matrix
from .result import Budget, Measurand, Term

__all__ = ["ReferenceValue", "RunEntry", "SharedTerm", "MeanResult", "NormalisedError",
           "Comparison", "choose_measurand", "term_key", "compare_runs", "K_EN"]

K_EN = 2.0                 # coverage factor of E_n (ISO 13528, ISO/IEC 17043)
_K_TOLERANCE = 0.005       # a stated k that prints as 2.00 is taken as 2


@dataclass(frozen=True)
class ReferenceValue:
    """A reference value typed in: value and its expanded uncertainty with k = 2."""

    value: float
    expanded_uncertainty: float

    def __post_init__(self) -> None:
        if not (math.isfinite(self.value) and math.isfinite(self.expanded_uncertainty)
                and self.expanded_uncertainty >= 0):
            raise UsageError("the reference needs a finite VALUE and a finite U >= 0; got "
                             f"{self.value!r} {self.expanded_uncertainty!r}", field="--reference")


@dataclass(frozen=True)
class RunEntry:
    """One compared result (a run, or the reference record)."""

    label: str
    title: str
    date: str
    value: float
    standard_uncertainty: float
    stated_expanded_uncertainty: float
    stated_coverage_factor: float
    expanded_uncertainty: float          # 2·u, used by E_n
    rescaled: bool                       # stated k differs from 2

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class SharedTerm:
    """A term treated as the same quantity in several compared results."""

    name: str
    runs: tuple[str, ...]                # labels of the results that share it
    basis: str                           # "file digest" or "typed in"
    digests: tuple[str, ...]
    evaluation: str
    contributions: tuple[float, ...]     # signed c·u in each of ``runs``

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["runs"], d["digests"] = list(self.runs), list(self.digests)
        d["contributions"] = list(self.contributions)
        return d


@dataclass(frozen=True)
class MeanResult:
    value: float
    internal_uncertainty: float
    external_uncertainty: float
    uncertainty_with_shared: float       # √(aᵀVa); equals the internal one without shared terms
    birge_ratio: float
    chi2: float
    dof: int
    p_value: float

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class NormalisedError:
    """E_n of ``a`` against ``b`` (a run, the reference or the weighted mean)."""

    a: str
    b: str
    difference: float                    # x_a − x_b
    standard_uncertainty: float          # u(x_a − x_b), shared terms and correlation included
    expanded_uncertainty: float          # 2·u(x_a − x_b)
    en: float | None                     # None when u(x_a − x_b) = 0
    shared: tuple[str, ...]

    @property
    def passed(self) -> bool | None:
        return None if self.en is None else abs(self.en) <= 1.0

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["shared"] = list(self.shared)
        d["passed"] = self.passed
        return d


@dataclass(frozen=True)
class Comparison:
    measurand: str
    unit: str
    runs: tuple[RunEntry, ...]
    reference: RunEntry | None
    reference_kind: str                  # "value", "record" or "" (against the weighted mean)
    mean: MeanResult | None
    en: tuple[NormalisedError, ...]      # each run against the reference or the weighted mean
    pairwise: tuple[NormalisedError, ...]
    shared: tuple[SharedTerm, ...]
    notes: tuple[str, ...]
    figure: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        return {"measurand": self.measurand, "unit": self.unit,
                "runs": [r.to_dict() for r in self.runs],
                "reference": None if self.reference is None else self.reference.to_dict(),
                "reference_kind": self.reference_kind,
                "weighted_mean": None if self.mean is None else self.mean.to_dict(),
                "en": [e.to_dict() for e in self.en],
                "pairwise": [e.to_dict() for e in self.pairwise],
                "shared_terms": [s.to_dict() for s in self.shared],
                "notes": list(self.notes), "figure": self.figure}


# --------------------------------------------------------------------------- choosing
def choose_measurand(records: Sequence[Budget], name: str | None = None,
                     files: Sequence[str] | None = None) -> str:
    """The measurand to compare: ``name``, else the first output of the first record whose
    name starts with "dev" (the relative deviation from n·e·f), else its first output.

    Raises
    ------
    UsageError or DataError
        ``name`` unknown (did-you-mean), or a record without the chosen measurand.
    """
    files = list(files) if files is not None else [None] * len(records)
    first = [m.name for m in records[0].measurands]
    if name is not None and name not in first:
        raise UsageError(f"no measurand '{name}'{did_you_mean(name, first)} in the first "
                         f"record (measurands: {', '.join(first)})", file=files[0],
                         field="--measurand")
    if name is None:
        devs = [n for n in first if n.startswith("dev")]
        name = devs[0] if devs else first[0]
    for rec, f in zip(records, files):
        names = [m.name for m in rec.measurands]
        if name not in names:
            raise DataError(f"has no measurand '{name}'{did_you_mean(name, names)} "
                            f"(measurands: {', '.join(names)}); choose one with --measurand",
                            file=f, field="measurands")
    return name


def term_key(budget: Budget, term: Term) -> tuple | None:
    """The identity of a term's source (see module docstring); None when the record lacks the
    input (such a term is never shared)."""
    try:
        q = budget.input(term.name)
    except KeyError:
        return None
    files = q.provenance.files
    if files:
        return ("file digest", term.name, tuple(sorted({f.sha256 for f in files})))
    return ("typed in", term.name, repr(float(q.value)), repr(float(q.standard_uncertainty)),
            json.dumps(q.distribution.to_dict(), sort_keys=True), q.evaluation, q.description,
            q.provenance.method)


# --------------------------------------------------------------------------- the comparison
def _entry(label: str, b: Budget, m: Measurand) -> RunEntry:
    report = b.run.get("report")
    date = report.get("measurement_date", "") if isinstance(report, dict) else ""
    k = m.coverage_factor
    return RunEntry(label=label, title=b.title, date=str(date), value=m.value,
                    standard_uncertainty=m.standard_uncertainty,
                    stated_expanded_uncertainty=m.expanded_uncertainty, stated_coverage_factor=k,
                    expanded_uncertainty=K_EN * m.standard_uncertainty,
                    rescaled=abs(k - K_EN) >= _K_TOLERANCE)


def _en(a: str, b: str, diff: float, var: float, scale: float,
        shared: tuple[str, ...]) -> NormalisedError:
    """E_n from the difference and its variance; ``scale`` is u_a² + u_b², against which a
    variance that is rounding noise (two results sharing every term) counts as zero."""
    if var <= 1e-12 * scale:
        return NormalisedError(a, b, diff, 0.0, 0.0, None, shared)
    u = math.sqrt(var)
    return NormalisedError(a, b, diff, u, K_EN * u, diff / (K_EN * u), shared)


def compare_runs(records: Sequence[Budget], *, labels: Sequence[str] | None = None,
                 measurand: str | None = None,
                 reference: ReferenceValue | Budget | None = None,
                 reference_label: str = "reference", pairwise: bool = False,
                 files: Sequence[str] | None = None) -> Comparison:
    """Compare runs (result records) with each other and with a reference.

    Parameters
    ----------
    records : sequence of Budget
        The runs; at least two, or one with a reference.
    labels : sequence of str, optional
        Short names of the runs (default "run 1", "run 2" ...).
    measurand : str, optional
        Output to compare; default see :func:`choose_measurand`.
    reference : ReferenceValue or Budget, optional
        A typed-in value with U (k = 2), or a reference record (its shared terms count).
        Without one, each run is compared with the weighted mean.
    reference_label : str
        Name of the reference in the output. Default "reference".
    pairwise : bool
        Also E_n of every pair of runs. Default False.
    files : sequence of str, optional
        File names of the records (runs, then the reference record), for error messages.
    """
    n = len(records)
    if n == 0 or (n < 2 and reference is None):
        raise UsageError("give at least two records, or one record and --reference",
                         field="RECORD")
    labels = list(labels) if labels is not None else [f"run {i + 1}" for i in range(n)]
    if len(labels) != n or len(set(labels)) != n or (reference is not None
                                                     and reference_label in labels):
        raise UsageError("give one unique label per run (and none equal to the reference's)",
                         field="labels")
    all_recs = list(records) + ([reference] if isinstance(reference, Budget) else [])
    name = choose_measurand(all_recs, measurand, files)
    ms = [r.measurand(name) for r in all_recs]
    files = list(files) if files is not None else [None] * len(all_recs)
    unit = ms[0].unit
    for m, f in zip(ms, files):
        if m.unit != unit:
            raise DataError(f"'{name}' is in {m.unit!r} here but in {unit!r} in the first "
                            "record; compare results in one unit", file=f, field="unit")
    for m, f in zip(ms[:n], files):
        if m.standard_uncertainty <= 0:
            raise DataError(f"'{name}' has u = 0 and cannot be weighted or compared", file=f,
                            field="standard_uncertainty")
    all_labels = labels + ([reference_label] if isinstance(reference, Budget) else [])
    entries = [_entry(lb, r, m) for lb, r, m in zip(all_labels, all_recs, ms)]
    notes: list[str] = []

    # ---- shared terms and the covariance matrix of all compared results
    contrib = [{t.name: t.sensitivity * t.standard_uncertainty for t in m.terms} for m in ms]
    keys = [{t.name: term_key(r, t) for t in m.terms} for r, m in zip(all_recs, ms)]
    holders: dict[tuple, list[int]] = {}
    for i, kd in enumerate(keys):
        for k in kd.values():
            if k is not None:
                holders.setdefault(k, []).append(i)
    shared_terms = []
    for k, idx in holders.items():
        if len(idx) > 1:
            q = all_recs[idx[0]].input(k[1])
            shared_terms.append(SharedTerm(
                name=k[1], runs=tuple(all_labels[i] for i in idx), basis=k[0],
                digests=k[2] if k[0] == "file digest" else (), evaluation=q.evaluation,
                contributions=tuple(contrib[i][k[1]] for i in idx)))
    size = len(all_recs)
    V = np.diag([m.standard_uncertainty ** 2 for m in ms])
    shared_names: dict[tuple[int, int], tuple[str, ...]] = {}
    ignored: dict[str, None] = {}
    for a in range(size):
        for b in range(a + 1, size):
            common = [nm for nm, k in keys[a].items() if k is not None and keys[b].get(nm) == k]
            shared_names[(a, b)] = tuple(common)
            if not common:
                continue
            ra = correlation_matrix(common, all_recs[a].run)
            va = np.array([contrib[a][nm] for nm in common])
            vb = np.array([contrib[b][nm] for nm in common])
            V[a, b] = V[b, a] = float(va @ ra @ vb)
            for x, y, rho in all_recs[a].run.get("input_correlations", []):
                if rho != 0 and (x in common) != (y in common) and {x, y} <= set(keys[a]):
                    ignored[f"r({x}, {y}) for {all_labels[a]} and {all_labels[b]}"] = None
    if ignored:
        notes.append("correlations between a shared and a non-shared input are not carried "
                     "into the covariance between runs: " + "; ".join(ignored))
    rescaled = [e.label for e in entries if e.rescaled]
    if rescaled:
        notes.append("E_n uses U = 2·u for every result; stated k differs from 2 for "
                     + ", ".join(f"{e.label} (k = {e.stated_coverage_factor:.3g})"
                                 for e in entries if e.rescaled))
    for s in shared_terms:
        # a residual (a_i − b_i)² below 1e-6 of a_i² is rounding of the same coefficient
        c0 = s.contributions[0]
        if any(not math.isclose(c, c0, rel_tol=1e-3) for c in s.contributions[1:]):
            notes.append(f"shared term {s.name} contributes differently to the runs "
                         f"({', '.join(f'{c:.3g}' for c in s.contributions)}); only the part "
                         "that cancels is left out of their differences")

    # ---- weighted mean over the runs (independent-run formulas; aᵀVa alongside)
    x = np.array([m.value for m in ms[:n]])
    u = np.array([m.standard_uncertainty for m in ms[:n]])
    mean = None
    if n >= 2:
        w = 1.0 / u ** 2
        big_w = float(w.sum())
        xbar = float(w @ x / big_w)
        u_int = big_w ** -0.5
        chi2 = float(w @ (x - xbar) ** 2)
        dof = n - 1
        rb = math.sqrt(chi2 / dof)
        a = w / big_w
        vn = V[:n, :n]
        u_v = math.sqrt(max(float(a @ vn @ a), 0.0))
        mean = MeanResult(xbar, u_int, u_int * rb, u_v, rb, chi2, dof,
                          float(stats.chi2.sf(chi2, dof)))

    # ---- E_n of each run against the reference or the weighted mean
    ens = []
    if isinstance(reference, Budget):
        for i in range(n):
            var = V[i, i] + V[n, n] - 2 * V[i, n]
            ens.append(_en(labels[i], reference_label, float(x[i] - ms[n].value), var,
                           V[i, i] + V[n, n], shared_names[(i, n)]))
        ref_entry, ref_kind = entries[n], "record"
    elif isinstance(reference, ReferenceValue):
        ur = reference.expanded_uncertainty / K_EN
        for i in range(n):
            var = float(V[i, i]) + ur ** 2
            ens.append(_en(labels[i], reference_label, float(x[i] - reference.value), var,
                           var, ()))
        ref_entry = RunEntry(reference_label, "reference value", "", reference.value, ur,
                             reference.expanded_uncertainty, K_EN, reference.expanded_uncertainty,
                             False)
        ref_kind = "value"
    else:
        ref_entry, ref_kind = None, ""
        a = (1.0 / u ** 2) / float((1.0 / u ** 2).sum())
        va = V[:n, :n] @ a
        ava = float(a @ va)
        for i in range(n):
            var = float(V[i, i] - 2 * va[i] + ava)
            ens.append(_en(labels[i], "weighted mean", float(x[i] - mean.value), var,
                           float(V[i, i]), _union(keys[i], [shared_names[tuple(sorted((i, j)))]
                                                           for j in range(n) if j != i])))
    pairs = []
    if pairwise:
        for i in range(n):
            for j in range(i + 1, n):
                var = V[i, i] + V[j, j] - 2 * V[i, j]
                pairs.append(_en(labels[i], labels[j], float(x[i] - x[j]), float(var),
                                 V[i, i] + V[j, j], shared_names[(i, j)]))
    for e in ens + pairs:
        if e.en is None:
            notes.append(f"{e.a} and {e.b} share every term: u of their difference is 0 and "
                         "E_n is undefined")
    runs = tuple(entries[:n])
    fig = _figure(name, unit, runs, ref_entry, mean)
    return Comparison(name, unit, runs, ref_entry, ref_kind, mean, tuple(ens), tuple(pairs),
                      tuple(shared_terms), tuple(notes), fig)


def _union(order: dict[str, Any], groups: list[tuple[str, ...]]) -> tuple[str, ...]:
    """Names in any of ``groups``, in the order of the run's terms."""
    found = {nm for g in groups for nm in g}
    return tuple(nm for nm in order if nm in found)


def _figure(name: str, unit: str, runs: tuple[RunEntry, ...], ref: RunEntry | None,
            mean: MeanResult | None) -> dict[str, Any]:
    """Figure data (the format of ``diagnostics["figures"]``): runs ± U (k = 2) and a band."""
    n = len(runs)
    xs = [float(i + 1) for i in range(n)]
    series = []
    if ref is not None:
        c, half, label = ref.value, ref.expanded_uncertainty, f"{ref.label} ± U (k = 2)"
    else:
        c, half = mean.value, K_EN * mean.uncertainty_with_shared
        label = "weighted mean ± 2·u (k = 2)"
    series.append({"label": label, "style": "band", "x": [0.5, n + 0.5],
                   "y_low": [c - half] * 2, "y_high": [c + half] * 2})
    series.append({"label": "", "style": "line", "x": [0.5, n + 0.5], "y": [c, c]})
    series.append({"label": "runs ± U (k = 2)", "style": "points", "x": xs,
                   "y": [r.value for r in runs], "yerr": [r.expanded_uncertainty for r in runs]})
    unit_txt = f" ({unit})" if unit not in ("", "1") else ""
    return {"id": "compare", "title": f"{name}: runs compared", "xlabel": "run",
            "ylabel": f"{name}{unit_txt}", "xscale": "linear", "yscale": "linear",
            "series": series}
