"""Time to build the main family: OR of n position-search rows with sum of positions = T.

Prints one line per instance: rows, T, domain size, positions, build seconds, and the ratio of
each build time to the first (baseline) instance measured in the same run.

    python benchmarks/bench_build.py                 # n = 4, T = 20, 40, 60
    python benchmarks/bench_build.py --n 3 --T 20 40
"""

import argparse
import time

from advbound.functions.builders import position_search_composition


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=4)
    ap.add_argument("--T", type=int, nargs="+", default=[20, 40, 60])
    ap.add_argument("--repeat", type=int, default=2)
    args = ap.parse_args()
    base = None
    print(f"{'rows':>4} {'T':>4} {'inputs':>9} {'positions':>9} {'seconds':>8} {'ratio':>7}")
    for T in args.T:
        best = float("inf")
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            f = position_search_composition("or", args.n, None, T)
            best = min(best, time.perf_counter() - t0)
        base = base or best
        print(f"{args.n:>4} {T:>4} {f.size:>9} {f.n:>9} {best:>8.2f} {best / base:>7.1f}")


if __name__ == "__main__":
    main()
