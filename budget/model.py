"""The measurement model: outputs as expression trees over the input quantities.

Built from the spec's ``[model]`` entries. Each output is parsed, earlier outputs and input
modules' own expressions are inlined (so every tree is written over input quantities and
constants only), and cycles are refused. Trees are compiled once for vectorised evaluation.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import expression as ex
from .errors import ModelError, did_you_mean

__all__ = ["Model", "build_model", "BUILTIN_CONSTANTS"]

#: Names every model may use without defining them. SI 2019 defining constants (exact).
BUILTIN_CONSTANTS: dict[str, float] = {
    "pi": math.pi,
    "e": 1.602176634e-19,          # elementary charge, C (SI Brochure 9th ed.)
    "h": 6.62607015e-34,           # Planck constant, J s
    "k_B": 1.380649e-23,           # Boltzmann constant, J/K
    "R_K": 6.62607015e-34 / 1.602176634e-19 ** 2,   # von Klitzing constant h/e², Ω
    "K_J": 2 * 1.602176634e-19 / 6.62607015e-34,    # Josephson constant 2e/h, Hz/V
}


@dataclass(frozen=True)
class Model:
    """Outputs of the measurement model.

    Attributes
    ----------
    outputs : tuple of str
        Output names in evaluation order (as written where possible).
    texts : dict
        Output name -> expression as written in the spec.
    trees : dict
        Output name -> fully inlined tree over input quantities and constants.
    constants : dict
        Constant name -> value (spec constants plus the built-ins used).
    """

    outputs: tuple[str, ...]
    texts: dict[str, str]
    trees: dict[str, ex.Node]
    constants: dict[str, float]
    _compiled: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    def compiled(self, name: str):
        if name not in self._compiled:
            self._compiled[name] = ex.compile_node(self.trees[name])
        return self._compiled[name]

    def evaluate(self, env: Mapping[str, Any]) -> dict[str, np.ndarray]:
        """Evaluate every output; ``env`` maps input names to scalars or sample arrays."""
        full = {**self.constants, **env}
        with np.errstate(all="ignore"):
            return {name: self.compiled(name)(full) for name in self.outputs}

    def uses(self, name: str) -> set[str]:
        """Names (inputs and constants) the output depends on."""
        return ex.names(self.trees[name])


def build_model(outputs: Mapping[str, str], *, quantities: set[str],
                constants: Mapping[str, float], inlined: Mapping[str, ex.Node] | None = None,
                file: str | None = None, lines: Mapping[str, int] | None = None) -> Model:
    """Parse, inline and check the model.

    Parameters
    ----------
    outputs : mapping
        Output name -> expression text.
    quantities : set of str
        Names of the input quantities (including input modules' sub-quantities).
    constants : mapping
        Spec constants (a built-in constant of the same name is overridden).
    inlined : mapping, optional
        Spec input name -> tree that replaces it (an input module's combining expression).
    file, lines : optional
        Where the spec is, for error messages (``lines`` maps output name -> line).
    """
    inlined = dict(inlined or {})
    lines = dict(lines or {})
    parsed: dict[str, ex.Node] = {}
    for name, text in outputs.items():
        parsed[name] = ex.parse(text, field=f"model.{name}", file=file, line=lines.get(name))
    # an input quantity shadows a built-in constant of the same name (e.g. an uncertain 'h')
    consts = {k: v for k, v in {**BUILTIN_CONSTANTS, **constants}.items() if k not in quantities}
    known = set(quantities) | set(inlined) | set(consts) | set(parsed)

    for name, tree in parsed.items():
        for ref in sorted(ex.names(tree)):
            if ref not in known:
                raise ModelError(f"unknown name '{ref}'{did_you_mean(ref, known)}",
                                 file=file, line=lines.get(name), field=f"model.{name}")

    resolved: dict[str, ex.Node] = {}
    order: list[str] = []

    def resolve(name: str, stack: tuple[str, ...]) -> ex.Node:
        if name in resolved:
            return resolved[name]
        if name in stack:
            cycle = " -> ".join(stack[stack.index(name):] + (name,))
            raise ModelError(f"the model outputs refer to each other in a cycle: {cycle}",
                             file=file, line=lines.get(name), field=f"model.{name}")
        tree = parsed[name]
        deps = {r: resolve(r, stack + (name,)) for r in ex.names(tree) if r in parsed}
        tree = ex.substitute(tree, {**deps, **inlined})
        resolved[name] = tree
        order.append(name)
        return tree

    for name in parsed:
        resolve(name, ())
    used_consts = set()
    for tree in resolved.values():
        used_consts |= ex.names(tree) & set(consts)
    ordered = tuple(n for n in outputs if n in resolved)
    return Model(outputs=ordered, texts=dict(outputs), trees=resolved,
                 constants={k: consts[k] for k in sorted(used_consts)})
