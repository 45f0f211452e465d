"""Independent simulators of the pump models for the tests (never the package's own models).

* ``staircase``: the decay-cascade ⟨n⟩(V) = Σ_k exp(−exp(−a_k (V − V_k))) written out from
  Kashcheyevs & Kaestner, Phys. Rev. Lett. 104, 186805 (2010), in float64.
* ``cascade_parts_decimal``: the same formula's missed part Σ_(k≤n) (1 − e^(−X_k)), extra part
  Σ_(k>n) e^(−X_k) and deviation ⟨n⟩ − n, with 60-digit decimals (Python's decimal module), so
  that errors of 1e-13 keep all their digits.
* ``escape_taus``: τ_k(V) = τ_k0 · exp(−b_k (V − V_ref)) (DOMAIN notes: escape times depend
  exponentially on the gate voltage — common practice).
* ``escape_mean``: mean number ejected within a hold time t for sequential escape with mean
  waiting times τ_k of the k-th escape, Σ_k P(T_1 + … + T_k ≤ t) from the hypoexponential
  distribution function, in 80-digit decimals; ``escape_simulated``: the same by direct
  simulation of exponential waiting times. Neither solves the master equation.
"""

from __future__ import annotations

from decimal import Decimal, localcontext

import numpy as np


def staircase(v, slopes, centres):
    """⟨n⟩ at gate voltages ``v`` (V); ``slopes`` a_k (1/V), one per step or one for all."""
    v = np.asarray(v, dtype=float)
    slopes = np.broadcast_to(np.asarray(slopes, dtype=float), (len(centres),))
    with np.errstate(over="ignore"):     # far below a step X_k = inf, so its term is 0 exactly
        return sum(np.exp(-np.exp(-a * (v - c))) for a, c in zip(slopes, centres))


def cascade_parts_decimal(v: float, slopes, centres, plateau: int) -> tuple[float, float, float]:
    """(missed, extra, ⟨n⟩ − n) at one voltage, each rounded once to float at the end."""
    slopes = list(np.broadcast_to(np.asarray(slopes, dtype=float), (len(centres),)))
    with localcontext() as ctx:
        ctx.prec = 60
        missed = extra = Decimal(0)
        for k, (a, c) in enumerate(zip(slopes, centres), start=1):
            x = (-Decimal(float(a)) * (Decimal(float(v)) - Decimal(float(c)))).exp()
            if k <= plateau:
                missed += 1 - (-x).exp()
            else:
                extra += (-x).exp()
        return float(missed), float(extra), float(extra - missed)


def escape_taus(tau0, slopes, v, v_ref: float) -> np.ndarray:
    """(points, N) mean waiting times τ_k(V) = τ_k0·exp(−b_k (V − V_ref)) (s).

    tau0 : (N,) τ_k0 (s); slopes : b_k (1/V), one per electron or one for all; v : (points,) V.
    """
    tau0 = np.asarray(tau0, dtype=float)
    b = np.broadcast_to(np.asarray(slopes, dtype=float), tau0.shape)
    v = np.atleast_1d(np.asarray(v, dtype=float))
    return tau0[None, :] * np.exp(-b[None, :] * (v[:, None] - v_ref))


def escape_simulated(rng, tau_k, t, cycles: int) -> np.ndarray:
    """Mean number ejected per point from ``cycles`` simulated cycles.

    tau_k : (points, N) mean waiting time of the k-th escape (s); t : (points,) hold time (s).
    Each cycle draws N exponential waiting times; the count ejected is how many cumulative
    escape times fall within t (a direct simulation, no master equation).
    """
    tau_k = np.asarray(tau_k, dtype=float)
    t = np.asarray(t, dtype=float)
    waits = rng.exponential(tau_k[:, None, :], size=(len(t), cycles, tau_k.shape[1]))
    return (np.cumsum(waits, axis=2) <= t[:, None, None]).sum(axis=2).mean(axis=1)


def escape_mean(tau_k, t) -> np.ndarray:
    """Exact mean number ejected, Σ_k P(T_1 + … + T_k ≤ t), T_j ~ Exp(mean τ_j), in decimals.

    P(sum of k independent exponentials with distinct rates λ_j ≤ t) =
    1 − Σ_j [Π_(i≠j) λ_i/(λ_i − λ_j)] e^(−λ_j t) (hypoexponential distribution function, any
    probability handbook). Needs distinct τ within each row.
    """
    tau_k = np.atleast_2d(np.asarray(tau_k, dtype=float))
    t = np.broadcast_to(np.asarray(t, dtype=float), (tau_k.shape[0],))
    out = np.empty(tau_k.shape[0])
    with localcontext() as ctx:
        ctx.prec = 80
        for p, (row, tt) in enumerate(zip(tau_k, t)):
            lam = [1 / Decimal(float(x)) for x in row]
            total = Decimal(0)
            for k in range(1, len(lam) + 1):
                s = Decimal(0)
                for j in range(k):
                    c = Decimal(1)
                    for i in range(k):
                        if i != j:
                            c *= lam[i] / (lam[i] - lam[j])
                    s += c * (-lam[j] * Decimal(float(tt))).exp()
                total += 1 - s
            out[p] = float(total)
    return out


__all__ = ["staircase", "cascade_parts_decimal", "escape_taus", "escape_simulated",
           "escape_mean"]
