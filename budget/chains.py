"""Measurement models of the usual traceability chains of a quantized current source.

``[model] chain = "..."`` replaces the free-form output expressions by one of these:

==========================  =================================================================
chain                       outputs
==========================  =================================================================
``resistor-voltmeter``      I = g·ΔV/R (A); delta_I = I/(n·e·f) − 1 shown in the chosen unit
``amplifier-voltmeter``     I = g·ΔV/A_TR (A); delta_I as above
``ammeter-under-test``      ε = I_read/(n·e·f·(1 + δ_pump)) − 1 (gain error of an ammeter read
                            against the pump as reference); delta_I = I_read/(n·e·f) − 1
==========================  =================================================================

Input names (rename them with ``inputs_map``):

* ``g`` — voltmeter gain correction factor (1); ``dV`` — on/off voltage difference (V);
* ``R`` — reference resistor (Ω); ``A_TR`` — amplifier transresistance (Ω = V/A);
* ``f`` — pump drive frequency (Hz); ``I_read`` — the ammeter's reading of the pump current (A);
* ``delta_pump`` — relative error of the pump's current against n·e·f (1);
* ``n`` (positive integer, electrons per cycle) and ``e`` (1.602176634e-19 C, exact since the
  2019 SI) are constants the engine provides from ``[constants]``; ``n`` may also be given in
  the ``[model]`` table, and is then returned in :attr:`ChainModel.constants`.

Numerical care. The deviation is written as *one* quotient minus one, ``q − 1``, a pure
number; its display unit (µA/A, ×10⁻⁸, nA/A) is applied by one exactly representable power of
ten (10^6, 10^8, 10^9; never a division by 1e-6, which binary cannot represent). For
0.5 ≤ q ≤ 2 the subtraction is exact (Sterbenz lemma), so the only error is the few roundings
of q, a few times 1e-16 absolute: a deviation of 1e-9 keeps six or more significant digits
(checked against exact rational arithmetic in tests/test_chains.py).

Spec keys of the ``[model]`` table with ``chain``
-------------------------------------------------
chain : str
    One of :data:`CHAINS` (required).
deviation_unit : {"10⁻⁶", "µA/A", "10⁻⁸", "10⁻⁹", "nA/A"}
    Display scale of the deviation output ``delta_I`` (a pure number, named without a unit
    whatever its scale): parts in 10^6 (shown in µA/A), 10^8 (shown ×10⁻⁸) or 10^9 (shown in
    nA/A). Default ``"10⁻⁶"``. Its former names ``dev_ppm``, ``dev_1e8``, ``dev_1e9`` are
    accepted as keys of ``outputs_map``, and records that use them still match ``delta_I``
    in compare and the logbook (:func:`budget.measurands.match_name`).
    ``"ppm"`` and ``"1e-8"`` are accepted spellings of 10⁻⁶ and 10⁻⁸; the result is shown in
    µA/A and ×10⁻⁸ all the same (the SI Brochure, 9th ed., §5.4.7, advises against ppm). The
    record stores the deviation as a plain number (SI) with the display unit beside it.
n : int
    Electrons per cycle (positive integer); otherwise taken from ``[constants]``.
inputs_map : table
    Renames of the chain's input names, e.g. ``{R = "R1G", dV = "V_diff"}``.
outputs_map : table
    Renames of the outputs, e.g. ``{I = "I_pump"}``.
description : str
    Replaces the chain's description.
"""

from __future__ import annotations

import keyword
from dataclasses import dataclass, field
from typing import Any

from .errors import SpecError, did_you_mean
from .expression import Var, names, parse, substitute, to_text
from .measurands import DEVIATION_OUTPUT, FORMER_DEVIATION_OUTPUTS

__all__ = ["CHAINS", "DEVIATION_UNITS", "ChainModel", "build_chain", "validate_n"]

#: Display scale of the deviation: (factor as an exact float, former output suffix, unit
#: label); the output is :data:`~budget.measurands.DEVIATION_OUTPUT` at every scale.
DEVIATION_UNITS = {"10⁻⁶": (1e6, "ppm", "µA/A"), "µA/A": (1e6, "ppm", "µA/A"),
                   "ppm": (1e6, "ppm", "µA/A"), "10⁻⁸": (1e8, "1e8", "×10⁻⁸"),
                   "1e-8": (1e8, "1e8", "×10⁻⁸"), "10⁻⁹": (1e9, "1e9", "nA/A"),
                   "nA/A": (1e9, "1e9", "nA/A")}

INPUT_UNITS = {"g": "1", "dV": "V", "R": "Ω", "A_TR": "Ω", "f": "Hz", "I_read": "A",
               "delta_pump": "1"}
CONSTANT_NAMES = ("n", "e")

# name -> (description, [(output, expression, unit)], deviation expression (a pure number))
_DEFS: dict[str, tuple[str, list[tuple[str, str, str]], str]] = {
    "resistor-voltmeter": (
        "resistor-voltmeter chain: the pump current through a reference resistor R, the "
        "voltage difference dV read by a voltmeter with gain correction g, I = g*dV/R",
        [("I", "g * dV / R", "A")],
        "g * dV / (n * e * f * R) - 1"),
    "amplifier-voltmeter": (
        "amplifier-voltmeter chain: a current amplifier of transresistance A_TR feeds a "
        "voltmeter with gain correction g, I = g*dV/A_TR",
        [("I", "g * dV / A_TR", "A")],
        "g * dV / (n * e * f * A_TR) - 1"),
    "ammeter-under-test": (
        "ammeter under test against the pump as reference: gain error "
        "eps = I_read/(n*e*f*(1 + delta_pump)) - 1",
        [("eps", "I_read / (n * e * f * (1 + delta_pump)) - 1", "1")],
        "I_read / (n * e * f) - 1"),
}

#: The chains :func:`build_chain` knows.
CHAINS = tuple(_DEFS)

KEYS = ("chain", "deviation_unit", "n", "inputs_map", "outputs_map", "description")


@dataclass(frozen=True)
class ChainModel:
    """The measurement model a chain stands for.

    Attributes
    ----------
    outputs : dict
        Ordered ``output name -> expression`` over input names (and earlier outputs).
    units : dict
        ``output name -> unit`` shown (the deviation's display unit, e.g. ``"µA/A"``).
    working_units : dict
        ``output name -> unit`` the expression computes in (the deviation: ``"1"``).
    description : str
        One sentence for the report.
    chain : str
        The chain's name.
    inputs : tuple of str
        Input names the expressions use (after ``inputs_map``), constants excluded.
    input_units : dict
        Expected unit of each input.
    constants : dict
        Constants fixed by the ``[model]`` table (``n`` when given there).
    renamed : dict
        The chain's own name of each output and input -> the name used (after
        ``outputs_map`` and ``inputs_map``); :mod:`budget.measurands` looks meanings up by it.
    """

    outputs: dict[str, str]
    units: dict[str, str]
    description: str
    chain: str = ""
    inputs: tuple[str, ...] = ()
    input_units: dict[str, str] = field(default_factory=dict)
    constants: dict[str, int] = field(default_factory=dict)
    renamed: dict[str, str] = field(default_factory=dict)
    working_units: dict[str, str] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"chain": self.chain, "outputs": dict(self.outputs), "units": dict(self.units),
                "description": self.description, "inputs": list(self.inputs),
                "input_units": dict(self.input_units), "constants": dict(self.constants),
                "working_units": dict(self.working_units)}


def validate_n(value: Any, *, file: str | None = None, line: int | None = None,
               field: str = "n") -> int:
    """Return ``value`` if it is a positive integer (electrons per cycle), else a SpecError."""
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise SpecError(f"must be a positive integer (electrons per cycle); got {value!r}",
                        file=file, line=line, field=field)
    return value


def _identifier(v: Any) -> bool:
    return isinstance(v, str) and v.isidentifier() and not keyword.iskeyword(v)


def build_chain(table: dict[str, Any], *, file: str, lines: dict[str, int]) -> ChainModel:
    """Build the model of ``[model] chain = "..."``.

    Parameters
    ----------
    table : dict
        The ``[model]`` table as loaded from TOML.
    file : str
        The spec file, for messages.
    lines : dict
        ``key -> line`` inside the table and ``"" -> header line``, when known.

    Raises
    ------
    SpecError
        Unknown key or chain (with a did-you-mean), bad ``n``, ``deviation_unit`` or renames.
    """
    def err(key: str, message: str) -> SpecError:
        return SpecError(message, file=file, line=lines.get(key, lines.get("")),
                         field=f"model.{key}")

    for key in table:
        if key not in KEYS:
            raise err(key, f"unknown key next to 'chain'{did_you_mean(key, KEYS)} (allowed: "
                           f"{', '.join(KEYS)}; free-form outputs need a [model] without chain)")
    name = table.get("chain")
    if not isinstance(name, str) or name not in _DEFS:
        raise err("chain", f"unknown chain {name!r}{did_you_mean(str(name), CHAINS)} "
                           f"(known: {', '.join(CHAINS)})")
    unit_key = table.get("deviation_unit", "10⁻⁶")
    if not isinstance(unit_key, str) or unit_key not in DEVIATION_UNITS:
        raise err("deviation_unit", f"must be one of {', '.join(DEVIATION_UNITS)}; got "
                                    f"{unit_key!r}{did_you_mean(str(unit_key), DEVIATION_UNITS)}")
    constants = {}
    if "n" in table:
        constants["n"] = validate_n(table["n"], file=file, line=lines.get("n", lines.get("")),
                                    field="model.n")
    description, base, dev_text = _DEFS[name]
    if "description" in table:
        if not isinstance(table["description"], str):
            raise err("description", f"must be a string; got {table['description']!r}")
        description = table["description"]
    _scale, _suffix, unit_label = DEVIATION_UNITS[unit_key]

    every = set(_names(dev_text)).union(*(_names(text) for _, text, _ in base))
    used = sorted(every - set(CONSTANT_NAMES))
    in_map = _renames(table, "inputs_map", used, err)
    default_outputs = [o for o, _, _ in base] + [DEVIATION_OUTPUT]
    out_map = _renames(table, "outputs_map", default_outputs, err,
                       aliases={o: DEVIATION_OUTPUT for o in FORMER_DEVIATION_OUTPUTS})
    final_inputs = [in_map.get(v, v) for v in used]
    final_outputs = [out_map.get(o, o) for o in default_outputs]
    clash = set(final_inputs) & (set(final_outputs) | set(CONSTANT_NAMES))
    if clash or len(set(final_outputs)) != len(final_outputs):
        key = "inputs_map" if clash else "outputs_map"
        raise err(key, f"names must be distinct from each other, the outputs and n, e; clash: "
                       f"{', '.join(sorted(clash) or final_outputs)}")

    mapping = {old: Var(new) for old, new in in_map.items()}

    def render(text: str) -> str:
        return to_text(substitute(parse(text), mapping))

    outputs: dict[str, str] = {}
    units: dict[str, str] = {}
    for (_, text, unit), final in zip(base, final_outputs):
        outputs[final] = render(text)
        units[final] = unit
    outputs[final_outputs[-1]] = render(dev_text)
    units[final_outputs[-1]] = unit_label
    # the model computes the deviation as a pure number (coherent SI, working unit "1"); the
    # chosen scale is only its display unit, applied by one exact power-of-ten factor, so the
    # typeset model carries no factor 10^6 beside a value stated in µA/A
    working = {**units, final_outputs[-1]: "1"}
    return ChainModel(outputs=outputs, units=units, description=description, chain=name,
                      working_units=working,
                      inputs=tuple(final_inputs),
                      input_units={in_map.get(v, v): INPUT_UNITS[v] for v in used},
                      constants=constants,
                      renamed={**dict(zip(default_outputs, final_outputs)),
                               **{v: in_map.get(v, v) for v in used}})


def _names(text: str) -> set[str]:
    return names(parse(text))


def _renames(table: dict, key: str, allowed: list[str], err,
             aliases: dict[str, str] | None = None) -> dict[str, str]:
    raw = table.get(key, {})
    if not isinstance(raw, dict):
        raise err(key, f"must be a table of old = \"new\" names; got {raw!r}")
    out = {}
    for old, new in raw.items():
        old = (aliases or {}).get(old, old)       # a former name of the same output
        if old in out:
            raise err(key, f"{old!r} is renamed twice (under its former name too)")
        if old not in allowed:
            raise err(key, f"{old!r} is not a name of this chain{did_you_mean(old, allowed)} "
                           f"(names: {', '.join(allowed)})")
        if not _identifier(new):
            raise err(key, f"the new name for {old!r} must be an identifier; got {new!r}")
        out[old] = new
    return out
