"""Sequential escape of loaded electrons: the master equation, its solution and its fit.

Physics
-------
N electrons are loaded into the dot; they leave one at a time. With m electrons on the dot the
escape rate is λ_m (1/s), so the occupation probabilities P_m(t) obey the master equation

    dP_N/dt = −λ_N P_N,      dP_m/dt = −λ_m P_m + λ_(m+1) P_(m+1)   (λ_0 = 0),

from P_N(0) = 1. The number ejected within a hold time t is N − m with probability P_m(t).
Escape order k = 1..N names the electrons by the order in which they leave: the k-th to
leave does so from occupation m = N − k + 1, with mean escape time τ_k = 1/λ_(N−k+1).
The charging energy makes successive escape times differ by about an order of magnitude.

With a gate voltage V the escape times depend exponentially on it,
τ_k(V) = τ_k0 · exp(−b_k (V − V_ref)), with τ_k0 in s, b_k in 1/V and V_ref in V.

Solution
--------
Only the products κ_m = λ_m·t enter, so the solver works in those dimensionless numbers.

* Closed form (Bateman): P_m = (Π_(j>m) κ_j) Σ_(i≥m) e^(−κ_i) / Π_(j≥m, j≠i) (κ_j − κ_i).
  It is a sum of terms of both signs; its absolute rounding error is about
  ε·Σ|terms|, which the code computes for every point.
* Where that estimate exceeds :data:`BATEMAN_TOLERANCE` (rates close together, equal rates,
  t = 0), the exponential of the bidiagonal rate matrix is used instead. It is computed by
  scaling and squaring of a series whose terms are all nonnegative (the rate matrix plus
  q·I has no negative entry), with the diagonal and first superdiagonal recomputed exactly
  after every squaring (the fix-up of Al-Mohy & Higham, SIAM J. Matrix Anal. Appl. 31, 970,
  2009 (memory)). Every sum is then a sum of positive numbers, so nothing cancels.
  ``scipy.linalg.expm`` (Padé) was measured against an 80-digit decimal evaluation of the
  closed form and lost up to 1e-8 absolute on such stiff, close-rate chains; this path stays
  within a few 1e-16 on the same cases.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["BATEMAN_TOLERANCE", "occupation_probabilities", "bateman_probabilities",
           "matrix_exponential_probabilities", "EscapeModel"]

#: Largest estimated absolute rounding error accepted from the closed form.
BATEMAN_TOLERANCE = 1e-14

_EPS = np.finfo(float).eps
_MAX_KAPPA = 1e30  # beyond this every probability but the end states is exactly 0 anyway
_TAYLOR_TERMS = 24  # series length for a scaled matrix of norm <= 2 (2^24/24! < 3e-17)
_THETA = 1.0        # largest q·τ of the scaled matrix


def _as_kappa(kappa) -> np.ndarray:
    k = np.asarray(kappa, dtype=float)
    if k.ndim == 1:
        k = k[None, :]
    if k.ndim != 2 or k.shape[1] < 1:
        raise ValueError("kappa must have shape (points, N) with N >= 1")
    return np.clip(k, 0.0, _MAX_KAPPA)


def bateman_probabilities(kappa) -> tuple[np.ndarray, np.ndarray]:
    """Closed-form occupation probabilities and their estimated absolute rounding error.

    P_m = Σ_(i≥m) c_(m,i) e^(−κ_i) with c_(m,m) = Π_(j>m) κ_j/(κ_j − κ_m) and the recursion
    c_(m,i) = c_(m+1,i)·κ_(m+1)/(κ_m − κ_i) for i > m (κ_0 = 0), O(N²) work per point.

    Parameters
    ----------
    kappa : array_like, shape (M, N)
        λ_m·t for occupations m = 1..N (column m−1), dimensionless, ≥ 0.

    Returns
    -------
    P : ndarray, shape (M, N + 1)
        P_m for m = 0..N (column m). Unreliable where ``err`` is large (NaN for equal rates).
    err : ndarray, shape (M,)
        ε·(N + 1)·max_m Σ_i |c_(m,i)| e^(−κ_i), an estimate of the absolute rounding error.
    """
    k = _as_kappa(kappa)
    M, N = k.shape
    lam = np.empty((N + 1, M))
    lam[0] = 0.0
    lam[1:] = k.T
    expo = np.exp(-lam)
    P = np.empty((N + 1, M))
    c = np.empty((N + 1, M))
    abs_sum = np.zeros(M)
    with np.errstate(all="ignore"):
        c[N] = 1.0
        P[N] = expo[N]
        for m in range(N - 1, -1, -1):
            # i > m: update the coefficients carried over from m + 1
            c[m + 1:] *= lam[m + 1] / (lam[m] - lam[m + 1:])
            # i = m: explicit product (for m = 0 it is exactly 1)
            c[m] = np.prod(lam[m + 1:] / (lam[m + 1:] - lam[m]), axis=0) if m else 1.0
            terms = c[m:] * expo[m:]
            P[m] = terms.sum(axis=0)
            abs_sum = np.maximum(abs_sum, np.abs(terms).sum(axis=0))
    err = _EPS * (N + 1) * abs_sum
    err = np.where(np.isfinite(err) & np.isfinite(P).all(axis=0), err, np.inf)
    return P.T, err


def _phi(a: np.ndarray, c: np.ndarray) -> np.ndarray:
    """(e^(−a) − e^(−c))/(c − a) without cancellation (the 2×2 exponential's corner)."""
    d = c - a
    x = d / 2
    with np.errstate(all="ignore"):
        direct = (np.exp(-a) - np.exp(-c)) / d
        shc = np.where(np.abs(x) < 1e-5, 1 + x * x / 6, np.sinh(x) / np.where(x == 0, 1, x))
        near = np.exp(-(a + c) / 2) * shc
    return np.where(np.abs(d) > 1, direct, near)


def matrix_exponential_probabilities(kappa) -> np.ndarray:
    """Occupation probabilities from the exponential of the bidiagonal rate matrix.

    Stable for any rates, including equal ones (see the module docstring for the method).

    Parameters
    ----------
    kappa : array_like, shape (M, N)
        λ_m·t for occupations m = 1..N, dimensionless, ≥ 0.

    Returns
    -------
    ndarray, shape (M, N + 1)
        P_m for m = 0..N.
    """
    k = _as_kappa(kappa)
    M, N = k.shape
    out = np.empty((M, N + 1))
    q = k.max(axis=1)
    with np.errstate(divide="ignore"):
        s = np.ceil(np.log2(np.maximum(q, 1e-300) / _THETA))
    s = np.maximum(0, s).astype(int)
    r = np.arange(N)
    for sv in np.unique(s):
        sel = np.flatnonzero(s == sv)
        ks, qs, tau = k[sel], q[sel], 2.0 ** (-int(sv))
        # states 1..N only (rows r ↔ occupation r+1); state 0 follows from the total, 1
        C = np.zeros((len(sel), N, N))
        C[:, r, r] = tau * (qs[:, None] - ks)         # ≥ 0
        C[:, r[:-1], r[:-1] + 1] = tau * ks[:, 1:]    # ≥ 0
        eye = np.broadcast_to(np.eye(N), C.shape)
        E = eye.copy()
        for j in range(_TAYLOR_TERMS, 0, -1):         # Horner form of Σ C^j / j!
            E = eye + (C @ E) / j
        E *= np.exp(-qs * tau)[:, None, None]
        for step in range(int(sv) + 1):
            if step:
                E = E @ E
            tt = tau * 2.0 ** step
            E[:, r, r] = np.exp(-ks * tt)             # exact diagonal
            if N > 1:                                  # exact first superdiagonal
                E[:, r[:-1], r[:-1] + 1] = ks[:, 1:] * tt * _phi(ks[:, :-1] * tt,
                                                                  ks[:, 1:] * tt)
        col = E[:, :, N - 1]
        out[sel, 1:] = col
        out[sel, 0] = np.maximum(0.0, 1.0 - col.sum(axis=1))
    return out


def occupation_probabilities(kappa) -> np.ndarray:
    """P_m (m = 0..N) at κ_m = λ_m·t: closed form where it is accurate, matrix exponential elsewhere.

    Parameters
    ----------
    kappa : array_like, shape (M, N) or (N,)
        λ_m·t for occupations m = 1..N, dimensionless.

    Returns
    -------
    ndarray, shape (M, N + 1)
        Probabilities of m = 0..N electrons remaining; each row sums to 1.
    """
    k = _as_kappa(kappa)
    P, err = bateman_probabilities(k)
    bad = ~(err <= BATEMAN_TOLERANCE)
    if bad.any():
        P[bad] = matrix_exponential_probabilities(k[bad])
    return P


class EscapeModel:
    """The sequential-escape model as a fit model over (gate voltage, hold time) points.

    Parameters (the vector θ, in this order)
    ----------------------------------------
    ``ln_tau0_k`` for k = 1..N : ln(τ_k0 / 1 s), the k-th escape time at V_ref;
    then, when the gate voltage varies, ``b_k`` for k = 1..N (1/V), or one shared ``b``.

    Parameters
    ----------
    loaded : int
        N, electrons loaded (1..10).
    gate : str
        ``"per-electron"`` (own b_k), ``"shared"`` (one b) or ``"none"`` (no gate dependence).
    reference_voltage : float
        V_ref in V. Default 0.
    """

    name = "sequential-escape"

    def __init__(self, loaded: int, gate: str = "per-electron", reference_voltage: float = 0.0):
        if gate not in ("per-electron", "shared", "none"):
            raise ValueError(f"gate must be per-electron, shared or none; got {gate!r}")
        self.loaded = int(loaded)
        self.gate = gate
        self.reference_voltage = float(reference_voltage)
        n = self.loaded
        names = [f"ln_tau0_{k}" for k in range(1, n + 1)]
        units = ["ln(s)"] * n
        if gate == "per-electron":
            names += [f"b_{k}" for k in range(1, n + 1)]
            units += ["1/V"] * n
        elif gate == "shared":
            names.append("b")
            units.append("1/V")
        self.param_names = tuple(names)
        self.param_units = tuple(units)

    @property
    def settings(self) -> dict:
        """Everything besides θ that defines the model (JSON-ready)."""
        return {"loaded": self.loaded, "gate": self.gate,
                "reference_voltage": self.reference_voltage}

    def slopes(self, theta: np.ndarray) -> np.ndarray:
        """b_k, shape (S, N), for parameter rows θ of shape (S, p)."""
        theta = np.atleast_2d(theta)
        n = self.loaded
        if self.gate == "per-electron":
            return theta[:, n:2 * n]
        if self.gate == "shared":
            return np.repeat(theta[:, n:n + 1], n, axis=1)
        return np.zeros((theta.shape[0], n))

    def ln_tau(self, theta: np.ndarray, v) -> np.ndarray:
        """ln(τ_k(V)/1 s), shape (S or M, N); θ rows broadcast against voltages."""
        theta = np.atleast_2d(theta)
        n = self.loaded
        dv = 0.0 if v is None else np.asarray(v, dtype=float).reshape(-1, 1) - \
            self.reference_voltage
        return theta[:, :n] - self.slopes(theta) * dv

    def probabilities(self, theta: np.ndarray, v, t) -> np.ndarray:
        """P(exactly j ejected), j = 0..N, shape (M, N + 1), at voltages ``v`` and hold times ``t``.

        θ may be one row (applied to every point) or one row per point.
        """
        t = np.asarray(t, dtype=float).reshape(-1, 1)
        ln_kappa = np.log(np.maximum(t, 1e-300)) - self.ln_tau(theta, v)   # by escape order k
        kappa = np.exp(np.clip(ln_kappa, -745.0, 69.0))
        kappa = np.where(t > 0, kappa, 0.0)
        # occupation m = N − k + 1: reverse the escape order into occupation order 1..N
        occ = occupation_probabilities(kappa[:, ::-1])                      # P_m, m = 0..N
        return occ[:, ::-1]                                                 # ejected j = N − m

    def predict(self, theta: np.ndarray, v, t) -> np.ndarray:
        """Mean number ejected ⟨n_ej⟩ at each point (dimensionless)."""
        p = self.probabilities(theta, v, t)
        return p @ np.arange(self.loaded + 1, dtype=float)

    def deviation(self, theta: np.ndarray, point: dict, plateau: int) -> np.ndarray:
        """⟨n_ej⟩ − n at the operating point, one value per θ row (sums of small terms)."""
        theta = np.atleast_2d(theta)
        v = None if point.get("gate_voltage") is None else \
            np.full(theta.shape[0], point["gate_voltage"])
        p = self.probabilities(theta, v, np.full(theta.shape[0], point["hold_time"]))
        j = np.arange(self.loaded + 1, dtype=float)
        return (p * (j - plateau)).sum(axis=1)

    def outcome(self, theta: np.ndarray, point: dict, plateau: int) -> dict:
        """P(n − 1), P(n), P(n + 1) ejected and the escape times at the operating point."""
        v = point.get("gate_voltage")
        p = self.probabilities(theta, None if v is None else [v], [point["hold_time"]])[0]
        n = plateau
        ln_t = self.ln_tau(theta, None if v is None else [v])[0]

        def pj(j: int) -> float:
            return float(p[j]) if 0 <= j <= self.loaded else 0.0
        return {"p_exactly_n": pj(n), "p_n_minus_1": pj(n - 1), "p_n_plus_1": pj(n + 1),
                "p_fewer": float(p[:n].sum()), "p_more": float(p[n + 1:].sum()),
                "escape_times_s": [float(math.exp(x)) for x in ln_t]}

    def best_gate_voltage(self, theta: np.ndarray, hold_time: float, plateau: int,
                          v_range: tuple[float, float]) -> dict:
        """Gate voltage in ``v_range`` that maximises P(exactly n ejected) at ``hold_time``."""
        from scipy.optimize import minimize_scalar
        lo, hi = v_range
        grid = np.linspace(lo, hi, 801)

        def p_n(v):
            v = np.atleast_1d(v)
            return self.probabilities(theta, v, np.full(v.shape, hold_time))[:, plateau]
        values = p_n(grid)
        i = int(np.argmax(values))
        a, b = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
        best_v, best_p = float(grid[i]), float(values[i])
        if b > a:
            res = minimize_scalar(lambda v: -p_n(v)[0], bounds=(a, b), method="bounded",
                                  options={"xatol": (hi - lo) * 1e-9})
            if res.success and -res.fun >= best_p:
                best_v, best_p = float(res.x), float(-res.fun)
        return {"gate_voltage": best_v, "p_exactly_n": best_p, "hold_time": float(hold_time),
                "at_edge": bool(i == 0 or i == len(grid) - 1)}

    # ------------------------------------------------------------------ fitting support
    def initial_guess(self, v, t, y) -> tuple[np.ndarray, list[int]]:
        """Starting θ from the linearised escapes, and the escape orders not seen in the data.

        Where the k-th escape is under way (k − 1 < ⟨n_ej⟩ < k), −ln(1 − (⟨n_ej⟩ − k + 1))
        ≈ t/τ_k(V) when escapes are well separated, so ln of it is linear in (ln τ_k0, b_k).
        """
        n = self.loaded
        ln_tau0 = np.zeros(n)
        b = np.zeros(n)
        missing = []
        dv = None if v is None else np.asarray(v) - self.reference_voltage
        for k in range(1, n + 1):
            frac = y - (k - 1)
            sel = (frac > 0.03) & (frac < 0.97) & (t > 0)
            if not sel.any():
                missing.append(k)
                continue
            z = np.log(-np.log1p(-frac[sel])) - np.log(t[sel])   # = −ln τ_k0 + b_k dv
            if dv is not None and self.gate != "none" and np.ptp(dv[sel]) > 0 and sel.sum() >= 2:
                A = np.column_stack([-np.ones(sel.sum()), dv[sel]])
                coef, *_ = np.linalg.lstsq(A, z, rcond=None)
                ln_tau0[k - 1], b[k - 1] = coef
            else:
                ln_tau0[k - 1] = -float(np.mean(z))
        theta = list(ln_tau0)
        if self.gate == "per-electron":
            theta += list(b)
        elif self.gate == "shared":
            theta.append(float(np.mean(b)))
        return np.asarray(theta, dtype=float), missing
