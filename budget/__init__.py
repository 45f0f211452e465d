"""qcs-budget: uncertainty budgets for quantized current sources (single-electron pumps).

Public API::

    from budget import load_spec, evaluate
    result = evaluate(load_spec("spec.toml"))
    print(result.measurands[0].expanded_uncertainty)
"""

__version__ = "0.1.0"

from .engine import evaluate  # noqa: E402
from .errors import BudgetError  # noqa: E402
from .result import Budget  # noqa: E402
from .spec import load_spec, parse_spec  # noqa: E402

__all__ = ["__version__", "load_spec", "parse_spec", "evaluate", "Budget", "BudgetError"]
