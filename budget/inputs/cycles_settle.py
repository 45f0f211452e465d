"""Settling findings of the ``cycles`` input: per file the diagnostics, the structured
warnings (``cycles.default_settle``, ``cycles.slow_settling``, ``cycles.transient``,
``cycles.settle_short``, ``cycles.fast_switching``) and the step-response figure, from the
statistics of :mod:`budget.inputs.settling`.

Rule for a residual transient at the settle time used (given or derived): its size r is the
larger of the fit's bound (|A| and τ two standard uncertainties towards more bias) and, when
the early/late test detects a transient, half the early − late difference. With r above
``transient_fraction`` (0.1) of the white-noise Type A u — or a derived settle time at the cap
— the finding is a warning stating r in the reading's unit and in u and the settle time and
segment length that would remove it; from r ≥ :data:`settling.ERROR_RATIO` u (1 u: the k = 2
interval of a normal result then covers 84 % instead of 95 %) or an unknown size it has
severity "error" (``budget sign`` refuses without ``--accept-warnings``). The result is not
corrected and r is not added to u: the predicted r is a bound, not an estimate of the bias.
``settle_policy = "refuse"`` turns any such finding into a spec error (exit 2, nothing
written)."""

from __future__ import annotations

import math
from typing import Any

from ..warnings import warn
from . import settling
from .context import InputContext
from .cycles_figures import figure_settling

__all__ = ["settling_findings"]


def settling_findings(ctx: InputContext, raws: list, records: list,
                       assess: list[dict], names: list[str], u_white: float,
                       o: dict[str, Any]) -> tuple[list[dict], list, list]:
    """Per file: the settling diagnostics, warnings and figures (module docstring)."""
    diags, ws, figs = [], [], []
    unit = o["unit"]
    for i, (raw, r, a, name) in enumerate(zip(raws, records, assess, names)):
        resp, fit, choice = a["response"], a["fit"], a["choice"]
        test = choice["test"] if choice else settling.half_test(raw.t, raw.y, raw.on, r.settle,
                                                                o["tail_s"])
        d: dict[str, Any] = {"file": name, "settle_s": r.settle,
                             "settle_source": "derived" if r.settle_default else "given",
                             "transient_fraction": o["transient_fraction"],
                             "step_response": resp.to_dict() if resp else None,
                             "fit": fit.to_dict() if fit else None, "half_test": test.to_dict(),
                             "choice": {k: v for k, v in choice.items() if k != "test"}
                             if choice else None, "suggested_settle_s": None}
        fit_text = fit.text if fit else "too few segments for a step response"
        frac = o["transient_fraction"]
        known_u = math.isfinite(u_white) and u_white > 0
        residual, source = _residual(resp, fit, test, r.settle, o["tail_s"])
        d["residual_transient"] = ({"estimate": residual, "source": source,
                                    "over_u": residual / u_white if known_u else None}
                                   if math.isfinite(residual) else None)
        if r.settle_default:
            how = choice["text"] if choice else "too few segments to derive one; the floor"
            ws.append(warn("cycles.default_settle", f"{name}: settle_s not given; {r.settle:.4g} s "
                           f"derived from the record ({how}; step response: {fit_text})",
                           severity="note"))
            capped = bool(choice) and choice["by"] == "cap"
            if known_u and (capped or residual > frac * u_white):
                over = residual / u_white if math.isfinite(residual) else math.nan
                msg = (f"{name}: a settling transient remains at the derived settle_s = "
                       f"{r.settle:.4g} s, half the median segment (early − late test t = "
                       f"{test.statistic:.3g}, {settling.p_text(test.p_value)}; "
                       + (f"about {residual:.3g} {unit} in each cycle difference, {over:.3g} u, "
                          f"{_SOURCE[source]}" if math.isfinite(residual) else
                          "its size is not known: no usable fit")
                       + f"); {_cure(resp, fit, u_white, frac, name=None)} (step response: "
                         f"{fit_text})")
                _emit(ctx, ws, "cycles.slow_settling", msg, over, o, "settle_policy")
        elif resp is not None and known_u:
            better = settling.choose_settle(raw.t, raw.y, raw.on, resp, fit, u_white, r.settle,
                                            o["tail_s"], frac,
                                            start=r.settle + resp.dt if test.detected else 0.0)
            predicted = float(settling.predicted_bias(resp, fit, r.settle, o["tail_s"])[0])
            if better["settle_s"] > r.settle:
                d["suggested_settle_s"] = better["settle_s"]
            cure = (f"settle_s = {better['settle_s']:.4g} s would remove it"
                    if better["by"] != "cap" and better["settle_s"] > r.settle else
                    _cure(resp, fit, u_white, frac, name=better["settle_s"]))
            over = residual / u_white
            if test.detected:
                msg = (f"{name}: a settling transient remains after settle_s = {r.settle:g} s "
                       f"(early − late half test: t = {test.statistic:.3g}, "
                       f"{settling.p_text(test.p_value)}; about {residual:.3g} {unit} in each "
                       f"cycle difference, {over:.3g} u, {_SOURCE[source]}); {cure} (step "
                       f"response: {fit_text})")
                _emit(ctx, ws, "cycles.transient", msg, over, o, "settle_s")
            elif math.isfinite(predicted) and predicted > frac * u_white:
                msg = (f"{name}: the fitted step response ({fit_text}) leaves up to "
                       f"{predicted:.3g} {unit} ({over:.2g} u) in each cycle difference after "
                       f"settle_s = {r.settle:g} s, uncorrected and not in u; the early − late "
                       f"test does not detect it ({settling.p_text(test.p_value)}); {cure}")
                _emit(ctx, ws, "cycles.settle_short", msg, over, o, "settle_s")
        if resp is not None and len(resp.lag_s) < settling.MIN_LAGS:
            ws.append(warn("cycles.fast_switching", f"{name}: the pump column alternates every "
                           f"{resp.segment_s:.4g} s ({len(resp.lag_s)} readings a segment): too "
                           "fast for the record to show whether the chain settles within "
                           f"settle_s = {r.settle:.4g} s (the step-response fit needs at least "
                           f"{settling.MIN_LAGS} readings a segment); a chain that has not "
                           "settled biases the result — lengthen the segments or establish the "
                           "chain's time constant separately"))
        if resp is not None:
            figs.append(figure_settling(resp, fit, r.settle, unit,
                                        name if len(raws) > 1 else "", i))
        diags.append(d)
    return diags, ws, figs


_SOURCE = {"fit": "the fit's bound (|A| and τ two u towards more bias)",
           "test": "half the early − late difference", None: ""}


def _residual(resp, fit, test, settle_s: float, tail_s: float) -> tuple[float, str | None]:
    """Residual transient in a cycle difference at ``settle_s`` (reading unit, ≥ 0) and its
    source: the larger of the fit's bound (:func:`settling.predicted_bias`) and, when the
    early/late test detects one, half the early − late difference; NaN when neither."""
    best, source = math.nan, None
    if resp is not None and fit is not None and fit.status in ("fits", "poor"):
        p = float(settling.predicted_bias(resp, fit, settle_s, tail_s)[0])
        if math.isfinite(p):
            best, source = p, "fit"
    if test.detected and not abs(test.bias) <= best:
        best, source = abs(test.bias), "test"
    return best, source


def _cure(resp, fit, u: float, fraction: float, name: float | None) -> str:
    """What would remove the residual: the settle time and segment length the fit asks for."""
    s = settling.needed_settle(resp, fit, u, fraction) if resp is not None and fit else None
    if s is None:
        return "lengthen the segments"
    head = (f"not even settle_s = {name:.4g} s (half the median segment) removes it; "
            if name is not None else "")
    return (f"{head}settle_s ≥ {s:.4g} s would keep it below {fraction:g} u, which needs "
            f"segments of at least {2 * s:.4g} s (the record's are {resp.segment_s:.4g} s)")


def _emit(ctx: InputContext, ws: list, code: str, msg: str, over: float, o: dict[str, Any],
          key: str) -> None:
    """A residual-transient finding: refused under ``settle_policy = "refuse"`` (exit 2),
    else a warning, severity "error" from :data:`settling.ERROR_RATIO` u on (or unknown
    size)."""
    if o["settle_policy"] == "refuse":
        raise ctx.spec_error(key if key in ctx.table else "settle_policy",
                             msg + '; settle_policy = "refuse"')
    big = not (over < settling.ERROR_RATIO)
    if big:
        msg += (f"; a residual of {over:.3g} u uncorrected: the k = 2 interval may cover far "
                "less than 95 % (84 % at 1 u); signing needs --accept-warnings"
                if math.isfinite(over) else
                "; its size is unknown: signing needs --accept-warnings")
    ws.append(warn(code, msg, severity="error" if big else "warning"))
