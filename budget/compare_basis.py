"""Which terms of two result records are the same error, and how strongly they are correlated.

A term is shared between runs only when something says so (issue 11, item 9):

* **typed-in inputs** (origin ``spec`` or ``observations``): only through a declared common
  cause, ``shared_as = "label"``; two records share the term when the labels match (the input
  names may differ). Equal numbers typed into two specs are *not* evidence of one error: a
  run-to-run reproducibility term typed identically is independent in each run.
* **module rows** carry ``across_runs``: ``"independent"`` (noise during the run, Type A,
  resolution) or ``"shared"`` (a calibration history, a certificate, a pump model). Rows of
  modules that do not state it take a default: ``cycles`` rows (the run's own Type A) and a
  voltmeter's resolution row (``NAME_res``) are independent, the rest shared — a Type A row of a
  calibration (a voltmeter's Josephson calibration, a comparison fit) is the same error in
  every run that uses the calibration.
  A shared module row is the same error in two records when it has the same name and the same
  set of file SHA-256 digests (or, without files, the same origin, method text, value and u).
* **correlation between two dates**: a drift prediction from one calibration history
  (``NAME_cal`` of ``resistor``/``amplifier``, ``NAME_offset`` of a ``frequency`` comparison
  file) is evaluated at each run's date. Its errors at t_a and t_b are correlated through the
  fit's parameter covariance C (its independent part; days relative to t_a):
  r = gₐᵀCg_b / √(gₐᵀCgₐ · g_bᵀCg_b), g = (1, t − t_a) for a line (r = 1 for a constant, and
  for the common part ``NAME_common``). Every other shared term has r = 1.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any

from .result import Budget, Term

__all__ = ["Identity", "SharedTerm", "TermBasis", "identity", "cross_correlation", "term_bases",
           "lookalike_notes"]

_TYPED = ("spec", "observations", "constant")


@dataclass(frozen=True)
class Identity:
    """What a term of one record is, across runs."""

    key: tuple | None          # equal keys in two records = the same error; None = independent
    kind: str                  # "declared", "history fit", "file digest", "module", "independent"
    reason: str                # one phrase for the table


@dataclass(frozen=True)
class TermBasis:
    """How one term (by name, in the records that carry it) is treated across runs."""

    name: str
    runs: tuple[str, ...]
    shared: bool
    basis: str                                   # text shown in compare's table
    correlations: tuple[tuple[str, str, float], ...] = ()   # (run a, run b, r) when shared

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "runs": list(self.runs), "shared": self.shared,
                "basis": self.basis,
                "correlations": [[a, b, r] for a, b, r in self.correlations]}


@dataclass(frozen=True)
class SharedTerm:
    """A term treated as the same quantity in several compared results."""

    name: str
    runs: tuple[str, ...]                # labels of the results that share it
    basis: str                           # "file digest" or "typed in"
    digests: tuple[str, ...]
    evaluation: str
    contributions: tuple[float, ...]     # signed c·u in each of ``runs``
    correlations: tuple[tuple[str, str, float], ...] = ()   # (run a, run b, r) between runs

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["runs"], d["digests"] = list(self.runs), list(self.digests)
        d["contributions"] = list(self.contributions)
        d["correlations"] = [list(c) for c in self.correlations]
        return d


def _default_across(q) -> tuple[str, str]:
    origin = q.provenance.origin
    if origin == "module:cycles":
        return "independent", "Type A of the run"
    if origin == "module:voltmeter" and q.name.endswith("_res"):
        return "independent", "resolution, read anew in each run"
    return "shared", "systematic (module default)"


def identity(budget: Budget, term: Term) -> Identity:
    """The identity of a term's error (see the module docstring)."""
    try:
        q = budget.input(term.name)
    except KeyError:
        return Identity(None, "independent", "not among the record's inputs")
    prov = q.provenance
    if prov.shared_as:
        return Identity(("declared", prov.shared_as), "declared",
                        f"declared shared_as = \"{prov.shared_as}\"")
    if prov.origin in _TYPED:
        return Identity(None, "independent", "typed in without shared_as: independent")
    across, why = (prov.across_runs, f"{q.description or 'stated by the module'}") \
        if prov.across_runs else _default_across(q)
    if across == "independent":
        return Identity(None, "independent", f"independent ({why})")
    if prov.files:
        digests = tuple(sorted({f.sha256 for f in prov.files}))
        kind = "history fit" if _fit_of(budget, term.name) is not None else "file digest"
        return Identity(("file digest", term.name, digests), kind,
                        "same data file " + ", ".join(d[:12] + "…" for d in digests))
    return Identity(("module", term.name, prov.origin, prov.method, repr(float(q.value)),
                     repr(float(q.standard_uncertainty)),
                     json.dumps(q.distribution.to_dict(), sort_keys=True)), "module",
                    f"the same {prov.origin} row ({why})")


def _fit_of(budget: Budget, name: str) -> dict | None:
    """The drift fit behind row ``name`` (its at, model and independent covariance), or None
    when the row is not a history prediction or the record predates the stored covariance."""
    for input_name, entry in (budget.run.get("modules") or {}).items():
        if name not in entry.get("quantities", []):
            continue
        diag = entry.get("diagnostics") or {}
        if name in (input_name, f"{input_name}_cal") and "independent_cov" in diag:
            return {"at": diag["at"], "model": diag["fit"]["model"],
                    "cov": diag["independent_cov"]}
        comp = diag.get("comparison")
        if (isinstance(comp, dict) and "independent_cov" in comp
                and name in (input_name, f"{input_name}_offset")):
            return {"at": comp["at"], "model": comp["fit"]["model"], "cov": comp["independent_cov"]}
    return None


def cross_correlation(a: Budget, b: Budget, name_a: str, ident: Identity) -> tuple[float, str]:
    """Correlation between the errors of a shared term in records ``a`` and ``b`` and its
    reason. 1 except for a history prediction at two dates (module docstring)."""
    if ident.kind != "history fit":
        return 1.0, ""
    fa, fb = _fit_of(a, name_a), _fit_of(b, name_a)
    if fa is None or fb is None:
        return 1.0, ""
    import pandas as pd  # here: most commands that import this module never need it

    days = float((pd.Timestamp(fb["at"]) - pd.Timestamp(fa["at"])) / pd.Timedelta(days=1))
    c = fa["cov"]
    if fa["model"] != "line" or days == 0:
        return 1.0, "drift-fit covariance"
    var_a = c[0][0]
    var_b = c[0][0] + 2 * days * c[0][1] + days * days * c[1][1]
    if var_a <= 0 or var_b <= 0:
        return 1.0, ""
    r = (c[0][0] + days * c[0][1]) / math.sqrt(var_a * var_b)
    return float(max(-1.0, min(1.0, r))), "drift-fit covariance"


def term_bases(recs: list[Budget], labels: list[str], idents: list[dict[str, Identity]],
           contrib: list[dict[str, float]], pair_r: dict[tuple, list]
           ) -> tuple[list[SharedTerm], list[TermBasis]]:
    """The shared terms (one per identity held by several results) and the basis of every
    term name, in the order the terms first appear."""
    holders: dict[tuple, list[tuple[int, str]]] = {}
    for i, d in enumerate(idents):
        for nm, idn in d.items():
            if idn.key is not None:
                holders.setdefault(idn.key, []).append((i, nm))
    shared = []
    for key, held in holders.items():
        if len(held) < 2:
            continue
        i0, nm0 = held[0]
        idn = idents[i0][nm0]
        q = recs[i0].input(nm0)
        shared.append(SharedTerm(
            name=nm0, runs=tuple(labels[i] for i, _ in held), basis=idn.kind,
            digests=key[2] if key[0] == "file digest" else (), evaluation=q.evaluation,
            contributions=tuple(contrib[i][nm] for i, nm in held),
            correlations=tuple((la, lb, r) for la, lb, r, _ in pair_r.get(key, []))))
    bases: dict[str, TermBasis] = {}
    for d in idents:
        for nm, idn in d.items():
            if nm in bases:
                continue
            held = holders.get(idn.key, []) if idn.key is not None else []
            if len(held) > 1:
                rs = pair_r.get(idn.key, [])
                fitted = [(la, lb, r) for la, lb, r, w in rs if w]
                text = f"shared: {idn.reason}; " + (
                    "r = " + ", ".join(f"{r:.4f} ({la}–{lb})" for la, lb, r in fitted)
                    + " from the drift-fit covariance" if fitted else "r = 1")
                runs = tuple(labels[j] for j, _ in held)
                bases[nm] = TermBasis(nm, runs, True, text,
                                      tuple((la, lb, r) for la, lb, r, _ in rs))
            else:
                runs = tuple(labels[j] for j, dd in enumerate(idents) if nm in dd)
                text = idn.reason if idn.key is None else \
                    f"not shared: no other record has {idn.reason}"
                bases[nm] = TermBasis(nm, runs, False, text)
    return shared, list(bases.values())


def lookalike_notes(recs: list[Budget], labels: list[str],
                    idents: list[dict[str, Identity]]) -> list[str]:
    """Notes for typed-in terms that look like one certificate but are treated as independent.

    Two records whose term of the same name is typed in with the same value, standard
    uncertainty and method text (which holds the ``source``) but no ``shared_as`` are probably
    the same calibration. They stay independent (equal numbers are no evidence of one error),
    but the user is told: if they are one error, treating them as independent understates the
    uncertainty of the weighted mean.
    """
    seen: dict[tuple, list[str]] = {}
    for r, lab, d in zip(recs, labels, idents):
        for nm, idn in d.items():
            if idn.key is not None:
                continue
            try:
                q = r.input(nm)
            except KeyError:
                continue
            if q.provenance.origin not in _TYPED or q.provenance.origin == "constant" \
                    or not q.standard_uncertainty:
                continue
            k = (nm, repr(float(q.value)), repr(float(q.standard_uncertainty)),
                 q.provenance.method)
            seen.setdefault(k, []).append(lab)
    return [f"{k[0]} is typed in with the same value, u and source in {', '.join(runs)} but "
            "is not declared shared (shared_as): it is treated as independent in each run; if "
            "it is the same certificate or calibration, declare shared_as = \"label\" in each "
            "spec — treated as independent, it makes u of the weighted mean too small"
            for k, runs in seen.items() if len(runs) > 1]
