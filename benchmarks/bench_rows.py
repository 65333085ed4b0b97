"""Dense versus row-symmetric (S_n-reduced) ADV± on OR of position-search rows with Σ k_i = T.

Typical call (from the repository root)::

    OMP_NUM_THREADS=1 python benchmarks/bench_rows.py --cases 3:7 4:8:1
    OMP_NUM_THREADS=1 python benchmarks/bench_rows.py --cases 6:12:1 --no-dense

A case is ``rows:T`` or ``rows:T:max_ones``.  For each case it builds the function once, then
times the dense program (``advbound.programs.solve``, CLARABEL, the baseline) and the row-symmetric one
(``advbound.programs.rowsym``: build of the reduced program, and the solve) in the same run, and prints the
speed-up as a ratio together with both values.  Seconds are this machine's own figures.
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
    from advbound.programs.rowsym import formulate_rows, gamma_on_orbits, position_search_family, reduced_lower_bound, \
        solve_reduced

    print(f"{'case':>10} {'|D|':>8} {'orbits':>6} {'weights':>8} {'largest block':>13} "
          f"{'dense s':>8} {'rows s':>8} {'ratio':>7} {'dense value':>12} {'rows value':>12}")
    for case in a.cases:
        parts = [int(p) for p in case.split(":")]
        n, T = parts[0], parts[1]
        mo = parts[2] if len(parts) > 2 else None
        fam = position_search_family("or", n, T, mo)
        t0 = time.perf_counter()
        prog = formulate_rows(fam)
        x, word, *_ = solve_reduced(prog)
        g, rho = gamma_on_orbits(prog, x)
        value = reduced_lower_bound(prog, g, rho)["lower"]
        t_rows = time.perf_counter() - t0
        t_dense, dense_value = float("nan"), float("nan")
        if not a.no_dense:
            from advbound.programs.rowsym import expand_gamma
            from advbound.programs.solve import solve
            f, _ = expand_gamma(prog, g)
            t0 = time.perf_counter()
            r = solve(f, solver="CLARABEL")
            t_dense = time.perf_counter() - t0
            dense_value = r.lower if r.lower is not None else float("nan")
        sz = prog.sizes()
        print(f"{case:>10} {fam.size:>8} {sz['orbits']:>6} {sz['weights']:>8} {max(sz['block_sizes']):>13} "
              f"{t_dense:>8.2f} {t_rows:>8.2f} {t_dense / t_rows:>7.1f} {dense_value:>12.7f} {value:>12.7f}",
              flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
