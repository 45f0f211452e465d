"""Built-in reference cases: published worked examples recomputed by the same code as any budget.

``budget validate`` runs :func:`run_all` and passes only if every check passes — evidence for
the software validation ISO/IEC 17025:2017 §7.11 asks of a laboratory (it does not replace the
laboratory's own validation). Each check names its source; values the project recalled rather
than read are marked "(memory)" in the source text, and values derived here are marked
"derived".
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from ..engine import evaluate
from ..model import BUILTIN_CONSTANTS
from ..propagate.lpu import coverage_factor
from ..spec import load_spec

__all__ = ["Check", "run_all", "CASES", "spec_path"]

HERE = Path(__file__).parent


def spec_path(name: str) -> Path:
    """Path of a built-in reference spec (``gum_h2``, ``ea402_s3`` ...)."""
    return HERE / f"{name}.toml"


@dataclass(frozen=True)
class Check:
    """One compared number: published (or exactly derived) against computed."""

    case: str
    source: str
    quantity: str
    published: float
    computed: float
    tolerance: float

    @property
    def passed(self) -> bool:
        return bool(abs(self.computed - self.published) <= self.tolerance)

    def to_dict(self) -> dict:
        return {**asdict(self), "passed": self.passed}


def _gum_h2() -> list[Check]:
    src = "JCGM 100:2008 Annex H.2, Tables H.2-H.3 (results: memory)"
    b = evaluate(load_spec(spec_path("gum_h2")))
    out = []
    for q, pub, tol in (("V", 4.9990, 5e-5), ("I", 19.6610e-3, 5e-8), ("phi", 1.04446, 5e-6)):
        out.append(Check("GUM H.2 method 1", src, f"mean {q}", pub, b.input(q).value, tol))
    for q, pub, tol in (("V", 0.0032, 5e-5), ("I", 0.0095e-3, 5e-8), ("phi", 0.00075, 5e-6)):
        out.append(Check("GUM H.2 method 1", src, f"s(mean {q})", pub,
                         b.input(q).standard_uncertainty, tol))
    pairs = {tuple(p[:2]): p[2] for p in b.run["input_correlations"]}
    for (a, c), pub in ((("V", "I"), -0.36), (("V", "phi"), 0.86), (("I", "phi"), -0.65)):
        out.append(Check("GUM H.2 method 1", src, f"r({a}, {c})", pub, pairs[(a, c)], 0.005))
    for name, y, u, ty, tu in (("R", 127.732, 0.071, 5e-4, 5e-4), ("X", 219.847, 0.295, 5e-4, 1.5e-3),
                               ("Z", 254.260, 0.236, 5e-4, 5e-4)):
        m = b.measurand(name)
        # u(X): unrounded inputs give 0.2956, which rounds to 0.296; the published 0.295 is
        # method 2's value (REFERENCES.md), hence one extra unit of tolerance here.
        out.append(Check("GUM H.2 method 1", src, f"{name} / Ω", y, m.value, ty))
        out.append(Check("GUM H.2 method 1", src, f"u({name}) / Ω", u, m.standard_uncertainty, tu))
    names = list(b.correlation_names)
    cm = np.array(b.correlation_matrix)
    for (a, c), pub in ((("R", "X"), -0.588), (("R", "Z"), -0.485), (("X", "Z"), 0.993)):
        out.append(Check("GUM H.2 method 1", src, f"r({a}, {c})", pub,
                         float(cm[names.index(a), names.index(c)]), 5e-4))
    # Method 2: evaluate the model on each of the five simultaneous sets (JCGM 100 H.2.4).
    spec = load_spec(spec_path("gum_h2"))
    from ..engine import resolve_inputs
    from ..model import build_model
    res = resolve_inputs(spec)
    model = build_model(spec.outputs, quantities={q.name for q in res.quantities},
                        constants=spec.constants)
    env = {n: np.asarray(spec.inputs[n]["observations"], dtype=float) for n in ("V", "I", "phi")}
    vals = model.evaluate(env)
    for name, y, u, tol in (("R", 127.732, 0.071, 5e-4), ("X", 219.847, 0.295, 5e-4),
                            ("Z", 254.260, 0.236, 5e-4)):
        arr = vals[name]
        out.append(Check("GUM H.2 method 2", src, f"{name} / Ω", y, float(arr.mean()), 5e-4))
        out.append(Check("GUM H.2 method 2", src, f"u({name}) / Ω", u,
                         float(arr.std(ddof=1) / math.sqrt(arr.size)), tol))
    r2 = np.corrcoef(np.vstack([vals["R"], vals["X"], vals["Z"]]))
    for (i, j, a, c), pub in (((0, 1, "R", "X"), -0.588), ((0, 2, "R", "Z"), -0.485),
                              ((1, 2, "X", "Z"), 0.993)):
        out.append(Check("GUM H.2 method 2", src, f"r({a}, {c})", pub, float(r2[i, j]), 5e-4))
    return out


def _ea402_s3() -> list[Check]:
    src = "EA-4/02 M:2022 supplement S3 (inputs from a secondary source; results: memory)"
    b = evaluate(load_spec(spec_path("ea402_s3")), monte_carlo_enabled=False)
    m = b.measurand("R_X")
    return [Check("EA-4/02 S3", src, "R_X / Ω", 10000.178, m.value, 5e-4),
            Check("EA-4/02 S3", src, "u(R_X) / mΩ", 8.3, 1e3 * m.standard_uncertainty, 0.05),
            Check("EA-4/02 S3", src, "U(R_X), k = 2 / Ω", 0.017, m.expanded_uncertainty, 5e-4)]


def _jcgm101_additive() -> list[Check]:
    out = []
    src_n = "JCGM 101:2008 §9.2.2 (memory)"
    b = evaluate(load_spec(spec_path("jcgm101_additive_normal")))
    m, mc = b.measurand("Y"), b.mc("Y")
    # Monte Carlo checks allow the published last digit plus three Monte Carlo standard errors
    # of a 95 % interval end at 10⁶ trials (≈ 3 × 0.005, derived from the order-statistic variance).
    out += [Check("JCGM 101 §9.2.2", src_n, "u(y), LPU", 2.0, m.standard_uncertainty, 5e-3),
            Check("JCGM 101 §9.2.2", src_n, "U_95, LPU", 3.92, m.expanded_uncertainty, 5e-3),
            Check("JCGM 101 §9.2.2", src_n, "MCM interval high", 3.92, mc.interval_high, 0.02),
            Check("JCGM 101 §9.2.2", src_n, "MCM interval low", -3.92, mc.interval_low, 0.02),
            Check("JCGM 101 §9.2.2", src_n, "linear result validated (1 = yes)", 1.0,
                  float(mc.validated), 0.0)]
    src_r = ("JCGM 101:2008 §9.2.3 (published ±3.88: memory); exact ±3.8794 derived from the "
             "Irwin–Hall distribution")
    b = evaluate(load_spec(spec_path("jcgm101_additive_rectangular")))
    m, mc = b.measurand("Y"), b.mc("Y")
    exact = math.sqrt(3) * (4 - 2 * 0.6 ** 0.25)
    out += [Check("JCGM 101 §9.2.3", src_r, "U_95, LPU", 3.92, m.expanded_uncertainty, 5e-3),
            Check("JCGM 101 §9.2.3", src_r, "MCM interval high (exact)", exact,
                  mc.interval_high, 0.015),
            Check("JCGM 101 §9.2.3", src_r, "MCM interval low (exact)", -exact,
                  mc.interval_low, 0.015),
            # d = 3.92 − 3.88 = 0.04 from the published intervals (derived)
            Check("JCGM 101 §9.2.3", src_r, "d_high = |y + U − y_high|", 0.0405, mc.d_high,
                  0.015)]
    return out


def _table_g2() -> list[Check]:
    src = "JCGM 100:2008 Table G.2"
    out = []
    for nu, k in ((1, 13.97), (2, 4.53), (3, 3.31), (4, 2.87), (5, 2.65), (6, 2.52), (7, 2.43),
                  (8, 2.37), (9, 2.32), (10, 2.28), (20, 2.13), (50, 2.05), (100, 2.025),
                  (math.inf, 2.000)):
        tol = 5e-4 if nu in (100, math.inf) else 5e-3
        out.append(Check("GUM Table G.2", src, f"k, p = 95.45 %, ν = {nu:g}", k,
                         coverage_factor(0.9545, nu), tol))
    for nu, k in ((1, 12.71), (2, 4.30), (5, 2.57), (10, 2.23), (20, 2.09), (math.inf, 1.960)):
        out.append(Check("GUM Table G.2", src, f"k, p = 95 %, ν = {nu:g}", k,
                         coverage_factor(0.95, nu), 5e-3 if math.isfinite(nu) else 5e-4))
    return out


def _si() -> list[Check]:
    src = "SI Brochure, 9th edition (2019): exact values"
    e = BUILTIN_CONSTANTS["e"]
    return [Check("SI 2019", src, "e / C", 1.602176634e-19, e, 0.0),
            Check("SI 2019", src, "R_K = h/e² / Ω", 25812.80745930450666, BUILTIN_CONSTANTS["R_K"],
                  1e-10),
            Check("SI 2019", src, "K_J = 2e/h / (GHz/V)", 483597.848416983632,
                  BUILTIN_CONSTANTS["K_J"] / 1e9, 1e-8),
            Check("SI 2019", src, "e·f at f = 1 GHz / pA", 160.2176634, e * 1e9 * 1e12, 1e-10)]


def _gum_h3() -> list[Check]:
    try:
        from .h3 import h3_case
    except ImportError:  # the regression input arrives with the chain modules
        return []
    return [Check("GUM H.3", c.source + " (memory, recomputes exactly)", c.quantity,
                  c.published, c.computed, c.tolerance) for c in h3_case()]


def _sp1065() -> list[Check]:
    """NIST SP 1065 1000-point test set through the Allan code the cycles module uses."""
    from ..stats.allan import adev, mdev, oadev
    src = "NIST SP 1065 (Handbook of Frequency Stability Analysis), 1000-point test data"
    x, data = 1234567890, []
    for _ in range(1000):             # x_0 is the seed itself; x_{n+1} = 16807 x_n mod (2³¹ − 1)
        data.append(x / 2147483647)
        x = 16807 * x % 2147483647
    published = {"ADEV": (adev, (2.922319e-1, 9.965736e-2, 3.897804e-2)),
                 "OADEV": (oadev, (2.922319e-1, 9.159953e-2, 3.241343e-2)),
                 "MDEV": (mdev, (2.922319e-1, 6.172376e-2, 2.170921e-2))}
    out = []
    for kind, (fn, values) in published.items():
        curve = fn(data, [1, 10, 100])
        for m, pub, got in zip((1, 10, 100), values, curve.deviation):
            # seven significant digits published: half a unit of the last one
            out.append(Check("NIST SP 1065", src, f"{kind}, m = {m}", pub, float(got),
                             0.5 * 10 ** (math.floor(math.log10(pub)) - 6)))
    return out


def _jcgm101_mass() -> list[Check]:
    """JCGM 101 §9.3 mass calibration: first- and second-order linear results (Table 10)."""
    src = "JCGM 101:2008 §9.3, Table 10 (memory)"
    spec = load_spec(spec_path("jcgm101_mass"))
    out = []
    for order in (1, 2):
        b = evaluate(replace(spec, propagation_order=order), monte_carlo_enabled=False)
        m = b.measurand("dm")
        u_pub, lo_pub, hi_pub = ((0.0539, 1.1285, 1.3395) if order == 1 else
                                 (0.0750, 1.0870, 1.3810))
        label = "first order" if order == 1 else "second order (§5.1.2, moments of each input)"
        # four decimals published in mg: half a unit of the last one, plus one unit for the
        # interval ends, which are rounded y ± U
        out += [Check("JCGM 101 §9.3", src, f"u(δm) / mg, LPU {label}", u_pub,
                      m.standard_uncertainty, 5e-5),
                Check("JCGM 101 §9.3", src, f"95 % interval low / mg, LPU {label}", lo_pub,
                      m.value - m.expanded_uncertainty, 1.5e-4),
                Check("JCGM 101 §9.3", src, f"95 % interval high / mg, LPU {label}", hi_pub,
                      m.value + m.expanded_uncertainty, 1.5e-4)]
    return out


def _derived_moments() -> list[Check]:
    """Exact results the propagation must reproduce (derived by integration or inversion)."""
    from ..coverage import dof_from_coverage_factor
    from ..spec import parse_spec
    src = "derived: Var(X²) = E[X⁴] − E[X²]² = 1/5 − 1/9 for X uniform on [−1, 1]"
    src_g2 = "JCGM 100:2008 Table G.2 (p = 95.45 %), inverted: ν with t_p(ν) = k"
    b = evaluate(parse_spec('[budget]\npropagation_order = 2\n[model]\nY = "X * X"\n'
                            '[monte_carlo]\nenabled = false\n[inputs.X]\n'
                            'distribution = "rectangular"\nlow = -1.0\nhigh = 1.0\n'))
    out = [Check("Second order, rectangular", src, "u(X²), X rectangular on [−1, 1]",
                 math.sqrt(1 / 5 - 1 / 9), b.measurand("Y").standard_uncertainty, 1e-12)]
    # the published k is rounded to two decimals, which moves ν by up to ±0.2 for ν ≤ 10
    for nu, k in ((2, 4.53), (3, 3.31), (4, 2.87), (6, 2.52), (10, 2.28)):
        out.append(Check("GUM Table G.2 inverse", src_g2, f"ν from k = {k:g} at p = 95.45 %",
                         float(nu), dof_from_coverage_factor(k, 0.9545), 0.2))
    return out


#: case name -> function returning its checks, in the order ``validate`` prints them
CASES: dict[str, Callable[[], list[Check]]] = {
    "GUM H.2": _gum_h2,
    "GUM H.3": _gum_h3,
    "EA-4/02 S3": _ea402_s3,
    "JCGM 101 §9.2": _jcgm101_additive,
    "GUM Table G.2": _table_g2,
    "SI 2019": _si,
    "NIST SP 1065": _sp1065,
    "JCGM 101 §9.3": _jcgm101_mass,
    "Derived moments and Table G.2 inverse": _derived_moments,
}


def run_all() -> list[Check]:
    """Run every reference case and return all checks."""
    out: list[Check] = []
    for fn in CASES.values():
        out.extend(fn())
    return out


