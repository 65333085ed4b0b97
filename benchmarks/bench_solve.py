"""Time and peak memory of ``advbound.programs.solve`` on the shipped instances and a few known functions.

Each case runs in its own subprocess, so its peak resident memory (``ru_maxrss``
from ``os.wait4``) is its own.  The first case is a baseline measured in the
same run (OR_2: interpreter start-up, imports and a trivial solve), and every
other case is also reported as a ratio to it, so figures from different
machines or loads can be compared.

Usage::

    nice -n 10 python benchmarks/bench_solve.py                      # first grid point of each instance
    python benchmarks/bench_solve.py --set T=6 --solver CLARABEL     # a given grid point
    python benchmarks/bench_solve.py --only instances/or3_sum_T.toml --json
"""

from __future__ import annotations

import argparse
import glob
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
KNOWN = {
    # name: (builder call, known ADV± for the record)
    "OR_2": ("or_function(2)", "sqrt(2)"),
    "MAJ_3": ("majority_function(3)", "2"),
    "EXACT_2_of_3": ("exact_function(3, 2)", "sqrt(7)"),
    "OR_6": ("or_function(6)", "sqrt(6)"),
    "PARITY_4": ("parity_function(4)", "4"),
}


def _child(spec: str, solver: str, tol: float, params: list[str], method: str) -> None:
    """Solve one case and print one JSON line (runs in the subprocess)."""
    t_import = time.perf_counter()
    import cvxpy  # noqa: F401 - imported before timing so that solve_time is the solve alone

    import advbound.functions.builders as b
    from advbound.functions.instance import load_function, parse_params
    from advbound.programs.solve import solve

    kind, _, what = spec.partition(":")
    if kind == "known":
        f = eval(KNOWN[what][0], {k: getattr(b, k) for k in b.__all__})  # noqa: S307 - fixed table above
    else:
        p = parse_params(params) if params else None
        try:
            f = load_function(what, p)
        except Exception:  # a --set that this instance does not use: fall back to its first grid point
            f = load_function(what, None)
    t0 = time.perf_counter()
    r = solve(f, solver=solver, tol=tol, method=method)
    t1 = time.perf_counter()
    print(json.dumps({"case": spec, "size": f.size, "positions": f.n, "status": r.status, "lower": r.lower,
                      "upper": r.upper, "gap": r.gap, "solve_time": t1 - t0, "import_time": t0 - t_import,
                      "solver_time": r.solver_stats.time, "iterations": r.solver_stats.iterations}))


def _run(spec: str, args) -> dict:
    cmd = [sys.executable, __file__, "--child", spec, "--solver", args.solver, "--tol", str(args.tol),
           "--method", args.method] + sum((["--set", s] for s in args.set), [])
    env = dict(os.environ, OMP_NUM_THREADS=os.environ.get("OMP_NUM_THREADS", "1"))
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=ROOT)
    out, err = proc.stdout.read(), proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    wall = time.perf_counter() - t0
    rss_mb = usage.ru_maxrss / 1024.0 if sys.platform != "darwin" else usage.ru_maxrss / 2**20
    if proc.returncode != 0 or not out.strip():
        last = (err.strip().splitlines() or ["no output"])[-1]
        return {"case": spec, "status": "error", "error": last, "wall": wall, "peak_mb": rss_mb}
    d = json.loads(out.strip().splitlines()[-1])
    d.update(wall=wall, peak_mb=rss_mb)
    return d


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--solver", default="SCS")
    ap.add_argument("--tol", type=float, default=1e-7)
    ap.add_argument("--method", default="dense")
    ap.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                    help="grid point for the instances (default: each instance's first grid point)")
    ap.add_argument("--only", action="append", default=[], metavar="PATH", help="only these instance files")
    ap.add_argument("--no-known", action="store_true", help="skip the known functions")
    ap.add_argument("--json", action="store_true", help="one JSON line per case instead of a table")
    ap.add_argument("--child", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        _child(args.child, args.solver, args.tol, args.set, args.method)
        return 0

    files = args.only or sorted(glob.glob(str(ROOT / "instances" / "*.toml")))
    cases = ["known:OR_2"]  # the baseline
    if not args.no_known:
        cases += [f"known:{k}" for k in KNOWN if k != "OR_2"]
    cases += [f"instance:{os.path.relpath(p, ROOT)}" for p in files]
    rows = []
    base = None
    if not args.json:
        print(f"solver {args.solver}, tol {args.tol:g}, method {args.method}"
              + (f", --set {' '.join(args.set)}" if args.set else ", first grid point"))
        print(f"{'case':44s} {'|D|':>5s} {'status':>10s} {'lower':>12s} {'gap':>9s} "
              f"{'solve s':>8s} {'x base':>7s} {'peak MB':>8s} {'x base':>7s}")
    for spec in cases:
        d = _run(spec, args)
        if base is None:
            base = d
        d["time_ratio"] = d.get("solve_time", float("nan")) / max(base.get("solve_time", float("nan")), 1e-9)
        d["memory_ratio"] = d["peak_mb"] / max(base["peak_mb"], 1e-9)
        rows.append(d)
        if args.json:
            print(json.dumps(d))
            continue
        if d["status"] == "error":
            print(f"{spec:44s} error: {d['error']}")
            continue
        gap = "-" if d["gap"] is None else f"{d['gap']:.2e}"
        low = "-" if d["lower"] is None else f"{d['lower']:.8f}"
        print(f"{spec:44s} {d['size']:5d} {d['status']:>10s} {low:>12s} {gap:>9s} {d['solve_time']:8.2f} "
              f"{d['time_ratio']:7.1f} {d['peak_mb']:8.1f} {d['memory_ratio']:7.2f}")
    if not args.json:
        print(f"baseline (OR_2): solve {base.get('solve_time', float('nan')):.3f} s, peak {base['peak_mb']:.1f} MB "
              f"(includes interpreter and imports)")
    return 0 if all(r["status"] in ("optimal", "inaccurate") for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main())
