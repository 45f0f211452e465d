"""Linear least squares with the full parameter covariance (JCGM 100:2008, Annex H.3).

Three models; the line is written about a chosen origin ``x0`` so that its first parameter is the
value *at* ``x0`` (for a drift line, ``x0`` is conveniently the date of interest):

* ``"line"``: y = p0 + p1·(x − x0)
* ``"constant"``: y = p0
* ``"proportional"``: y = p0·x (a line through the origin; ``x0`` is not used)

Two ways of weighting:

* **unweighted** (``u=None``), as in GUM H.3: the observations have a common, unknown standard
  deviation, estimated from the residuals, s² = Σr²/(n − p); the covariance is s²·(XᵀX)⁻¹ and the
  degrees of freedom are n − p (H.3.3–H.3.5).
* **weighted** (``u`` given): the observations carry stated standard uncertainties u_i; the
  covariance is (XᵀWX)⁻¹ with W = diag(1/u_i²) ("absolute sigma"). The consistency of the
  scatter with the stated u_i is tested with χ² = Σ(r_i/u_i)² on ν = n − p degrees of freedom;
  the Birge ratio is R_B = √(χ²/ν).
* **generalised** (``cov`` given): the observations carry a full covariance matrix V (for
  calibrations that share a reference standard, V = diag(u_i² − u_c²) + u_c²·S with S_ij = 1
  when rows i and j share the reference). Generalised least squares (Aitken):
  β = (XᵀV⁻¹X)⁻¹XᵀV⁻¹y with covariance (XᵀV⁻¹X)⁻¹ and χ² = rᵀV⁻¹r (JCGM 100 §5.2 and H.3 for
  the propagation; the estimator is the textbook GLS, common practice). It is computed by
  whitening with the Cholesky factor of V, so the rest is the weighted case. When the policy decides that the scatter exceeds the stated
  uncertainties, the covariance is multiplied by χ²/ν (never divided: a scatter smaller than
  stated does not shrink the uncertainty), and the degrees of freedom become ν because the scale
  is then estimated from the residuals.

The solution uses a QR factorisation of the whitened design matrix (numerically better than
forming the normal equations); the covariance is R⁻¹R⁻ᵀ.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from ..errors import ComputationError

__all__ = ["INFLATE_POLICIES", "Fit", "fit"]

#: How to react to a scatter larger than the stated uncertainties (weighted fits only).
#: ``"chi2-test"``: inflate when the χ² test rejects consistency at level ``alpha``;
#: ``"birge"``: inflate whenever R_B > 1; ``"never"``: keep the stated uncertainties.
INFLATE_POLICIES = ("chi2-test", "birge", "never")

_MODELS = {"line": 2, "constant": 1, "proportional": 1}


@dataclass(frozen=True)
class Fit:
    """Result of :func:`fit`. Parameters are about the origin ``x0``.

    Attributes
    ----------
    model : str
        ``"line"``, ``"constant"`` or ``"proportional"``.
    x0 : float
        Origin of the abscissa (same unit as x).
    params : tuple of float
        ``(p0, p1)`` for a line: value at x0 (unit of y) and slope (unit of y per unit of x);
        ``(p0,)`` for a constant (unit of y) or for a proportional model (the slope).
    cov : tuple of tuple of float
        Parameter covariance matrix, after any inflation.
    n : int
        Number of observations.
    nu : int
        n − p, the residual degrees of freedom.
    weighted : bool
        Whether stated uncertainties were used.
    residuals : tuple of float
        y_i − ŷ_i (unit of y).
    residual_sd : float
        s = √(Σr²/ν), the plain scatter of the residuals (unit of y); NaN when ν = 0.
    chi2, reduced_chi2, birge_ratio, p_value : float
        Consistency statistics of a weighted fit (NaN when unweighted or ν = 0). ``p_value`` is
        P(χ²_ν ≥ χ²) (upper tail).
    scale : float
        Factor applied to (XᵀWX)⁻¹: s² for an unweighted fit, χ²/ν when inflated, else 1.
    inflated : bool
        True when a weighted covariance was multiplied by χ²/ν.
    dof : float
        Degrees of freedom of the parameter uncertainties: ν when the scale was estimated from
        the residuals (unweighted or inflated), ``math.inf`` otherwise.
    policy, alpha : str, float
        Inflation policy and significance level used.
    verdict : str
        One sentence on the consistency check and what was done.
    """

    model: str
    x0: float
    params: tuple[float, ...]
    cov: tuple[tuple[float, ...], ...]
    n: int
    nu: int
    weighted: bool
    residuals: tuple[float, ...]
    residual_sd: float
    chi2: float
    reduced_chi2: float
    birge_ratio: float
    p_value: float
    scale: float
    inflated: bool
    dof: float
    policy: str = "chi2-test"
    alpha: float = 0.05
    verdict: str = ""

    # ------------------------------------------------------------------ derived
    @property
    def covariance(self) -> np.ndarray:
        """Parameter covariance as a numpy array (a copy)."""
        return np.array(self.cov, dtype=float)

    @property
    def std_errors(self) -> tuple[float, ...]:
        """Standard uncertainties of the parameters."""
        return tuple(math.sqrt(max(self.cov[i][i], 0.0)) for i in range(len(self.params)))

    @property
    def correlation(self) -> float:
        """Correlation coefficient r(p0, p1) of a line (NaN for a constant)."""
        if len(self.params) < 2:
            return math.nan
        s0, s1 = self.std_errors
        return self.cov[0][1] / (s0 * s1) if s0 > 0 and s1 > 0 else math.nan

    def predict(self, x: float | np.ndarray) -> tuple[np.ndarray | float, np.ndarray | float]:
        """Fitted value at ``x`` and its standard uncertainty (the uncertainty of the fitted line,
        u² = gᵀCg with g = (1, x − x0), JCGM 100 H.3; g = x for a proportional model).
        Scalars in, scalars out."""
        xa = np.asarray(x, dtype=float)
        c = np.array(self.cov, dtype=float)
        if self.model == "constant":
            y = np.full(xa.shape, self.params[0])
            u = np.full(xa.shape, math.sqrt(max(c[0, 0], 0.0)))
        elif self.model == "proportional":
            y = self.params[0] * xa
            u = np.abs(xa) * math.sqrt(max(c[0, 0], 0.0))
        else:
            d = xa - self.x0
            y = self.params[0] + self.params[1] * d
            var = c[0, 0] + 2 * d * c[0, 1] + d * d * c[1, 1]
            u = np.sqrt(np.maximum(var, 0.0))
        if xa.ndim == 0:
            return float(y), float(u)
        return y, u

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (NaN and infinity become ``None``)."""
        def clean(v: float) -> float | None:
            return float(v) if math.isfinite(v) else None
        return {
            "model": self.model, "x0": self.x0, "params": [float(p) for p in self.params],
            "std_errors": [float(s) for s in self.std_errors],
            "cov": [[float(v) for v in row] for row in self.cov],
            "correlation": clean(self.correlation), "n": self.n, "nu": self.nu,
            "weighted": self.weighted, "residual_sd": clean(self.residual_sd),
            "chi2": clean(self.chi2), "reduced_chi2": clean(self.reduced_chi2),
            "birge_ratio": clean(self.birge_ratio), "p_value": clean(self.p_value),
            "scale": clean(self.scale), "inflated": self.inflated, "dof": clean(self.dof),
            "policy": self.policy, "alpha": self.alpha, "verdict": self.verdict,
        }


def _check_representable(cov: np.ndarray) -> None:
    """Refuse a covariance that float64 cannot hold.

    Squares of uncertainties beyond about 1e154 overflow to inf, below about 1e-162 they
    underflow to 0; either would pass on a wrong uncertainty (infinite, or an exact value).
    The unscaled covariance (XᵀWX)⁻¹ of finite data with u > 0 has a positive diagonal.
    """
    if not (np.all(np.isfinite(cov)) and np.all(np.diag(cov) > 0)):
        raise ComputationError("the fit's covariance cannot be represented in float64 (the "
                               "values or uncertainties are too large or too small to square); "
                               "give the data in another unit")


def fit(x: np.ndarray | list[float], y: np.ndarray | list[float],
        u: np.ndarray | list[float] | None = None, *, model: str = "line", x0: float = 0.0,
        inflate: str = "chi2-test", alpha: float = 0.05,
        cov: np.ndarray | None = None) -> Fit:
    """Least-squares fit of a straight line or a constant.

    Parameters
    ----------
    x, y : array_like
        Abscissae and observations (any consistent units). ``x`` is ignored for a constant.
    u : array_like, optional
        Standard uncertainties of ``y`` (> 0). Omit for the unweighted fit of GUM H.3.
    model : {"line", "constant", "proportional"}
        Default ``"line"``.
    x0 : float
        Origin of the abscissa; the first parameter is the fitted value at ``x0``. Default 0.
    inflate : {"chi2-test", "birge", "never"}
        Policy for a weighted fit whose scatter exceeds the stated uncertainties (see
        :data:`INFLATE_POLICIES`). Default ``"chi2-test"``.
    alpha : float
        Significance level of the χ² test (0 < alpha < 1). Default 0.05.
    cov : ndarray (n, n), optional
        Full covariance matrix of ``y`` (symmetric positive definite, unit of y squared);
        replaces ``u`` (generalised least squares). Default: none.

    Raises
    ------
    ComputationError
        Too few points, all abscissae equal, non-finite numbers or u ≤ 0.
    """
    if model not in _MODELS:
        raise ComputationError(f"model must be one of {', '.join(_MODELS)}; got {model!r}",
                               field="model")
    if inflate not in INFLATE_POLICIES:
        raise ComputationError(f"inflate must be one of {', '.join(INFLATE_POLICIES)}; "
                               f"got {inflate!r}", field="inflate")
    if not 0.0 < alpha < 1.0:
        raise ComputationError(f"alpha must lie in (0, 1); got {alpha!r}", field="alpha")
    xa = np.asarray(x, dtype=float).ravel()
    ya = np.asarray(y, dtype=float).ravel()
    p = _MODELS[model]
    n = ya.size
    if xa.size != n:
        raise ComputationError(f"x and y differ in length ({xa.size} and {n})")
    if not (np.all(np.isfinite(xa)) and np.all(np.isfinite(ya)) and math.isfinite(x0)):
        raise ComputationError("x, y and x0 must be finite numbers")
    if cov is not None:
        if u is not None:
            raise ComputationError("give either u or cov, not both")
        va = np.asarray(cov, dtype=float)
        if va.shape != (n, n) or not np.all(np.isfinite(va)):
            raise ComputationError(f"cov must be a finite {n} x {n} matrix")
        try:
            chol = np.linalg.cholesky(va)
        except np.linalg.LinAlgError:
            raise ComputationError("the covariance of the observations is not positive "
                                   "definite") from None
        u = np.sqrt(np.diag(va))
    else:
        chol = None
    weighted = u is not None
    if weighted:
        ua = np.asarray(u, dtype=float).ravel()
        if ua.size != n:
            raise ComputationError(f"u and y differ in length ({ua.size} and {n})")
        if not np.all(np.isfinite(ua) & (ua > 0)):
            raise ComputationError("stated uncertainties must be finite and > 0")
    else:
        ua = np.ones(n)
    need = p if weighted else p + 1  # unweighted: the scale needs at least one residual dof
    if n < need:
        raise ComputationError(f"{n} point(s) are too few for a {model} fit"
                               f"{'' if weighted else ' without stated uncertainties'}"
                               f" (at least {need} needed)")
    d = xa - x0
    if model == "line" and np.ptp(d) == 0:
        raise ComputationError("all abscissae are equal; a line cannot be fitted")
    if model == "proportional" and not np.any(xa != 0):
        raise ComputationError("all abscissae are zero; a line through the origin is not "
                               "determined")

    if model == "constant":
        design = np.ones((n, 1))
    elif model == "proportional":
        design = xa[:, None].copy()
    else:
        design = np.column_stack([np.ones(n), d])
    # Scale the x columns so that all columns are of order one: the QR factor is then well
    # conditioned however large the abscissae are (days, seconds since an epoch ...).
    col = np.ones(p)
    if model == "line":
        col[1] = float(np.max(np.abs(d))) or 1.0
    elif model == "proportional":
        col[0] = float(np.max(np.abs(xa)))
    if chol is None:
        a = design / col / ua[:, None]
        yw = ya / ua
    else:
        # whitening: L⁻¹X and L⁻¹y turn the generalised problem into an ordinary one
        a = np.linalg.solve(chol, design / col)
        yw = np.linalg.solve(chol, ya)
    q, r = np.linalg.qr(a)
    if np.min(np.abs(np.diag(r))) <= 1e-12 * np.max(np.abs(np.diag(r))):
        raise ComputationError("the design matrix is singular; the fit is not determined")
    # p ≤ 2: numpy's small dense solvers are exact enough on a triangular factor and cheap
    beta_s = np.linalg.solve(r, q.T @ yw)
    r_inv = np.linalg.inv(r)
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        cov_s = r_inv @ r_inv.T
        params = beta_s / col
        cov = cov_s / np.outer(col, col)
    _check_representable(cov)

    resid = ya - design @ params
    nu = n - p
    residual_sd = math.sqrt(float(resid @ resid) / nu) if nu > 0 else math.nan
    chi2 = reduced = birge = p_value = math.nan
    inflated = False
    if not weighted:
        scale = residual_sd ** 2
        dof = float(nu)
        verdict = (f"unweighted fit: uncertainties from the residual scatter s = "
                   f"{residual_sd:.3g} with {nu} degrees of freedom")
    else:
        scale, dof = 1.0, math.inf
        if nu == 0:
            verdict = ("as many parameters as points: the scatter cannot be checked against the "
                       "stated uncertainties")
        else:
            white = resid / ua if chol is None else np.linalg.solve(chol, resid)
            chi2 = float(np.sum(white ** 2))  # rᵀV⁻¹r
            reduced = chi2 / nu
            birge = math.sqrt(reduced)
            p_value = float(special.chdtrc(nu, chi2))
            if inflate == "chi2-test":
                inflated = p_value < alpha
                test = (f"chi-square test: chi2 = {chi2:.3g} on {nu} dof, P(chi2 >= observed) = "
                        f"{p_value:.3g} {'<' if inflated else '>='} {alpha:g}")
            elif inflate == "birge":
                inflated = birge > 1.0
                test = f"Birge ratio {birge:.3g} {'>' if inflated else '<='} 1"
            else:
                test = f"Birge ratio {birge:.3g}, p = {p_value:.3g}; inflation disabled"
            if inflated:
                scale, dof = reduced, float(nu)
                verdict = (f"scatter exceeds the stated uncertainties ({test}); covariance "
                           f"multiplied by chi2/nu = {reduced:.3g} (uncertainties x {birge:.3g}),"
                           f" {nu} degrees of freedom")
            elif inflate == "never":
                verdict = f"stated uncertainties kept as they are ({test})"
            else:
                verdict = f"scatter consistent with the stated uncertainties ({test})"
    with np.errstate(over="ignore", invalid="ignore"):
        cov = cov * scale
    if not np.all(np.isfinite(cov)):
        _check_representable(cov)
    return Fit(model=model, x0=float(x0), params=tuple(float(v) for v in params),
               cov=tuple(tuple(float(v) for v in row) for row in cov), n=n, nu=nu,
               weighted=weighted, residuals=tuple(float(v) for v in resid),
               residual_sd=residual_sd, chi2=chi2, reduced_chi2=reduced, birge_ratio=birge,
               p_value=p_value, scale=float(scale), inflated=inflated, dof=dof, policy=inflate,
               alpha=float(alpha), verdict=verdict)
