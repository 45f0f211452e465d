"""n, f and the nominal current n·e·f beside the result.

e = 1.602 176 634×10⁻¹⁹ C exactly (SI Brochure, 9th edition, 2019); n·e·f at n = 1 and
f = 600 MHz is 9.613 059 804×10⁻¹¹ A (derivation: 1.602176634e-19 × 6e8). The worked examples
are invented data; here they only supply the structure (a frequency module, a pump module).
"""

from __future__ import annotations

from pathlib import Path

from numeric import near

from budget import evaluate, load_spec, parse_spec
from budget.nominal import nominal_point, nominal_text
from budget.report import render_html
from budget.text import budget_text

EXAMPLES = Path(__file__).resolve().parents[1] / "worked_examples"
NEF_600MHZ_PA = 96.13059804      # n·e·f in pA at n = 1, f = 600 MHz (derivation above)


def test_frequency_module_gives_the_nominal_current():
    b = evaluate(load_spec(EXAMPLES / "amplifier_chain" / "spec.toml"),
                 monte_carlo_enabled=False)
    p = nominal_point(b)
    assert p.n == 1 and p.frequency_hz == 600e6
    assert p.current_a * 1e12 == near(NEF_600MHZ_PA, rel=1e-12)
    assert "nominal current n·e·f = 9.613059804e-11 A" in nominal_text(p)
    assert "drive frequency f = 600 MHz" in budget_text(b)
    html = render_html(b, figures=False)
    assert "n·e·f = 9.613059804×10⁻¹¹ A" in html
    assert "n·e·f = 9.613059804×10⁻¹¹ A" in render_html(b, certificate=True, figures=False)


def test_pump_module_gives_plateau_and_operating_point():
    b = evaluate(load_spec(EXAMPLES / "pump_characterisation" / "spec.toml"),
                 monte_carlo_enabled=False)
    p = nominal_point(b)
    assert p.n == 1 and p.frequency_source == "constant f0"
    assert "gate_voltage" in p.operating_point


def test_no_pump_no_line():
    # a budget without n, e and f (EA-4/02-style resistor) states no pump line
    b = evaluate(parse_spec('[budget]\ntitle = "no pump (invented)"\n[model]\nY = "A"\n'
                            '[inputs.A]\nvalue = 1\nstandard_uncertainty = 0.1\n'),
                 monte_carlo_enabled=False)
    assert nominal_point(b) is None or "n" not in (b.run.get("constants") or {})
    assert "n·e·f" not in budget_text(b)
