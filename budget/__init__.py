"""qcs-budget: uncertainty budgets for quantized current sources (single-electron pumps).

Public API::

    from budget import load_spec, evaluate
    result = evaluate(load_spec("spec.toml"))
    print(result.measurands[0].expanded_uncertainty)

The names are imported on first use (PEP 562 module ``__getattr__``): ``import budget`` and the
commands that need no numerics (``budget --help``, ``identity``, ``sign``, ``verify``) do not
pay for numpy and scipy.
"""

from .version import __version__

__all__ = ["__version__", "load_spec", "parse_spec", "evaluate", "Budget", "BudgetError"]

#: public name -> module that defines it
_LAZY = {"evaluate": "engine", "BudgetError": "errors", "Budget": "result",
         "load_spec": "spec", "parse_spec": "spec"}


def __getattr__(name: str):
    if name in _LAZY:
        import importlib
        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value      # later lookups skip this function
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(__all__))
