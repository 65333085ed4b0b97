"""Timing of the exact t-query program (advbound.programs.exact), with the symmetry reduction on and off.

Usage::

    OMP_NUM_THREADS=1 nice -n 10 /work/venv/bin/python benchmarks/bench_exact.py            # "1min" tier
    OMP_NUM_THREADS=1 nice -n 10 /work/venv/bin/python benchmarks/bench_exact.py --tier 10min

The "1min" tier lists instances whose slower run (symmetry off) takes well under a minute on one
core; the "10min" tier instances take minutes.  Each row: function, |D|, t, wall time with the
automorphism reduction (on) and without it (off), their ratio, the verified success probability
(achieved) and the status.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from advbound.functions.builders import or_function, parity_function, position_search_row  # noqa: E402
from advbound.programs.exact import exact_success  # noqa: E402
from advbound.functions.function import PartialFunction  # noqa: E402


def search(n: int) -> PartialFunction:
    """Unique marked item among n (domain: weight-one strings; output: the marked index)."""
    return PartialFunction.from_pairs("01", [("".join("1" if i == k else "0" for i in range(n)), k)
                                             for k in range(n)], description=f"search_{n}")


def or_of_rows(T: int) -> PartialFunction:
    """OR of 3 position-search rows restricted to k_1 + k_2 + k_3 = T (instances/or3_sum_T.toml)."""
    from advbound.functions.instance import load_function
    here = os.path.join(os.path.dirname(__file__), "..", "instances", "or3_sum_T.toml")
    return load_function(here, {"T": T})


TIERS = {
    "1min": [("parity_4", lambda: parity_function(4), 2), ("or_4", lambda: or_function(4), 2),
             ("search_8", lambda: search(8), 2), ("psrow_4 (q=3)", lambda: position_search_row(4), 2),
             ("parity_5", lambda: parity_function(5), 3), ("or3_sum_T T=4", lambda: or_of_rows(4), 2)],
    "10min": [("parity_6", lambda: parity_function(6), 3), ("or_6", lambda: or_function(6), 3),
              ("search_16", lambda: search(16), 2), ("psrow_6 (q=3)", lambda: position_search_row(6), 3),
              ("or3_sum_T T=5", lambda: or_of_rows(5), 2)],
}


def run(name, build, t, off: bool, solver: str):
    f = build()
    row = {"name": name, "size": f.size, "t": t}
    t0 = time.perf_counter()
    r = exact_success(f, t, solver=solver)
    row.update(on=time.perf_counter() - t0, value=r.success_probability, upper=r.upper_bound, status=r.status)
    if off:
        t0 = time.perf_counter()
        r2 = exact_success(f, t, solver=solver, use_symmetry=False)
        row.update(off=time.perf_counter() - t0, value_off=r2.success_probability, status_off=r2.status)
    return row


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tier", choices=("1min", "10min", "all"), default="1min")
    ap.add_argument("--no-off", action="store_true", help="skip the runs without symmetry")
    ap.add_argument("--solver", default="CLARABEL")
    args = ap.parse_args(argv)
    tiers = ["1min", "10min"] if args.tier == "all" else [args.tier]
    exact_success(or_function(2), 1, solver=args.solver)  # warm up imports
    head = f"{'function':<16}{'|D|':>5}{'t':>3}{'on (s)':>9}{'off (s)':>9}{'off/on':>8}  {'success':>11}  {'upper':>11}  status"
    print(head)
    print("-" * len(head))
    for tier in tiers:
        for name, build, t in TIERS[tier]:
            r = run(name, build, t, not args.no_off, args.solver)
            off = r.get("off")
            ratio = f"{off / r['on']:.1f}" if off else "-"
            offs = f"{off:.2f}" if off else "-"
            status = r["status"] if "status_off" not in r else f"{r['status']}/{r['status_off']}"
            print(f"{r['name']:<16}{r['size']:>5}{r['t']:>3}{r['on']:>9.2f}{offs:>9}{ratio:>8}  "
                  f"{r['value']:>11.8f}  {r['upper'] if r['upper'] is not None else float('nan'):>11.8f}  {status}",
                  flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
