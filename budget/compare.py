"""Comparison of runs: weighted mean, Birge ratio, χ² and normalised errors E_n.

All numbers are in the first record's unit of the measurand (others converted; another
dimension refused): a current in A, a relative deviation from n·e·f — any output works.

Normalised error (ISO 13528, ISO/IEC 17043)
-------------------------------------------
E_n = (x_1 − x_2) / U(x_1 − x_2); |E_n| ≤ 1 passes. Two bases (``en_basis``), and the output
says which:

* ``"stated"`` (default): each result enters with the U its record states, U_i = k_i·u_i with its
  own k (ISO 13528 §9.7 uses the participants' expanded uncertainties, memory). For
  independent results U(x_1 − x_2) = √(U_1² + U_2²); with the runs' covariance V,
  U² = Σ_ij k_i k_j c_i c_j V_ij for the combination c (c = (1, −1) for a difference).
* ``"2u"``: every result with U = 2u (k = 2); the comparison lists the records whose k differs.

Shared terms (runs of one laboratory)
-------------------------------------
Which terms of two records are the same error is decided by :mod:`budget.compare_basis`:
typed-in inputs only through a declared ``shared_as`` label; module rows by their
``across_runs`` flag (Type A, noise, resolution: independent) and the same data-file digests;
a drift prediction from one calibration history at two dates with the correlation from the
fit covariance, not 1. With signed contributions a_i = c_i·u(x_i) of run a, b_i of run b and
ρ_i the cross-run correlation of term i,

    cov(x_a, x_b) = Σ_{i, j shared} a_i √|ρ_i| r_ij √|ρ_j| b_j · sign(ρ_i)   (r_ii = 1; r_ij of run a)

and u²(x_a − x_b) = u_a² + u_b² − 2 cov(x_a, x_b). When a shared term enters both runs with the
same contribution and ρ = 1 this leaves the term out of the difference; when the contributions
differ, the part that does not cancel, (a_i − b_i)², stays. Correlations between a shared and a
non-shared input are not carried into cov (listed in notes).

Weighted mean (generalised least squares)
-----------------------------------------
With the runs' covariance matrix V (V_ii = u_i², V_ab = cov above): weights
a = V⁻¹1/(1ᵀV⁻¹1), x̄ = aᵀx, internal u(x̄) = (1ᵀV⁻¹1)^(−1/2), χ² = rᵀV⁻¹r with r = x − x̄ on
N − 1 degrees of freedom, p = P(χ²_(N−1) ≥ χ²), Birge ratio R_B = √(χ²/(N − 1)), external u =
R_B × internal u. For independent runs these are the textbook formulas (w_i = 1/u_i²; Cox,
Metrologia 39 (2002) 589, memory). A shared term makes runs agree less easily than their
total u suggests: two runs with independent u = 0.3 and a shared u = 0.954, values 0 and 1, give
χ² = 0.5²·2/0.09 = 5.56 (p = 0.018), where the independent-run formula gave 0.50.

E_n against the weighted mean: the run is part of the mean, so x_i and x̄ are correlated.
var(x_i − x̄) = V_ii − 2 (V a)_i + aᵀ V a = V_ii − u²(x̄) (for GLS weights (Va)_i = u²(x̄)). The
stated uncertainties are used (not inflated by R_B): E_n tests them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from .compare_basis import (
    SharedTerm,
    TermBasis,
    cross_correlation,
    identity,
    lookalike_notes,
    term_bases,
)
from .errors import DataError, UsageError, did_you_mean
from .explain import correlation_matrix
from .measurands import default_measurand, match_name, measurand_of
from .numbers import overflow_checked
from .result import Budget, Measurand, Term, in_unit

__all__ = ["ReferenceValue", "RunEntry", "SharedTerm", "MeanResult", "NormalisedError",
           "Comparison", "TermBasis", "choose_measurand", "en_basis_text", "used_k_text", "term_key", "compare_runs", "K_EN",
           "EN_BASES"]

K_EN = 2.0                 # coverage factor of E_n with en_basis = "2u" (ISO 13528, ISO/IEC 17043)
EN_BASES = ("stated", "2u")
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
        # E_n and χ² square both: a VALUE or U beyond about 1e154 overflows a float
        overflow_checked(lambda: (self.value ** 2, (self.expanded_uncertainty / K_EN) ** 2),
                         "the square of the reference VALUE or U",
                         lambda msg: UsageError(msg, field="--reference"))


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
    expanded_uncertainty: float          # U used by E_n: stated k·u, or 2·u
    rescaled: bool                       # 2u basis and the stated k differs from 2

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class MeanResult:
    value: float
    internal_uncertainty: float
    external_uncertainty: float
    uncertainty_with_shared: float       # √(aᵀVa); equals the internal one (GLS weights)
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
    expanded_uncertainty: float          # U(x_a − x_b) from the results' U (see en_basis)
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
    en_basis: str = "stated"             # "stated" (each record's U) or "2u"
    terms: tuple[TermBasis, ...] = ()    # every term name and how it is treated across runs

    def to_dict(self) -> dict[str, Any]:
        return {"measurand": self.measurand, "unit": self.unit,
                "runs": [r.to_dict() for r in self.runs],
                "reference": None if self.reference is None else self.reference.to_dict(),
                "reference_kind": self.reference_kind,
                "weighted_mean": None if self.mean is None else self.mean.to_dict(),
                "en": [e.to_dict() for e in self.en],
                "pairwise": [e.to_dict() for e in self.pairwise],
                "shared_terms": [s.to_dict() for s in self.shared],
                "en_basis": self.en_basis,
                "terms": [t.to_dict() for t in self.terms],
                "notes": list(self.notes), "figure": self.figure}


# --------------------------------------------------------------------------- choosing
def choose_measurand(records: Sequence[Budget], name: str | None = None,
                     files: Sequence[str] | None = None) -> str:
    """The measurand to compare: ``name``, else the first record's chain deviation
    (``delta_I``, or the first output whose name starts with "dev"), else its first output;
    a former name of the chain deviation matches (:func:`budget.measurands.measurand_of`).

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
        name = default_measurand(first)
    for rec, f in zip(records, files):
        names = [m.name for m in rec.measurands]
        if match_name(name, {m.name: m.unit for m in rec.measurands}) is None:
            raise DataError(f"has no measurand '{name}'{did_you_mean(name, names)} "
                            f"(measurands: {', '.join(names)}); choose one with --measurand",
                            file=f, field="measurands")
    return name


def used_k_text(entry: RunEntry, en_basis: str) -> str:
    """The coverage factor of the U used for ``entry``: its stated k, or 2 with ``"2u"``."""
    k = entry.stated_coverage_factor if en_basis == "stated" else K_EN
    return f"k = {k:.3g}"


def en_basis_text(en_basis: str) -> str:
    """One sentence for the renderers: which expanded uncertainties E_n uses."""
    if en_basis == "stated":
        return ("E_n uses each record's stated U (its own k; ISO 13528 §9.7) with the runs' "
                "covariance; |E_n| ≤ 1 passes")
    return "E_n uses U = 2u for every result (k = 2; ISO 13528); |E_n| ≤ 1 passes"


def term_key(budget: Budget, term: Term) -> tuple | None:
    """The identity of a term's error across runs (:func:`budget.compare_basis.identity`);
    None when it is independent in every run (or the record lacks the input)."""
    return identity(budget, term).key


# --------------------------------------------------------------------------- the comparison
def _entry(label: str, b: Budget, m: Measurand, en_basis: str = "stated") -> RunEntry:
    report = b.run.get("report")
    date = report.get("measurement_date", "") if isinstance(report, dict) else ""
    k = m.coverage_factor
    used = m.expanded_uncertainty if en_basis == "stated" else K_EN * m.standard_uncertainty
    return RunEntry(label=label, title=b.title, date=str(date), value=m.value,
                    standard_uncertainty=m.standard_uncertainty,
                    stated_expanded_uncertainty=m.expanded_uncertainty, stated_coverage_factor=k,
                    expanded_uncertainty=used,
                    rescaled=en_basis != "stated" and abs(k - K_EN) >= _K_TOLERANCE)


def _en(a: str, b: str, diff: float, var: float, big_var: float, scale: float,
        shared: tuple[str, ...]) -> NormalisedError:
    """E_n from the difference, its variance ``var`` and the square of its expanded
    uncertainty ``big_var``; ``scale`` is Σ|c_i|·u_i², against which a variance that is
    rounding noise (two results sharing every term) counts as zero."""
    if var <= 1e-12 * scale or big_var <= 0:
        return NormalisedError(a, b, diff, 0.0, 0.0, None, shared)
    big = math.sqrt(big_var)
    return NormalisedError(a, b, diff, math.sqrt(var), big, diff / big, shared)


def _gls_mean(x: np.ndarray, v: np.ndarray, notes: list[str]
              ) -> tuple[MeanResult, np.ndarray]:
    """Generalised least-squares mean of results ``x`` with covariance ``v``: weights
    a = V⁻¹1/(1ᵀV⁻¹1), u²(x̄) = 1/(1ᵀV⁻¹1), χ² = rᵀV⁻¹r on N − 1 degrees of freedom."""
    n = x.size
    try:
        chol = np.linalg.cholesky(v)
        solve = lambda b: np.linalg.solve(chol.T, np.linalg.solve(chol, b))  # noqa: E731
        vi1 = solve(np.ones(n))
        big_w = float(vi1.sum())
        if not big_w > 0:
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        # the runs share every term of some combination: V is singular and no GLS weights
        # exist; the independent-run weights 1/u_i² keep the mean defined, and the note says so
        notes.append("the runs' covariance matrix is singular (some combination of the runs has "
                     "no independent uncertainty): weights 1/u_i² used and χ² from the "
                     "diagonal only")
        d = np.diag(v)
        solve = lambda b: b / d  # noqa: E731
        vi1 = 1.0 / d
        big_w = float(vi1.sum())
    a = vi1 / big_w
    if np.any(a < 0):
        notes.append("a run has a negative weight in the generalised least-squares mean "
                     "(strongly correlated runs with unequal uncertainties); x̄ lies outside the "
                     "runs' range in such a case")
    xbar = float(a @ x)
    r = x - xbar
    chi2 = float(r @ solve(r))
    dof = n - 1
    rb = math.sqrt(max(chi2, 0.0) / dof)
    u_int = big_w ** -0.5
    u_v = math.sqrt(max(float(a @ v @ a), 0.0))
    return MeanResult(xbar, u_int, u_int * rb, u_v, rb, chi2, dof,
                      float(special.chdtrc(dof, chi2))), a


def compare_runs(records: Sequence[Budget], *, labels: Sequence[str] | None = None,
                 measurand: str | None = None,
                 reference: ReferenceValue | Budget | None = None,
                 reference_label: str = "reference", pairwise: bool = False,
                 files: Sequence[str] | None = None, en_basis: str = "stated") -> Comparison:
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
    en_basis : {"stated", "2u"}
        Expanded uncertainties of E_n: each record's stated U = k·u (default; ISO 13528 §9.7,
        memory), or U = 2u for every result.
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
    ms = [measurand_of(r, name) for r in all_recs]
    files = list(files) if files is not None else [None] * len(all_recs)
    unit = ms[0].unit   # other units of the same dimension are converted to the first's
    unit_notes = [f"results stated in other units were converted to {unit}"] * any(
        m.unit != unit for m in ms)
    unit_notes += sorted({f"{m.name} matched as {name} (names of the same chain deviation)"
                          for m in ms if m.name != name})
    ms = [in_unit(m, unit, file=f) for m, f in zip(ms, files)]
    for m, f in zip(ms[:n], files):
        if m.standard_uncertainty <= 0:
            raise DataError(f"'{name}' has u = 0 and cannot be weighted or compared", file=f,
                            field="standard_uncertainty")
    all_labels = labels + ([reference_label] if isinstance(reference, Budget) else [])
    notes: list[str] = unit_notes

    # ---- which terms are the same error, and the covariance matrix of all compared results
    contrib = [{t.name: t.sensitivity * t.standard_uncertainty for t in m.terms} for m in ms]
    idents = [{t.name: identity(r, t) for t in m.terms} for r, m in zip(all_recs, ms)]
    size = len(all_recs)
    V = np.diag([m.standard_uncertainty ** 2 for m in ms])
    shared_names: dict[tuple[int, int], tuple[str, ...]] = {}
    pair_r: dict[tuple, list] = {}          # key -> [(label a, label b, r, reason)]
    ignored: dict[str, None] = {}
    for a in range(size):
        for b in range(a + 1, size):
            by_key_b = {idn.key: nm for nm, idn in idents[b].items() if idn.key is not None}
            common = [(nm, by_key_b[idn.key], idn) for nm, idn in idents[a].items()
                      if idn.key is not None and idn.key in by_key_b]
            shared_names[(a, b)] = tuple(nm for nm, _, _ in common)
            if not common:
                continue
            names_a = [nm for nm, _, _ in common]
            ra = correlation_matrix(names_a, all_recs[a].run)
            rho = []
            for nm, _, idn in common:
                r, why = cross_correlation(all_recs[a], all_recs[b], nm, idn)
                rho.append(r)
                pair_r.setdefault(idn.key, []).append((all_labels[a], all_labels[b], r, why))
            # each shared term enters with its cross-run correlation ρ (1, or from a drift fit
            # between two dates); within-run correlations r_ij of run a are kept between terms
            sq = np.sqrt(np.abs(rho))
            va = np.array([contrib[a][nm] for nm, _, _ in common]) * sq * np.sign(rho)
            vb = np.array([contrib[b][nb] for _, nb, _ in common]) * sq
            V[a, b] = V[b, a] = float(va @ ra @ vb)
            for x, y, r_xy in all_recs[a].run.get("input_correlations", []):
                if r_xy != 0 and (x in names_a) != (y in names_a) and {x, y} <= set(idents[a]):
                    ignored[f"r({x}, {y}) for {all_labels[a]} and {all_labels[b]}"] = None
    shared_terms, bases = term_bases(all_recs, all_labels, idents, contrib, pair_r)
    notes.extend(lookalike_notes(all_recs, all_labels, idents))
    if ignored:
        notes.append("correlations between a shared and a non-shared input are not carried "
                     "into the covariance between runs: " + "; ".join(ignored))
    for s in shared_terms:
        c0 = s.contributions[0]
        if any(not math.isclose(c, c0, rel_tol=1e-3) for c in s.contributions[1:]):
            notes.append(f"shared term {s.name} contributes differently to the runs "
                         f"({', '.join(f'{c:.3g}' for c in s.contributions)}); only the part "
                         "that cancels is left out of their differences")

    # ---- coverage factors of E_n: each record's stated k, or 2 for all
    if en_basis not in EN_BASES:
        raise UsageError(f"en_basis must be one of {', '.join(EN_BASES)}; got {en_basis!r}",
                         field="--en-basis")
    ks = np.array([m.coverage_factor if en_basis == "stated" else K_EN for m in ms])
    entries = [_entry(lb, r, m, en_basis) for lb, r, m in zip(all_labels, all_recs, ms)]
    if en_basis == "stated":
        notes.append("E_n uses each record's stated U = k·u with its own k (ISO 13528 §9.7); "
                     "U(difference)² = Σ k_i k_j c_i c_j V_ij with the runs' covariance V; "
                     "--en-basis 2u gives U = 2u for every result")
    else:
        rescaled = [e for e in entries if e.rescaled]
        notes.append("E_n uses U = 2·u for every result (--en-basis 2u)" + (
            "; stated k differs from 2 for " + ", ".join(
                f"{e.label} (k = {e.stated_coverage_factor:.3g})" for e in rescaled)
            if rescaled else ""))

    # ---- weighted mean over the runs: generalised least squares with V
    x = np.array([m.value for m in ms[:n]])
    mean, a_w = (None, None) if n < 2 else _gls_mean(x, V[:n, :n], notes)

    # ---- E_n: U² = cᵀ(K V K)c for the combination c of the results (K = diag(k))
    kvk = V * np.outer(ks, ks)

    def en_of(la: str, lb: str, diff: float, c: np.ndarray, shared: tuple[str, ...],
              extra_var: float = 0.0, extra_u2: float = 0.0) -> NormalisedError:
        var = float(c @ V @ c) + extra_var
        big = float(c @ kvk @ c) + extra_u2
        scale = float(np.abs(c) @ np.diag(V)) + extra_var
        return _en(la, lb, diff, var, big, scale, shared)

    ens = []
    if isinstance(reference, Budget):
        for i in range(n):
            c = np.zeros(size)
            c[i], c[n] = 1.0, -1.0
            ens.append(en_of(labels[i], reference_label, float(x[i] - ms[n].value), c,
                             shared_names[(i, n)]))
        ref_entry, ref_kind = entries[n], "record"
    elif isinstance(reference, ReferenceValue):
        ur = reference.expanded_uncertainty / K_EN
        for i in range(n):
            c = np.zeros(size)
            c[i] = 1.0
            ens.append(en_of(labels[i], reference_label, float(x[i] - reference.value), c, (),
                             extra_var=ur ** 2, extra_u2=reference.expanded_uncertainty ** 2))
        ref_entry = RunEntry(reference_label, "reference value", "", reference.value, ur,
                             reference.expanded_uncertainty, K_EN, reference.expanded_uncertainty,
                             False)
        ref_kind = "value"
    else:
        ref_entry, ref_kind = None, ""
        for i in range(n):
            c = -a_w.copy()
            c[i] += 1.0
            ens.append(en_of(labels[i], "weighted mean", float(x[i] - mean.value), c,
                             _union(idents[i], [shared_names[tuple(sorted((i, j)))]
                                                for j in range(n) if j != i])))
    pairs = []
    if pairwise:
        for i in range(n):
            for j in range(i + 1, n):
                c = np.zeros(size)
                c[i], c[j] = 1.0, -1.0
                pairs.append(en_of(labels[i], labels[j], float(x[i] - x[j]), c,
                                   shared_names[(i, j)]))
    for e in ens + pairs:
        if e.en is None:
            notes.append(f"{e.a} and {e.b} share every term: u of their difference is 0 and "
                         "E_n is undefined")
    runs = tuple(entries[:n])
    fig = _figure(name, unit, runs, ref_entry, mean, en_basis)
    return Comparison(name, unit, runs, ref_entry, ref_kind, mean, tuple(ens), tuple(pairs),
                      tuple(shared_terms), tuple(notes), fig, en_basis, tuple(bases))


def _union(order: dict[str, Any], groups: list[tuple[str, ...]]) -> tuple[str, ...]:
    """Names in any of ``groups``, in the order of the run's terms."""
    found = {nm for g in groups for nm in g}
    return tuple(nm for nm in order if nm in found)


def _figure(name: str, unit: str, runs: tuple[RunEntry, ...], ref: RunEntry | None,
            mean: MeanResult | None, en_basis: str = "stated") -> dict[str, Any]:
    """Figure data (the format of ``diagnostics["figures"]``): runs ± U and a band.

    The legend names the U drawn: each record's stated U (``en_basis = "stated"``) or 2u.
    """
    k_txt = "its stated k" if en_basis == "stated" else "k = 2"
    n = len(runs)
    xs = [float(i + 1) for i in range(n)]
    series = []
    if ref is not None:
        c, half, label = ref.value, ref.expanded_uncertainty, f"{ref.label} ± U ({k_txt})"
    else:
        c, half = mean.value, K_EN * mean.uncertainty_with_shared
        label = "weighted mean ± 2·u (k = 2)"
    series.append({"label": label, "style": "band", "x": [0.5, n + 0.5],
                   "y_low": [c - half] * 2, "y_high": [c + half] * 2})
    series.append({"label": "", "style": "line", "x": [0.5, n + 0.5], "y": [c, c]})
    series.append({"label": "runs ± U (each run's stated k)" if en_basis == "stated" else "runs ± 2u", "style": "points", "x": xs,
                   "y": [r.value for r in runs], "yerr": [r.expanded_uncertainty for r in runs]})
    unit_txt = f" ({unit})" if unit not in ("", "1") else ""
    return {"id": "compare", "title": f"{name}: runs compared", "xlabel": "run",
            "ylabel": f"{name}{unit_txt}", "xscale": "linear", "yscale": "linear",
            "series": series}
