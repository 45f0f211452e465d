"""Settling findings of the ``cycles`` input: per file the diagnostics, the structured
warnings (``cycles.default_settle``, ``cycles.slow_settling``, ``cycles.transient``,
``cycles.settle_short``, ``cycles.fast_switching``) and the step-response figure, from the statistics of
:mod:`budget.inputs.settling`. ``settle_policy = "refuse"`` turns a detected transient into a
spec error (exit 2)."""

from __future__ import annotations

import math
from typing import Any

from ..warnings import warn
from . import settling
from .context import InputContext

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
        if r.settle_default:
            how = choice["text"] if choice else "too few segments to derive one; the floor"
            ws.append(warn("cycles.default_settle", f"{name}: settle_s not given; {r.settle:.4g} s "
                           f"derived from the record ({how}; step response: {fit_text})",
                           severity="note"))
            if choice and choice["by"] == "cap":
                ws.append(warn("cycles.slow_settling", f"{name}: a settling transient remains "
                               f"even at settle_s = {r.settle:.4g} s, half the median segment "
                               f"(early − late test t = {test.statistic:.3g}, "
                               f"{settling.p_text(test.p_value)}); lengthen the segments"))
        elif resp is not None and math.isfinite(u_white) and u_white > 0:
            better = settling.choose_settle(raw.t, raw.y, raw.on, resp, fit, u_white, r.settle,
                                            o["tail_s"], o["transient_fraction"],
                                            start=r.settle + resp.dt if test.detected else 0.0)
            predicted = float(settling.predicted_bias(resp, fit, r.settle, o["tail_s"])[0])
            if better["settle_s"] > r.settle:
                d["suggested_settle_s"] = better["settle_s"]
            if test.detected:
                cure = (f"settle_s = {better['settle_s']:.4g} s would remove it"
                        if better["by"] != "cap" else
                        f"not even settle_s = {better['settle_s']:.4g} s (half the median "
                        "segment) removes it; lengthen the segments")
                msg = (f"{name}: a settling transient remains after settle_s = {r.settle:g} s "
                       f"(early − late half test: t = {test.statistic:.3g}, "
                       f"{settling.p_text(test.p_value)}; about {abs(test.bias):.3g} {unit} in each cycle "
                       f"difference, {abs(test.bias) / u_white:.3g} u); {cure} (step response: "
                       f"{fit_text})")
                if o["settle_policy"] == "refuse":
                    raise ctx.spec_error("settle_s", msg + '; settle_policy = "refuse"')
                ws.append(warn("cycles.transient", msg))
            elif math.isfinite(predicted) and predicted > o["transient_fraction"] * u_white \
                    and better["settle_s"] > r.settle:
                ws.append(warn("cycles.settle_short", f"{name}: the fitted step response "
                               f"({fit_text}) leaves up to {predicted:.3g} {unit} "
                               f"({predicted / u_white:.2g} u) in each cycle difference after "
                               f"settle_s = {r.settle:g} s; the early − late test does not "
                               f"detect it ({settling.p_text(test.p_value)}); settle_s = "
                               f"{better['settle_s']:.4g} s would keep it below "
                               f"{o['transient_fraction']:g} u", severity="note"))
        if resp is not None and len(resp.lag_s) < settling.MIN_LAGS:
            ws.append(warn("cycles.fast_switching", f"{name}: the pump column alternates every "
                           f"{resp.segment_s:.4g} s ({len(resp.lag_s)} readings a segment): too "
                           "fast for the record to show whether the chain settles within "
                           f"settle_s = {r.settle:.4g} s (the step-response fit needs at least "
                           f"{settling.MIN_LAGS} readings a segment); a chain that has not "
                           "settled biases the result — lengthen the segments or establish the "
                           "chain's time constant separately"))
        if resp is not None:
            figs.append(settling.figure(resp, fit, r.settle, unit,
                                        name if len(raws) > 1 else "", i))
        diags.append(d)
    return diags, ws, figs
