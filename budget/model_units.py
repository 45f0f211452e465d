"""Units of a built model: the dimension check of every output and its display unit.

Runs once after :func:`budget.model.build_model` and before any number is propagated:

1. each input quantity's dimension comes from its unit (``None`` for a typed-in input that
   states no ``unit``: it is not checked); constants carry theirs (built-ins: e in C, h in J s,
   k_B in J/K, R_K in Ω, K_J in Hz/V; a spec constant only when a table gives its unit, and
   ``n`` (electrons per cycle) is a count);
2. every output expression is checked (:func:`budget.dimensions.infer`); a mismatch is a
   ModelError naming the output, the sub-expression and both dimensions;
3. the display unit (``[units] OUTPUT``, a chain's own unit, else the coherent SI unit) must
   have the output's dimension; the output's tree is multiplied by the one factor from its
   working unit to the display unit, so LPU, Monte Carlo and the record are in the display
   unit (the record's ``unit`` says which) at the cost of one multiplication.
"""

from __future__ import annotations

import math
from dataclasses import replace

from . import expression as ex
from .dimensions import BUILTIN_UNITS, Dims, infer
from .errors import ModelError, SpecError
from .model import Model
from .quantity import Quantity
from .units import Unit, UnitError, dim_text, display_factor, parse_unit, si_symbol

__all__ = ["apply_units"]


def _dims(unit: str) -> Dims:
    try:
        return parse_unit(unit).dims
    except UnitError:
        return None


def apply_units(spec, model: Model, qs: list[Quantity], unstated: set[str],
                inlined: dict[str, ex.Node], module_units: dict[str, str] | None = None
                ) -> tuple[Model, dict[str, str]]:
    """Check the model's dimensions; return the model scaled to display units and the labels.

    Parameters
    ----------
    spec : Spec
    model : Model
        As built (coherent SI, or a chain's working units).
    qs : list of Quantity
        The input quantities (their ``unit`` is coherent SI after reading).
    unstated : set of str
        Names of typed-in inputs without a ``unit`` (dimension unknown, not checked).
    inlined : dict
        Input module name -> its combining expression.
    module_units : dict, optional
        Input module name -> the unit its expression's value is in, when the module states it
        (its numbers carry a unit, e.g. a nominal frequency).

    Returns
    -------
    (Model, dict)
        The model whose output trees give display-unit numbers, and output -> unit label.
    """
    env: dict[str, Dims] = {}
    for name, unit in BUILTIN_UNITS.items():
        env[name] = _dims(unit)
    const_units = getattr(spec, "constant_units", {}) or {}
    for name in spec.constants:   # a plain number states no unit: not checked
        env[name] = _dims(const_units[name]) if name in const_units else None
    if "n" in spec.constants:
        env["n"] = _dims("1")     # electrons per cycle, a count (and no unit: spec._constants)
    for q in qs:
        env[q.name] = None if q.name in unstated else _dims(q.unit)
    for name, tree in inlined.items():
        if module_units and name in module_units:
            env[name] = _dims(module_units[name])
            continue
        env[name] = infer(tree, env, where=f"inputs.{name}", file=spec.path,
                          line=spec.line_of(("inputs", name)))
    lines = spec.lines.get(("model",), {})
    parsed = {o: ex.parse(t, field=f"model.{o}", file=spec.path, line=lines.get(o))
              for o, t in spec.outputs.items()}
    done: dict[str, Dims] = {}

    def dims_of(o: str, stack: tuple[str, ...] = ()) -> Dims:
        if o not in done:
            for ref in ex.names(parsed[o]) & set(parsed):
                if ref not in stack:
                    env[ref] = dims_of(ref, stack + (o,))
            try:
                done[o] = infer(parsed[o], env, where=f"model.{o}", file=spec.path,
                                line=lines.get(o))
            except ModelError:
                _blame_chain_input(spec, env)   # a chain input's unit, when that is the cause
                raise
        return done[o]

    working_units = getattr(spec, "working_units", {}) or {}
    trees = dict(model.trees)
    labels: dict[str, str] = {}
    for o in model.outputs:
        d = dims_of(o)
        env[o] = d
        work_text = working_units.get(o)
        work = parse_unit(work_text) if work_text is not None else None
        if work is not None and d is not None and work.dims != d:
            _blame_chain_input(spec, env)
            raise ModelError(f"the chain's output {o} is {dim_text(work.dims)} but its inputs "
                             f"make it {dim_text(d)}: check the inputs' units", file=spec.path,
                             line=lines.get("chain"), field=f"model.{o}")
        text = spec.units.get(o)
        uline = spec.line_of(("units",), o)
        if text is None:
            labels[o] = si_symbol(d) if d is not None and any(d) else ""
            continue
        try:
            shown = parse_unit(text)
        except UnitError as exc:
            raise SpecError(str(exc), file=spec.path, line=uline, field=f"units.{o}") from None
        if shown.is_offset:
            raise SpecError(f"{text!r} is an offset scale; an output is shown in a unit of "
                            f"differences ({shown.si})", file=spec.path, line=uline,
                            field=f"units.{o}")
        if work is None and shown.dimensionless and shown.scale != 1.0:
            _refuse_double_scale(spec, o, parsed[o], text, shown.scale, uline)
        have = work.dims if work is not None else d
        if have is None:
            if shown.scale != 1.0:
                raise SpecError(f"cannot convert {o} to {text!r}: its dimension is unknown "
                                "because inputs it uses state no unit; give their unit",
                                file=spec.path, line=uline, field=f"units.{o}")
            labels[o] = text
            continue
        if shown.dims != have:
            raise SpecError(f"{text!r} is {dim_text(shown.dims)} but {o} is {dim_text(have)}",
                            file=spec.path, line=uline, field=f"units.{o}")
        factor = display_factor(work if work is not None else Unit("", 1.0, 0.0, "", have),
                                shown)
        if factor != 1.0:
            trees[o] = ex.Bin("*", trees[o], ex.Num(factor))
        labels[o] = text
    if trees != model.trees:
        model = replace(model, trees=trees, _compiled={})
    return model, labels


def _blame_chain_input(spec, env: dict[str, Dims]) -> None:
    """Name the chain input whose unit has the wrong dimension, when one has (the chain's
    output check alone would point at the output, away from the input's ``unit`` key)."""
    for name, info in (getattr(spec, "input_info", {}) or {}).items():
        expected = info[2] if len(info) > 2 else ""
        have = env.get(name)
        if not expected or have is None:
            continue
        want = _dims(expected)
        if want is not None and have != want:
            raise SpecError(f"input {name} of the chain must be {dim_text(want)}; its unit "
                            f"makes it {dim_text(have)}",
                            file=spec.path, line=spec.line_of(("inputs", name), "unit"),
                            field=f"inputs.{name}.unit")


def _refuse_double_scale(spec, o: str, tree: ex.Node, text: str, scale: float,
                         line: int | None) -> None:
    """Refuse a dimensionless output written as ``1e6 * (...)`` and shown in a scaled unit
    (``µA/A``, ``10⁻⁶``): the display unit scales it again (a result 10⁶ too large)."""
    factor = None
    if isinstance(tree, ex.Bin) and tree.op == "*":
        for side in (tree.a, tree.b):
            if isinstance(side, ex.Num) and side.value > 0 and side.value != 1.0:
                p = math.log10(side.value)
                if abs(p - round(p)) < 1e-12:
                    factor = side.value
    if factor is not None:
        raise SpecError(f"model.{o} multiplies by {factor:g} and the display unit {text!r} "
                        f"multiplies by {1 / scale:g} again, so the number shown would carry "
                        f"both factors: write {o} as the plain ratio (e.g. I / (n * e * f) - "
                        f"1) and let {text!r} scale it", file=spec.path, line=line,
                        field=f"units.{o}")
