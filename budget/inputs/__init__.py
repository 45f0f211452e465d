"""Input modules: turn a data file named in the spec into quantities with provenance.

Every module has the same shape (see DEVELOPERS.md, "Adding an input module"):

* ``KEYS`` — a frozenset of the option keys it accepts in ``[inputs.NAME]`` (besides ``module``);
  unknown keys are refused by the registry with a did-you-mean;
* ``evaluate(ctx: InputContext) -> ModuleResult`` — never prints, never writes files.

Modules are imported lazily, so a spec that uses none of them does not pay for their imports.
"""

from __future__ import annotations

import importlib
from types import ModuleType

from ..errors import SpecError, did_you_mean
from ..quantity import ModuleResult
from .context import InputContext

__all__ = ["MODULES", "InputContext", "run_module", "get_module"]

#: module name in the spec -> import path
MODULES: dict[str, str] = {
    "cycles": "budget.inputs.cycles",
    "resistor": "budget.inputs.resistor",
    "amplifier": "budget.inputs.amplifier",
    "voltmeter": "budget.inputs.voltmeter",
    "frequency": "budget.inputs.frequency",
    "pump": "budget.inputs.pump",
}


def get_module(name: str, *, file: str | None = None, line: int | None = None,
               field: str = "module") -> ModuleType:
    """Import the input module called ``name`` or raise a SpecError with a did-you-mean."""
    if not isinstance(name, str) or name not in MODULES:
        raise SpecError(f"unknown input module {name!r}{did_you_mean(str(name), MODULES)}"
                        f" (known: {', '.join(sorted(MODULES))})", file=file, line=line,
                        field=field)
    try:
        return importlib.import_module(MODULES[name])
    except ModuleNotFoundError as exc:  # a registered module that is not written yet
        raise SpecError(f"input module {name!r} is not available in this version ({exc.name})",
                        file=file, line=line, field=field) from None


def run_module(ctx: InputContext) -> ModuleResult:
    """Check the table's keys against the module's ``KEYS`` and evaluate it."""
    mod = get_module(ctx.table.get("module"), file=ctx.spec_file, line=ctx.key_line("module"),
                     field=f"inputs.{ctx.name}.module")
    allowed = set(mod.KEYS) | {"module", "description"}
    for key in ctx.table:
        if key not in allowed:
            raise SpecError(f"unknown key for module '{ctx.table['module']}'"
                            f"{did_you_mean(key, allowed)}", file=ctx.spec_file,
                            line=ctx.key_line(key), field=f"inputs.{ctx.name}.{key}")
    result = mod.evaluate(ctx)
    if not isinstance(result, ModuleResult):  # pragma: no cover - programming error
        raise TypeError(f"input module {ctx.table['module']} returned {type(result).__name__}")
    return result
