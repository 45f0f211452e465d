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
  adaptive RQMC procedure therefore tests for the stop only from :data:`SOBOL_MIN_BATCHES`
  batches on (nine or more degrees of freedom).
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
from .validate import numerical_tolerance

__all__ = ["McmSettings", "McmResult", "monte_carlo", "CHUNK", "coverage_intervals",
           "adaptive_batch_size", "SAMPLINGS", "is_power_of_two"]

SAMPLINGS = ("random", "sobol")

VALIDATION_DIVISOR = 5  # adaptive stop at δ/5 (JCGM 101 §8.2), see the module docstring
CHUNK = 200_000  # trials per chunk: ~1.6 MB per input, fixed so that results are reproducible
SOBOL_BITS = 52  # Sobol points are k/2^52; the half-step shift below keeps them inside (0, 1)
SOBOL_MIN_BATCHES = 10  # adaptive RQMC: at least 10 scrambles before the stop is tested (below)
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

    def to_dict(self) -> dict:
        """JSON-ready fields (values in the output's unit; tuples become lists)."""
        return {"name": self.name, "trials": self.trials, "value": self.value,
                "standard_uncertainty": self.standard_uncertainty,
                "symmetric": list(self.symmetric), "shortest": list(self.shortest),
                "histogram_counts": list(self.histogram_counts),
                "histogram_edges": list(self.histogram_edges), "adaptive": self.adaptive,
                "stabilised": self.stabilised, "batches": self.batches,
                "interval_probabilities": dict(self.interval_probabilities)}


def coverage_intervals(sorted_y: np.ndarray, p: float) -> tuple[tuple[float, float],
                                                                tuple[float, float]]:
    """Probabilistically symmetric and shortest 100p % intervals from sorted samples.

    JCGM 101 §7.7: q = pM + ½ rounded down; symmetric: r = (M − q)/2 (rounded up to an integer
    when needed), interval [y_(r), y_(r+q)] in 1-based order statistics; shortest: the r* that
    minimises y_(r+q) − y_(r) for r = 1 … M − q (the first such r on ties).

    Parameters
    ----------
    sorted_y : numpy.ndarray
        The M output samples in ascending order (M ≥ 2), in the output's unit.
    p : float
        Coverage probability, in (0, 1).

    Returns
    -------
    tuple
        ``((low, high), (low, high))``: the symmetric and the shortest interval, in the
        samples' unit.
    """
    m = sorted_y.size
    q = int(p * m + 0.5)
    q = min(max(q, 1), m - 1)
    r = (m - q) // 2 if (m - q) % 2 == 0 else (m - q + 1) // 2
    r = max(r, 1)
    sym = (float(sorted_y[r - 1]), float(sorted_y[r + q - 1]))
    widths = sorted_y[q:] - sorted_y[: m - q]
    i = int(np.argmin(widths))
    short = (float(sorted_y[i]), float(sorted_y[i + q]))
    return sym, short


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
                intervals: Mapping[str, tuple[float, float]] | None = None
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

    if settings.trials is not None:
        samples = {name: np.empty(settings.trials) for name in outputs}
        run(samples, 0, settings.trials, settings.trials)
        batches, stabilised = 1, True
    else:
        batch = adaptive_batch_size(p, settings.sampling)
        # one buffer per output for every trial the procedure may run: pages are committed
        # only as batches fill them, and the result is a view, so the samples exist once
        cap = max(settings.max_trials // batch, 1) * batch
        buf = {name: np.empty(cap) for name in outputs}
        stats: list[dict[str, tuple[float, float, float, float]]] = []
        min_batches = SOBOL_MIN_BATCHES if sobol else 2
        stabilised = False
        while True:
            h = len(stats)
            target = max((h + 1) * batch, 2 * batch)
            run(buf, h * batch, batch, min(target, settings.max_trials))
            stats.append({n: _batch_stats(buf[n][h * batch:(h + 1) * batch], p,
                                          settings.interval) for n in outputs})
            if len(stats) >= min_batches and _stable(batch, stats, outputs,
                                                      settings.significant_digits):
                stabilised = True
                break
            if (len(stats) + 1) * batch > settings.max_trials:
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
            stabilised=stabilised, batches=batches, interval_probabilities=inside)
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


def adaptive_batch_size(coverage_probability: float, sampling: str = "random") -> int:
    """Trials per batch of the adaptive procedure, M = max(⌈100/(1 − p)⌉, 10⁴) (JCGM 101 §7.9.4).

    With ``sampling="sobol"`` M is rounded up to the next power of two (16 384 at p = 0.95).

    Parameters
    ----------
    coverage_probability : float
        p, in (0, 1).
    sampling : {"random", "sobol"}
        Default "random".

    Returns
    -------
    int
        M; the procedure always runs whole batches, so ``max_trials`` must be at least M.
    """
    m = max(math.ceil(100 / (1 - coverage_probability)), 10_000)
    return 1 << (m - 1).bit_length() if sampling == "sobol" else m


def _batch_stats(y: np.ndarray, p: float, interval: str = "symmetric"
                 ) -> tuple[float, float, float, float]:
    """Mean, standard deviation and the ends of the reported interval of one batch."""
    ys = np.sort(y)
    sym, short = coverage_intervals(ys, p)
    lo, hi = short if interval == "shortest" else sym
    return float(ys.mean()), float(ys.std(ddof=1)), lo, hi


def _stable(m: int, stats, outputs, ndig: int) -> bool:
    """JCGM 101 §7.9.4 e)–h): 2·s of each batch statistic within δ(u(y)) for every output
    (``m`` is the batch size M, the same for every batch)."""
    h = len(stats)
    for name in outputs:
        arr = np.array([s[name] for s in stats])          # h × 4
        s = arr.std(axis=0, ddof=1) / math.sqrt(h)
        # u(y) of all h·M values from the batch means and standard deviations (exact identity
        # for equal batches: (hM − 1)·s² = (M − 1)·Σ s_r² + M·Σ (ȳ_r − ȳ)²). Concatenating the
        # batches here made each check cost O(hM), and the whole procedure O(h²M).
        dev = arr[:, 0] - arr[:, 0].mean()
        u_all = math.sqrt(((m - 1) * float(np.sum(arr[:, 1] ** 2)) + m * float(dev @ dev))
                          / (h * m - 1))
        delta = numerical_tolerance(u_all, ndig) / VALIDATION_DIVISOR
        if not np.all(2 * s <= delta):
            return False
    return True
