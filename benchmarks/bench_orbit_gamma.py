"""A row-invariant Γ evaluated by orbits against the dense evaluation, on OR of position-search rows.

Typical call (from the repository root)::

    OMP_NUM_THREADS=1 python benchmarks/bench_orbit_gamma.py --cases 4:8 5:10 6:12
    OMP_NUM_THREADS=1 python benchmarks/bench_orbit_gamma.py --cases 8:16 12:24 --no-dense

A case is ``rows:T`` (inputs with Σ k_i = T and at most one row of value 1).  Γ is the
same-profile star of examples/gamma_star.py with ``cross = 0.05``.  For each case, in one run: the
dense path (build the function, ``gamma_from_callable`` + ``evaluate_gamma``; the baseline), the
quotient norms (``quotient_gamma``) and the representative set (``orbit_gamma``, basis build
included).  Prints seconds (this machine's own figures), the ratios against the baseline and the
three bounds.
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import time

HERE = os.path.dirname(os.path.abspath(__file__))


def _star():
    spec = importlib.util.spec_from_file_location("gamma_star", os.path.join(HERE, "..", "examples", "gamma_star.py"))
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod.gamma


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="+", default=["4:8", "5:10"], metavar="ROWS:T")
    ap.add_argument("--no-dense", action="store_true", help="skip the dense baseline and the blocks (large cases)")
    a = ap.parse_args(argv)
    from advbound.evidence.orbitgamma import orbit_gamma
    from advbound.evidence.orbitquotient import quotient_gamma
    from advbound.evidence.usergamma import evaluate_gamma, gamma_from_callable
    from advbound.functions.builders import position_search_composition
    from advbound.functions.rowfamily import position_search_family

    gamma, params = _star(), {"cross": 0.05}
    print(f"{'case':>7} {'|D|':>11} {'dense s':>8} {'quotient s':>10} {'ratio':>7} {'blocks s':>9} {'ratio':>7}  bounds")
    for case in a.cases:
        n, T = (int(v) for v in case.split(":"))
        fam = position_search_family("or", n, T, max_ones=1)
        t0 = time.perf_counter()
        q = quotient_gamma(fam, gamma, params)
        tq = time.perf_counter() - t0
        dense = blocks = None
        td = tb = float("nan")
        if not a.no_dense:
            t0 = time.perf_counter()
            f = position_search_composition("or", n, T - n + 1, T, max_ones=1)
            dense = evaluate_gamma(f, gamma_from_callable(f, gamma, params=params)).certified_ratio
            td = time.perf_counter() - t0
            t0 = time.perf_counter()
            blocks = orbit_gamma(fam, gamma, params).lower
            tb = time.perf_counter() - t0
        bounds = " ".join(f"{v:.10g}" for v in (dense, q.lower, blocks) if v is not None)
        print(f"{case:>7} {fam.size:>11,} {td:>8.2f} {tq:>10.2f} {td / tq:>7.1f} {tb:>9.2f} {td / tb:>7.1f}  {bounds}",
              flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
