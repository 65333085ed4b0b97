"""``advbound exact FILE``: the optimal success probability of t-query algorithms, or the least t for an error.

Typical use::

    advbound exact instances/or_search.toml --set T=4 --queries 2 --json
    advbound exact or3.tbl --error 0 --compare-adversary

The memory of the program is estimated before it is built
(:func:`advbound.functions.sizing.exact_estimate`).  With ``--queries`` a program that needs more
than this machine has available is refused; with ``--error`` the search stops at the
largest ``t`` that fits and says so.  ``--allow-large`` lifts both limits.
"""

from __future__ import annotations

import json
import math
import sys

__all__ = ["register", "run", "adversary_factor"]


def adversary_factor(error: float) -> float:
    """``(1 - 2 sqrt(ε(1-ε))) / 2``: the factor in ``Q_ε >= factor · ADV±``.

    >>> adversary_factor(0.0), round(adversary_factor(1 / 3), 6)
    (0.5, 0.028595)
    """
    e = min(max(float(error), 0.0), 1.0)
    return (1.0 - 2.0 * math.sqrt(e * (1.0 - e))) / 2.0


def register(subparsers) -> None:
    """Add the ``exact`` parser to ``subparsers``."""
    p = subparsers.add_parser(
        "exact", help="exact t-query optimum (Barnum-Saks-Szegedy SDP) or least queries for an error",
        description="Solve the exact t-query semidefinite program for one function (TOML instance or table "
                    "file): the best worst-case success probability with --queries t, or the least number of "
                    "queries reaching success 1 - ε with --error ε.  Values are verified with numpy.")
    p.add_argument("file", metavar="FILE", help="instance (.toml) or table file")
    p.add_argument("--set", dest="params", action="append", default=[], metavar="NAME=VALUE",
                   help="set an instance parameter (repeatable), e.g. --set T=7")
    mode = p.add_mutually_exclusive_group(required=True)
    mode.add_argument("--queries", type=int, metavar="Q", help="number of queries t")
    mode.add_argument("--error", type=float, metavar="EPS", help="allowed error ε in [0, 1)")
    p.add_argument("--max-queries", type=int, default=None, metavar="N",
                   help="with --error: largest t tried (default: number of live positions)")
    p.add_argument("--solver", default="CLARABEL", metavar="NAME", help="CLARABEL (default) or SCS")
    p.add_argument("--tol", type=float, default=1e-8, metavar="X", help="solver tolerance (default 1e-8)")
    p.add_argument("--decision-tol", type=float, default=1e-4, metavar="X",
                   help="with --error: t is accepted when its verified success is >= 1 - ε - X (default 1e-4)")
    p.add_argument("--no-symmetry", action="store_true", help="do not use automorphisms to shrink the program")
    p.add_argument("--compare-adversary", action="store_true",
                   help="also solve ADV± and check Q_ε >= (1 - 2 sqrt(ε(1-ε)))/2 · ADV±")
    p.add_argument("--allow-large", action="store_true",
                   help="build the program even when its memory estimate exceeds what this machine has available")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    p.set_defaults(run=run)


def _load(args):
    from advbound.functions.instance import load_function, parse_params

    params = parse_params(args.params) if args.params else None
    return load_function(args.file, params=params), (params or {})


def _compare(f, res, allow_large: bool = False) -> dict:
    """ADV± of ``f`` and the check ``queries >= factor(ε) · ADV±`` with ε the verified achievable error."""
    try:
        from advbound.programs.solve import solve
    except ImportError:
        return {"available": False, "note": "advbound.programs.solve is not installed; adversary comparison skipped"}
    from advbound.functions.sizing import TooLargeError
    try:
        adv = solve(f, allow_large=allow_large)
    except TooLargeError as err:
        return {"available": False, "note": f"ADV± solve skipped: {err}"}
    lower = adv.lower
    if lower is None or not adv.success:
        return {"available": False, "note": f"ADV± solve did not verify ({adv.status}); comparison skipped"}
    eps = res.error
    factor = adversary_factor(eps)
    need = factor * lower
    return {"available": True, "adv_lower": float(lower), "adv_upper": None if adv.upper is None else float(adv.upper),
            "error": float(eps), "factor": float(factor), "required_queries": float(need),
            "holds": bool(res.queries >= need - 1e-9)}


def _query_cap(f, args):
    """Largest ``t`` the ``--error`` search may try within the memory budget, and why it is lower, if it is.

    Returns ``(max_queries, note)``; ``note`` is None when the budget does not cut the search.
    """
    from advbound.functions.domain import domain
    from advbound.functions.sizing import TooLargeError, check_memory, exact_estimate

    top = args.max_queries if args.max_queries is not None else int(len(domain(f).live_positions()))
    if args.allow_large:
        return top, None
    sym = not args.no_symmetry
    check_memory(exact_estimate(f, 0, use_symmetry=sym))  # even t = 0 does not fit: refuse outright
    for t in range(1, top + 1):
        try:
            check_memory(exact_estimate(f, t, use_symmetry=sym))
        except TooLargeError as err:
            return t - 1, str(err)
    return top, None


def run(args) -> int:
    """Handler of ``advbound exact``; returns the exit code."""
    from advbound.errors import InvalidFunctionError
    from advbound.programs.exact import exact_success, least_queries
    from advbound.functions.sizing import check_memory, exact_estimate

    if not (args.tol > 0):
        raise InvalidFunctionError(f"--tol must be positive, got {args.tol}")
    if args.queries is not None and args.queries < 0:
        raise InvalidFunctionError(f"--queries must be a non-negative integer, got {args.queries}")
    if args.error is not None and not (0 <= args.error < 1):
        raise InvalidFunctionError(f"--error must be in [0, 1), got {args.error}")
    if args.max_queries is not None and args.max_queries < 0:
        raise InvalidFunctionError(f"--max-queries must be non-negative, got {args.max_queries}")
    f, params = _load(args)
    kw = dict(solver=args.solver, tol=args.tol, use_symmetry=not args.no_symmetry)
    capped = None
    if args.queries is not None:
        check_memory(exact_estimate(f, args.queries, use_symmetry=not args.no_symmetry),
                     allow_large=args.allow_large)
        res = exact_success(f, args.queries, **kw)
    else:
        max_q, capped = _query_cap(f, args)
        res = least_queries(f, args.error, max_queries=max_q, decision_tol=args.decision_tol, **kw)
        if capped is not None and (res.reached or res.queries < max_q):
            capped = None
    comparison = (_compare(f, res, args.allow_large)
                  if args.compare_adversary and res.success_probability is not None else None)
    if capped is not None:
        sys.stderr.write(f"advbound: search stopped at t = {max_q}, the most that fits in memory: {capped}\n")

    if args.json:
        d = res.to_dict()
        d.update(file=str(args.file), params=dict(params), function=f.description, positions=f.n)
        if comparison is not None:
            d["adversary"] = comparison
        if capped is not None:
            d["memory_cap"] = {"queries": max_q, "message": capped}
        print(json.dumps(d, indent=2, sort_keys=True))
    else:
        print(f"function     {f.description or args.file}  (|D| = {f.size}, N = {f.n}, "
              f"alphabet {''.join(f.alphabet)!r}, {len(f.labels)} outputs)")
        print(f"oracle       {res.oracle}")
        if args.error is not None:
            reached = "reached" if res.reached else "NOT reached"
            print(f"target       success >= 1 - {args.error:g} (decision tolerance {args.decision_tol:g}): {reached}")
            for h in res.history:
                print(f"  t = {h['queries']}: success in [{_f(h['success_probability'])}, {_f(h['upper_bound'])}]"
                      f"  ({h['status']}, {h['time']:.2f}s)")
            print(f"least t      {res.queries if res.reached else 'none up to ' + str(res.queries)}")
        print(f"queries      {res.queries}")
        print(f"success      {_f(res.success_probability)}  (achieved by a verified algorithm)")
        print(f"upper bound  {_f(res.upper_bound)}  (verified dual)")
        print(f"objective    {_f(res.objective)}  (solver's claim)")
        r = res.residuals
        if r:
            print(f"residuals    psd {r['psd_violation']:.1e}, equalities {r['equality_residual']:.1e}, "
                  f"drift {r['drift']:.1e}")
        prog = res.program
        if prog:
            sym = prog.get("symmetry", {})
            ng = sym.get("generators_used", 0)
            print(f"program      {prog['psd_blocks']} PSD blocks (sizes {prog['psd_sizes']}), {prog['variables']} "
                  f"variables, face dims {prog['face_dims']}; symmetry: {ng} generator{'' if ng == 1 else 's'} "
                  f"({sym.get('source', 'off')})")
        st = res.solver_stats
        print(f"solver       {st.name} {st.version}, {st.time:.2f}s")
        print(f"status       {res.status}: {res.message}")
        if comparison is not None:
            if not comparison["available"]:
                print(f"adversary    {comparison['note']}")
            else:
                verdict = "holds" if comparison["holds"] else "VIOLATED"
                print(f"adversary    ADV± >= {comparison['adv_lower']:.6f}; Q_ε >= (1 - 2 sqrt(ε(1-ε)))/2 · ADV± "
                      f"= {comparison['required_queries']:.4f} with ε = {comparison['error']:.3g}: {verdict} "
                      f"(t = {res.queries})")
    if not res.success:
        return 1
    if args.error is not None and not res.reached:
        return 1
    return 0


def _f(v) -> str:
    return "none" if v is None else f"{v:.8f}"
