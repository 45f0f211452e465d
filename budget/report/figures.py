"""Every figure the project draws: matplotlib drawings turned into SVG text and ``data:`` URIs.

The one place that draws (modules, the pump fit and the comparison only supply figure *data*):

* :func:`share_figure` — horizontal bars of each term's share of u_c² for one measurand;
* :func:`mc_figure` — the Monte Carlo histogram (as a probability density) with the linear
  result's distribution drawn over it (Gaussian, or the scaled and shifted t with ν_eff degrees
  of freedom when ν_eff is finite: (Y − y)/u_c ~ t_ν, JCGM 100 G.3.1) and both coverage
  intervals marked (y ± U from the law of propagation, and the Monte Carlo interval);
* :func:`module_figure` — the generic renderer of the figure *data* that input modules put in
  ``diagnostics["figures"]`` (points with error bars, lines, bands; linear or log axes). The
  Allan curve, the drift line with its band and the plateau fit all come through it;
* :func:`compare_figure` — a comparison of runs, one labelled tick per run;
* :func:`trend_figure` — the logbook's trend: runs against date per chain, the means before
  and after each recalibration, the flags.

No global matplotlib state is touched: every drawing builds its own ``Figure`` (not pyplot) and
saves it with the SVG canvas, so importing :mod:`budget` or rendering a report never changes
the user's backend (stricter than switching to Agg). Settings live in a ``rc_context``.

Text in the SVG stays text (``svg.fonttype = 'none'``, font DejaVu Sans): WeasyPrint draws it
with the report's own font (checked on rendered pages: Ω, µ, ±, ⁻⁸ come out right), the files
are a third of the size of outlined text and draw about twice as fast. Maths parsing of labels,
titles and legends is off, so a ``$`` in a label from a data file is just a character (tick
labels keep it: log axes write their powers of ten with it); the SVG writer escapes
``<`` and ``&``, and an SVG shown through ``<img>`` runs no script in any case.
"""

from __future__ import annotations

import base64
import io
import math
import re
from collections.abc import Sequence
from typing import Any

from ..errors import DataError
from ..fmt import fmt_dof, fmt_value
from .text import pretty_label, sci, superscript

__all__ = ["share_figure", "compare_figure", "trend_figure", "mc_figure", "module_figure", "check_figure", "svg_data_uri",
           "linear_pdf", "MAX_POINTS"]

#: Longest series drawn; longer ones are thinned evenly (the modules' own limit is ~400).
MAX_POINTS = 2000
WIDTH_IN = 6.3                 # about the text width of an A4 page with 2 cm margins
_STYLES = ("points", "line", "band")
_SCALES = ("linear", "log")

_RC = {
    "svg.fonttype": "none",
    "svg.hashsalt": "qcs-budget",      # stable ids: the same budget gives the same SVG
    "font.family": ["DejaVu Sans"],
    "font.size": 8.0,
    "axes.titlesize": 8.5,
    "axes.labelsize": 8.0,
    "legend.fontsize": 7.0,
    "xtick.labelsize": 7.0,
    "ytick.labelsize": 7.0,
    "axes.unicode_minus": True,
    "axes.grid": True,
    "grid.alpha": 0.3,
    "axes.spines.top": False,
    "axes.spines.right": False,
}


def svg_data_uri(svg: str) -> str:
    """``data:image/svg+xml;base64,...`` for an SVG text."""
    return "data:image/svg+xml;base64," + base64.b64encode(svg.encode("utf-8")).decode("ascii")


def _new_figure(height_in: float):
    from matplotlib.figure import Figure  # deferred: matplotlib costs ~0.3 s to import
    return Figure(figsize=(WIDTH_IN, height_in), layout="constrained")


def _plain_text(fig) -> None:
    """No maths parsing of the texts we set (labels, titles, legends, bar labels), so a ``$``
    from a data file is a character; tick labels keep it (log axes write 10⁻⁷ with it)."""
    texts = [t for leg in fig.legends for t in leg.get_texts()]
    for ax in fig.axes:
        texts += [ax.xaxis.label, ax.yaxis.label, ax.title, ax._left_title, ax._right_title]
        texts += list(ax.texts)
        if ax.get_legend() is not None:
            texts += ax.get_legend().get_texts()
    for t in texts:
        t.set_parse_math(False)


def _to_svg(fig) -> str:
    _plain_text(fig)
    buf = io.StringIO()
    # metadata Date None: no time stamp, so the same budget gives byte-identical SVG
    fig.savefig(buf, format="svg", metadata={"Date": None})
    return buf.getvalue()


def _rc():
    import matplotlib
    return matplotlib.rc_context(_RC)


# --------------------------------------------------------------------------- shares
def share_figure(names: Sequence[str], shares: Sequence[float], *, title: str = "") -> str:
    """Bars of the shares of u_c² (fractions 0..1), largest at the top; returns SVG text."""
    pairs = sorted(zip(names, shares), key=lambda p: p[1])      # barh draws bottom-up
    with _rc():
        fig = _new_figure(0.9 + 0.24 * max(len(pairs), 1))
        ax = fig.add_subplot()
        labels = [p[0] for p in pairs]
        vals = [100.0 * p[1] for p in pairs]
        bars = ax.barh(range(len(vals)), vals, color="#3b6ea5", height=0.65)
        ax.set_yticks(range(len(vals)), labels)
        ax.set_xlabel("share of u_c² (%)")
        ax.set_xlim(0, max(vals + [1.0]) * 1.15)
        ax.grid(axis="y", visible=False)
        ax.bar_label(bars, labels=[f"{v:.1f} %" for v in vals], padding=2, fontsize=6.5)
        if title:
            ax.set_title(title, loc="left")
        return _to_svg(fig)


# --------------------------------------------------------------------------- Monte Carlo
def mc_figure(*, name: str, unit: str, value: float, standard_uncertainty: float,
              expanded_uncertainty: float, effective_dof: float, coverage_probability: float,
              counts: Sequence[int], edges: Sequence[float], trials: int,
              interval: tuple[float, float], interval_kind: str) -> str:
    """Monte Carlo histogram with the linear result's PDF and both coverage intervals.

    The x axis is the deviation from the linear estimate y (in the measurand's unit), which
    keeps the tick labels short when y is large compared with u_c.
    """
    import numpy as np

    counts_a = np.asarray(counts, dtype=float)
    edges_a = np.asarray(edges, dtype=float)
    y, u, big_u = value, standard_uncertainty, expanded_uncertainty
    widths = np.diff(edges_a)
    # density of the whole sample: the histogram spans the 0.05 %..99.95 % quantiles, so the
    # bars hold ~99.9 % of the trials and the area matches the overlaid PDF
    density = counts_a / (max(trials, 1) * np.where(widths > 0, widths, 1.0))
    lo, hi = float(edges_a[0]), float(edges_a[-1])
    lo, hi = min(lo, y - 1.2 * big_u, interval[0]), max(hi, y + 1.2 * big_u, interval[1])
    grid = np.linspace(lo, hi, 400)
    if u > 0:
        pdf = linear_pdf(grid, y, u, effective_dof)
        lin_label = (f"linear result: y + u_c·t(ν_eff = {fmt_dof(effective_dof)})"
                     if math.isfinite(effective_dof) else "linear result: Gaussian N(y, u_c²)")
    else:
        pdf, lin_label = None, ""
    p = f"{100 * coverage_probability:g} %"
    # axis in units of 10^e when the deviations are very small or large (no offset text)
    e = _exp3(max(big_u, abs(interval[0] - y), abs(interval[1] - y)))
    sc = 10.0 ** -e
    with _rc():
        fig = _new_figure(3.0)
        ax = fig.add_subplot()
        ax.stairs(density / sc, (edges_a - y) * sc, fill=True, color="#9fbad6",
                  label=f"Monte Carlo, {trials:,} trials")
        if pdf is not None:
            ax.plot((grid - y) * sc, pdf / sc, color="#c0392b", lw=1.2, label=lin_label)
        for x in (-big_u, big_u):
            ax.axvline(x * sc, color="#c0392b", ls="--", lw=1.0,
                       label=f"y ± U ({p}, law of propagation)" if x < 0 else None)
        for i, x in enumerate(interval):
            ax.axvline((x - y) * sc, color="#1f4e79", ls=":", lw=1.5,
                       label=f"Monte Carlo {interval_kind} {p} interval" if i == 0 else None)
        unit_txt = f" {unit}" if unit not in ("", "1") else ""
        scale_txt = f"10{superscript(str(e))}" if e else ""
        paren = " ".join(t for t in (scale_txt, unit if unit_txt else "") if t)
        ax.set_xlabel(f"{name} − {sci(fmt_value(y, u))}{unit_txt}" + (f" ({paren})" if paren
                                                                        else ""))
        ax.set_ylabel("probability density")
        ax.set_yticks([])                    # the density's scale says nothing to a reader
        top = max(float(np.max(density / sc)) if density.size else 0.0,
                  float(np.max(pdf / sc)) if pdf is not None else 0.0)
        ax.set_ylim(0, 1.08 * top if top > 0 else 1.0)
        ax.grid(axis="y", visible=False)
        # below the axes: inside, it would hide the interval marks it explains
        fig.legend(loc="outside lower center", ncols=2, frameon=False)
        return _to_svg(fig)


def linear_pdf(x, y: float, u: float, nu: float):
    """Density of the linear result at ``x``: (Y − y)/u_c ~ t_ν (JCGM 100 G.3.1), Gaussian
    for ν = ∞. ``u`` > 0."""
    import numpy as np
    from scipy import stats
    z = (np.asarray(x, dtype=float) - y) / u
    return (stats.t.pdf(z, nu) if math.isfinite(nu) else stats.norm.pdf(z)) / u


def _exp3(x: float) -> int:
    """Engineering exponent (multiple of 3) for axis scaling; 0 for ordinary magnitudes."""
    if not (x > 0 and math.isfinite(x)):
        return 0
    e = math.floor(math.log10(x))
    return 0 if -2 <= e <= 3 else 3 * math.floor(e / 3)


# --------------------------------------------------------------------------- module figures
def _numbers(values: Any, where: str, *, allow_none: bool = True) -> list[float]:
    if not isinstance(values, list):
        raise DataError(f"must be a list of numbers; got {type(values).__name__}", field=where)
    out = []
    for i, v in enumerate(values):
        if v is None and allow_none:
            out.append(math.nan)          # the record writes NaN/inf as null: leave a gap
        elif isinstance(v, (int, float)) and not isinstance(v, bool):
            out.append(float(v))
        else:
            raise DataError(f"entry {i + 1} must be a number; got {v!r}", field=where)
    return out


def check_figure(fig: Any, where: str = "figure") -> dict[str, Any]:
    """Check a module figure dict (the format in ``budget/inputs``) and return a clean copy.

    Raises
    ------
    DataError
        Naming the field at fault, e.g. ``figures[0].series[1].y``.
    """
    if not isinstance(fig, dict):
        raise DataError("a figure must be a table (dict)", field=where)
    out: dict[str, Any] = {}
    for key in ("id", "title", "xlabel", "ylabel"):
        v = fig.get(key, "")
        if not isinstance(v, str):
            raise DataError(f"must be text; got {v!r}", field=f"{where}.{key}")
        out[key] = v
    for key in ("xscale", "yscale"):
        v = fig.get(key, "linear")
        if v not in _SCALES:
            raise DataError(f"must be 'linear' or 'log'; got {v!r}", field=f"{where}.{key}")
        out[key] = v
    series = fig.get("series")
    if not isinstance(series, list) or not series:
        raise DataError("must be a non-empty list of series", field=f"{where}.series")
    out["series"] = []
    for j, s in enumerate(series):
        w = f"{where}.series[{j}]"
        if not isinstance(s, dict):
            raise DataError("a series must be a table (dict)", field=w)
        style = s.get("style", "line")
        if style not in _STYLES:
            raise DataError(f"must be one of {', '.join(_STYLES)}; got {style!r}",
                            field=f"{w}.style")
        label = s.get("label", "")
        if not isinstance(label, str):
            raise DataError(f"must be text; got {label!r}", field=f"{w}.label")
        c = {"label": label, "style": style, "x": _numbers(s.get("x"), f"{w}.x")}
        keys = {"points": ("y", "yerr"), "line": ("y",), "band": ("y_low", "y_high")}[style]
        for k in keys:
            if k == "yerr" and s.get(k) is None:
                continue
            c[k] = _numbers(s.get(k), f"{w}.{k}")
            if len(c[k]) != len(c["x"]):
                raise DataError(f"has {len(c[k])} entries but x has {len(c['x'])}",
                                field=f"{w}.{k}")
        out["series"].append(c)
    return out


def _wrap(text: str, width: int) -> str:
    import textwrap
    return "\n".join(textwrap.wrap(pretty_label(text), width)) or ""


def _thin(n: int) -> slice:
    return slice(None, None, max(1, math.ceil(n / MAX_POINTS)))


def module_figure(fig: dict[str, Any], where: str = "figure") -> str:
    """Draw one module figure dict (checked with :func:`check_figure`); returns SVG text."""
    import numpy as np
    f = check_figure(fig, where)
    ylabel, yf = f["ylabel"], 1.0
    if f["yscale"] == "linear":
        ylabel, yf = _scaled_axis(f["ylabel"], [v for s in f["series"] for k in
                                                ("y", "y_low", "y_high", "yerr")
                                                for v in s.get(k) or () if v is not None])
    with _rc():
        mfig = _new_figure(3.0)
        ax = mfig.add_subplot()
        for s in f["series"]:
            sl = _thin(len(s["x"]))
            x = np.asarray(s["x"])[sl]
            label = s["label"] or None

            def y(key: str, s=s, sl=sl):
                return np.asarray(s[key], dtype=float)[sl] * yf
            if s["style"] == "band":
                ax.fill_between(x, y("y_low"), y("y_high"), alpha=0.25, lw=0, label=label)
            elif s["style"] == "line":
                ax.plot(x, y("y"), lw=1.2, label=label)
            else:
                yerr = y("yerr") if "yerr" in s else None
                ax.errorbar(x, y("y"), yerr=yerr, fmt="o", ms=3, lw=0.8,
                            capsize=2, label=label)
        ax.set_xscale(f["xscale"])
        ax.set_yscale(f["yscale"])
        ax.set_xlabel(_wrap(f["xlabel"], 90))
        ax.set_ylabel(_wrap(ylabel, 34))   # ~2.3 in of axis height at 8 pt
        if f["yscale"] == "linear":
            # plain tick values: no "1e-9" or "+9.61e-2" written at the end of the axis
            ax.ticklabel_format(useOffset=False, axis="y", style="plain")
        if any(s["label"] for s in f["series"]):
            # below the axes: a record of hundreds of points leaves no empty corner inside
            mfig.legend(loc="outside lower center", ncols=2, frameon=False)
        if f["xscale"] == "linear":
            # dates as decimal years (2026.4...) must not turn into "+2.026e3" offsets
            ax.ticklabel_format(useOffset=False, axis="x", style="plain")
        return _to_svg(mfig)


_PREFIX = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 3: "k", 6: "M", 9: "G"}
_SUPER = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _scaled_axis(label: str, values: list[float]) -> tuple[str, float]:
    """A label and a factor that put an axis's tick values in plain numbers (no offset or
    "1e-9" text at the axis end): values below 10⁻³ or from 10⁵ on are shown in a multiple of
    10³ that the label states — an SI prefix on a simple unit ("(V)" → "(nV)"), else
    "(10⁻⁹ unit)" (SI Brochure §3, prefixes)."""
    top = max((abs(v) for v in values if math.isfinite(v)), default=0.0)
    if top == 0 or 1e-3 <= top < 1e5:
        return label, 1.0
    p = 3 * math.floor(math.log10(top) / 3)
    m = re.fullmatch(r"(.*)\(([^()]*)\)\s*", label)
    unit = m.group(2).strip() if m else ""
    if m and p in _PREFIX and re.fullmatch(r"(V|A|Ω|s|Hz|W|F|H|C|K|m|g)", unit):
        new = f"{m.group(1)}({_PREFIX[p]}{unit})"
    elif m and unit in ("", "1"):
        new = f"{m.group(1)}(10{str(p).translate(_SUPER)})"
    elif m:
        new = f"{m.group(1)}(10{str(p).translate(_SUPER)} {unit})"
    else:
        new = f"{label} (10{str(p).translate(_SUPER)})"
    return new, 10.0 ** -p


# --------------------------------------------------------------------------- comparison
_COMPARE_RC = {"svg.fonttype": "none", "svg.hashsalt": "qcs-budget-compare",
       "font.family": ["DejaVu Sans"], "font.size": 8.0, "legend.fontsize": 7.0,
       "axes.unicode_minus": True, "text.parse_math": False, "axes.grid": True,
       "grid.alpha": 0.3, "axes.spines.top": False, "axes.spines.right": False}


def compare_figure(fig: dict[str, Any], run_labels: Sequence[str],
                   run_titles: Sequence[str] = ()) -> str:
    """SVG text of the comparison figure (``fig`` as built by :func:`budget.compare.compare_runs`):
    each run with its expanded uncertainty as an error bar over the reference (or weighted-mean)
    band, one x tick per run labelled with ``run_labels`` and, under it, the run's title from
    ``run_titles`` (wrapped, at most three lines; which :func:`module_figure` cannot do).
    """
    import textwrap

    import matplotlib
    from matplotlib.figure import Figure

    f = check_figure(fig, "comparison figure")
    with matplotlib.rc_context(_COMPARE_RC):
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
        width = max(14, 100 // max(n, 1))
        ticks = []
        for i, lab in enumerate(run_labels):
            title = run_titles[i] if i < len(run_titles) else ""
            lines = textwrap.wrap(title, width)[:3] if title else []
            if title and len(textwrap.wrap(title, width)) > 3:
                lines[-1] = lines[-1][: width - 1] + "…"
            ticks.append("\n".join([lab] + lines))
        ax.set_xticks(range(1, n + 1), ticks)
        for t in ax.get_xticklabels():
            t.set_parse_math(False)       # a "$" in a title is a character
            t.set_fontsize(7.0 if run_titles else 8.0)
        ax.set_xlim(0.5, n + 0.5)
        ax.grid(axis="x", visible=False)
        ax.set_xlabel(f["xlabel"])
        ax.set_ylabel(f["ylabel"])
        ax.ticklabel_format(axis="y", useOffset=False)
        ax.legend(frameon=False, loc="best")
        buf = io.StringIO()
        mfig.savefig(buf, format="svg", metadata={"Date": None})
        return buf.getvalue()


_CHAIN_STYLE = (("#1f4e79", "o"), ("#b35806", "s"), ("#4d7f17", "^"), ("#6a3d9a", "D"))


def trend_figure(trend) -> str:
    """SVG text of a logbook trend (:class:`budget.logbook.trend.Trend`): each run with its
    expanded uncertainty against measurement date, one colour per chain; each chain's weighted
    means before and after every tested recalibration as segments; recalibrations as dashed
    lines (red and labelled when the step test flags them); runs flagged against the other
    chain ringed in red."""
    from datetime import datetime

    import matplotlib.dates as mdates

    def when(s: str) -> datetime:
        return datetime.fromisoformat(s if "T" in s else s + "T00:00")

    unit_txt = f" ({trend.unit})" if trend.unit not in ("", "1") else ""
    flagged_runs = {r for f in trend.flags if f.kind == "run-vs-other-chain" for r in f.runs}
    with _rc():
        fig = _new_figure(3.3)
        ax = fig.add_subplot()
        chains = [c.chain for c in trend.chains]
        for j, chain in enumerate(chains):
            colour, marker = _CHAIN_STYLE[j % len(_CHAIN_STYLE)]
            pts = [p for p in trend.points if p.chain == chain]
            ax.errorbar([when(p.date_start) for p in pts], [p.value for p in pts],
                        yerr=[p.expanded_uncertainty for p in pts], fmt=marker, ms=3.5, lw=0.8,
                        capsize=2, color=colour, label=f"{chain} ± U")
            ring = [p for p in pts if p.id in flagged_runs]
            if ring:
                ax.plot([when(p.date_start) for p in ring], [p.value for p in ring], "o",
                        ms=8, mfc="none", mec="#c0392b", mew=1.0,
                        label="run flagged against the other chain" if j == 0 else None)
            for s in trend.steps:
                if s.recalibration.chain != chain or s.before is None:
                    continue
                r = s.recalibration
                ax.plot([when(s.date_first), when(r.date_to)], [s.before.value] * 2,
                        color=colour, lw=1.6, alpha=0.8)
                ax.plot([when(r.date_to), when(s.date_last)], [s.after.value] * 2,
                        color=colour, lw=1.6, alpha=0.8)
        seen = set()
        for s in trend.steps:
            r = s.recalibration
            colour = "#c0392b" if s.flagged else "#7f7f7f"
            label = ("recalibration, step flagged" if s.flagged else "recalibration")
            ax.axvline(when(r.date_to), color=colour, ls="--", lw=1.0,
                       label=None if label in seen else label)
            seen.add(label)
            if s.flagged:
                ax.annotate(f"{r.chain}: E_n = {s.en:.1f}\n{_wrap(r.label(), 60)}",
                            (when(r.date_to), 1.0), xycoords=("data", "axes fraction"),
                            xytext=(4, -4), textcoords="offset points", va="top", fontsize=6.0,
                            color="#c0392b", bbox={"boxstyle": "square,pad=0.2", "fc": "white",
                                                   "ec": "none", "alpha": 0.85})
        ax.xaxis.set_major_formatter(mdates.DateFormatter("%Y-%m"))
        ax.set_xlabel("measurement date")
        ax.set_ylabel(f"{pretty_label(trend.measurand)}{unit_txt}")
        ax.ticklabel_format(axis="y", useOffset=False)
        ax.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=3,
                  fontsize=6.5)
        return _to_svg(fig)
