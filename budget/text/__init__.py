"""Plain-text renderers of library results, as the ``budget`` command shows them.

Each renderer is a free function of a result object that returns a string (lines joined by
``"\\n"``, no trailing newline); none of them prints, reads arguments or writes files — that
is :mod:`budget.cli`'s job. Numbers are rounded by :mod:`budget.fmt` only.

Modules
-------
tables          the generic column table and the label-column layout of fixed-section answers
budget_table    ``budget run``: the budget table and result lines of a Budget
explain_text    ``budget explain``: the overview and the fixed-section answer for one term
whatif_text     ``budget explain``: what-if scenarios and two budgets side by side
compare_text    ``budget compare``: runs, weighted mean, Birge ratio, E_n
logbook_text    ``budget logbook list``, ``show``, ``trend``
evidence_text   ``budget validate``, ``budget identity create``, ``budget verify``
warnings_text   the structured warnings every budget-showing command prints on stderr
"""

from __future__ import annotations

from .budget_table import budget_text
from .compare_text import compare_text
from .evidence_text import (
    identity_text,
    recompute_text,
    signatures_text,
    validate_text,
    verdict_text,
)
from .explain_text import explain_overview_text, explain_term_text
from .logbook_text import logbook_list_text, logbook_show_text, logbook_trend_text, main_measurand
from .tables import section, table
from .warnings_text import warnings_text
from .whatif_text import diff_text, scenarios_text

__all__ = ["budget_text", "compare_text", "explain_overview_text", "explain_term_text",
           "identity_text", "logbook_list_text", "logbook_show_text", "logbook_trend_text",
           "main_measurand", "recompute_text", "section", "signatures_text", "table",
           "validate_text", "verdict_text", "warnings_text", "diff_text", "scenarios_text"]
