"""Dense reference SDP vs the factored solver, and the large-instance lower bound, in one run.

Instances: OR_n of position-search rows of length ``T - n + 1`` restricted to ``sum_i k_i = T``
(built with ``advbound.functions.builders.compose``).  Each case runs in its own subprocess with a wall-clock
limit, so its peak resident memory (``ru_maxrss`` from ``os.wait4``) is its own.  For every instance
both methods finish, the dense optimum must lie in the factored solver's verified bracket widened by
``1e-5`` relative ("agree" column).  The ratio columns are factored / dense.

Usage::

    nice -n 10 python benchmarks/bench_scale.py --quick           # T = 5, 6 and a 10^4-input lower bound
    nice -n 10 python benchmarks/bench_scale.py                   # T = 5..20 (three rows), large bounds
    python benchmarks/bench_scale.py --rows 4 --T 8 10 --limit 600 --json
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _child(kind: str, n: int, T: int, limit: float, tol: float) -> None:
    """Run one case and print one JSON line (subprocess)."""
    import math

    t0 = time.perf_counter()
    out = {"kind": kind, "n": n, "T": T}
    if kind == "large":
        from advbound.programs.largescale import large_lower_bound

        r = large_lower_bound(n, T, max_ones=1, time_limit=limit / 2)
        out.update(size=r.domain_size, lower=r.lower, upper=None, status=r.status)
    else:
        from advbound.functions.builders import compose, or_function, position_search_row
        from advbound.functions.timemodel import Budget

        f = compose(or_function(n), position_search_row(T - n + 1), budget=Budget.sum_squares(T))
        out["size"] = f.size
        if kind == "dense":
            out.update(_dense(f))
        else:
            from advbound.programs.factored import solve_factored

            r = solve_factored(f, tol=tol, time_limit=limit * 0.9)
            out.update(lower=r.lower, upper=r.upper, status=r.status, gap=r.relative_gap)
    out["time"] = time.perf_counter() - t0
    print(json.dumps({k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in out.items()}))


def _dense(f) -> dict:
    """The dense reference: advbound.programs.solve with method="dense" and CLARABEL."""
    from advbound.programs.solve import solve

    r = solve(f, solver="CLARABEL", method="dense")
    return {"value": r.objective, "lower": r.lower, "upper": r.upper, "status": r.status}


class _Popen(subprocess.Popen):
    """Popen whose wait records the child's peak RSS (``os.wait4``)."""

    def _try_wait(self, wait_flags):
        try:
            pid, sts, usage = os.wait4(self.pid, wait_flags)
        except ChildProcessError:
            return self.pid, 0
        if pid == self.pid:
            self._peak_mb = usage.ru_maxrss / 1024.0
        return pid, sts


def _run(kind, n, T, limit, tol) -> dict:
    cmd = [sys.executable, __file__, "--child", kind, str(n), str(T), str(limit), str(tol)]
    env = dict(os.environ, OMP_NUM_THREADS="1", PYTHONPATH=str(ROOT))
    t0 = time.perf_counter()
    proc = _Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        out, err = proc.communicate(timeout=limit + 30)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.communicate()
        return {"kind": kind, "n": n, "T": T, "status": "timeout", "time": time.perf_counter() - t0}
    res = {"kind": kind, "n": n, "T": T, "status": "crashed", "time": time.perf_counter() - t0}
    for line in out.splitlines():
        if line.startswith("{"):
            res = json.loads(line)
    res["peak_mb"] = getattr(proc, "_peak_mb", None)
    if res.get("status") == "crashed":
        res["error"] = err.strip().splitlines()[-1:] if err.strip() else []
    return res


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small instances only (a few minutes)")
    ap.add_argument("--rows", type=int, default=3)
    ap.add_argument("--T", type=int, nargs="*", help="time budgets (default: quick 5 6, full 5 7 9 12 16 20)")
    ap.add_argument("--limit", type=float, default=600.0, help="wall-clock limit per case, seconds")
    ap.add_argument("--tol", type=float, default=1e-4, help="factored target relative gap")
    ap.add_argument("--dense-max", type=int, default=400, help="skip the dense reference above this |D|")
    ap.add_argument("--large", type=int, nargs="*", help="T values of the large lower bound (rows --rows)")
    ap.add_argument("--json", action="store_true", help="also print every record as JSON")
    ap.add_argument("--child", nargs=5, help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    sys.stdout.reconfigure(line_buffering=True)
    if a.child:
        kind, n, T, limit, tol = a.child
        _child(kind, int(n), int(T), float(limit), float(tol))
        return 0
    Ts = a.T or ([5, 6] if a.quick else [5, 7, 9, 12, 16, 20])
    large = a.large if a.large is not None else ([30] if a.quick else [52, 80])
    from math import comb
    rows = []
    print(f"{'n':>2} {'T':>3} {'|D|':>7} {'method':>8} {'time s':>8} {'peak MB':>8} {'lower':>11} {'upper':>11} "
          f"{'status':>10} {'agree':>6}")
    for T in Ts:
        size = comb(T - 1, a.rows - 1) * 2 ** a.rows
        dense = _run("dense", a.rows, T, a.limit, a.tol) if size <= a.dense_max else \
            {"kind": "dense", "status": "skipped", "size": size}
        fac = _run("factored", a.rows, T, a.limit, a.tol)
        agree = ""
        v = dense.get("value")
        if v is not None and fac.get("lower") is not None and fac.get("upper") is not None:
            agree = "yes" if fac["lower"] <= v * (1 + 1e-5) and v <= fac["upper"] * (1 + 1e-5) else "NO"
        for r in (dense, fac):
            lo = r.get("lower", r.get("value"))
            up = r.get("upper", r.get("value"))
            print(f"{a.rows:>2} {T:>3} {r.get('size', size):>7} {r['kind']:>8} {r.get('time', float('nan')):>8.1f} "
                  f"{(r.get('peak_mb') or float('nan')):>8.0f} {(lo if lo is not None else float('nan')):>11.7f} "
                  f"{(up if up is not None else float('nan')):>11.7f} {r.get('status', ''):>10} "
                  f"{agree if r is fac else '':>6}")
        if dense.get("time") and fac.get("time") and dense.get("status") not in ("timeout", "skipped", "crashed"):
            print(f"   ratio factored/dense: time {fac['time'] / dense['time']:.2f}, "
                  f"peak memory {(fac.get('peak_mb') or 0) / max(dense.get('peak_mb') or 1, 1):.2f}")
        rows += [dense, fac]
    for T in large:
        r = _run("large", 4, T, a.limit, a.tol)
        print(f"{4:>2} {T:>3} {r.get('size', 0):>7} {'large':>8} {r.get('time', float('nan')):>8.1f} "
              f"{(r.get('peak_mb') or float('nan')):>8.0f} {(r.get('lower') or float('nan')):>11.7f} "
              f"{'-':>11} {r.get('status', ''):>10}")
        rows.append(r)
    for kind in ("dense", "factored", "large"):
        ok = [r for r in rows if r.get("kind") == kind and r.get("status") in ("optimal", "inaccurate")
              and r.get("time", 1e9) <= a.limit]
        if ok:
            best = max(ok, key=lambda r: r.get("size", 0))
            print(f"largest {kind} instance finished within {a.limit:.0f} s: |D| = {best['size']} "
                  f"(T = {best['T']}, {best['time']:.0f} s, status {best['status']})")
    if a.json:
        for r in rows:
            print(json.dumps(r))
    return 0


if __name__ == "__main__":
    sys.exit(main())
