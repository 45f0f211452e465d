"""The Monte Carlo method of JCGM 101 (propagation of distributions).

* Samples come from a numpy ``Generator`` (PCG64) seeded with a recorded seed.
* Uncorrelated inputs are drawn from their own distributions (JCGM 101 §6.4). A normal input
  with finite degrees of freedom ν (a Type A mean, or a certificate value with stated ν) is drawn
  from the scaled and shifted t_ν with scale u (JCGM 101 §6.4.9), so that the Monte Carlo check
  sees the same reliability information that Welch–Satterthwaite gives the linear result
  (``t_for_finite_dof=False`` draws it as normal instead). Correlated
  Gaussian inputs are drawn from the multivariate Gaussian (§6.4.8). A correlated input with a
  non-Gaussian distribution is joined to the others through a Gaussian copula (each marginal
  keeps its own distribution; the correlation imposed is that of the underlying Gaussian, which
  for non-Gaussian marginals differs slightly from r — stated in the result notes).
* Work is done in chunks of :data:`CHUNK` trials, so memory grows with trials × outputs only.
* ``trials=None`` runs the adaptive procedure of JCGM 101 §7.9: batches of
  M = max(⌈100/(1 − p)⌉, 10⁴) trials until twice the standard deviations of the batch means of
  y, u(y) and both ends of the interval that is reported (``interval``: probabilistically
  symmetric or shortest, JCGM 101 §7.9.4 c) asks for the one "required") are all within δ/5, δ being the numerical tolerance of u(y)
  (§7.9.2). The factor 1/5 is the one JCGM 101 §8.2 asks for when the Monte Carlo result is
  used to validate the linear result (memory), which this tool always does: with δ itself the
  Monte Carlo noise of the interval ends would be as large as the tolerance it is judged by.
* Coverage intervals: probabilistically symmetric (§7.7.1) and shortest (§7.7.2).
* ``sampling="sobol"`` replaces the pseudo-random draws by randomized quasi-Monte Carlo
  (RQMC): scrambled Sobol points from ``scipy.stats.qmc.Sobol`` (one input a coordinate, a
  correlated group one coordinate per member), carried to each input through its inverse
  distribution function (``Distribution.ppf``; t inputs through the t ppf; correlated inputs
  through the same Gaussian copula as above). JCGM 101 describes pseudo-random sampling only;
  RQMC is an estimator of the same distribution function whose intervals are checked against a
  10⁸-trial pseudo-random run (benchmarks/README.md). Every batch of the adaptive procedure,
  and a fixed run, gets its own independent scramble, so the batch results are independent and
  identically distributed as §7.9 assumes. Batch sizes and fixed trial counts are powers of two
  (the balance of the Sobol points holds for 2^k points). An RQMC batch is so much more
  accurate than a pseudo-random one that two or three batches can already pass the §7.9 test;
  with so few the standard deviation of the batch results is itself a guess (one or two degrees
  of freedom) and the stop was seen to come early with an interval end off by about δ. The
  adaptive RQMC procedure therefore tests for the stop only from :data:`MIN_BATCHES`
  batches on (nine or more degrees of freedom).
* Stricter than JCGM 101 §7.9 in three ways (each documented in README.md):

  - **At least** :data:`MIN_BATCHES` **batches, for pseudo-random sampling too.** §7.9.4 lets
    the stop be tested from the second batch on; with h batches the standard deviation of the
    batch results has h − 1 degrees of freedom, and with one the chance that it comes out below
    half its true value is P(χ²₁ < ¼) ≈ 0.38, with nine P(χ²₉ < 9/4) ≈ 0.013 (scipy.stats.chi2;
    tests/test_mcm_accuracy.py). Runs that stopped after two batches were seen with an
    interval end off by about δ.
  - **The stop tolerance is δ = min(δ(u_MC), δ(u_c))/5**: §7.9.2 takes δ from the Monte Carlo
    u(y), §8.1 from the linear u_c(y). Where the two sit in different decades (t inputs of few
    degrees of freedom make u_MC much larger than u_c) the §7.9 δ is ten times the one the §8
    comparison is judged by; the smaller one serves both.
  - **A fixed number of trials is never called stabilised.** Its numerical accuracy is still
    estimated, as §7.9.4 does for batches: the M trials are split into h batches
    (:func:`fixed_batches`: 10 contiguous ones for pseudo-random sampling, 16 independent
    scrambles for RQMC) and the standard deviation of the batch results divided by √h is the
    standard uncertainty of each result (:class:`Accuracy`). The §8 verdict uses it
    (:func:`budget.propagate.validate.compare_lpu_mcm`).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import special

from ..errors import ComputationError
from ..model import Model
from ..numbers import overflow_checked
from ..quantity import Quantity
from .lpu import correlation_groups
from .mcm_batches import (
    FIXED_BATCHES,
    MIN_BATCHES,
    Accuracy,
    accuracy_of,
    adaptive_batch_size,
    batch_stats,
    coverage_intervals,
    fixed_batches,
    stable,
)
from .validate import numerical_tolerance

__all__ = ["McmSettings", "McmResult", "Accuracy", "monte_carlo", "CHUNK",
           "coverage_intervals", "adaptive_batch_size", "fixed_batches", "SAMPLINGS",
           "is_power_of_two", "MIN_BATCHES", "FIXED_BATCHES"]

SAMPLINGS = ("random", "sobol")

CHUNK = 200_000  # trials per chunk: ~1.6 MB per input, fixed so that results are reproducible
SOBOL_BITS = 52  # Sobol points are k/2^52; the half-step shift below keeps them inside (0, 1)
SOBOL_MIN_BATCHES = MIN_BATCHES  # the name used before pseudo-random runs had the same minimum
SOBOL_CELLS = 1 << 22  # points × coordinates per Sobol chunk (32 MB); results do not depend on it


@dataclass(frozen=True)
class McmSettings:
    """Settings of a Monte Carlo run.

    Parameters
    ----------
    trials : int or None
        Fixed number of trials, or None for the adaptive procedure.
    seed : int
        Seed of the random-number generator (always recorded).
    coverage_probability : float
        p of the coverage interval. Default 0.95.
    significant_digits : int
        ndig for the numerical tolerance (adaptive stopping and §8 validation). Default 2.
    max_trials : int
        Upper bound for the adaptive procedure. Default 10⁷.
    t_for_finite_dof : bool
        Draw normal inputs with finite ν from t_ν (JCGM 101 §6.4.9). Default True.
    interval : {"symmetric", "shortest"}
        The coverage interval that is reported, and so the one whose ends the adaptive
        procedure stabilises (JCGM 101 §7.9.4). Default "symmetric".
    sampling : {"random", "sobol"}
        Pseudo-random draws (JCGM 101 §6) or scrambled Sobol points (randomized quasi-Monte
        Carlo, see the module docstring). Default "random".
    """

    trials: int | None
    seed: int
    coverage_probability: float = 0.95
    significant_digits: int = 2
    max_trials: int = 10_000_000
    t_for_finite_dof: bool = True
    interval: str = "symmetric"
    sampling: str = "random"


@dataclass(frozen=True)
class McmResult:
    """Monte Carlo summary for one output (samples are not kept)."""

    name: str
    trials: int
    value: float
    standard_uncertainty: float
    symmetric: tuple[float, float]
    shortest: tuple[float, float]
    histogram_counts: tuple[int, ...]
    histogram_edges: tuple[float, ...]
    adaptive: bool
    stabilised: bool
    batches: int
    #: output name -> fraction of the trials inside the interval given to :func:`monte_carlo`
    interval_probabilities: dict[str, float] = field(default_factory=dict)
    #: numerical accuracy of the results from the batches (None: fewer than two batches)
    accuracy: Accuracy | None = None
    #: δ/5 the adaptive stop was tested against (0 for a fixed number of trials)
    stop_tolerance: float = 0.0

    def to_dict(self) -> dict:
        """JSON-ready fields (values in the output's unit; tuples become lists)."""
        return {"name": self.name, "trials": self.trials, "value": self.value,
                "standard_uncertainty": self.standard_uncertainty,
                "symmetric": list(self.symmetric), "shortest": list(self.shortest),
                "histogram_counts": list(self.histogram_counts),
                "histogram_edges": list(self.histogram_edges), "adaptive": self.adaptive,
                "stabilised": self.stabilised, "batches": self.batches,
                "interval_probabilities": dict(self.interval_probabilities),
                "accuracy": None if self.accuracy is None else self.accuracy.to_dict(),
                "stop_tolerance": self.stop_tolerance}


class _Sampler:
    """Draws chunks of input samples: independent inputs and correlated groups."""

    def __init__(self, quantities: Sequence[Quantity], corr: np.ndarray,
                 t_for_finite_dof: bool = True):
        if t_for_finite_dof:
            quantities = [_as_t(q) for q in quantities]
        self.fixed = {q.name: q.value for q in quantities if q.is_constant}
        live = [i for i, q in enumerate(quantities) if not q.is_constant]
        r = corr[np.ix_(live, live)]
        self.independent: list[Quantity] = []
        self.groups: list[tuple[list[Quantity], np.ndarray, bool]] = []
        for comp in correlation_groups(r):
            qs = [quantities[live[c]] for c in comp]
            if len(comp) == 1:
                self.independent.append(qs[0])
                continue
            sub = r[np.ix_(comp, comp)]
            w, v = np.linalg.eigh(sub)
            factor = v * np.sqrt(np.clip(w, 0.0, None))   # sub ≈ factor @ factor.T (PSD-safe)
            gaussian = all(q.distribution.kind == "normal" for q in qs)
            self.groups.append((qs, factor, gaussian))
        self.copula_used = any(not g for _, _, g in self.groups)
        self.dim = len(self.independent) + sum(len(qs) for qs, _, _ in self.groups)

    def transform(self, u: np.ndarray) -> dict[str, np.ndarray]:
        """Input samples from points ``u`` of shape (m, dim) inside (0, 1): inverse
        distribution functions, correlated groups through the Gaussian copula of :meth:`draw`."""
        env: dict[str, np.ndarray] = dict(self.fixed)
        col = 0
        for q in self.independent:
            env[q.name] = q.distribution.ppf(u[:, col])
            col += 1
        for qs, factor, gaussian in self.groups:
            z = special.ndtri(u[:, col:col + len(qs)]) @ factor.T
            col += len(qs)
            for j, q in enumerate(qs):
                d = q.distribution
                env[q.name] = d.loc + d.scale * z[:, j] if gaussian else d.ppf(special.ndtr(z[:, j]))
        return env

    def draw(self, rng: np.random.Generator, m: int) -> dict[str, np.ndarray]:
        env: dict[str, np.ndarray] = dict(self.fixed)
        for q in self.independent:
            env[q.name] = q.distribution.sample(rng, m)
        for qs, factor, gaussian in self.groups:
            z = rng.standard_normal((m, len(qs))) @ factor.T
            for j, q in enumerate(qs):
                d = q.distribution
                env[q.name] = d.loc + d.scale * z[:, j] if gaussian else d.ppf(special.ndtr(z[:, j]))
        return env


def _as_t(q: Quantity) -> Quantity:
    """A normal input with finite ν becomes a scaled, shifted t_ν with scale u (§6.4.9)."""
    if q.distribution.kind != "normal" or math.isinf(q.dof) or q.is_constant:
        return q
    from dataclasses import replace

    from ..distributions import Distribution
    return replace(q, distribution=Distribution.student_t(q.value, q.standard_uncertainty, q.dof))


def infinite_variance_inputs(quantities: Sequence[Quantity],
                             t_for_finite_dof: bool = True) -> frozenset[str]:
    """Names of the inputs the sampler draws from a t distribution with ν ≤ 2.

    Such a distribution has no finite variance, so the Monte Carlo standard uncertainty of an
    output that depends on one is not defined (the coverage interval still is).
    """
    qs = [_as_t(q) for q in quantities] if t_for_finite_dof else list(quantities)
    return frozenset(q.name for q in qs if not q.is_constant
                     and q.distribution.kind == "student-t" and q.distribution.dof <= 2)


def monte_carlo(model: Model, quantities: Sequence[Quantity], corr: np.ndarray,
                settings: McmSettings, *,
                progress: Callable[[int, int], None] | None = None,
                intervals: Mapping[str, tuple[float, float]] | None = None,
                linear_u: Mapping[str, float] | None = None
                ) -> dict[str, McmResult]:
    """Run the Monte Carlo method for every output of the model.

    Parameters
    ----------
    progress : callable, optional
        Called as ``progress(done, total)`` after each chunk (total is the current target for
        the adaptive procedure).
    intervals : mapping, optional
        Output name -> (low, high), e.g. the linear y ± U; the result's
        ``interval_probabilities`` gives the fraction of trials inside each (the coverage
        probability the Monte Carlo method gives that interval).
    linear_u : mapping, optional
        Output name -> the linear u_c(y): the adaptive stop is tested against
        min(δ(u_MC), δ(u_c))/5 (module docstring); without it against δ(u_MC)/5 (§7.9.2).
    """
    rng = np.random.default_rng(settings.seed)
    sampler = _Sampler(quantities, corr, settings.t_for_finite_dof)
    p = settings.coverage_probability
    outputs = model.outputs
    sobol = settings.sampling == "sobol"
    if settings.sampling not in SAMPLINGS:
        raise ComputationError(f"unknown sampling {settings.sampling!r}; use "
                               + " or ".join(repr(x) for x in SAMPLINGS),
                               field="monte_carlo.sampling")
    if sobol and settings.trials is not None and not is_power_of_two(settings.trials):
        raise ComputationError(f"with sampling = \"sobol\" the number of trials must be a power "
                               f"of two; got {settings.trials:,}", field="monte_carlo.trials")
    if sobol:
        from scipy.stats import qmc  # scipy.stats costs most of a second: only when used
    if sobol and sampler.dim > qmc.Sobol.MAXDIM:
        raise ComputationError(f"sampling = \"sobol\" supports at most {qmc.Sobol.MAXDIM:,} "
                               f"uncertain inputs; this model has {sampler.dim:,} (use "
                               "sampling = \"random\")", field="monte_carlo.sampling")
    chunk = CHUNK if not sobol else _sobol_chunk(sampler.dim)

    def run(out: dict[str, np.ndarray], start: int, n: int, total: int) -> None:
        """Fill ``out[name][start:start + n]``; a Sobol run gets its own scramble."""
        points = qmc.Sobol(sampler.dim, scramble=True, bits=SOBOL_BITS, rng=rng) \
            if sobol and sampler.dim else None
        done = 0
        while done < n:
            m = min(chunk, n - done)
            if not sobol:
                env = sampler.draw(rng, m)
            else:
                u = points.random(m) if points is not None else np.empty((m, 0))
                u += 0.5 ** (SOBOL_BITS + 1)             # k/2^52 -> (k + ½)/2^52, inside (0, 1)
                env = sampler.transform(u)
                del u
            vals = model.evaluate(env)
            del env
            for name in outputs:
                out[name][start + done:start + done + m] = vals[name]
            done += m
            if progress is not None:
                progress(start + done, total)

    stop_delta: dict[str, float] = {}
    if settings.trials is not None:
        total = settings.trials
        samples = {name: np.empty(total) for name in outputs}
        h = fixed_batches(total, p, settings.sampling)
        if sobol:
            # h independent scrambles of M/h points each (powers of two): independent batches
            size = total // h
            for i in range(h):
                run(samples, i * size, size, total)
            bounds = [(i * size, (i + 1) * size) for i in range(h)]
        else:
            run(samples, 0, total, total)
            edges = np.linspace(0, total, h + 1).astype(int)
            bounds = list(zip(edges[:-1], edges[1:]))
        stats = [{n: batch_stats(samples[n][a:b], p) for n in outputs} for a, b in bounds]
        batches, stabilised = h, False
    else:
        batch = adaptive_batch_size(p, settings.sampling)
        # one buffer per output for every trial the procedure may run: pages are committed
        # only as batches fill them, and the result is a view, so the samples exist once
        cap = max(settings.max_trials // batch, 1) * batch
        buf = {name: np.empty(cap) for name in outputs}
        stats = []
        stabilised = False
        lin = {n: numerical_tolerance(float(linear_u[n]), settings.significant_digits)
               for n in outputs if linear_u and n in linear_u}
        while True:
            h = len(stats)
            target = max((h + 1) * batch, MIN_BATCHES * batch)
            run(buf, h * batch, batch, min(target, settings.max_trials))
            stats.append({n: batch_stats(buf[n][h * batch:(h + 1) * batch], p)
                          for n in outputs})
            if len(stats) >= MIN_BATCHES and stable(batch, stats, outputs,
                                                      settings.significant_digits,
                                                      settings.interval, lin, stop_delta):
                stabilised = True
                break
            if (len(stats) + 1) * batch > settings.max_trials:
                if len(stats) >= 2:
                    stable(batch, stats, outputs, settings.significant_digits,
                            settings.interval, lin, stop_delta)   # records the δ/5 used
                break
        batches = len(stats)
        samples = {n: buf[n][:batches * batch] for n in outputs}

    results = {}
    for name in outputs:
        y = samples[name]
        if not np.all(np.isfinite(y)):
            bad = int(np.count_nonzero(~np.isfinite(y)))
            raise ComputationError(f"{bad} of {y.size} Monte Carlo trials gave a non-finite "
                                   "value (the model is undefined somewhere inside the input "
                                   "distributions, e.g. a division by a quantity that can be 0)",
                                   field=f"model.{name}")
        mean, sd = overflow_checked(
            lambda y=y: (float(y.mean()), float(y.std(ddof=1))),
            "the Monte Carlo mean or standard deviation",
            lambda msg, name=name: ComputationError(msg + " (values near the largest float)",
                                                    field=f"model.{name}"))
        y.sort()
        sym, short = coverage_intervals(y, p)
        counts, edges = _histogram(y)
        inside = {}
        if intervals and name in intervals:
            a, b = intervals[name]
            inside[name] = float(np.searchsorted(y, b, side="right")
                                 - np.searchsorted(y, a, side="left")) / y.size
        results[name] = McmResult(
            name=name, trials=int(y.size), value=mean, standard_uncertainty=sd, symmetric=sym,
            shortest=short, histogram_counts=tuple(int(c) for c in counts),
            histogram_edges=tuple(float(e) for e in edges), adaptive=settings.trials is None,
            stabilised=stabilised, batches=batches, interval_probabilities=inside,
            accuracy=accuracy_of([st[name] for st in stats]),
            stop_tolerance=stop_delta.get(name, 0.0))
    return results


def _histogram(y: np.ndarray, bins: int = 80) -> tuple[np.ndarray, np.ndarray]:
    """Counts and edges over the central 99.9 % of the sorted samples ``y``.

    Values so large (1e308) or so narrow against their magnitude (1e308 ± 1) that no
    finite-width bins exist give an empty histogram: the report then draws none, rather than
    the run failing over a figure."""
    lo, hi = np.quantile(y, [0.0005, 0.9995]) if y.size > 2000 else (y[0], y[-1])
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
    try:
        with np.errstate(all="raise"):
            return np.histogram(y, bins=bins, range=(lo, hi))
    except (ValueError, FloatingPointError):
        return np.zeros(0, dtype=int), np.zeros(0)


def is_power_of_two(n: int) -> bool:
    """True when ``n`` is 2^k for some k ≥ 0."""
    return n > 0 and n & (n - 1) == 0


def _sobol_chunk(dim: int) -> int:
    """Sobol points per chunk: a power of two, at most SOBOL_CELLS points × coordinates."""
    m = 1 << 17
    while m > 1 and m * max(dim, 1) > SOBOL_CELLS:
        m >>= 1
    return m


_stable = stable  # the name the bookkeeping tests use
