"""One CLARABEL solve of the row-symmetric program against the default path with its rescaled re-solves.

Typical call (from the repository root)::

    OMP_NUM_THREADS=1 python benchmarks/bench_rescale.py --cases 7:12:1 6:12:1

A case is ``rows:T`` or ``rows:T:max_ones`` (OR of position-search rows with Σ k_i = T).  For each
case it builds the reduced program once and, in the same run, times

* the baseline: ``solve_rows(f, retry=False, refine=False, first="default")``, one unrescaled solve
  whose certificate is checked;
* the default: ``solve_rows(f)``, which starts rescaled to the positive bound's densities on programs
  of at least ``GUESS_WEIGHTS`` pair orbits and re-solves rescaled to its best point (then tries the
  other settings of ``RETRIES`` and the refinement) while the checked relative gap exceeds ``RETRY_GAP``.

It prints both checked bounds, the relative gaps, the attempts of the default path and the time
ratio (default over baseline).  Seconds are this machine's own figures.
"""

from __future__ import annotations

import argparse
import time
import warnings


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="+", default=["7:12:1"], metavar="ROWS:T[:MAX_ONES]")
    a = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    from advbound.functions.rowfamily import position_search_family
    from advbound.programs.rowsym import solve_rows

    solve_rows(position_search_family("or", 2, 4, None))        # imports and first-call set-up, untimed
    print(f"{'case':>8} {'one solve s':>11} {'lower':>10} {'upper':>10} {'gap':>8} | {'default s':>9} "
          f"{'lower':>10} {'upper':>10} {'gap':>8} {'ratio':>6}  attempts")
    for case in a.cases:
        parts = [int(p) for p in case.split(":")]
        fam = position_search_family("or", parts[0], parts[1], parts[2] if len(parts) > 2 else None)
        row = []
        for kw in ({"retry": False, "refine": False, "first": "default"}, {}):
            t0 = time.perf_counter()
            r = solve_rows(fam, **kw)
            seconds = time.perf_counter() - t0
            lo, up = (v if v is not None else float("nan") for v in (r.lower, r.upper))
            row.append((seconds, lo, up, (up - lo) / up, r))
        (t1, l1, u1, g1, _), (t2, l2, u2, g2, r2) = row
        tried = ", ".join(f"{e['settings']} ({e['status']})" for e in r2.certificate.metadata.get("attempts", [])) \
            if r2.certificate is not None else r2.message
        print(f"{case:>8} {t1:>11.1f} {l1:>10.6f} {u1:>10.6f} {g1:>8.1e} | {t2:>9.1f} {l2:>10.6f} {u2:>10.6f} "
              f"{g2:>8.1e} {t2 / t1:>6.2f}  {tried or 'first solve only'}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
