"""The budget spec: a TOML file naming the measurands, the model and the inputs.

Stable sections and keys (see README "The budget spec"):

``[budget]``       title, description, coverage_probability (default 0.95), propagation_order
                   (1 or 2, default 1), dof_rounding ("floor" default, or "interpolate"),
                   coverage_factor (fixes k instead of t_p(ν_eff))
``[report]``       free text for the report header (laboratory, report_number, item, ...)
``[model]``        one entry per output, ``name = "expression"``; or ``chain = "..."``
``[units]``        ``output = "unit"``
``[constants]``    ``name = number``
``[monte_carlo]``  trials (integer or "adaptive"), seed, interval ("symmetric" or "shortest"),
                   significant_digits (ndig, default 2), max_trials, enabled,
                   t_for_finite_dof (default true: normal inputs with finite ν drawn from t_ν),
                   sampling ("random" or "sobol": randomized quasi-Monte Carlo; unset: "sobol"
                   for the adaptive procedure, "random" for a fixed number of trials)
``[inputs.NAME]``  a typed-in quantity, ``observations``, or ``module`` + ``file``
``[correlations]`` pairs = [["a", "b", r], ...], from_observations = [["V", "I", "phi"], ...]
"""

from __future__ import annotations

import hashlib
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import SpecError, did_you_mean
from .measurands import CHAIN_INPUTS, chain_defaults, former_name_hint, output_descriptions
from .numbers import NumberError, checked, shown
from .schema import SchemaViolation, load_schema, validate

__all__ = ["Spec", "load_spec", "parse_spec", "SECTIONS", "REPORT_KEYS", "MAX_TRIALS"]

SECTIONS = ("budget", "report", "model", "outputs", "units", "constants", "monte_carlo",
            "inputs", "correlations")
BUDGET_KEYS = ("title", "description", "coverage_probability", "propagation_order",
               "dof_rounding", "coverage_factor")
REPORT_KEYS = ("laboratory", "laboratory_address", "accreditation", "report_number",
               "certificate_number", "item", "item_serial", "manufacturer", "customer",
               "customer_address", "operator", "approver", "approver_role", "measurement_date",
               "issue_date", "receipt_date", "method", "procedure", "traceability", "conditions",
               "location", "remarks", "measurand", "item_condition", "adjustment",
               "deviations", "external_providers", "decision_rule", "conformity")
MC_KEYS = ("trials", "seed", "interval", "significant_digits", "max_trials", "enabled",
           "t_for_finite_dof", "sampling")
CORRELATION_KEYS = ("pairs", "from_observations")
MAX_TRIALS = 100_000_000   # beyond this a run takes hours and gigabytes: certainly a mistake
MIN_TRIALS = 1_000         # fewer cannot give a 95 % interval worth reporting (JCGM 101 §7.2)
_IDENT = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class Spec:
    """A loaded, checked budget spec (inputs not yet evaluated).

    Attributes
    ----------
    path : str
        The spec file as named by the user ("<string>" when parsed from text).
    folder : Path
        Folder that relative data-file names are resolved against.
    sha256 : str
        Digest of the spec's bytes.
    outputs : dict
        Output name -> expression text, in the order written (or built by a chain).
    inputs : dict
        Input name -> its TOML table.
    """

    path: str
    folder: Path
    text: str
    sha256: str
    title: str
    description: str
    coverage_probability: float
    propagation_order: int
    dof_rounding: str
    coverage_factor: float | None
    outputs: dict[str, str]
    units: dict[str, str]
    constants: dict[str, float]
    inputs: dict[str, dict[str, Any]]
    correlation_pairs: tuple[tuple[str, str, float], ...]
    from_observations: tuple[tuple[str, ...], ...]
    trials: int | None            # None = adaptive
    seed: int | None
    interval: str
    significant_digits: int
    max_trials: int
    monte_carlo_enabled: bool
    report: dict[str, str]
    t_for_finite_dof: bool = True
    chain: str | None = None
    # "random" (pseudo-random, JCGM 101) or "sobol" (RQMC); None (unset): "sobol" for the adaptive
    # procedure, "random" for a fixed number of trials (resolved by the engine, which knows
    # whether --trials overrides the spec)
    sampling: str | None = None
    #: output -> the unit its expression gives numbers in, when not coherent SI (a chain's)
    working_units: dict[str, str] = field(default_factory=dict)
    #: constant -> its unit as stated in ``[constants]`` ({value = 600, unit = "MHz"})
    constant_units: dict[str, str] = field(default_factory=dict)
    lines: dict[tuple[str, ...], dict[str, int]] = field(default_factory=dict, repr=False)
    #: output -> {"symbol", "name", "definition"} (``[outputs.NAME]``; budget.measurands)
    output_info: dict[str, dict[str, str]] = field(default_factory=dict)
    #: input -> (symbol, meaning, unit) a chain gives its inputs
    input_info: dict[str, tuple[str, str, str]] = field(default_factory=dict)

    def line_of(self, section: tuple[str, ...], key: str = "") -> int | None:
        """Line number of ``key`` in table ``section`` ("" for the header), when known."""
        return self.lines.get(section, {}).get(key, self.lines.get(section, {}).get(""))


def load_spec(path: str | Path) -> Spec:
    """Read and check a spec file.

    Raises
    ------
    SpecError
        Naming the file, line and key of the first problem found.
    """
    p = Path(path)
    if not p.is_file():
        raise SpecError("spec file not found", file=str(path))
    raw = p.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise SpecError("not UTF-8 text", file=str(path), line=line) from None
    return parse_spec(text, file=str(path), folder=p.resolve().parent, raw=raw)


def _toml_key(text: str) -> tuple[str, ...] | None:
    """The key path of a TOML key as written (bare, quoted with escapes, dotted), or None."""
    try:
        data = tomllib.loads(text + " = 0")
    except tomllib.TOMLDecodeError:
        return None
    path = []
    while isinstance(data, dict) and len(data) == 1:
        k, data = next(iter(data.items()))
        path.append(k)
    return tuple(path) if data == 0 else None


def _locate(text: str) -> dict[tuple[str, ...], dict[str, int]]:
    """Map each TOML table to the lines of its header and keys (for error messages).

    Keys are read with the TOML parser itself, so a quoted key with escapes (``"a\\nb" = 1``)
    is found at its own line, not at its table's header."""
    out: dict[tuple[str, ...], dict[str, int]] = {(): {}}
    current: tuple[str, ...] = ()
    header = re.compile(r"^\s*\[\s*([^\[\]]+?)\s*\]\s*(#.*)?$")
    keyline = re.compile(r"""^\s*((?:[A-Za-z0-9_\-]+|"(?:[^"\\]|\\.)*"|'[^']*')"""
                         r"""(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|"(?:[^"\\]|\\.)*"|'[^']*'))*)\s*=""")
    for i, ln in enumerate(text.split("\n"), start=1):  # TOML ends lines at LF only
        m = header.match(ln)
        if m:
            current = _toml_key(m.group(1)) or tuple(
                part.strip().strip('"') for part in m.group(1).split("."))
            out.setdefault(current, {})[""] = i
            continue
        k = keyline.match(ln)
        if k:
            dotted = _toml_key(k.group(1))
            if dotted:
                sect = current + dotted[:-1]
                out.setdefault(sect, {}).setdefault(dotted[-1], i)
    return out


def parse_spec(text: str, *, file: str = "<string>", folder: Path | None = None,
               raw: bytes | None = None) -> Spec:
    """Parse and check spec text (see :func:`load_spec`)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        msg = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        raise SpecError(f"not valid TOML: {msg}", file=file,
                        line=int(m.group(1)) if m else None) from None
    lines = _locate(text)
    chk = _Checker(file, lines)
    for sect in data:
        if sect not in SECTIONS:
            raise SpecError(f"unknown section [{sect}]{did_you_mean(sect, SECTIONS)}", file=file,
                            line=chk.line((sect,)), field=sect)
        if not isinstance(data[sect], dict):
            raise SpecError(f"'{sect}' must be a table [{sect}]", file=file,
                            line=chk.line((), sect), field=sect)
    chk.types(data)

    b = data.get("budget", {})
    chk.keys(("budget",), b, BUDGET_KEYS)
    title = chk.string(("budget",), b, "title", "Untitled budget")
    description = chk.string(("budget",), b, "description", "")
    p = chk.number(("budget",), b, "coverage_probability", 0.95)
    if not 0.5 <= p < 1:
        raise chk.error(("budget",), "coverage_probability", f"must lie in [0.5, 1); got {shown(p)}")
    order = b.get("propagation_order", 1)
    if isinstance(order, bool) or order not in (1, 2):
        raise chk.error(("budget",), "propagation_order", f"must be 1 or 2; got {shown(order)}")
    dof_rounding = chk.choice(("budget",), b, "dof_rounding", ("floor", "interpolate"), "floor")
    kfix = b.get("coverage_factor")
    if kfix is not None:
        kfix = chk.number(("budget",), b, "coverage_factor", None)
        if not kfix > 0:
            raise chk.error(("budget",), "coverage_factor", f"must be > 0; got {shown(kfix)}")

    rep = data.get("report", {})
    chk.keys(("report",), rep, REPORT_KEYS)
    report = {k: chk.string(("report",), rep, k, "") for k in rep}

    model = data.get("model", {})
    if not model:
        raise SpecError("the spec has no [model] section (one entry per output: "
                        "name = \"expression\")", file=file, field="model")
    chain = None
    units_from_chain: dict[str, str] = {}
    chain_working: dict[str, str] = {}
    chain_constants: dict[str, float] = {}
    described: dict[str, dict[str, str]] = {}
    input_info: dict[str, tuple[str, str, str]] = {}
    if "chain" in model:
        chain = model["chain"]
        from .chains import build_chain  # a chain spec needs the chain models only
        built = build_chain(model, file=file, lines=lines.get(("model",), {}))
        outputs = dict(built.outputs)
        units_from_chain = dict(built.units)
        chain_working = dict(built.working_units)
        chain_constants = {k: float(v) for k, v in built.constants.items()}
        described = chain_defaults(chain, built.renamed)
        input_info = {new: (*CHAIN_INPUTS[old], built.input_units.get(new, ""))
                      for old, new in built.renamed.items() if old in CHAIN_INPUTS}
    else:
        outputs = {}
        for name, expr in model.items():
            chk.ident(("model",), name)
            if not isinstance(expr, str):
                raise chk.error(("model",), name, "must be an expression in quotes, e.g. "
                                "I = \"g * dV / R\"; got " + repr(expr))
            outputs[name] = expr

    output_info = output_descriptions(data.get("outputs", {}), outputs, described, file=file,
                                      lines=lines)
    units = dict(units_from_chain)
    for k in data.get("units", {}):
        if k not in outputs:
            raise chk.error(("units",), k, f"is not an output of [model]"
                                           f"{did_you_mean(k, outputs)}"
                                           f"{former_name_hint(k, outputs)}")
        units[k] = chk.string(("units",), data["units"], k, "")

    constants, constant_units = _constants(chk, data.get("constants", {}))
    for k, v in chain_constants.items():
        if k in constants and constants[k] != v:
            raise chk.error(("constants",), k, f"conflicts with {k} = {v:g} in [model]")
        constants[k] = v
    if chain is not None and "n" in data.get("constants", {}):
        from .chains import validate_n
        validate_n(data["constants"]["n"], file=file, line=chk.line(("constants",), "n"),
                   field="constants.n")

    mc = data.get("monte_carlo", {})
    chk.keys(("monte_carlo",), mc, MC_KEYS)
    trials_v = mc.get("trials", "adaptive")
    if trials_v == "adaptive":
        trials = None
    else:
        if isinstance(trials_v, bool) or not isinstance(trials_v, int):
            raise chk.error(("monte_carlo",), "trials",
                            f"must be an integer or \"adaptive\"; got {shown(trials_v)}")
        trials = check_trials(trials_v, file=file, line=chk.line(("monte_carlo",), "trials"))
    seed = mc.get("seed")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int) or seed < 0):
        raise chk.error(("monte_carlo",), "seed", f"must be a non-negative integer; got {shown(seed)}")
    interval = chk.choice(("monte_carlo",), mc, "interval", ("symmetric", "shortest"),
                          "symmetric")
    ndig = mc.get("significant_digits", 2)
    if isinstance(ndig, bool) or ndig not in (1, 2, 3, 4):
        raise chk.error(("monte_carlo",), "significant_digits", f"must be 1, 2, 3 or 4; got {shown(ndig)}")
    max_trials = mc.get("max_trials", 10_000_000)
    if isinstance(max_trials, bool) or not isinstance(max_trials, int):
        raise chk.error(("monte_carlo",), "max_trials", f"must be an integer; got {shown(max_trials)}")
    max_trials = check_trials(max_trials, file=file, line=chk.line(("monte_carlo",), "max_trials"),
                              field="monte_carlo.max_trials")
    enabled = mc.get("enabled", True)
    if not isinstance(enabled, bool):
        raise chk.error(("monte_carlo",), "enabled", f"must be true or false; got {shown(enabled)}")

    t_dof = mc.get("t_for_finite_dof", True)
    if not isinstance(t_dof, bool):
        raise chk.error(("monte_carlo",), "t_for_finite_dof", f"must be true or false; got {shown(t_dof)}")

    sampling = None if mc.get("sampling") is None else chk.choice(
        ("monte_carlo",), mc, "sampling", ("random", "sobol"), "random")
    if sampling == "sobol" and trials is not None and trials & (trials - 1):
        raise chk.error(("monte_carlo",), "trials",
                        "must be a power of two with sampling = \"sobol\" (the balance of "
                        f"Sobol points holds for 2^k of them), e.g. {1 << (trials - 1).bit_length():,}; "
                        f"got {trials:,}")

    inputs = data.get("inputs", {})
    if not inputs:
        raise SpecError("the spec has no inputs ([inputs.NAME] tables)", file=file,
                        field="inputs")
    for name, table in inputs.items():
        chk.ident(("inputs",), name)
        if not isinstance(table, dict):
            raise chk.error(("inputs",), name, "must be a table [inputs." + name + "]")
        if name in constants:
            raise chk.error(("inputs", name), "", f"'{name}' is both an input and a constant")
        if name in outputs:
            raise chk.error(("inputs", name), "", f"'{name}' is both an input and a model output")
    for name in outputs:
        if name in constants:
            raise chk.error(("model",), name, f"'{name}' is both an output and a constant")

    corr = data.get("correlations", {})
    chk.keys(("correlations",), corr, CORRELATION_KEYS)
    pairs = []
    # types and shapes were checked against spec.schema.json (chk.types)
    pairs = [(a, b, float(r)) for a, b, r in corr.get("pairs", [])]
    groups = [tuple(item) for item in corr.get("from_observations", [])]

    return Spec(path=file, folder=folder or Path.cwd(), text=text,
                sha256=hashlib.sha256(raw if raw is not None else text.encode()).hexdigest(),
                title=title, description=description, coverage_probability=p,
                propagation_order=order, dof_rounding=dof_rounding, coverage_factor=kfix,
                outputs=outputs, units=units, constants=constants, inputs=dict(inputs),
                correlation_pairs=tuple(pairs), from_observations=tuple(groups), trials=trials,
                seed=seed, interval=interval, significant_digits=ndig, max_trials=max_trials,
                monte_carlo_enabled=enabled, report=report, t_for_finite_dof=t_dof, chain=chain,
                sampling=sampling, working_units=chain_working,
                constant_units=constant_units, lines=lines, output_info=output_info,
                input_info=input_info)



def _constants(chk, table: dict[str, Any]) -> tuple[dict[str, float], dict[str, str]]:
    """``[constants]``: plain numbers (dimensionless) or ``{value = ..., unit = "..."}``
    tables, converted to coherent SI once (budget.units)."""
    constants: dict[str, float] = {}
    units: dict[str, str] = {}
    for k, v in table.items():
        chk.ident(("constants",), k)
        if not isinstance(v, dict):
            constants[k] = chk.number(("constants",), table, k, None)
            continue
        sect = ("constants", k)
        extra = sorted(set(v) - {"value", "unit"})
        if extra or "value" not in v:
            raise chk.error(("constants",), k, "a constant with a unit is a table "
                            "{value = NUMBER, unit = \"UNIT\"}" + (f"; unknown key {extra[0]!r}"
                                                                  if extra else ""))
        value = chk.number(sect, v, "value", None)
        text = chk.string(sect, v, "unit", "1")
        from .units import UnitError, parse_unit
        try:
            unit = parse_unit(text)
        except UnitError as exc:
            raise chk.error(("constants",), k, str(exc)) from None
        if k == "n" and not (unit.dimensionless and unit.scale == 1):
            raise chk.error(("constants",), k, f"n counts electrons per cycle and carries no "
                            f"unit; got {text!r}")
        constants[k] = unit.to_si(value)
        units[k] = unit.si
    return constants, units


def check_trials(n: int, *, file: str | None = None, line: int | None = None,
                 field: str = "monte_carlo.trials") -> int:
    """Refuse trial counts outside [MIN_TRIALS, MAX_TRIALS]."""
    if not MIN_TRIALS <= n <= MAX_TRIALS:
        got = f"{n:,}" if abs(n) < 10 ** 30 else shown(n)
        raise SpecError(f"must lie between {MIN_TRIALS:,} and {MAX_TRIALS:,}; got {got}",
                        file=file, line=line, field=field)
    return n


class _Checker:
    """Small helpers that turn a bad key into a SpecError with its line."""

    def __init__(self, file: str, lines: dict):
        self.file, self.lines = file, lines

    def line(self, section: tuple[str, ...], key: str = "") -> int | None:
        d = self.lines.get(section, {})
        return d.get(key, d.get(""))

    def error(self, section: tuple[str, ...], key: str, message: str) -> SpecError:
        fld = ".".join(section + ((key,) if key else ()))
        return SpecError(message, file=self.file, line=self.line(section, key), field=fld)

    def keys(self, section: tuple[str, ...], table: dict, allowed: tuple[str, ...]) -> None:
        for k in table:
            if k not in allowed:
                raise self.error(section, k, f"unknown key{did_you_mean(k, allowed)}")

    def ident(self, section: tuple[str, ...], name: str) -> None:
        if not _IDENT.match(name):
            err = self.error(section, name, "a name must start with an ASCII letter (A-Z, a-z) "
                                            "and hold only ASCII letters, digits and "
                                            "underscores")
            if err.line is None or (section + (name,)) in self.lines:  # a table [section.name]
                err.line = self.line(section + (name,))
            raise err

    def string(self, section, table, key, default):
        v = table.get(key, default)
        if not isinstance(v, str):
            raise self.error(section, key, f"must be a string; got {shown(v)}")
        return v

    def number(self, section, table, key, default):
        try:
            return checked(table.get(key, default))
        except NumberError as exc:
            raise self.error(section, key, str(exc)) from None

    def types(self, data: dict) -> None:
        """Check the types of every known key against ``spec.schema.json`` (one place)."""
        try:
            validate(data, load_schema("spec.schema.json"))
        except SchemaViolation as exc:
            keys = [p for p in exc.path if isinstance(p, str)]
            idx = [q for q in exc.path if isinstance(q, int)]
            words = [f"{'entry' if i == 0 else 'item'} {q + 1}" for i, q in enumerate(idx)]
            entries = (", ".join(words) + ": ") if words else ""
            raise self.error(tuple(keys[:-1]), keys[-1] if keys else "",
                             entries + exc.message) from None

    def choice(self, section, table, key, choices, default):
        v = table.get(key, default)
        if v not in choices:
            raise self.error(section, key, f"must be one of {', '.join(choices)}; got {shown(v)}"
                                           f"{did_you_mean(str(v), choices)}")
        return v
