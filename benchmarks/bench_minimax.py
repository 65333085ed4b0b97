"""The positive bound ADV of interchangeable rows: the minimax program against the row-symmetric one.

Typical call (from the repository root)::

    OMP_NUM_THREADS=1 python benchmarks/bench_minimax.py --cases 5:10 6:12

A case is ``rows:T`` (OR of position-search rows, Σ k_i = T, at most one row of value 1).  For each
case it builds the row family once, then times, in the same run, the row-symmetric program on its
trivial block (``solve_rows(fam, bound="positive")``, the baseline) and the minimax program
(``solve_minimax_rows(fam)``), both with verification of both bounds, and prints the speed-up as a
ratio with both verified intervals.  ``--no-baseline`` skips the baseline for large cases.
``--programs`` also times the two ways of solving the minimax program itself, without
verification: the cutting planes (``solve_minimax``, the baseline of that line) and the one-solve
transport program (``solve_transport``, what ``solve_minimax_rows`` runs), with their values
``1/t`` (the relaxation) and ``1/φ`` (the weights' least pair sum).
Seconds are this machine's own figures.
"""

from __future__ import annotations

import argparse
import time
import warnings


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="+", default=["5:10"], metavar="ROWS:T")
    ap.add_argument("--no-baseline", action="store_true", help="skip the row-symmetric baseline")
    ap.add_argument("--programs", action="store_true", help="also time cutting planes against the one-solve program")
    a = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    from advbound.functions.rowfamily import position_search_family
    from advbound.programs.minimax import solve_minimax, solve_minimax_rows
    from advbound.programs.minimax_transport import solve_transport
    from advbound.programs.rowsym import solve_rows

    for case in a.cases:
        n, T = (int(v) for v in case.split(":"))
        fam = position_search_family("or", n, T, max_ones=1)
        print(f"OR of {n} rows, T = {T}, at most one row of value 1: {fam.size} inputs, {len(fam.contents)} orbits")
        base = None
        if not a.no_baseline:
            t0 = time.perf_counter()
            r = solve_rows(fam, bound="positive")
            base = time.perf_counter() - t0
            print(f"  rows (trivial block)  {base:9.2f} s  [{r.lower:.8f}, {r.upper}]  {r.status}")
        t0 = time.perf_counter()
        m = solve_minimax_rows(fam)
        mm = time.perf_counter() - t0
        ratio = f"  ratio {base / mm:.1f}x" if base else ""
        print(f"  minimax               {mm:9.2f} s  [{m.lower:.8f}, {m.upper:.8f}]  {m.status}{ratio}")
        if a.programs:
            t0 = time.perf_counter()
            c = solve_minimax(fam)
            tc = time.perf_counter() - t0
            print(f"  cutting planes        {tc:9.2f} s  1/t {1 / c.t:.8f}  1/phi {1 / c.phi:.8f}  {c.status}, "
                  f"{c.rounds} rounds, {c.keys.shape[0]} cuts")
            t0 = time.perf_counter()
            o = solve_transport(fam)
            to = time.perf_counter() - t0
            print(f"  transport (one solve) {to:9.2f} s  1/t {1 / o.t:.8f}  1/phi {1 / o.phi:.8f}  {o.status}  "
                  f"ratio {tc / to:.1f}x")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
