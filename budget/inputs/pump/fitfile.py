"""Fit-result files: a pump model fitted elsewhere, read back into the same pump term.

Format (TOML or JSON; the suffix ``.json`` selects JSON, anything else is read as TOML)
-------------------------------------------------------------------------------------
Top-level keys (units in brackets):

``kind``              must be ``"pump-fit-result"``
``version``           must be 1
``model``             ``"decay-cascade"`` or ``"sequential-escape"``
``parameter_names``   list of strings, in the model's order (see below)
``parameter_values``  list of numbers, same length
``covariance``        list of rows: a symmetric positive semi-definite matrix, same size
``plateau``           n, integer ≥ 1
``operating_point``   gate voltage at which δ is wanted [V]; optional for a sequential-escape
                      model without gate dependence
``gate_range``        optional [low, high]: the scanned gate voltages [V]; an operating point
                      outside it needs ``allow_extrapolation`` in the spec
``dof``               optional degrees of freedom of the fit (default: infinite)
``source``            optional free text: who fitted what, with which code

decay-cascade only:   ``steps`` K (integer), ``shared_slope`` (true/false)
sequential-escape:    ``loaded`` N (integer), ``gate`` ("per-electron", "shared" or "none"),
                      ``reference_voltage`` [V] (required unless gate = "none"),
                      ``hold_time`` [s], optional ``hold_time_range`` [low, high] [s]

Parameter names and units
-------------------------
decay-cascade, shared slope: ``a`` [1/V], ``V_1`` … ``V_K`` [V];
per-step slopes: ``a_1``, ``V_1``, ``a_2``, ``V_2``, … .
sequential-escape: ``ln_tau0_1`` … ``ln_tau0_N`` [ln s] (natural log of the escape time in
seconds at the reference voltage, in order of escape), then ``b_1`` … ``b_N`` [1/V] or ``b``.
The covariance is in the same units and order.
"""

from __future__ import annotations

import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ...errors import DataError, did_you_mean
from .cascade import CascadeModel
from .escape import EscapeModel

__all__ = ["FitRecord", "read_fit_file", "record_from_dict", "fit_file_text", "make_model", "KIND",
           "VERSION"]

KIND = "pump-fit-result"
VERSION = 1
_MODELS = ("decay-cascade", "sequential-escape")


@dataclass(frozen=True)
class FitRecord:
    """The content of a fit-result file (or of a fit made here, ready to be written).

    Parameters
    ----------
    model : str
        Model name.
    settings : dict
        Model settings (steps/shared_slope or loaded/gate/reference_voltage).
    names : tuple of str
        Parameter names.
    values : tuple of float
        Parameter values.
    covariance : tuple of tuple of float
        Their covariance.
    plateau : int
        n.
    point : dict
        ``gate_voltage`` [V] or None, and ``hold_time`` [s] for the escape model.
    gate_range, hold_time_range : tuple of float or None
        Ranges covered by the data.
    dof : float
        Degrees of freedom of the fit (inf when unknown).
    source : str
        Free text.
    """

    model: str
    settings: dict
    names: tuple[str, ...]
    values: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    plateau: int
    point: dict
    gate_range: tuple[float, float] | None = None
    hold_time_range: tuple[float, float] | None = None
    dof: float = math.inf
    source: str = ""
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """The file's content as a dict, in the documented key order."""
        d: dict[str, Any] = {"kind": KIND, "version": VERSION, "model": self.model}
        d.update(self.settings)
        d["plateau"] = int(self.plateau)
        if self.point.get("gate_voltage") is not None:
            d["operating_point"] = float(self.point["gate_voltage"])
        if self.model == "sequential-escape":
            d["hold_time"] = float(self.point["hold_time"])
        if self.gate_range is not None:
            d["gate_range"] = [float(x) for x in self.gate_range]
        if self.hold_time_range is not None:
            d["hold_time_range"] = [float(x) for x in self.hold_time_range]
        if math.isfinite(self.dof):
            d["dof"] = float(self.dof)
        if self.source:
            d["source"] = self.source
        d["parameter_names"] = list(self.names)
        d["parameter_values"] = [float(v) for v in self.values]
        d["covariance"] = [[float(c) for c in row] for row in self.covariance]
        return d


def make_model(name: str, settings: dict) -> CascadeModel | EscapeModel:
    """Build the model object a record describes."""
    if name == "decay-cascade":
        return CascadeModel(settings["steps"], settings["shared_slope"])
    return EscapeModel(settings["loaded"], settings["gate"], settings.get("reference_voltage", 0.0))


# ---------------------------------------------------------------------------- writing
def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v)  # shortest repr round-trips exactly through tomllib
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)  # a TOML basic string is JSON-compatible here
    if isinstance(v, list):
        if v and isinstance(v[0], list):
            return "[\n" + "".join(f"  {_toml_value(r)},\n" for r in v) + "]"
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def fit_file_text(record: FitRecord, fmt: str = "toml") -> str:
    """The fit-result file for ``record`` as TOML (default) or JSON text."""
    d = record.to_dict()
    if fmt == "json":
        return json.dumps(d, indent=2) + "\n"
    lines = ["# Pump fit result (format: budget/inputs/pump/fitfile.py). Units: V, s, 1/V, ln s."]
    lines += [f"{k} = {_toml_value(v)}" for k, v in d.items()]
    return "\n".join(lines) + "\n"


# ---------------------------------------------------------------------------- reading
def read_fit_file(path: Path, *, shown: str | None = None) -> FitRecord:
    """Read and validate a fit-result file; every problem is a DataError naming the field."""
    shown = shown or str(path)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise DataError(f"not UTF-8 text (bad byte at offset {exc.start})", file=shown) from None
    if path.suffix.lower() == ".json":
        try:
            d = json.loads(text)
        except json.JSONDecodeError as exc:
            raise DataError(f"not valid JSON: {exc.msg}", file=shown, line=exc.lineno) from None
    else:
        try:
            d = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            msg = str(exc)
            line = None
            if "(at line " in msg:
                try:
                    line = int(msg.split("(at line ")[1].split(",")[0])
                except ValueError:
                    line = None
            raise DataError(f"not valid TOML: {msg}", file=shown, line=line) from None
    if not isinstance(d, dict):
        raise DataError("must hold a table of keys at the top level", file=shown)
    return record_from_dict(d, shown)


def _err(shown: str, key: str, msg: str) -> DataError:
    return DataError(msg, file=shown, field=key)


def _get(d: dict, key: str, kinds: tuple[type, ...], shown: str, default: Any = ...) -> Any:
    if key not in d:
        if default is ...:
            raise _err(shown, key, "is required")
        return default
    v = d[key]
    if float in kinds and isinstance(v, int) and not isinstance(v, bool):
        v = float(v)
    if isinstance(v, bool) and bool not in kinds or not isinstance(v, kinds):
        names = {float: "a number", int: "an integer", str: "a string", bool: "true or false",
                 list: "a list"}
        raise _err(shown, key, f"must be {' or '.join(names[k] for k in kinds)}; got {v!r}")
    if isinstance(v, float) and not math.isfinite(v):
        raise _err(shown, key, f"must be finite; got {v!r}")
    return v


def _numbers(d: dict, key: str, shown: str, n: int | None = None) -> list[float]:
    v = _get(d, key, (list,), shown)
    out = []
    for i, x in enumerate(v):
        if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
            raise _err(shown, f"{key}[{i + 1}]", f"must be a finite number; got {x!r}")
        out.append(float(x))
    if n is not None and len(out) != n:
        raise _err(shown, key, f"must have {n} entries; got {len(out)}")
    return out


def _range(d: dict, key: str, shown: str) -> tuple[float, float] | None:
    if key not in d:
        return None
    lo, hi = _numbers(d, key, shown, 2)
    if not lo <= hi:
        raise _err(shown, key, f"must be [low, high] with low <= high; got {[lo, hi]}")
    return lo, hi


def record_from_dict(d: dict, shown: str = "") -> FitRecord:
    """Validate the content of a fit-result file (a dict) and build the record."""
    known = {"kind", "version", "model", "parameter_names", "parameter_values", "covariance",
             "plateau", "operating_point", "gate_range", "dof", "source", "steps",
             "shared_slope", "loaded", "gate", "reference_voltage", "hold_time",
             "hold_time_range"}
    for key in d:
        if key not in known:
            raise _err(shown, key, f"unknown key{did_you_mean(key, known)}")
    if _get(d, "kind", (str,), shown) != KIND:
        raise _err(shown, "kind", f"must be {KIND!r}; got {d['kind']!r}")
    if _get(d, "version", (int,), shown) != VERSION:
        raise _err(shown, "version", f"must be {VERSION}; got {d['version']!r}")
    model = _get(d, "model", (str,), shown)
    if model not in _MODELS:
        raise _err(shown, "model", f"must be one of {', '.join(_MODELS)}; got {model!r}"
                                   f"{did_you_mean(model, _MODELS)}")
    plateau = _get(d, "plateau", (int,), shown)
    if plateau < 1:
        raise _err(shown, "plateau", f"must be >= 1; got {plateau}")
    if model == "decay-cascade":
        steps = _get(d, "steps", (int,), shown)
        if not 1 <= steps <= 20:
            raise _err(shown, "steps", f"must be between 1 and 20; got {steps}")
        if plateau + 1 > steps:
            raise _err(shown, "steps", f"must be at least plateau + 1 = {plateau + 1} "
                                       f"(the upper edge of plateau {plateau}); got {steps}")
        settings = {"steps": steps, "shared_slope": _get(d, "shared_slope", (bool,), shown)}
        point = {"gate_voltage": _get(d, "operating_point", (float,), shown)}
    else:
        loaded = _get(d, "loaded", (int,), shown)
        if not 1 <= loaded <= 10:
            raise _err(shown, "loaded", f"must be between 1 and 10; got {loaded}")
        if plateau > loaded:
            raise _err(shown, "plateau", f"must not exceed loaded = {loaded}; got {plateau}")
        gate = _get(d, "gate", (str,), shown)
        if gate not in ("per-electron", "shared", "none"):
            raise _err(shown, "gate", f"must be per-electron, shared or none; got {gate!r}")
        settings = {"loaded": loaded, "gate": gate,
                    "reference_voltage": _get(d, "reference_voltage", (float,), shown,
                                              None if gate != "none" else 0.0)}
        if settings["reference_voltage"] is None:
            raise _err(shown, "reference_voltage", "is required")
        hold = _get(d, "hold_time", (float,), shown)
        if not hold > 0:
            raise _err(shown, "hold_time", f"must be > 0; got {hold!r}")
        v_op = _get(d, "operating_point", (float,), shown, None)
        if gate != "none" and v_op is None:
            raise _err(shown, "operating_point", "is required when the escape times depend on "
                                                 "the gate voltage")
        if gate == "none" and v_op is not None:
            raise _err(shown, "operating_point", "must be absent when gate = \"none\"")
        point = {"gate_voltage": v_op, "hold_time": hold}
    m = make_model(model, settings)
    names = _get(d, "parameter_names", (list,), shown)
    if [str(n) for n in names] != list(m.param_names) or not all(isinstance(n, str) for n in names):
        raise _err(shown, "parameter_names", f"must be {list(m.param_names)} for this "
                                             f"{model} model; got {names!r}")
    p = len(names)
    values = _numbers(d, "parameter_values", shown, p)
    rows = _get(d, "covariance", (list,), shown)
    if len(rows) != p:
        raise _err(shown, "covariance", f"must be a {p}×{p} matrix; got {len(rows)} rows")
    cov = []
    for i, row in enumerate(rows):
        if not isinstance(row, list):
            raise _err(shown, f"covariance[{i + 1}]", "must be a list of numbers")
        cov.append(_numbers({f"covariance[{i + 1}]": row}, f"covariance[{i + 1}]", shown, p))
    C = np.asarray(cov)
    asym = np.abs(C - C.T)
    scale = np.sqrt(np.abs(np.outer(np.diag(C), np.diag(C)))) + 1e-300
    if np.any(asym > 1e-9 * scale):
        i, j = np.unravel_index(int(np.argmax(asym / scale)), C.shape)
        raise _err(shown, f"covariance[{i + 1}][{j + 1}]", "the covariance matrix must be "
                                                           "symmetric")
    if np.any(np.diag(C) < 0):
        i = int(np.flatnonzero(np.diag(C) < 0)[0])
        raise _err(shown, f"covariance[{i + 1}][{i + 1}]", "a variance must be >= 0")
    d_ = np.sqrt(np.diag(C))
    with np.errstate(all="ignore"):
        R = np.where(np.outer(d_, d_) > 0, C / np.outer(d_, d_), 0.0)
    if np.linalg.eigvalsh((R + R.T) / 2).min() < -1e-8:
        raise _err(shown, "covariance", "the covariance matrix must be positive semi-definite "
                                        "(a correlation implied by it lies outside [-1, 1] or "
                                        "the matrix has a negative eigenvalue)")
    dof = _get(d, "dof", (float,), shown, math.inf)
    if not dof > 0:
        raise _err(shown, "dof", f"must be > 0; got {dof!r}")
    return FitRecord(model=model, settings=settings, names=tuple(names), values=tuple(values),
                     covariance=tuple(tuple(r) for r in ((C + C.T) / 2).tolist()),
                     plateau=plateau, point=point, gate_range=_range(d, "gate_range", shown),
                     hold_time_range=_range(d, "hold_time_range", shown), dof=dof,
                     source=_get(d, "source", (str,), shown, ""))
