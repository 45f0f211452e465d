"""The decay-cascade model of a pump's current plateaus (Kashcheyevs & Kaestner, PRL 104, 186805, 2010).

With X_k the integrated escape rate of the k-th electron during decoupling and ln X_k linear in
the gate voltage V, the mean number of electrons transferred per cycle is

    ⟨n⟩(V) = Σ_(k=1..K) exp(−X_k),      X_k = exp(−a_k (V − V_k)),

a staircase of K double-exponential steps. V_k (V) is where step k reaches e^(−1) of its height
and a_k (1/V) its steepness; with a shared slope a_k = a for every k and the usual figure of
merit is δ_(k+1) = a·(V_(k+1) − V_k) (= Δ_(k+1) − Δ_k in the paper's notation, Δ_k = a·V_k).

On plateau n the pump's error is ⟨n⟩/n − 1 with ⟨n⟩ − n = Σ_(k≤n) (e^(−X_k) − 1) + Σ_(k>n) e^(−X_k):
electrons missed on the rising edges (negative) plus extra electrons from the next steps
(positive). The two parts have opposite signs. The code sums them with ``expm1`` so that
errors of 1e-12 are not lost in the rounding of ⟨n⟩ ≈ n.
"""

from __future__ import annotations

import numpy as np

__all__ = ["CascadeModel"]

_U_MAX = 700.0  # clip for u = −a (V − V_k) so that exp(u) stays finite


class CascadeModel:
    """Decay-cascade staircase as a fit model over gate voltages.

    Parameters (the vector θ, in this order)
    ----------------------------------------
    shared slope: ``a`` (1/V), then ``V_1`` .. ``V_K`` (V);
    per-step slopes: ``a_1``, ``V_1``, ``a_2``, ``V_2``, ... .

    Parameters
    ----------
    steps : int
        K, number of steps in the model (≥ 1).
    shared_slope : bool
        One slope for all steps (default) or one per step.
    """

    name = "decay-cascade"

    def __init__(self, steps: int, shared_slope: bool = True):
        self.steps = int(steps)
        self.shared_slope = bool(shared_slope)
        if self.shared_slope:
            names = ["a"] + [f"V_{k}" for k in range(1, self.steps + 1)]
            units = ["1/V"] + ["V"] * self.steps
        else:
            names, units = [], []
            for k in range(1, self.steps + 1):
                names += [f"a_{k}", f"V_{k}"]
                units += ["1/V", "V"]
        self.param_names = tuple(names)
        self.param_units = tuple(units)

    @property
    def settings(self) -> dict:
        """Everything besides θ that defines the model (JSON-ready)."""
        return {"steps": self.steps, "shared_slope": self.shared_slope}

    def split(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Slopes a_k and centres V_k, each of shape (S, K), for θ rows of shape (S, p)."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        K = self.steps
        if self.shared_slope:
            return np.repeat(theta[:, :1], K, axis=1), theta[:, 1:K + 1]
        return theta[:, 0::2], theta[:, 1::2]

    def _u(self, theta: np.ndarray, v) -> np.ndarray:
        """u_k = −a_k (V − V_k) = ln X_k, shape (points, K); θ rows broadcast over points."""
        a, vk = self.split(theta)
        v = np.asarray(v, dtype=float).reshape(-1, 1)
        return np.clip(-a * (v - vk), -745.0, _U_MAX)

    def predict(self, theta: np.ndarray, v) -> np.ndarray:
        """⟨n⟩ at gate voltages ``v`` (V), dimensionless."""
        return np.exp(-np.exp(self._u(theta, v))).sum(axis=1)

    def jacobian(self, theta: np.ndarray, v) -> np.ndarray:
        """∂⟨n⟩/∂θ, shape (len(v), p), analytic."""
        a, vk = self.split(theta)
        v = np.asarray(v, dtype=float).reshape(-1, 1)
        u = self._u(theta, v)
        # e^(−X) X computed as exp(u − e^u): finite where X overflows
        g = np.exp(u - np.exp(u))
        d_a = g * (v - vk)              # ∂/∂a_k
        d_v = -g * a                    # ∂/∂V_k
        if self.shared_slope:
            return np.column_stack([d_a.sum(axis=1), d_v])
        out = np.empty((v.shape[0], 2 * self.steps))
        out[:, 0::2] = d_a
        out[:, 1::2] = d_v
        return out

    def error_parts(self, theta: np.ndarray, v, plateau: int) -> tuple[np.ndarray, np.ndarray]:
        """Missed-electron part Σ_(k≤n)(1 − e^(−X_k)) and extra part Σ_(k>n) e^(−X_k), ≥ 0 each."""
        x = np.exp(self._u(theta, v))
        missed = -np.expm1(-x[:, :plateau]).sum(axis=1)
        extra = np.exp(-x[:, plateau:]).sum(axis=1)
        return missed, extra

    def deviation_at(self, theta: np.ndarray, v, plateau: int) -> np.ndarray:
        """⟨n⟩ − n at voltages ``v`` (one θ) or at one voltage for many θ rows."""
        missed, extra = self.error_parts(theta, v, plateau)
        return extra - missed

    def deviation(self, theta: np.ndarray, point: dict, plateau: int) -> np.ndarray:
        """⟨n⟩ − n at the operating point, one value per θ row."""
        return self.deviation_at(theta, point["gate_voltage"], plateau)

    def outcome(self, theta: np.ndarray, point: dict, plateau: int) -> dict:
        """Missed and extra probabilities at the operating point (first-order, per cycle)."""
        missed, extra = self.error_parts(theta, [point["gate_voltage"]], plateau)
        return {"p_missed": float(missed[0]), "p_extra": float(extra[0])}

    def figure_of_merit(self, theta: np.ndarray, plateau: int) -> float | None:
        """δ_(n+1) = a·(V_(n+1) − V_n) for a shared slope, else None."""
        if not self.shared_slope or plateau >= self.steps:
            return None
        a, vk = self.split(theta)
        return float(a[0, 0] * (vk[0, plateau] - vk[0, plateau - 1]))

    def best_gate_voltage(self, theta: np.ndarray, plateau: int) -> dict:
        """Operating points on plateau n between V_n and V_(n+1).

        * ``gate_voltage``: where the total error probability (missed + extra) is smallest —
          the robust choice; its ``predicted_error`` is δ there.
        * ``zero_crossing``: where the two opposite-sign parts cancel, so δ = 0 exactly
          (|δ| is smallest there, but only by cancellation of two larger errors).
        """
        from scipy.optimize import brentq, minimize_scalar
        a, vk = self.split(theta)
        lo, hi = sorted((float(vk[0, plateau - 1]), float(vk[0, plateau])))
        grid = np.linspace(lo, hi, 2001)
        missed, extra = self.error_parts(theta, grid, plateau)
        with np.errstate(divide="ignore"):
            total = np.log(missed + extra)
        i = int(np.argmin(total))
        best_v = float(grid[i])
        if 0 < i < len(grid) - 1:
            def f(v):
                m, e = self.error_parts(theta, [v], plateau)
                return float(np.log(m[0] + e[0]))
            res = minimize_scalar(f, bounds=(grid[i - 1], grid[i + 1]), method="bounded",
                                  options={"xatol": (hi - lo) * 1e-10})
            if res.success and res.fun <= total[i]:
                best_v = float(res.x)
        m, e = self.error_parts(theta, [best_v], plateau)
        out = {"gate_voltage": best_v, "predicted_error": float((e[0] - m[0]) / plateau),
               "error_probability": float(m[0] + e[0]), "zero_crossing": None}
        dev = extra - missed
        sign = np.flatnonzero(np.diff(np.sign(dev)) != 0)
        if sign.size:
            j = int(sign[0])
            out["zero_crossing"] = float(brentq(
                lambda v: float(self.deviation_at(theta, [v], plateau)[0]), grid[j], grid[j + 1],
                xtol=1e-15 * max(1.0, abs(hi)), rtol=1e-14))
        return out

    # ------------------------------------------------------------------ fitting support
    def initial_guess(self, v: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, list[int]]:
        """Starting θ from the linearised steps, and the steps that have no point on their edge.

        On the edge of step k (k − 1 < ⟨n⟩ < k, other steps flat), ln(−ln(⟨n⟩ − k + 1))
        = −a_k V + a_k V_k is linear in V.
        """
        K = self.steps
        slopes = np.full(K, np.nan)
        centres = np.full(K, np.nan)
        missing = []
        for k in range(1, K + 1):
            frac = y - (k - 1)
            sel = (frac > 0.03) & (frac < 0.97)
            if sel.sum() >= 2 and np.ptp(v[sel]) > 0:
                z = np.log(-np.log(frac[sel]))
                c1, c0 = np.polyfit(v[sel], z, 1)
                if c1 != 0:
                    slopes[k - 1], centres[k - 1] = -c1, -c0 / c1
            elif sel.sum() == 1:
                centres[k - 1] = float(v[sel][0])   # refined below once a slope is known
            else:
                missing.append(k)
        known = slopes[np.isfinite(slopes)]
        if known.size:
            a0 = float(np.median(known))
        else:  # every edge has a single point: a slope from the scan's resolution
            a0 = float(np.sign(np.corrcoef(v, y)[0, 1]) or 1.0) * 3.0 / max(np.ptp(v), 1e-300) * K
        for k in range(K):
            if not np.isfinite(slopes[k]):
                slopes[k] = a0
                if np.isfinite(centres[k]):
                    frac = y - k
                    sel = (frac > 0.03) & (frac < 0.97)
                    if sel.any():
                        centres[k] = float(v[sel][0] + np.log(-np.log(frac[sel][0])) / a0)
        if self.shared_slope:
            theta = np.concatenate([[float(np.median(slopes))], centres])
        else:
            theta = np.column_stack([slopes, centres]).ravel()
        return theta, missing
