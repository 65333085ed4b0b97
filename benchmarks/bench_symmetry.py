"""Dense versus symmetry-reduced ADV± on OR of position-search rows with sum of positions = T.

Typical call (from the repository root)::

    OMP_NUM_THREADS=1 nice -n 10 python benchmarks/bench_symmetry.py compare --T 5 6 7
    OMP_NUM_THREADS=1 nice -n 10 python benchmarks/bench_symmetry.py reach --rows 3 --T 10 12 14 --limit 600
    OMP_NUM_THREADS=1 nice -n 10 python benchmarks/bench_symmetry.py reach --rows 3 --T 10 --solvers SCS --chordal

``compare`` runs the dense program (``advbound.programs.solve.solve``, method ``dense``) and the
symmetric one (``advbound.programs.symmetric.solve_symmetric``) on the same instance and prints
wall and CPU time and the verified bounds.  ``reach`` runs only the symmetric program (``--chordal``: with chordal blocks),
each instance in a subprocess killed after ``--limit`` seconds, and stops a family at
its first failure.  Every line is also appended as JSON to ``--out``.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

_RUN = r"""
import json, sys, time, warnings
warnings.simplefilter("ignore")
from advbound.functions.builders import compose, or_function, position_search_row
from advbound.functions.timemodel import Budget
rows, T, method, solver, tol = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3], sys.argv[4], float(sys.argv[5])
chordal = sys.argv[6] == "1"
f = compose(or_function(rows), [position_search_row(T - rows + 1)] * rows, budget=Budget.sum_squares(T))
w0, c0 = time.perf_counter(), time.process_time()
if method == "dense":
    from advbound.programs.solve import solve
    r = solve(f, solver=solver, tol=tol)
else:
    from advbound.programs.symmetric import solve_symmetric
    r = solve_symmetric(f, solver=solver, tol=tol, chordal=chordal)
out = dict(rows=rows, T=T, inputs=f.size, method=method + ("+chordal" if chordal else ""), solver=solver,
           tol=tol, status=r.status,
           lower=r.lower, upper=r.upper, wall=time.perf_counter() - w0, cpu=time.process_time() - c0,
           iterations=r.solver_stats.iterations, sizes={k: v for k, v in r.solver_stats.options.items()
                                                         if k in ("group_order", "weights", "densities",
                                                                  "representatives", "build_time")})
print("RESULT " + json.dumps(out))
"""


def run_one(rows, T, method, solver, tol, limit, chordal=False):
    env = dict(os.environ, OMP_NUM_THREADS="1")
    t0 = time.perf_counter()
    try:
        p = subprocess.run([sys.executable, "-c", _RUN, str(rows), str(T), method, solver, str(tol),
                            "1" if chordal else "0"],
                           capture_output=True, text=True, timeout=limit, env=env)
    except subprocess.TimeoutExpired:
        method = method + ("+chordal" if chordal else "")
        return dict(rows=rows, T=T, method=method, solver=solver, tol=tol, status="timeout",
                    wall=time.perf_counter() - t0)
    for line in p.stdout.splitlines():
        if line.startswith("RESULT "):
            return json.loads(line[7:])
    method = method + ("+chordal" if chordal else "")
    tail = (p.stderr.strip().splitlines() or ["no output"])[-1]
    return dict(rows=rows, T=T, method=method, solver=solver, tol=tol, status="error", detail=tail,
                wall=time.perf_counter() - t0)


def show(r):
    lo = "-" if r.get("lower") is None else f"{r['lower']:.6f}"
    up = "-" if r.get("upper") is None else f"{r['upper']:.6f}"
    cpu = "-" if r.get("cpu") is None else f"{r['cpu']:.1f}"
    print(f"rows={r['rows']} T={r['T']:>2} |D|={r.get('inputs', '?'):>5} {r['method']:>9} {r['solver']:>8} "
          f"tol={r['tol']:.0e} {r['status']:>10} lower={lo} upper={up} wall={r['wall']:.1f}s cpu={cpu}s "
          f"{r.get('detail', '')}", flush=True)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("mode", choices=("compare", "reach"))
    ap.add_argument("--rows", type=int, default=3)
    ap.add_argument("--T", type=int, nargs="+", required=True)
    ap.add_argument("--solvers", nargs="+", default=["SCS", "CLARABEL"])
    ap.add_argument("--tol", type=float, default=1e-7)
    ap.add_argument("--limit", type=float, default=600.0)
    ap.add_argument("--out", default="benchmarks/bench_symmetry.jsonl")
    ap.add_argument("--chordal", action="store_true", help="symmetric runs also use chordal blocks")
    a = ap.parse_args(argv)
    with open(a.out, "a") as fh:
        for solver in a.solvers:
            for T in a.T:
                methods = ("dense", "symmetric") if a.mode == "compare" else ("symmetric",)
                failed = False
                for m in methods:
                    r = run_one(a.rows, T, m, solver, a.tol, a.limit, a.chordal and m == "symmetric")
                    show(r)
                    fh.write(json.dumps(r) + "\n")
                    fh.flush()
                    failed = r["status"] not in ("optimal", "inaccurate")
                if a.mode == "reach" and failed:
                    break
    return 0


if __name__ == "__main__":
    sys.exit(main())
