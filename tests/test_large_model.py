"""A model with many inputs (issue 14, item 4): the linear propagation does not write out
every ∂f/∂x (that work is (inputs) × (model size), quadratic here), and ``explain`` writes the
one asked for on demand.

Model (derivation by hand): Y = Σ_{i<n} x_i · x_{(i+1) mod n}, so
∂Y/∂x_j = x_{j−1} + x_{j+1} (indices mod n) and u_c² = Σ_j (x_{j−1} + x_{j+1})² u_j² for
uncorrelated inputs (GUM 5.1.2).
"""

from __future__ import annotations

import math

from numeric import near

from budget import evaluate, parse_spec
from budget.explain import explain_term

N = 400


def spec_text(n: int, correlated: bool = False) -> str:
    t = [f"x{i} * x{(i + 1) % n}" for i in range(n)]
    expr = " + ".join("(" + " + ".join(t[k:k + 50]) + ")" for k in range(0, n, 50))
    lines = ["[model]", f'Y = "{expr}"', "[monte_carlo]", "enabled = false"]
    for i in range(n):
        lines += [f"[inputs.x{i}]", f"value = {1.0 + 0.01 * i}",
                  f"standard_uncertainty = {0.001 * (1 + i % 7)}"]
    if correlated:
        lines += ["[correlations]", 'pairs = [["x0", "x1", 0.9], ["x1", "x2", 0.9], '
                  '["x0", "x2", -0.9]]']
    return "\n".join(lines) + "\n"


def test_large_model_leaves_derivative_texts_out_and_explain_writes_one():
    b = evaluate(parse_spec(spec_text(N), file="large.toml"))
    m = b.measurand("Y")
    x = [1.0 + 0.01 * i for i in range(N)]
    u = [0.001 * (1 + i % 7) for i in range(N)]
    c = [x[(j - 1) % N] + x[(j + 1) % N] for j in range(N)]
    assert m.standard_uncertainty == near(math.sqrt(sum((c[j] * u[j]) ** 2 for j in range(N))),
                                          rel=1e-12)
    assert all(t.derivative == "" for t in m.terms)
    assert any("too large for every ∂f/∂x to be written out" in n for n in b.run["notes"])
    (a,) = explain_term(b, "x7").answers
    assert a.derivative.replace(" ", "") in ("x6+x8", "x8+x6")
    assert a.derivative_value == near(c[7], rel=1e-12)
    assert not any("not in the record" in w for w in a.cautions)


def test_small_model_keeps_its_derivatives():
    b = evaluate(parse_spec(spec_text(20), file="small.toml"))
    assert all(t.derivative for t in b.measurand("Y").terms)
    assert not any("too large" in n for n in b.run["notes"])


def test_psd_check_still_refuses_an_inconsistent_block():
    # r12 = r23 = 0.9, r13 = −0.9: the 3 × 3 block has determinant
    # 1 + 2·r12·r23·r13 − r12² − r23² − r13² = 1 − 1.458 − 2.43 = −2.888 < 0 (by hand): not PSD
    import pytest

    from budget.errors import SpecError
    with pytest.raises(SpecError, match="not positive semi-definite"):
        evaluate(parse_spec(spec_text(60, correlated=True), file="c.toml"))
