"""Measurands as a metrologist writes them: a symbol, a name and a definition for each output.

Spec keys (``[outputs.NAME]``, NAME an output of ``[model]``), all optional strings:

symbol : str
    The quantity symbol, a letter or word with an optional subscript after ``_``, e.g.
    ``"I_P"``, ``"R_X"``, ``"δ_I"`` (typeset in italic, the subscript upright when it is a
    word; ISO 80000-1 §7.1, common practice). Default: the output's name.
name : str
    The quantity's name in words, e.g. ``"pump current"``. Default: a chain's, else "".
definition : str
    What exactly is measured (VIM 2.3 measurand: the quantity intended to be measured), e.g.
    ``"DC current delivered by the pump at the operating point, 1 nA range"``. Default: a
    chain's, else "".

The traceability chains (:mod:`budget.chains`) fill all three in for their outputs and give
their inputs a meaning, so the report's table of symbols is complete without any key.
"""

from __future__ import annotations

import re
from typing import Any

from .errors import SpecError, did_you_mean

__all__ = ["OUTPUT_KEYS", "SYMBOL_RE", "output_descriptions", "chain_defaults",
           "CONSTANT_MEANINGS", "DEVIATION_OUTPUT", "FORMER_DEVIATION_OUTPUTS",
           "DEVIATION_DISPLAY_UNITS", "default_measurand", "deviation_aliases", "match_name",
           "measurand_of",
           "former_name_hint"]

#: The chains' deviation output: the pure number q − 1 (I/(n·e·f) − 1), whatever unit it is
#: shown in, so its name carries no unit.
DEVIATION_OUTPUT = "delta_I"
#: Its former names (one per display scale, all the same pure number in records that state
#: the display unit): records that use them still match ``delta_I`` in compare and the logbook.
FORMER_DEVIATION_OUTPUTS = ("dev_ppm", "dev_1e8", "dev_1e9")
#: Display units a deviation was stored with; a former name is taken as ``delta_I`` only when
#: its record states one of them (then the numbers are the pure number shown in that unit; a
#: bare "1" might hold a value scaled by 10⁶ by hand and is never matched).
DEVIATION_DISPLAY_UNITS = ("µA/A", "ppm", "×10⁻⁸", "nA/A", "10⁻⁶", "10⁻⁸", "10⁻⁹")


def deviation_aliases(name: str) -> tuple[str, ...]:
    """The other names the same chain deviation has had (empty for any other name)."""
    group = (DEVIATION_OUTPUT, *FORMER_DEVIATION_OUTPUTS)
    return tuple(n for n in group if n != name) if name in group else ()


def match_name(name: str, available: dict[str, str]) -> str | None:
    """The output of ``available`` (name -> unit as read) that is the measurand ``name``:
    the same name, else a former or current name of the chain deviation stated in a
    deviation display unit (see :data:`DEVIATION_DISPLAY_UNITS`); None when there is none."""
    if name in available:
        return name
    for other in deviation_aliases(name):
        if other in available and available[other] in DEVIATION_DISPLAY_UNITS:
            return other
    return None


def measurand_of(rec: Any, name: str) -> Any:
    """The measurand ``name`` of a Budget ``rec``, by its own name or another name of the
    chain deviation (:func:`match_name`); KeyError when it has neither."""
    found = match_name(name, {m.name: m.unit for m in rec.measurands})
    if found is None:
        raise KeyError(name)
    return rec.measurand(found)


def default_measurand(names: list[str]) -> str | None:
    """The output a comparison or a logbook list follows by default: the chain deviation
    (``delta_I``, or a name starting with "dev"), else the first."""
    if DEVIATION_OUTPUT in names:
        return DEVIATION_OUTPUT
    devs = [n for n in names if n.startswith("dev")]
    return devs[0] if devs else (names[0] if names else None)


def former_name_hint(name: str, outputs: Any) -> str:
    """" (the chain's deviation is now called delta_I)" when ``name`` is a former name."""
    if name in FORMER_DEVIATION_OUTPUTS and DEVIATION_OUTPUT in outputs:
        return f" (the chain's deviation {name} is now called {DEVIATION_OUTPUT})"
    return ""

OUTPUT_KEYS = ("symbol", "name", "definition")

#: a letter (or word) with primes, then an optional subscript of letters, digits, ',' or '.'
SYMBOL_RE = re.compile(r"([^\W\d_][^\W_]*'*)(?:_\{?([^\W_][\w,.]*?)\}?)?")

#: Meanings of the constants every chain uses (SI Brochure, 9th ed., 2019, §2.2: e exact).
CONSTANT_MEANINGS = {
    "n": ("number of electrons transferred per cycle (plateau index)", "1"),
    "e": ("elementary charge, exact since the 2019 SI", "C"),
}

# chain -> {default output name -> (symbol, name, definition)}; {input -> (symbol, meaning)}
_CHAIN_OUTPUTS: dict[str, dict[str, tuple[str, str, str]]] = {
    "resistor-voltmeter": {
        "I": ("I_P", "pump current", "DC current delivered by the single-electron pump, "
              "measured as the on/off voltage difference across a reference resistor"),
    },
    "amplifier-voltmeter": {
        "I": ("I_P", "pump current", "DC current delivered by the single-electron pump, "
              "measured through a current amplifier of known transresistance"),
    },
    "ammeter-under-test": {
        "eps": ("ε_A", "gain error of the ammeter", "relative error of the ammeter's reading "
                "of the pump current against n·e·f corrected for the pump's own error"),
    },
}
_DEVIATION = ("δ_P", "relative deviation of the pump current from n·e·f",
              "I/(n·e·f) − 1 with I the pump current: how far the measured current lies from "
              "the quantized value")
_AMMETER_DEVIATION = ("δ_A", "relative deviation of the ammeter's reading from n·e·f",
                      "I_read/(n·e·f) − 1, the pump's own error not corrected")

#: chain input -> (symbol, meaning)
CHAIN_INPUTS: dict[str, tuple[str, str]] = {
    "g": ("g", "gain correction factor of the voltmeter"),
    "dV": ("ΔV", "on/off voltage difference read by the voltmeter"),
    "R": ("R", "resistance of the reference resistor"),
    "A_TR": ("A_TR", "transresistance of the current amplifier"),
    "f": ("f", "drive frequency of the pump"),
    "I_read": ("I_read", "the ammeter's reading of the pump current"),
    "delta_pump": ("δ_pump", "relative error of the pump current against n·e·f"),
}


def chain_defaults(chain: str, renamed_outputs: dict[str, str]) -> dict[str, dict[str, str]]:
    """Symbol, name and definition of a chain's outputs, keyed by their final names.

    ``renamed_outputs`` maps the chain's default output names (``I``, ``delta_I`` …) to the
    names used in the spec (after ``outputs_map``).
    """
    table = _CHAIN_OUTPUTS.get(chain, {})
    out: dict[str, dict[str, str]] = {}
    for old, new in renamed_outputs.items():
        if old in table:
            sym, name, definition = table[old]
        elif old == DEVIATION_OUTPUT:
            sym, name, definition = (_AMMETER_DEVIATION if chain == "ammeter-under-test"
                                     else _DEVIATION)
        else:
            continue
        out[new] = {"symbol": sym, "name": name, "definition": definition}
    return out


def output_descriptions(table: Any, outputs: dict[str, str], defaults: dict[str, dict[str, str]],
                        *, file: str, lines: dict[tuple[str, ...], dict[str, int]]
                        ) -> dict[str, dict[str, str]]:
    """Each output's ``symbol``, ``name`` and ``definition`` from ``[outputs.NAME]``.

    Parameters
    ----------
    table : dict
        The spec's ``[outputs]`` table (``{}`` when absent).
    outputs : dict
        The model's outputs (name -> expression).
    defaults : dict
        A chain's descriptions (:func:`chain_defaults`); the spec's keys override them.
    file, lines : for messages (the spec file and its key -> line map).

    Returns
    -------
    dict
        Output name -> {"symbol", "name", "definition"} for every output, in model order.

    Raises
    ------
    SpecError
        An output not in ``[model]``, an unknown key, a value that is not a string, or a symbol
        that is not a letter or word with an optional subscript.
    """
    def err(path: tuple[str, ...], key: str, msg: str) -> SpecError:
        sect = lines.get(path, {})
        return SpecError(msg, file=file, line=sect.get(key, sect.get("")),
                         field=".".join(path + ((key,) if key else ())))

    if not isinstance(table, dict):
        raise err(("outputs",), "", "must be tables [outputs.NAME] with symbol, name, definition")
    for name, keys in table.items():
        if name not in outputs:
            raise err(("outputs", name), "", f"'{name}' is not an output of [model]"
                                             f"{did_you_mean(name, outputs)}"
                                             f"{former_name_hint(name, outputs)}")
        if not isinstance(keys, dict):
            raise err(("outputs", name), "", f"must be a table [outputs.{name}]")
        for k, v in keys.items():
            if k not in OUTPUT_KEYS:
                raise err(("outputs", name), k, f"unknown key{did_you_mean(k, OUTPUT_KEYS)} "
                                                f"(known: {', '.join(OUTPUT_KEYS)})")
            if not isinstance(v, str):
                raise err(("outputs", name), k, f"must be a string; got {v!r}")
        sym = keys.get("symbol")
        if sym is not None and not SYMBOL_RE.fullmatch(sym.strip()):
            raise err(("outputs", name), "symbol", "must be a letter or word with an optional "
                      f"subscript after '_', e.g. \"I_P\" or \"δ_I\"; got {sym!r}")
    out = {}
    for name in outputs:
        d = {"symbol": name, "name": "", "definition": ""}
        d.update(defaults.get(name, {}))
        d.update({k: v.strip() for k, v in (table.get(name) or {}).items()})
        out[name] = d
    return out
