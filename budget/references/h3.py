"""JCGM 100:2008 (GUM), Annex H.3 — calibration of a thermometer by linear least squares.

Eleven readings t_k of a thermometer are compared with a reference; the corrections b_k are fitted
by b(t) = y1 + y2·(t − t0), t0 = 20 °C, without stated uncertainties (the scale comes from the
residual scatter, ν = n − 2 = 9). The GUM publishes the parameters, their standard uncertainties
and correlation, the residual standard deviation and the predicted correction at 30 °C.

:func:`h3_case` recomputes all of these through :func:`budget.stats.regression.fit` — the same
code the ``resistor``, ``amplifier`` and ``frequency`` input modules use for their drift lines —
so ``budget validate`` can show that the regression reproduces a published worked example.
"""

from __future__ import annotations

from typing import NamedTuple

from ..stats.regression import fit

__all__ = ["B_K", "SOURCE", "T0", "T_K", "Check", "h3_case"]

SOURCE = "JCGM 100:2008 (GUM), Annex H.3"

#: Reference temperature t0 (°C), thermometer readings t_k (°C) and corrections b_k (°C) of H.3.
T0 = 20.0
T_K = (21.521, 22.012, 22.512, 23.003, 23.507, 23.999, 24.513, 25.002, 25.503, 26.010, 26.511)
B_K = (-0.171, -0.169, -0.166, -0.159, -0.164, -0.165, -0.156, -0.157, -0.159, -0.161, -0.160)


class Check(NamedTuple):
    """One published number and its recomputation.

    ``tolerance`` is one unit in the last digit the source publishes; the check passes when
    ``abs(computed - published) <= tolerance``.
    """

    quantity: str
    published: float
    computed: float
    tolerance: float
    source: str

    @property
    def passed(self) -> bool:
        return abs(self.computed - self.published) <= self.tolerance


def h3_case() -> list[Check]:
    """Recompute GUM H.3 and pair each published value with the computed one.

    Returns
    -------
    list of Check
        In order: y1 (°C), s(y1) (°C), y2 (1), s(y2) (1), r(y1, y2), residual s (°C),
        b(30 °C) (°C) and u(b(30 °C)) (°C).
    """
    f = fit(T_K, B_K, model="line", x0=T0)  # unweighted, as in the GUM
    y1, y2 = f.params
    s1, s2 = f.std_errors
    b30, u30 = f.predict(30.0)
    where = SOURCE
    return [
        Check("y1 (°C)", -0.1712, y1, 1e-4, where),
        Check("s(y1) (°C)", 0.0029, s1, 1e-4, where),
        Check("y2", 0.00218, y2, 1e-5, where),
        Check("s(y2)", 0.00067, s2, 1e-5, where),
        Check("r(y1, y2)", -0.930, f.correlation, 1e-3, where),
        Check("residual s (°C)", 0.0035, f.residual_sd, 1e-4, where),
        Check("b(30 °C) (°C)", -0.1494, b30, 1e-4, where),
        Check("u(b(30 °C)) (°C)", 0.0041, u30, 1e-4, where),
    ]
