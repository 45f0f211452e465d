"""From pump characterisation data (or a fit-result file) to the pump term δ and its findings.

The same functions serve the spec module (:mod:`budget.inputs.pump`) and the command line
(``budget pump fit``). Problems with an *option* (operating point, plateau ...) are raised
through the ``option_error(key, message)`` factory the caller passes, so a spec reports them
at its own file and line and the CLI at its own option; problems with a *data file* are
:class:`~budget.errors.DataError` naming the file, row and column.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from ...errors import BudgetError, DataError, SpecError
from ..tables import numeric_column, read_table, row_ranges
from .cascade import CascadeModel
from .escape import EscapeModel
from .fit import (
    DEFAULT_SAMPLES,
    DEFAULT_SEED,
    FitResult,
    Prediction,
    fit_least_squares,
    predict_delta,
)
from .fitfile import FitRecord, make_model, read_fit_file
from .thermal import ThermalCheck, read_thermal

__all__ = ["PumpData", "PumpAnalysis", "read_pump_data", "analyse_data", "analyse_fit_file",
           "add_thermal_check", "MODELS", "SPACING_FACTOR"]

MODELS = ("decay-cascade", "sequential-escape")
#: Successive escape times closer than this factor are flagged (charging energy: ~10×).
SPACING_FACTOR = 3.0

OptionError = Callable[[str, str], BudgetError]


def _default_option_error(key: str, message: str) -> BudgetError:
    return SpecError(message, field=key)


@dataclass(frozen=True)
class PumpData:
    """A plateau scan or a time-resolved escape record, as read from its CSV file.

    Arrays: ``gate_voltage`` (V) or None, ``hold_time`` (s) or None (plateau scans),
    ``n_mean`` (electrons per cycle), ``n_std`` or None.
    """

    file: str
    path: Path
    gate_voltage: np.ndarray | None
    hold_time: np.ndarray | None
    n_mean: np.ndarray
    n_std: np.ndarray | None

    @property
    def rows(self) -> str:
        return row_ranges(range(1, len(self.n_mean) + 1))


def read_pump_data(path: Path, model: str, *, shown: str | None = None) -> PumpData:
    """Read a pump data CSV: ``gate_voltage, n_mean[, n_std]`` for the decay cascade,
    ``hold_time_s, n_mean[, gate_voltage, n_std]`` for sequential escape."""
    shown = shown or str(path)
    if model == "decay-cascade":
        df = read_table(path, ["gate_voltage", "n_mean"], ["n_std"], shown=shown)
        v = numeric_column(df, "gate_voltage", shown=shown)
        t = None
    else:
        df = read_table(path, ["hold_time_s", "n_mean"], ["gate_voltage", "n_std"], shown=shown)
        t = numeric_column(df, "hold_time_s", shown=shown, nonnegative=True)
        v = numeric_column(df, "gate_voltage", shown=shown) if "gate_voltage" in df.columns \
            else None
    y = numeric_column(df, "n_mean", shown=shown)
    s = numeric_column(df, "n_std", shown=shown, positive=True) if "n_std" in df.columns \
        else None
    return PumpData(file=shown, path=path, gate_voltage=v, hold_time=t, n_mean=y, n_std=s)


@dataclass(frozen=True)
class PumpAnalysis:
    """Everything found about the pump term: fit, prediction, operating points, cautions.

    Parameters
    ----------
    model : str
        Model name.
    plateau : int
        n.
    point : dict
        ``gate_voltage`` (V or None) and, for sequential escape, ``hold_time`` (s).
    record : FitRecord
        The fit result (what ``--write-fit`` writes; read back from a fit-result file).
    prediction : Prediction
        δ with its sampled and linear uncertainties.
    outcome : dict
        Probabilities at the operating point (missed/extra, or P(n−1), P(n), P(n+1)).
    best : dict or None
        The best operating gate voltage and its predicted error.
    notes : tuple of str
        Cautions for the provenance (model extrapolation first).
    fit : FitResult or None
        The fit made here (None when the parameters came from a fit-result file).
    data : PumpData or None
        The data fitted.
    source_file : str
        The data or fit-result file, as named by the user.
    thermal : ThermalCheck or None
        The regime check, when temperature data were given.
    findings : dict
        Model-specific extras (figure of merit, escape-time ratios ...).
    """

    model: str
    plateau: int
    point: dict
    record: FitRecord
    prediction: Prediction
    outcome: dict
    best: dict | None
    notes: tuple[str, ...]
    fit: FitResult | None = None
    data: PumpData | None = None
    source_file: str = ""
    source_path: Path | None = None
    thermal: ThermalCheck | None = None
    findings: dict = field(default_factory=dict)

    @property
    def model_object(self) -> CascadeModel | EscapeModel:
        return make_model(self.record.model, self.record.settings)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (figures are added by the caller)."""
        return {"model": self.model, "plateau": self.plateau, "operating_point": dict(self.point),
                "prediction": self.prediction.to_dict(), "outcome": self.outcome,
                "best_operating_point": self.best, "notes": list(self.notes),
                "fit": None if self.fit is None else self.fit.to_dict(),
                "fit_result": self.record.to_dict(), "source_file": self.source_file,
                "thermal_check": None if self.thermal is None else self.thermal.to_dict(),
                **self.findings}


# ---------------------------------------------------------------------------- helpers
def _check_samples(samples: int, seed: int, option_error: OptionError) -> None:
    if isinstance(samples, bool) or not isinstance(samples, int) or not 1000 <= samples <= 10**7:
        raise option_error("samples", f"must be an integer between 1000 and 10000000; "
                                      f"got {samples!r}")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise option_error("seed", f"must be a non-negative integer; got {seed!r}")


def _in_range(x: float, lo: float, hi: float) -> bool:
    return lo - 1e-12 * max(1.0, abs(lo), abs(hi)) <= x <= hi + 1e-12 * max(1.0, abs(lo),
                                                                              abs(hi))


def _extrapolation(key: str, x: float, rng: tuple[float, float] | None, what: str, unit: str,
                   file: str, allow: bool, option_error: OptionError, notes: list[str],
                   recorded: str) -> None:
    """Refuse (or, with ``allow``, note) an operating point outside the data; the error names
    the file as ``file``, the note as ``recorded``."""
    if rng is None or _in_range(x, *rng):
        return

    def outside(name: str) -> str:
        return f"{x:g} {unit} lies outside the {what} [{rng[0]:g}, {rng[1]:g}] {unit} of {name}"
    if not allow:
        raise option_error(key, outside(file) + "; allow extrapolation (allow_extrapolation = "
                                                "true, or --allow-extrapolation) to accept a "
                                                "prediction there")
    notes.append(f"extrapolated: the operating point {outside(recorded)}")


def _base_notes(model: str, source: str, rms: float | None) -> list[str]:
    data = f"residual scatter {rms:.2g} electrons per cycle" if rms is not None and \
        math.isfinite(rms) else "fit made elsewhere"
    return [f"model extrapolation, not a measurement: the pump error is what the {model} model, "
            f"fitted to the characterisation data ({source}; {data}), predicts at the operating "
            "point; those data do not resolve an error this small directly"]


# ---------------------------------------------------------------------------- analysis
def _finish(model, theta, cov, plateau, point, notes, *, samples, seed, shown, dof, fit, data,
            source_file, source_path, gate_range, hold_range, source_text) -> PumpAnalysis:
    theta = np.asarray(theta, dtype=float)
    pred = predict_delta(model, theta, cov, point, plateau, samples=samples, seed=seed,
                         shown=shown)
    if pred.differs:
        notes.append(f"linear propagation gives u = {pred.linear_std:.3g}, sampling of the fit "
                     f"parameters u = {pred.std:.3g}; the sampled value is used (the model is "
                     "not linear in its parameters over their uncertainty)")
    outcome = model.outcome(theta[None, :], point, plateau)
    findings: dict[str, Any] = {}
    if isinstance(model, CascadeModel):
        best = model.best_gate_voltage(theta[None, :], plateau)
        fom = model.figure_of_merit(theta[None, :], plateau)
        findings["figure_of_merit"] = fom
    else:
        best = None
        if point.get("gate_voltage") is not None and gate_range is not None:
            best = model.best_gate_voltage(theta[None, :], point["hold_time"], plateau,
                                           gate_range)
        times = outcome["escape_times_s"]
        ratios = [times[k + 1] / times[k] for k in range(len(times) - 1)]
        findings["escape_time_ratios"] = ratios
        findings["escape_spacing_ok"] = bool(all(r >= SPACING_FACTOR for r in ratios))
        if not findings["escape_spacing_ok"]:
            notes.append("successive escape times at the operating point differ by less than a "
                         f"factor {SPACING_FACTOR:g} (ratios {', '.join(f'{r:.3g}' for r in ratios)}"
                         "); the order-of-magnitude spacing expected from the charging energy "
                         "is not seen — check the loaded number and the model")
    record = FitRecord(model=model.name, settings=model.settings, names=model.param_names,
                       values=tuple(float(v) for v in theta),
                       covariance=tuple(tuple(float(c) for c in row) for row in np.asarray(cov)),
                       plateau=plateau, point=dict(point), gate_range=gate_range,
                       hold_time_range=hold_range, dof=dof, source=source_text)
    return PumpAnalysis(model=model.name, plateau=plateau, point=dict(point), record=record,
                        prediction=pred, outcome=outcome, best=best, notes=tuple(notes),
                        fit=fit, data=data, source_file=source_file, source_path=source_path,
                        findings=findings)


def analyse_data(path: Path, *, model: str, plateau: int, operating_point: float | None = None,
                 hold_time: float | None = None, loaded: int | None = None,
                 steps: int | None = None, shared_slope: bool | None = None,
                 reference_voltage: float | None = None, allow_extrapolation: bool = False,
                 samples: int = DEFAULT_SAMPLES, seed: int = DEFAULT_SEED,
                 max_evaluations: int = 2000, shown: str | None = None,
                 option_error: OptionError = _default_option_error,
                 best_if_missing: bool = False, recorded: str | None = None) -> PumpAnalysis:
    """Fit ``model`` to the data file and predict δ = ⟨n⟩/n − 1 at the operating point.

    Parameters
    ----------
    path : Path
        CSV file (see :func:`read_pump_data`).
    model : str
        ``"decay-cascade"`` or ``"sequential-escape"``.
    plateau : int
        n, the wanted number per cycle (≥ 1).
    operating_point : float, optional
        Gate voltage (V); required for the decay cascade and for escape data with a
        ``gate_voltage`` column, unless ``best_if_missing``.
    hold_time : float, optional
        Hold time (s) of the escape model's operating point; required for it.
    loaded : int, optional
        N electrons loaded (escape model). Default: the number of escapes the data show,
        ⌈max n_mean − 0.25⌉, at least n.
    steps : int, optional
        K steps (cascade). Default: ⌈max n_mean − 0.25⌉, at least n + 1.
    shared_slope : bool, optional
        One slope for all steps/electrons. Default true for the cascade, false for escape.
    reference_voltage : float, optional
        V_ref (V) of the escape model. Default: the operating point.
    allow_extrapolation : bool
        Accept an operating point outside the data. Default false.
    samples, seed : int
        Parameter samples and Generator seed for the propagation.
    max_evaluations : int
        Fit budget in model evaluations. Default 2000.
    shown : str, optional
        File name for messages.
    option_error : callable
        ``(key, message) -> BudgetError`` for problems with an option.
    best_if_missing : bool
        Without an operating gate voltage, evaluate δ at the best one the fit predicts
        (least total error probability, or most probable n ejected) instead of refusing.
        Default false.
    recorded : str, optional
        How the notes, ``source_file`` and the fit record name the file (the input modules
        give the path relative to the spec's folder, so that records do not depend on where
        the project is). Default ``shown``.
    """
    shown = shown or str(path)
    recorded = recorded or shown
    if model not in MODELS:
        raise option_error("model", f"must be one of {', '.join(MODELS)}; got {model!r}")
    if isinstance(plateau, bool) or not isinstance(plateau, int) or plateau < 1:
        raise option_error("plateau", f"must be an integer >= 1; got {plateau!r}")
    _check_samples(samples, seed, option_error)
    data = read_pump_data(path, model, shown=shown)
    y, sigma = data.n_mean, data.n_std
    notes = _base_notes(model, recorded, None)
    only = {"decay-cascade": ("hold_time", "loaded"), "sequential-escape": ("steps",)}[model]
    given = {"hold_time": hold_time, "loaded": loaded, "steps": steps}
    for key in only:
        if given[key] is not None:
            raise option_error(key, f"does not apply to the {model} model")
    if model == "decay-cascade":
        if operating_point is None and not best_if_missing:
            raise option_error("operating_point", "is required (gate voltage in V)")
        v = data.gate_voltage
        if np.ptp(y) < 0.5:
            raise DataError(f"no step inside the scanned range: n_mean only spans "
                            f"[{y.min():.4g}, {y.max():.4g}]", file=shown, field="n_mean")
        K = steps if steps is not None else max(plateau + 1, math.ceil(y.max() - 0.25))
        if isinstance(K, bool) or not isinstance(K, int) or not 1 <= K <= 20:
            raise option_error("steps", f"must be an integer between 1 and 20; got {K!r}")
        if K < plateau + 1:
            raise option_error("steps", f"must be at least plateau + 1 = {plateau + 1} (the "
                                        f"upper edge of plateau {plateau}); got {K}")
        m = CascadeModel(K, True if shared_slope is None else bool(shared_slope))
        point = {"gate_voltage": None if operating_point is None else float(operating_point)}
        gate_range = (float(v.min()), float(v.max()))
        hold_range = None
        chosen_later = False
        x0, missing = m.initial_guess(v, y)
        for k in missing:
            where = "is not inside the scanned range" if not (y.min() < k - 0.5 < y.max()) \
                else "is not resolved (no data point on its edge)"
            raise DataError(f"step {k} of the {K}-step model {where}; n_mean spans "
                            f"[{y.min():.4g}, {y.max():.4g}]", file=shown, field="n_mean")
        if operating_point is not None:
            _extrapolation("operating_point", point["gate_voltage"], gate_range,
                           "gate voltages scanned", "V", shown, allow_extrapolation,
                           option_error, notes, recorded)
        predict, jac = (lambda th: m.predict(th, v)), (lambda th: m.jacobian(th, v))
    else:
        t, v = data.hold_time, data.gate_voltage
        if hold_time is None:
            raise option_error("hold_time", "is required for the sequential-escape model (s)")
        if not (isinstance(hold_time, float) and hold_time > 0):
            raise option_error("hold_time", f"must be a number > 0 (s); got {hold_time!r}")
        if v is None and operating_point is not None:
            raise option_error("operating_point", f"{shown} has no gate_voltage column, so the "
                                                  "escape times do not depend on a gate voltage")
        if v is not None and operating_point is None and not best_if_missing:
            raise option_error("operating_point", f"is required: {shown} has a gate_voltage "
                                                  "column")
        N = loaded if loaded is not None else max(plateau, math.ceil(y.max() - 0.25))
        if isinstance(N, bool) or not isinstance(N, int) or not 1 <= N <= 10:
            raise option_error("loaded", f"must be an integer between 1 and 10; got {N!r}")
        if plateau > N:
            raise option_error("plateau", f"must not exceed the electrons loaded ({N}); "
                                          f"got {plateau}")
        over = np.flatnonzero(y > N + 0.5)
        if over.size:
            raise DataError(f"n_mean = {y[over[0]]:g} exceeds the {N} electrons loaded",
                            file=shown, row=int(over[0]) + 1, field="n_mean")
        gate = "none" if v is None else ("shared" if shared_slope else "per-electron")
        if v is not None and np.ptp(v) == 0:
            raise DataError("gate_voltage is the same on every row; drop the column (and "
                            "operating_point) or scan the gate", file=shown,
                            field="gate_voltage")
        vref = reference_voltage if reference_voltage is not None else \
            (operating_point if operating_point is not None else
             (0.0 if v is None else float(np.mean(v))))
        m = EscapeModel(N, gate, float(vref) if gate != "none" else 0.0)
        point = {"gate_voltage": None if operating_point is None else float(operating_point),
                 "hold_time": float(hold_time)}
        chosen_later = v is not None and operating_point is None
        gate_range = None if v is None else (float(v.min()), float(v.max()))
        hold_range = (float(t.min()), float(t.max()))
        if point["gate_voltage"] is not None:
            _extrapolation("operating_point", point["gate_voltage"], gate_range,
                           "gate voltages recorded", "V", shown, allow_extrapolation,
                           option_error, notes, recorded)
        _extrapolation("hold_time", point["hold_time"], hold_range, "hold times recorded", "s",
                       shown, allow_extrapolation, option_error, notes, recorded)
        x0, missing = m.initial_guess(v, t, y)
        for k in missing:
            raise DataError(f"the escape of electron {k} of {N} is not seen in the data (no "
                            f"n_mean between {k - 1} and {k}); record longer or shorter hold "
                            "times, or set loaded", file=shown, field="n_mean")
        predict, jac = (lambda th: m.predict(th, v, t)), None
    p = len(m.param_names)
    if len(y) <= p:
        raise DataError(f"has {len(y)} data rows; the {model} model has {p} parameters, so at "
                        f"least {p + 1} rows are needed", file=shown)
    fit = fit_least_squares(m, predict, y, sigma, x0, jac=jac, max_evaluations=max_evaluations,
                            shown=shown)
    theta = fit.theta
    if isinstance(m, CascadeModel):
        a, vk = m.split(theta)
        lo, hi = gate_range
        for k in range(K):
            if not lo <= vk[0, k] <= hi:
                raise DataError(f"the fitted step {k + 1} (V_{k + 1} = {vk[0, k]:.6g} V) lies "
                                f"outside the scanned range [{lo:g}, {hi:g}] V", file=shown,
                                field="gate_voltage")
        if not (np.all(a > 0) or np.all(a < 0)) or np.any(np.diff(vk[0]) * np.sign(a[0, 0]) <= 0):
            raise DataError("the fitted steps are out of order or rise in opposite directions; "
                            "check steps and the scanned range", file=shown, field="n_mean")
        edge_lo, edge_hi = sorted((float(vk[0, plateau - 1]), float(vk[0, plateau])))
        if point["gate_voltage"] is None:
            point["gate_voltage"] = m.best_gate_voltage(theta[None, :], plateau)["gate_voltage"]
            notes.append(f"no operating point given: δ is evaluated at the best gate voltage "
                         f"the fit predicts, {point['gate_voltage']:.6g} V (least total error "
                         "probability)")
        if not edge_lo < point["gate_voltage"] < edge_hi:
            raise option_error("operating_point", f"{point['gate_voltage']:g} V is not on "
                                                  f"plateau {plateau}, which lies between "
                                                  f"V_{plateau} = {edge_lo:.6g} V and "
                                                  f"V_{plateau + 1} = {edge_hi:.6g} V")
    elif chosen_later:
        best = m.best_gate_voltage(theta[None, :], point["hold_time"], plateau, gate_range)
        point["gate_voltage"] = best["gate_voltage"]
        notes.append(f"no operating point given: δ is evaluated at the gate voltage the fit "
                     f"predicts best at the hold time, {point['gate_voltage']:.6g} V (most "
                     "probable to eject exactly n)")
    notes = _base_notes(model, recorded, fit.residual_rms) + notes[1:] + [fit.scale_reason]
    return _finish(m, theta, fit.cov, plateau, point, notes, samples=samples, seed=seed,
                   shown=shown, dof=math.inf if fit.weighted and fit.scale == 1.0 else float(fit.dof),
                   fit=fit,
                   data=data, source_file=recorded, source_path=path, gate_range=gate_range,
                   hold_range=hold_range, source_text=f"fitted by qcs-budget to {recorded}")


def analyse_fit_file(path: Path, *, plateau: int | None = None,
                     operating_point: float | None = None, hold_time: float | None = None,
                     allow_extrapolation: bool = False, samples: int = DEFAULT_SAMPLES,
                     seed: int = DEFAULT_SEED, shown: str | None = None,
                     option_error: OptionError = _default_option_error,
                     recorded: str | None = None) -> PumpAnalysis:
    """The pump term from a fit-result file (see :mod:`budget.inputs.pump.fitfile`).

    ``plateau``, ``operating_point`` and ``hold_time`` given here replace the file's values
    (a note records it); the sampling is the same as for raw data, so identical parameters,
    covariance, seed and samples give an identical term. ``shown`` names the file in
    messages, ``recorded`` (default ``shown``) in the notes and ``source_file``.
    """
    shown = shown or str(path)
    recorded = recorded or shown
    _check_samples(samples, seed, option_error)
    rec = read_fit_file(path, shown=shown)
    notes = _base_notes(rec.model, recorded, None)
    notes.append(f"parameters and covariance from the fit-result file {recorded}"
                 + (f" ({rec.source})" if rec.source else "") + "; the fit was not repeated here")
    n = rec.plateau
    if plateau is not None:
        if isinstance(plateau, bool) or not isinstance(plateau, int) or plateau < 1:
            raise option_error("plateau", f"must be an integer >= 1; got {plateau!r}")
        if plateau != n:
            notes.append(f"plateau {plateau} from the spec replaces {n} from the fit file")
        n = plateau
    point = dict(rec.point)
    if operating_point is not None:
        if point.get("gate_voltage") is None:
            raise option_error("operating_point", f"the model in {shown} has no gate "
                                                  "dependence")
        if operating_point != point["gate_voltage"]:
            notes.append(f"operating point {operating_point:g} V from the spec replaces "
                         f"{point['gate_voltage']:g} V from the fit file")
        point["gate_voltage"] = float(operating_point)
    if hold_time is not None:
        if rec.model != "sequential-escape":
            raise option_error("hold_time", "applies to the sequential-escape model only")
        point["hold_time"] = float(hold_time)
    m = make_model(rec.model, rec.settings)
    if isinstance(m, CascadeModel) and n + 1 > m.steps:
        raise option_error("plateau", f"plateau {n} needs a model with at least {n + 1} steps; "
                                      f"{shown} has {m.steps}")
    if isinstance(m, EscapeModel) and n > m.loaded:
        raise option_error("plateau", f"must not exceed the {m.loaded} electrons loaded in "
                                      f"{shown}; got {n}")
    if point.get("gate_voltage") is not None:
        _extrapolation("operating_point", point["gate_voltage"], rec.gate_range,
                       "gate voltages of the fitted data", "V", shown, allow_extrapolation,
                       option_error, notes, recorded)
    if "hold_time" in point:
        _extrapolation("hold_time", point["hold_time"], rec.hold_time_range,
                       "hold times of the fitted data", "s", shown, allow_extrapolation,
                       option_error, notes, recorded)
    return _finish(m, np.asarray(rec.values), np.asarray(rec.covariance), n, point, notes,
                   samples=samples, seed=seed, shown=shown, dof=rec.dof, fit=None, data=None,
                   source_file=recorded, source_path=path, gate_range=rec.gate_range,
                   hold_range=rec.hold_time_range, source_text=rec.source)


def add_thermal_check(analysis: PumpAnalysis, path: Path, *, shown: str | None = None,
                      recorded: str | None = None) -> PumpAnalysis:
    """Attach the thermal-activation check of a temperature-series file to an analysis.

    ``shown`` names the file in messages, ``recorded`` (default ``shown``) in the check's
    ``file`` and the note."""
    check = read_thermal(path, shown=shown or str(path))
    if recorded:
        check = replace(check, file=recorded)
    note = f"escape regime from {check.file}: {check.verdict} ({check.reason})"
    return replace(analysis, thermal=check, notes=analysis.notes + (note,))
