"""Signing, verifying and archiving costs (issue 6), run by hand, never in CI.

Measures, side by side in one process: creating an identity; signing and verifying a report of
1 and 30 pages; archiving a budget whose data file is 1 MB and 20 MB, against plain SHA-256
hashing of the same bytes (the floor: every archived byte is hashed once while copied).
Times are the minimum of a few repeats. All data are invented.

Usage::

    .venv/bin/python benchmarks/bench_signing.py
"""

from __future__ import annotations

import hashlib
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from evidence_helpers import PASSPHRASE, make_pdf, write_spec_folder  # noqa: E402

from budget import archive, signing, verify  # noqa: E402
from budget.engine import evaluate  # noqa: E402
from budget.spec import load_spec  # noqa: E402


def best(fn, repeat=5):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        n = [0]

        def make_id():
            n[0] += 1
            return signing.create_identity("Bench Signer", "Tester", tmp / f"id{n[0]}",
                                           PASSPHRASE)
        print(f"create identity (EC P-256, PKCS#12 PBKDF2 100k):  {best(make_id) * 1e3:8.1f} ms")
        ident = make_id()
        spec_path = write_spec_folder(tmp / "lab")
        record = evaluate(load_spec(spec_path)).to_json()
        spec_bytes = spec_path.read_bytes()
        for pages in (1, 30):
            pdf = make_pdf(pages=pages)
            holder = {}

            def sign():
                holder["s"] = signing.sign_pdf(pdf, ident.p12_path, PASSPHRASE,
                                               record_json=record, spec_text=spec_bytes)
            t_sign = best(sign)
            signed = holder["s"]
            t_verify = best(lambda: verify.verify_pdf(signed, ident.pem_path))
            t_hash = best(lambda: hashlib.sha256(signed).hexdigest())
            print(f"{pages:2d} page(s), {len(signed) / 1e3:7.1f} kB: sign {t_sign * 1e3:7.1f} ms, "
                  f"verify {t_verify * 1e3:7.1f} ms, sha256 {t_hash * 1e6:7.1f} µs")
        for mb in (1, 20):
            folder = tmp / f"lab{mb}"
            sp = write_spec_folder(folder)
            # pad the calibration table with comment-free extra rows: a bigger input file
            cal = folder / "data" / "cal.csv"
            row = "1.0,1.0000012\n"
            cal.write_text(cal.read_text("utf-8") + row * (mb * 1_000_000 // len(row)),
                           encoding="utf-8")
            spec = load_spec(sp)
            b = evaluate(spec)
            k = [0]

            def arch():
                k[0] += 1
                archive.archive(spec, b, tmp / f"arch{mb}_{k[0]}")
            t_arch = best(arch, repeat=3)
            data = cal.read_bytes()
            t_hash = best(lambda: hashlib.sha256(data).hexdigest(), repeat=3)
            print(f"archive with a {len(data) / 1e6:5.1f} MB input: {t_arch * 1e3:7.1f} ms "
                  f"(sha256 alone {t_hash * 1e3:6.1f} ms, ratio {t_arch / t_hash:5.1f})")


if __name__ == "__main__":
    main()
