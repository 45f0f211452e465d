"""The figure of a comparison of runs: each run with its expanded uncertainty (k = 2) as an
error bar, over the reference band (or the weighted mean's band), as SVG text.

It draws the figure *data* of :attr:`budget.compare.Comparison.figure` (the usual figure format,
x = run number 1..N) but with one tick per run labelled by the run's name, which the generic
module-figure renderer cannot do. Like :mod:`budget.report.figures` it builds its own
``Figure`` (no pyplot, no global state) and writes no time stamp, so the same comparison gives
the same SVG.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from typing import Any

from .figures import check_figure

__all__ = ["compare_figure"]

_RC = {"svg.fonttype": "none", "svg.hashsalt": "qcs-budget-compare",
       "font.family": ["DejaVu Sans"], "font.size": 8.0, "legend.fontsize": 7.0,
       "axes.unicode_minus": True, "text.parse_math": False, "axes.grid": True,
       "grid.alpha": 0.3, "axes.spines.top": False, "axes.spines.right": False}


def compare_figure(fig: dict[str, Any], run_labels: Sequence[str]) -> str:
    """SVG text of the comparison figure (``fig`` as built by :func:`budget.compare.compare_runs`)."""
    import matplotlib
    from matplotlib.figure import Figure

    f = check_figure(fig, "comparison figure")
    with matplotlib.rc_context(_RC):
        mfig = Figure(figsize=(6.3, 2.5), layout="constrained")
        ax = mfig.add_subplot()
        for s in f["series"]:
            label = s["label"] or None
            if s["style"] == "band":
                ax.fill_between(s["x"], s["y_low"], s["y_high"], color="#9fbad6", alpha=0.5,
                                lw=0, label=label)
            elif s["style"] == "line":
                ax.plot(s["x"], s["y"], color="#1f4e79", lw=1.0, label=label)
            else:
                ax.errorbar(s["x"], s["y"], yerr=s.get("yerr"), fmt="o", ms=4, lw=1.0,
                            capsize=3, color="#c0392b", label=label)
        n = len(run_labels)
        ax.set_xticks(range(1, n + 1), list(run_labels))
        ax.set_xlim(0.5, n + 0.5)
        ax.grid(axis="x", visible=False)
        ax.set_xlabel(f["xlabel"])
        ax.set_ylabel(f["ylabel"])
        ax.ticklabel_format(axis="y", useOffset=False)
        ax.legend(frameon=False, loc="best")
        buf = io.StringIO()
        mfig.savefig(buf, format="svg", metadata={"Date": None})
        return buf.getvalue()
