#!/usr/bin/env bash
# The installed wheel must find its templates: build a wheel from this checkout, install it in
# a fresh virtual environment outside the repository, and render a report and a certificate
# draft from a small typed-in spec there.
set -euo pipefail
cd "$(dirname "$0")/.."
PY=${PY:-python3}
work=$(mktemp -d /tmp/qcs-wheel.XXXXXX)
trap 'rm -rf "$work"' EXIT
"$PY" -m pip wheel --quiet --no-deps --no-build-isolation . -w "$work/dist" 2>/dev/null \
  || "$PY" -m pip wheel --quiet --no-deps . -w "$work/dist"
"$PY" -m venv "$work/venv"
"$work/venv/bin/python" -m pip install --quiet "$work"/dist/qcs_budget-*.whl
cat > "$work/spec.toml" <<'TOML'
[budget]
title = "Wheel check (invented numbers)"
[model]
Y = "A + B"
[inputs.A]
value = 1.0
standard_uncertainty = 0.1
[inputs.B]
value = 2.0
distribution = "rectangular"
half_width = 0.2
TOML
cd "$work"
"$work/venv/bin/budget" report spec.toml --no-monte-carlo -o report.pdf --html report.html
"$work/venv/bin/budget" report spec.toml --no-monte-carlo --certificate -o cert.pdf
"$work/venv/bin/python" - <<'PY'
import budget.report.render as r
d = r.template_dir()
assert "site-packages" in str(d), d          # the wheel's own copy, not a source checkout
assert open("report.pdf", "rb").read(5) == b"%PDF-" and open("cert.pdf", "rb").read(5) == b"%PDF-"
print(f"wheel check: templates from {d}; report and certificate draft rendered")
PY
