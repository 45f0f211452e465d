"""Mutation testing of the numerical core: does the suite notice a one-token change?

Usage (by hand, never in CI; ``make mutate`` runs every module of :data:`MODULES` in turn)::

    nice -n 15 python tests/mutate.py [MODULE ...] [--sample N] [--seed S] [--known]

For each module, every function body is parsed with :mod:`ast` and one mutant is made per
candidate node (the classic operators of mutation testing: arithmetic ``+ − × ÷ **`` swapped,
comparisons ``< ≤ > ≥ == !=`` shifted or negated, ``and``/``or`` swapped, unary minus and
``not`` dropped, numbers n → n + 1, ``True``/``False`` swapped). The driver imports numpy, scipy,
pytest and the package once, then for each mutant forks a child that recompiles the mutated
module, swaps the changed functions' code objects into the loaded module (so every
``from … import`` name sees the mutant), and runs that module's tests (:data:`MODULES`) with
``pytest -x``. A mutant is *killed* when the tests fail or time out (3 × the clean run + 10 s),
and *survives* when they pass. ``--known`` plants instead the named bugs of issue 18
(:data:`KNOWN`) and reports which tests kill them.

Results go to ``.mutate/MODULE.json`` (kept out of git) and a summary line per module on
stdout; tests/README.md carries the last measured kill rates and the list of survivors.

Only the tests listed for a module are run against its mutants, so a kill rate here is a lower
bound for the whole suite. Lines ending in ``# pragma: no mutate`` are skipped (messages,
guards whose mutants are equivalent by construction — each one explained in tests/README.md).
"""

from __future__ import annotations

import argparse
import ast
import copy
import importlib
import json
import os
import random
import signal
import sys
import time
import types
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

# module → the test files that check it (run with -x against each mutant)
MODULES: dict[str, list[str]] = {
    "budget.coverage": ["test_core_gaps.py", "test_coverage.py", "test_coverage_factor_grid.py"],
    "budget.propagate.lpu": ["test_core_gaps.py", "test_lpu.py", "test_coverage_factor_grid.py",
                             "test_second_order.py", "test_dof_correlated.py"],
    "budget.propagate.validate": ["test_mcm_bookkeeping.py", "test_mcm.py",
                                  "test_mcm_adaptive_stop.py", "test_mcm_accuracy.py"],
    "budget.propagate.mcm": ["test_mcm_bookkeeping.py", "test_mcm_adaptive_stop.py", "test_mcm.py",
                             "test_mcm_rqmc.py", "test_second_order.py"],
    "budget.propagate.mcm_batches": ["test_mcm_bookkeeping.py", "test_mcm_adaptive_stop.py",
                                     "test_mcm_accuracy.py", "test_mcm.py", "test_mcm_rqmc.py"],
    "budget.distributions": ["test_distribution_ppf.py", "test_distributions.py",
                             "test_sampled_distribution.py", "test_second_order.py", "test_mcm.py"],
    "budget.stats.allan": ["test_core_gaps.py", "test_allan.py", "test_allan_blocks.py"],
    "budget.stats.autocorr": ["test_autocorr_bounds.py", "test_autocorr.py"],
    "budget.stats.regression": ["test_regression.py", "test_history_common.py"],
    "budget.stats.onoff": ["test_typea_floor.py", "test_cycles.py"],
    "budget.stats.typea": ["test_typea_floor.py", "test_cycles.py", "test_autocorr.py"],
    "budget.compare": ["test_core_gaps.py", "test_compare_unequal.py", "test_compare_edges.py",
                       "test_compare.py", "test_compare_covariance.py"],
    "budget.inputs.pump.cascade": ["test_core_gaps.py", "test_pump_cascade_scale.py",
                                   "test_pump_cascade.py"],
    "budget.inputs.pump.escape": ["test_core_gaps.py", "test_pump_escape.py"],
}

# the bugs of issue 18 that once passed the whole suite: (module, old text, new text, tests)
KNOWN: dict[str, tuple[str, str, str, list[str]]] = {
    "1 k from the normal quantile for ν > 100": (
        "budget.propagate.lpu", "if math.isinf(dof) or dof > 1e7:",
        "if math.isinf(dof) or dof > 100:", MODULES["budget.propagate.lpu"]),
    "2 oadev: swapped operands for m ≥ 65 536": (
        "budget.stats.allan",
        "np.subtract(s[lo + 2 * k:hi + 2 * k], s[lo + k:hi + k], out=av)",
        "np.subtract(s[lo + k:hi + k], s[lo + 2 * k:hi + 2 * k], out=av)",
        MODULES["budget.stats.allan"]),
    "3 adaptive Monte Carlo stops at δ, not δ/5": (
        "budget.propagate.mcm_batches", "        delta /= VALIDATION_DIVISOR\n", "\n",
        MODULES["budget.propagate.mcm_batches"]),
    "4 E_n against the mean: V_ii − aᵀVa": (
        "budget.compare",
        "            c = -a_w.copy()\n            c[i] += 1.0\n            ens.append(en_of(labels[i], "
        "\"weighted mean\", float(x[i] - mean.value), c,\n",
        "            c = np.zeros(size)\n            c[i] = 1.0\n"
        "            _v = float(-a_w @ V[:n, :n] @ a_w)\n            ens.append(en_of(labels[i], "
        "\"weighted mean\", float(x[i] - mean.value), c, extra_var=_v,"
        " extra_u2=_v * ks[i] ** 2, shared=\n",
        MODULES["budget.compare"]),
    "5 cascade missed part to first order (X, not 1 − e^(−X))": (
        "budget.inputs.pump.cascade", "missed = -np.expm1(-x[:, :plateau]).sum(axis=1)",
        "missed = x[:, :plateau].sum(axis=1)", MODULES["budget.inputs.pump.cascade"]),
    "6 cascade deviation naively as ⟨n⟩ − n": (
        "budget.inputs.pump.cascade", "        return extra - missed\n",
        "        return self.predict(theta, v) - plateau\n",
        MODULES["budget.inputs.pump.cascade"]),
}

_BIN = {ast.Add: ast.Sub, ast.Sub: ast.Add, ast.Mult: ast.Div, ast.Div: ast.Mult,
        ast.Pow: ast.Mult, ast.FloorDiv: ast.Div, ast.Mod: ast.FloorDiv}
_CMP = {ast.Lt: ast.LtE, ast.LtE: ast.Lt, ast.Gt: ast.GtE, ast.GtE: ast.Gt, ast.Eq: ast.NotEq,
        ast.NotEq: ast.Eq, ast.Is: ast.IsNot, ast.IsNot: ast.Is, ast.In: ast.NotIn,
        ast.NotIn: ast.In}
_SYM = {ast.Add: "+", ast.Sub: "−", ast.Mult: "×", ast.Div: "/", ast.Pow: "**",
        ast.FloorDiv: "//", ast.Mod: "%", ast.Lt: "<", ast.LtE: "≤", ast.Gt: ">", ast.GtE: "≥",
        ast.Eq: "==", ast.NotEq: "!=", ast.Is: "is", ast.IsNot: "is not", ast.In: "in",
        ast.NotIn: "not in", ast.And: "and", ast.Or: "or"}


# ------------------------------------------------------------------ finding mutants
def _candidates(tree: ast.Module, lines: list[str]) -> list[tuple[int, str, int]]:
    """(index in ast.walk order, description, line) of every mutable node in a function body."""
    inside: set[int] = set()
    skip: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            body = node.body
            if body and isinstance(body[0], ast.Expr) and isinstance(
                    getattr(body[0], "value", None), ast.Constant):
                body = body[1:]                      # the docstring
            for stmt in body:
                inside.update(id(n) for n in ast.walk(stmt))
        if isinstance(node, (ast.JoinedStr, ast.Raise)):
            skip.update(id(n) for n in ast.walk(node))   # messages and their formatting
    out = []
    for i, node in enumerate(ast.walk(tree)):
        if id(node) not in inside or id(node) in skip:
            continue
        line = getattr(node, "lineno", 0)
        if line and lines[line - 1].rstrip().endswith("# pragma: no mutate"):
            continue
        if isinstance(node, (ast.BinOp, ast.AugAssign)) and type(node.op) in _BIN:
            out.append((i, f"{_SYM[type(node.op)]} → {_SYM[_BIN[type(node.op)]]}", line))
        elif isinstance(node, ast.Compare) and len(node.ops) == 1 and type(node.ops[0]) in _CMP:
            op = type(node.ops[0])
            out.append((i, f"{_SYM[op]} → {_SYM[_CMP[op]]}", line))
        elif isinstance(node, ast.BoolOp):
            out.append((i, "and → or" if isinstance(node.op, ast.And) else "or → and", line))
        elif isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.Not)):
            out.append((i, "drop unary −" if isinstance(node.op, ast.USub) else "drop not",
                        line))
        elif isinstance(node, ast.Constant) and type(node.value) in (int, float):
            out.append((i, f"{node.value!r} → {node.value + 1!r}", line))
        elif isinstance(node, ast.Constant) and type(node.value) is bool:
            out.append((i, f"{node.value} → {not node.value}", line))
    return out


def _mutate(tree: ast.Module, index: int) -> ast.Module:
    tree = copy.deepcopy(tree)
    for i, node in enumerate(ast.walk(tree)):
        if i != index:
            continue
        if isinstance(node, (ast.BinOp, ast.AugAssign)):
            node.op = _BIN[type(node.op)]()
        elif isinstance(node, ast.Compare):
            node.ops = [_CMP[type(node.ops[0])]()]
        elif isinstance(node, ast.BoolOp):
            node.op = ast.Or() if isinstance(node.op, ast.And) else ast.And()
        elif isinstance(node, ast.UnaryOp):
            node.op = ast.UAdd()          # +x keeps x; +bool keeps its truth: the op is dropped
        elif isinstance(node, ast.Constant):
            node.value = (not node.value) if type(node.value) is bool else node.value + 1
        return tree
    raise IndexError(index)


# ------------------------------------------------------------------ applying one in a child
def _functions(ns, prefix=""):
    """qualified name → function, for module-level functions and methods (nested classes too)."""
    out = {}
    for name, obj in list(vars(ns).items()) if not isinstance(ns, dict) else ns.items():
        if isinstance(obj, (staticmethod, classmethod)):
            obj = obj.__func__
        if isinstance(obj, property):
            for part, f in (("fget", obj.fget), ("fset", obj.fset)):
                if f is not None:
                    out[f"{prefix}{name}.{part}"] = f
        elif isinstance(obj, types.FunctionType):
            while hasattr(obj, "__wrapped__"):
                obj = obj.__wrapped__
            out[prefix + name] = obj
        elif isinstance(obj, type) and not prefix.count(".") > 3:
            out.update(_functions(obj, f"{prefix}{name}."))
    return out


def _install(module: types.ModuleType, code) -> None:
    """Swap into ``module`` the code of every function the mutant changed (and its numbers)."""
    ns: dict = {"__name__": module.__name__, "__file__": module.__file__,
                "__package__": module.__package__}
    exec(code, ns)  # noqa: S102 - the module's own source, mutated by this driver
    old = _functions(module)
    for name, f in _functions(ns).items():
        g = old.get(name)
        if g is not None and g.__code__ != f.__code__:
            g.__code__ = f.__code__
    for name, value in ns.items():               # module-level numbers (e.g. a divisor)
        if type(value) in (int, float) and getattr(module, name, None) != value:
            setattr(module, name, value)


def _run_child(modname: str, code, tests: list[str], timeout: float) -> tuple[str, float]:
    """'killed', 'survived', 'timeout' or 'error' for one mutant (``code`` None: clean run)."""
    t0 = time.monotonic()
    pid = os.fork()
    if pid == 0:                                   # child
        try:
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, 1)
            os.dup2(devnull, 2)
            import pytest
            if code is not None:
                _install(importlib.import_module(modname), code)
            rc = pytest.main(["-x", "-q", "-p", "no:cacheprovider", "-p", "no:randomly",
                              *[str(ROOT / "tests" / t) for t in tests]])
            os._exit(0 if rc == 0 else 1)
        except BaseException:                      # noqa: BLE001 - any failure kills the mutant
            os._exit(3)
    deadline = t0 + timeout
    while True:
        done, status = os.waitpid(pid, os.WNOHANG)
        if done:
            rc = os.waitstatus_to_exitcode(status)
            return ("survived" if rc == 0 else "error" if rc == 3 else "killed",
                    time.monotonic() - t0)
        if time.monotonic() > deadline:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
            return "timeout", time.monotonic() - t0
        time.sleep(0.05)


# ------------------------------------------------------------------ driver
def run_module(modname: str, sample: int | None, seed: int, out_dir: Path) -> dict:
    tests = MODULES[modname]
    path = ROOT / (modname.replace(".", "/") + ".py")
    source = path.read_text(encoding="utf-8")
    lines = source.splitlines()
    tree = ast.parse(source, str(path))
    cands = _candidates(tree, lines)
    if sample is not None and sample < len(cands):
        cands = sorted(random.Random(seed).sample(cands, sample), key=lambda c: c[0])
    status, clean = _run_child(modname, None, tests, 3600)
    if status != "survived":
        raise SystemExit(f"{modname}: the clean test run fails ({status}); fix that first")
    timeout = 3 * clean + 10
    results = []
    for n, (index, what, line) in enumerate(cands, 1):
        code = compile(_mutate(tree, index), str(path), "exec")
        st, dt = _run_child(modname, code, tests, timeout)
        results.append({"line": line, "mutation": what, "status": st, "seconds": round(dt, 1),
                        "source": lines[line - 1].strip() if line else ""})
        print(f"  [{n}/{len(cands)}] {modname}:{line} {what}: {st}", file=sys.stderr,
              flush=True)
    # a mutant the driver could not install ("error") counts neither way
    results_ok = [r for r in results if r["status"] != "error"]
    killed = sum(r["status"] in ("killed", "timeout") for r in results_ok)
    summary = {"module": modname, "tests": tests, "mutants": len(results_ok), "killed": killed,
               "survived": len(results_ok) - killed, "not_installed": len(results) - len(results_ok),
               "clean_seconds": round(clean, 1),
               "sampled": sample is not None, "results": results}
    out_dir.mkdir(exist_ok=True)
    (out_dir / f"{modname}.json").write_text(json.dumps(summary, indent=1, ensure_ascii=False),
                                             encoding="utf-8")
    rate = 100.0 * killed / max(len(results_ok), 1)
    print(f"{modname}: {killed}/{len(results_ok)} killed ({rate:.1f} %), clean run {clean:.0f} s"
          + (f", {summary['not_installed']} not installed" if summary["not_installed"] else ""),
          flush=True)
    for r in results:
        if r["status"] == "survived":
            print(f"    survived  line {r['line']}: {r['mutation']}   | {r['source']}")
    return summary


def run_known() -> int:
    failed = 0
    for name, (modname, old, new, tests) in KNOWN.items():
        path = ROOT / (modname.replace(".", "/") + ".py")
        source = path.read_text(encoding="utf-8")
        if source.count(old) != 1:
            print(f"{name}: the text to change is not found once in {path.name} (code moved?)")
            failed += 1
            continue
        code = compile(source.replace(old, new), str(path), "exec")
        st, dt = _run_child(modname, code, tests, 3600)
        print(f"{name}: {st} ({dt:.0f} s; tests {' '.join(tests)})", flush=True)
        failed += st == "survived"
    return 1 if failed else 0


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("modules", nargs="*", help="dotted module names (default: all of MODULES)")
    p.add_argument("--sample", type=int, help="mutate only N randomly chosen nodes per module")
    p.add_argument("--seed", type=int, default=18, help="seed of --sample (default 18)")
    p.add_argument("--known", action="store_true", help="plant the named bugs of issue 18")
    p.add_argument("--list", action="store_true", help="count the mutants, run nothing")
    args = p.parse_args(argv)
    os.chdir(ROOT)
    sys.path[:0] = [str(ROOT), str(ROOT / "tests")]
    if args.known:
        return run_known()
    mods = args.modules or list(MODULES)
    unknown = [m for m in mods if m not in MODULES]
    if unknown:
        p.error(f"not in MODULES: {', '.join(unknown)}")
    if args.list:
        for m in mods:
            src = (ROOT / (m.replace(".", "/") + ".py")).read_text(encoding="utf-8")
            print(m, len(_candidates(ast.parse(src), src.splitlines())))
        return 0
    import numpy  # noqa: F401 - imported once here, shared by every forked child
    import pytest  # noqa: F401
    import scipy.stats  # noqa: F401
    for m in mods:
        importlib.import_module(m)
    total_k = total_n = 0
    for m in mods:
        s = run_module(m, args.sample, args.seed, ROOT / ".mutate")
        total_k += s["killed"]
        total_n += s["mutants"]
    print(f"total: {total_k}/{total_n} killed ({100.0 * total_k / max(total_n, 1):.1f} %)")
    return 0


if __name__ == "__main__":
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    sys.exit(main())
