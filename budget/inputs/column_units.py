"""Units written in a CSV header: ``value [GΩ]``, ``reading_V [µV]``.

A header cell may carry a unit in square brackets after the column name. The column name is
the part before the bracket (so ``value [GΩ]`` is the column ``value``), and the unit is parsed
once by :func:`budget.units.parse_unit`. A module states, for each column that may carry a unit,
the dimension the column needs (:class:`ColumnUnit`); a unit is then converted to the coherent
SI unit of that dimension before any number is used. Refused, each with one line naming the
file and the column (exit 2):

* a unit pint cannot read (with a did-you-mean);
* a unit of another dimension than the column needs (``value [mV]`` in a resistor history);
* an offset scale (``°C``) on a column that holds differences (uncertainties);
* a unit on a column that takes none: a count (``n_mean``), a coverage factor, a date, text,
  or a column whose name states its unit (``temperature_C``).
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np

from ..errors import DataError
from ..units import Unit, UnitError, dim_text, parse_unit

__all__ = ["ColumnUnit", "split_header", "resolve_units", "column_unit", "to_si"]

_BRACKET = re.compile(r"^(?P<name>[^\[\]]*?)\s*\[(?P<unit>[^\[\]]*)\]$")


@dataclass(frozen=True)
class ColumnUnit:
    """What unit a column may carry.

    Attributes
    ----------
    si : str
        Coherent SI unit the column's numbers are used in (``"Ω"``, ``"V"``, ``"1"``); a header
        unit must have its dimension.
    what : str
        What the column holds, for messages ("a resistance").
    difference : bool
        The numbers are differences (an uncertainty): an offset scale (°C) is refused. Default
        False.
    """

    si: str
    what: str
    difference: bool = False

    def to_dict(self) -> dict:
        return {"si": self.si, "what": self.what, "difference": self.difference}


def split_header(columns: Iterable[str]) -> tuple[list[str], dict[str, str]]:
    """Column names without their bracketed units, and name -> unit text for those with one.

    ``"value [GΩ]"`` gives the name ``"value"`` and the unit ``"GΩ"``; a cell without brackets
    is its own name.
    """
    names, units = [], {}
    for c in columns:
        c = str(c).strip()
        m = _BRACKET.match(c)
        if m:
            names.append(m.group("name").strip())
            units[m.group("name").strip()] = m.group("unit").strip()
        else:
            names.append(c)
    return names, units


def resolve_units(units: Mapping[str, str], rules: Mapping[str, ColumnUnit] | None, *,
                  shown: str) -> dict[str, Unit]:
    """Parse and check each header unit against the column's rule.

    Parameters
    ----------
    units : mapping
        Column name -> unit text from the header (:func:`split_header`).
    rules : mapping, optional
        Column name -> :class:`ColumnUnit` for the columns that may carry a unit.
    shown : str
        File name for messages.

    Returns
    -------
    dict
        Column name -> parsed :class:`~budget.units.Unit`.

    Raises
    ------
    DataError
        One per bad header cell, naming the file and the column (see the module docstring).
    """
    rules = rules or {}
    out: dict[str, Unit] = {}
    for col, text in units.items():
        rule = rules.get(col)
        if rule is None:
            raise DataError(f"takes no unit in the header; got [{text}] (a count, a factor, a "
                            "date, text, or a name that states its unit)", file=shown,
                            field=col)
        try:
            unit = parse_unit(text)
        except UnitError as exc:
            raise DataError(f"cannot read the unit in the header: {exc}", file=shown,
                            field=col) from None
        need = parse_unit(rule.si)
        if unit.dims != need.dims:
            raise DataError(f"unit [{text}] is {dim_text(unit.dims)} but the column holds "
                            f"{rule.what}, {dim_text(need.dims)}", file=shown, field=col)
        if unit.is_offset and rule.difference:
            raise DataError(f"unit [{text}] is an offset scale; the column holds differences "
                            f"(uncertainties): give them in {need.si}", file=shown, field=col)
        out[col] = unit
    return out


def column_unit(df, column: str) -> Unit | None:
    """The unit a table's header gave ``column`` (None without one)."""
    return (df.attrs.get("units") or {}).get(column)


def to_si(values: np.ndarray, unit: Unit | None, *, difference: bool = False) -> np.ndarray:
    """Numbers in ``unit`` in coherent SI (``x·scale + offset``; differences ``x·scale``)."""
    if unit is None or (unit.scale == 1.0 and unit.offset == 0.0):
        return values
    return values * unit.scale + (0.0 if difference else unit.offset)
