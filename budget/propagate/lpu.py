"""The law of propagation of uncertainty (JCGM 100 §5) with Welch–Satterthwaite (Annex G).

For outputs Y_a = f_a(X_1 … X_N) with estimates x, standard uncertainties u and correlation
matrix r:

* sensitivity coefficients c_ai = ∂f_a/∂x_i, exact (forward-mode differentiation of the tree);
* u_c²(y_a) = Σ_i Σ_j c_ai c_aj u_i u_j r_ij (JCGM 100 eq. 16);
* cov(y_a, y_b) = Σ_i Σ_j c_ai c_bj u_i u_j r_ij (JCGM 100 eq. F / H.2 practice);
* share of term i in u_c²: (c_i u_i) Σ_j r_ij (c_j u_j) / u_c². The shares sum to one; without
  correlations each is (c_i u_i)²/u_c², and with correlations a share may fall outside [0, 1];
* ν_eff = u_c⁴ / Σ_i (c_i u_i)⁴/ν_i (JCGM 100 eq. G.2b) for independent inputs; a term with
  ν = ∞ adds nothing. With correlated inputs the rule is its generalisation
  :func:`effective_dof`:

      ν_eff = u_c⁴ / Σ_g w_g²/ν_g,   w_g = Σ_{i∈g} (c_i u_i) Σ_j r_ij (c_j u_j),

  g running over *estimation groups*: inputs whose uncertainties were estimated together from
  one sample (simultaneous observations, ``[correlations] from_observations``; quantities of one
  input module linked by the module's own correlations and sharing one ν), every other input a
  group of its own. w_g is the group's part of u_c² (the sum of its members' variance shares
  times u_c²). Derivation (first order, as Welch–Satterthwaite itself): the estimate of u_c² is
  Σ_ij r_ij a_i a_j with a_i = c_i s_i; if the estimated scale of group g is off by a relative
  ε_g with var(ε_g) = 1/(2ν_g) (a scaled χ²_ν variance estimate), then ∂û_c²/∂ε_g = 2 w_g and
  var(û_c²) = Σ_g 2 w_g²/ν_g; matching var = 2 u_c⁴/ν_eff gives the formula. It reduces to
  G.2b for r = I; a group measured alone (GUM H.2) gets exactly ν = n − 1, since c^T S c of one
  sample's covariance S is a scaled χ²_{n−1}; an input with c = 0 has w = 0 and takes no part
  (Y2 = "B" with A correlated to B keeps B's ν), and a weakly correlated input's weight follows
  its own contribution, continuous in r (A + B with r = 0.01 gives ν_eff ≈ 3·10⁴, as r = 0
  gives 4·10⁴). Correlated errors from shared components are treated in the same spirit by
  Willink, Metrologia 44 (2007) 340 (memory); the rule here is derived, not taken from there,
  and the Monte Carlo check (JCGM 101 §8) remains the arbiter of the interval;
* k = t_p(ν_eff). A fractional ν_eff is truncated to the next lower integer by default
  (JCGM 100 G.4.1 note 1 allows truncation or interpolation); ``dof_rounding="interpolate"``
  evaluates the t quantile at the fractional ν instead;
* second order (``order=2``, uncorrelated inputs only). The JCGM 100 §5.1.2 note formula
  u_c² += Σ_i Σ_j [½ f_ij² + f_i f_ijj] u_i² u_j² assumes normal inputs: its diagonal terms use
  the normal's E[δ⁴] = 3u⁴. For inputs of any distribution, with skewness γ_i = μ₃/u³ and
  kurtosis β_i = μ₄/u⁴ (:attr:`budget.distributions.Distribution.kurtosis`), the Taylor series
  Y − y ≈ Σ f_i δ_i + ½ Σ f_ij δ_i δ_j + ⅙ Σ f_ijk δ_i δ_j δ_k gives, to fourth order in u
  (derived: Var(L) + 2 Cov(L, Q) + Var(Q) + 2 Cov(L, C) with independent δ_i),

      u_c² += Σ_i [f_i f_ii γ_i u_i³ + (¼ f_ii² (β_i − 1) + ⅓ β_i f_i f_iii) u_i⁴]
              + Σ_{i≠j} [½ f_ij² + f_i f_ijj] u_i² u_j²,

  which is the note's formula for β = 3, γ = 0. Y = X², X rectangular on [−1, 1] (β = 9/5):
  ¼·4·(9/5 − 1)/9 = 1/5 − 1/9, u = 0.298, exact for a quadratic model (the normal formula would
  give 0.47). An input whose kurtosis is infinite (Student t with ν ≤ 4) is refused.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

from .. import expression as ex
from ..coverage import coverage_probability_of
from ..errors import ComputationError, SpecError
from ..gradient import value_and_gradient
from ..model import Model
from ..quantity import Quantity

__all__ = ["LinearResult", "propagate_linear", "coverage_factor", "correlation_groups",
           "effective_dof"]


@dataclass(frozen=True)
class LinearResult:
    """Linear-propagation result for one output.

    All arrays are indexed like the ``names`` tuple of uncertain inputs.
    """

    name: str
    value: float
    standard_uncertainty: float
    names: tuple[str, ...]
    sensitivities: np.ndarray
    contributions: np.ndarray       # c_i u_i (signed)
    variance_shares: np.ndarray
    second_order_variance: float
    effective_dof: float
    coverage_factor: float
    coverage_probability: float
    expanded_uncertainty: float
    #: P(|t_ν_eff| ≤ k): what k gives at ν_eff (differs from p when k is fixed or ν truncated)
    coverage_probability_of_k: float = math.nan

    def to_dict(self) -> dict:
        """JSON-ready fields (arrays become lists of floats; an infinite ν becomes None)."""
        return {"name": self.name, "value": float(self.value),
                "standard_uncertainty": float(self.standard_uncertainty),
                "names": list(self.names),
                "sensitivities": [float(v) for v in self.sensitivities],
                "contributions": [float(v) for v in self.contributions],
                "variance_shares": [float(v) for v in self.variance_shares],
                "second_order_variance": float(self.second_order_variance),
                "effective_dof": (None if math.isinf(self.effective_dof)
                                  else float(self.effective_dof)),
                "coverage_factor": float(self.coverage_factor),
                "coverage_probability": float(self.coverage_probability),
                "expanded_uncertainty": float(self.expanded_uncertainty),
                "coverage_probability_of_k": float(self.coverage_probability_of_k)}


def coverage_factor(p: float, dof: float, rounding: str = "floor") -> float:
    """k = t_p(ν): the two-sided Student-t quantile for coverage probability ``p``.

    Parameters
    ----------
    p : float
        Coverage probability, in (0, 1) (e.g. 0.95; 0.9545 gives k = 2 for ν = ∞).
    dof : float
        Effective degrees of freedom ν; ``inf`` (or above 1e7) gives the normal quantile.
    rounding : {"floor", "interpolate"}
        "floor" (default) truncates a fractional ν to the next lower integer, at least 1
        (JCGM 100 G.4.1 note 1); "interpolate" uses the fractional ν as it is.

    Returns
    -------
    float
        The coverage factor k (dimensionless).

    Raises
    ------
    SpecError
        ``p`` outside (0, 1).
    """
    if not 0 < p < 1:
        raise SpecError(f"coverage probability must lie in (0, 1); got {p!r}")
    q = (1 + p) / 2
    # scipy.special rather than scipy.stats: the same quantiles (ndtri, stdtrit) without the
    # second-long import of scipy.stats at every start of the command
    if math.isinf(dof) or dof > 1e7:
        return float(special.ndtri(q))
    # the small allowance keeps ν = 3.9999999999 (rounding noise of an exact 4) at 4
    nu = max(1.0, math.floor(dof + 1e-9)) if rounding == "floor" else max(dof, 1e-9)
    return float(special.stdtrit(nu, q))


def propagate_linear(model: Model, quantities: Sequence[Quantity], corr: np.ndarray, *,
                     coverage_probability: float = 0.95, order: int = 1,
                     dof_rounding: str = "floor", fixed_k: float | None = None,
                     dof_groups: Sequence[Sequence[str]] = ()
                     ) -> tuple[dict[str, LinearResult], np.ndarray]:
    """Propagate the input uncertainties through every output of the model.

    Parameters
    ----------
    model : Model
    quantities : sequence of Quantity
        All input quantities (constants included; they get no budget row).
    corr : ndarray
        Correlation matrix between ``quantities`` (same order).
    coverage_probability : float
        p for the expanded uncertainty. Default 0.95.
    order : int
        1, or 2 to add the second-order terms.
    dof_rounding : str
        "floor" (default) or "interpolate"; see :func:`coverage_factor`.
    fixed_k : float, optional
        Use this coverage factor instead of t_p(ν_eff).
    dof_groups : sequence of sequences of str
        Estimation groups for ν_eff (see :func:`effective_dof`): names of inputs whose
        uncertainties come from one sample. Inputs in no group stand alone. Default none.

    Returns
    -------
    results : dict
        Output name -> LinearResult.
    output_covariance : ndarray
        Covariance matrix of the outputs (first order), in ``model.outputs`` order.
    """
    env = {**model.constants, **{q.name: q.value for q in quantities}}
    keep = [i for i, q in enumerate(quantities) if not q.is_constant]
    names = tuple(quantities[i].name for i in keep)
    u = np.array([quantities[i].standard_uncertainty for i in keep])
    dof = np.array([quantities[i].dof for i in keep])
    r = corr[np.ix_(keep, keep)] if keep else np.zeros((0, 0))
    index = {n: i for i, n in enumerate(names)}
    correlated = bool(np.any(np.abs(r - np.eye(len(keep))) > 0))
    if order == 2 and correlated:
        raise SpecError("propagation_order = 2 needs uncorrelated inputs (JCGM 100 §5.1.2 "
                        "gives the second-order terms only for that case); remove the "
                        "correlations or use order 1", field="budget.propagation_order")

    groups = estimation_groups(names, dof_groups)
    shape = _shapes([quantities[i] for i in keep]) if order == 2 else []
    results: dict[str, LinearResult] = {}
    cu_rows = []
    for name in model.outputs:
        value, c = value_and_gradient(model.trees[name], env, index)
        if not math.isfinite(value):
            raise ComputationError("the model gives a non-finite value at the input estimates "
                                   f"({value!r})", field=f"model.{name}")
        if not np.all(np.isfinite(c)):
            bad = names[int(np.flatnonzero(~np.isfinite(c))[0])]
            raise ComputationError(f"the sensitivity coefficient for '{bad}' is not finite at "
                                   "the input estimates", field=f"model.{name}")
        with np.errstate(all="ignore"):
            cu = c * u
            r_cu = r @ cu
            var1 = float(cu @ r_cu)
        if not (np.all(np.isfinite(cu)) and math.isfinite(var1)):
            raise ComputationError("the combined variance overflows a double-precision number "
                                   "(rescale the inputs, e.g. work in other units)",
                                   field=f"model.{name}")
        cu_rows.append(cu)
        var2 = _second_order(model.trees[name], env, names, u, shape) if order == 2 else 0.0
        var = var1 + var2
        uc = math.sqrt(max(var, 0.0))
        shares = cu * r_cu / var if var > 0 else np.zeros_like(cu)
        nu = effective_dof(cu, r_cu, dof, var, groups)
        k = fixed_k if fixed_k is not None else coverage_factor(coverage_probability, nu,
                                                                dof_rounding)
        results[name] = LinearResult(
            name=name, value=float(value), standard_uncertainty=uc, names=names,
            sensitivities=c, contributions=cu, variance_shares=shares,
            second_order_variance=var2, effective_dof=nu, coverage_factor=k,
            coverage_probability=coverage_probability, expanded_uncertainty=k * uc,
            coverage_probability_of_k=coverage_probability_of(k, nu))
    cu_m = np.array(cu_rows) if cu_rows else np.zeros((0, len(keep)))
    cov = cu_m @ r @ cu_m.T
    return results, cov


def estimation_groups(names: Sequence[str], dof_groups: Sequence[Sequence[str]]
                      ) -> list[list[int]]:
    """Index groups over ``names``: each of ``dof_groups`` (names not present are skipped),
    then every remaining input alone."""
    index = {n: i for i, n in enumerate(names)}
    out, seen = [], set()
    for grp in dof_groups:
        g = sorted({index[n] for n in grp if n in index} - seen)
        if g:
            out.append(g)
            seen.update(g)
    out.extend([i] for i in range(len(names)) if i not in seen)
    return out


def effective_dof(cu: np.ndarray, r_cu: np.ndarray, dof: np.ndarray, var: float,
                  groups: Sequence[Sequence[int]]) -> float:
    """ν_eff = u_c⁴ / Σ_g w_g²/ν_g with w_g = Σ_{i∈g} (c_i u_i)(r·cu)_i (module docstring).

    Parameters
    ----------
    cu : ndarray
        Signed contributions c_i u_i, in the output's unit.
    r_cu : ndarray
        r @ cu (same unit).
    dof : ndarray
        ν_i of every input (``inf`` allowed).
    var : float
        u_c² including any second-order variance (which carries ν = ∞).
    groups : sequence of index lists
        Estimation groups covering the inputs; a group's ν is the smallest of its members'
        (they are equal for one sample).

    Returns
    -------
    float
        ν_eff; ``inf`` when no group with finite ν contributes.
    """
    w = cu * r_cu
    denom = 0.0
    for g in groups:
        nu_g = float(np.min(dof[list(g)]))
        if math.isfinite(nu_g):
            denom += float(np.sum(w[list(g)])) ** 2 / nu_g
    return var ** 2 / denom if denom > 0 else math.inf


def correlation_groups(r: np.ndarray) -> list[list[int]]:
    """Connected components of the graph whose edges are the non-zero correlations."""
    n = r.shape[0]
    seen: set[int] = set()
    out = []
    for a in range(n):
        if a in seen:
            continue
        comp, stack = [], [a]
        while stack:
            b = stack.pop()
            if b in seen:
                continue
            seen.add(b)
            comp.append(b)
            stack.extend(int(c) for c in np.flatnonzero(r[b] != 0) if c not in seen and c != b)
        out.append(sorted(comp))
    return out


def _shapes(qs: Sequence[Quantity]) -> list[tuple[float, float]]:
    """(γ, β) of every input's distribution; an infinite β is refused (module docstring)."""
    out = []
    for q in qs:
        d = q.distribution
        # a normal input with finite ν is drawn from t_ν by the Monte Carlo method, but the GUM's
        # linear and second-order propagation treat it as normal (JCGM 100 §5.1.2)
        beta, gamma = d.kurtosis, d.skewness
        if not math.isfinite(beta):
            raise SpecError(f"propagation_order = 2 needs the fourth moment of every input; "
                            f"'{q.name}' is a {d.describe()} whose fourth moment is infinite "
                            "(ν ≤ 4); use order 1 and the Monte Carlo result",
                            field="budget.propagation_order")
        out.append((gamma, beta))
    return out


def _second_order(tree: ex.Node, env: dict, names: tuple[str, ...], u: np.ndarray,
                  shape: Sequence[tuple[float, float]]) -> float:
    """Second-order variance for independent inputs of any distribution (module docstring)."""
    total = 0.0
    used = ex.names(tree)
    first = {n: ex.diff(tree, n) for n in names if n in used}

    def at(node: ex.Node) -> float:
        return float(ex.compile_node(node)(env))

    for i, ni in enumerate(names):
        if ni not in first:
            continue
        fi = first[ni]
        f_i = at(fi)
        for j, nj in enumerate(names):
            if nj not in used:
                continue
            fij = ex.diff(fi, nj)
            f_ij = at(fij)
            f_ijj = at(ex.diff(fij, nj))
            if i == j:
                gamma, beta = shape[i]
                total += f_i * f_ij * gamma * u[i] ** 3
                total += (0.25 * f_ij ** 2 * (beta - 1) + beta / 3 * f_i * f_ijj) * u[i] ** 4
            else:
                total += (0.5 * f_ij ** 2 + f_i * f_ijj) * u[i] ** 2 * u[j] ** 2
    return total
