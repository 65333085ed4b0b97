"""The default solve path against the dense program on OR of position-search rows with Σ k_i = T.

Typical call (from the repository root)::

    OMP_NUM_THREADS=1 python benchmarks/bench_rows.py --cases 3:7 4:8:1
    OMP_NUM_THREADS=1 python benchmarks/bench_rows.py --cases 6:12:1 --no-dense

A case is ``rows:T`` or ``rows:T:max_ones``.  For each case it builds the function once
(``position_search_composition``), then times, in the same run, the dense program
(``solve(f, method="dense", solver="CLARABEL")``, the baseline) and ``solve(f)`` with default
options (``method="auto"``, which picks the row-symmetric program and verifies both bounds), and
prints the speed-up as a ratio with both values.  One untimed solve of a 2-row instance with each
program comes first, so imports and first-call set-up are not in either figure.  Seconds are this
machine's own figures.
"""

from __future__ import annotations

import argparse
import time
import warnings


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="+", default=["3:7"], metavar="ROWS:T[:MAX_ONES]")
    ap.add_argument("--no-dense", action="store_true", help="skip the dense baseline (large cases)")
    a = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    from advbound.functions.builders import position_search_composition
    from advbound.programs.solve import solve

    warm = position_search_composition("or", 2, None, 4)   # imports and first-call set-up, untimed
    solve(warm)
    solve(warm, method="dense", solver="CLARABEL")
    print(f"{'case':>10} {'|D|':>8} {'dense s':>8} {'auto s':>8} {'ratio':>7} {'dense lower':>12} "
          f"{'auto lower':>12} {'auto upper':>12} {'rel. gap':>9}  program, status")
    for case in a.cases:
        parts = [int(p) for p in case.split(":")]
        n, T = parts[0], parts[1]
        mo = parts[2] if len(parts) > 2 else None
        f = position_search_composition("or", n, None, T, max_ones=mo)
        t0 = time.perf_counter()
        r = solve(f)
        t_auto = time.perf_counter() - t0
        t_dense, dense_value = float("nan"), float("nan")
        if not a.no_dense:
            from advbound.functions.sizing import TooLargeError
            t0 = time.perf_counter()
            try:
                d = solve(f, method="dense", solver="CLARABEL")
                dense_value = d.lower if d.lower is not None else float("nan")
                t_dense = time.perf_counter() - t0
            except TooLargeError as err:   # the dense baseline does not fit: say so, keep the rows figure
                print(f"{case:>10} dense baseline refused: {str(err).split(';')[0]}", flush=True)
        gap = r.relative_gap if r.relative_gap is not None else float("nan")
        nan = float("nan")
        print(f"{case:>10} {f.size:>8} {t_dense:>8.2f} {t_auto:>8.2f} {t_dense / t_auto:>7.1f} {dense_value:>12.7f} "
              f"{r.lower if r.lower is not None else nan:>12.7f} {r.upper if r.upper is not None else nan:>12.7f} "
              f"{gap:>9.1e}  {r.method}, {r.status}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
