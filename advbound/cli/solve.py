"""``advbound solve FILE``: solve one instance or table file and print verified bounds.

Typical use::

    advbound solve instances/or_search.toml --set T=7 --solver CLARABEL --json

Before anything is built, the ``--save-certificate`` path is checked (an existing
file needs ``--force``) and, for ``--method dense``, the memory of the solve is
estimated (:func:`advbound.functions.sizing.solve_estimate`); a program that needs more than
this machine has available is refused with the estimate unless ``--allow-large``.
"""

from __future__ import annotations

import json
import sys

__all__ = ["register", "run"]

_BOUND_NAMES = {"general": "ADV± (general adversary bound)", "positive": "ADV (positive weights)"}


def register(subparsers) -> None:
    """Add the ``solve`` parser to ``subparsers``."""
    p = subparsers.add_parser("solve", help="solve ADV± / ADV for one function and verify the bounds",
                              description="Solve the adversary SDP for one function (TOML instance or table file), "
                                          "verify lower and upper bounds independently of the solver, "
                                          "and print them.")
    p.add_argument("file", metavar="FILE", help="instance (.toml) or table file")
    p.add_argument("--set", dest="params", action="append", default=[], metavar="NAME=VALUE",
                   help="set an instance parameter (repeatable), e.g. --set T=7")
    p.add_argument("--bound", choices=("general", "positive"), default="general",
                   help="general = ADV± (default), positive = ADV")
    p.add_argument("--solver", default=None, metavar="NAME",
                   help="SCS or CLARABEL (default: the one the method picks; SCS for --method dense or symmetric)")
    p.add_argument("--tol", type=float, default=None, metavar="X",
                   help="solver tolerance (default 1e-7, 1e-8 for the rows program, 1e-6 for minimax; for --method factored the "
                        "target relative gap, default 1e-4)")
    p.add_argument("--max-iters", type=int, default=None, metavar="N", help="solver iteration limit")
    p.add_argument("--method", default="auto", metavar="NAME",
                   help="auto (default: for interchangeable rows minimax with --bound positive, else rows; otherwise dense if it fits in memory, "
                        "else factored for two outputs), dense, symmetric, factored, rows or minimax (the positive "
                        "bound of interchangeable rows)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    p.add_argument("--save-certificate", metavar="PATH", default=None,
                   help="write the certificate (.npz) for later re-checking")
    p.add_argument("--force", action="store_true", help="overwrite an existing --save-certificate file")
    p.add_argument("--allow-large", action="store_true",
                   help="solve even when the memory estimate exceeds what this machine has available")
    p.add_argument("--subdomain", type=int, default=None, metavar="K",
                   help="row-symmetric program only: solve on the input orbits of most positive-bound weight "
                        "within K pair orbits, for a verified lower bound on the whole function (no upper bound)")
    p.set_defaults(run=run)


def _load(args):
    from advbound.functions.instance import load_function, parse_params

    params = parse_params(args.params) if args.params else None
    return load_function(args.file, params=params), (params or {})


def run(args) -> int:
    """Handler of ``advbound solve``; returns the exit code."""
    from advbound.evidence.orbitcert import save_any_certificate
    from advbound.cli.paths import check_output_path
    from advbound.errors import InvalidFunctionError
    from advbound.programs.solve import solve

    if args.tol is not None and not (args.tol > 0):
        raise InvalidFunctionError(f"--tol must be positive, got {args.tol}")
    if args.max_iters is not None and args.max_iters <= 0:
        raise InvalidFunctionError(f"--max-iters must be positive, got {args.max_iters}")
    if args.save_certificate:
        check_output_path(args.save_certificate, force=args.force)
    extra = {}
    if args.subdomain is not None:
        if args.subdomain < 1:
            raise InvalidFunctionError(f"--subdomain must be a positive number of pair orbits, got {args.subdomain}")
        if args.method not in ("auto", "rows"):
            raise InvalidFunctionError(f"--subdomain works with the row-symmetric program, not --method {args.method}")
        extra["subdomain"] = args.subdomain
    f, params = _load(args)
    res = solve(f, bound=args.bound, solver=args.solver, tol=args.tol, max_iters=args.max_iters,
                method=args.method, allow_large=args.allow_large, **extra)
    saved = None
    if args.save_certificate and res.certificate is not None:
        save_any_certificate(res.certificate, args.save_certificate)
        saved = args.save_certificate

    if args.json:
        d = res.to_dict()
        d.update(file=str(args.file), params={k: v for k, v in params.items()}, requested_method=args.method,
                 function=f.description, positions=f.n, outputs=len(f.labels),
                 certificate=saved)
        if res.verification is not None:
            v = res.verification
            d["verification"] = {"passed": v.passed, "checks": [[n, bool(ok), det] for n, ok, det in v.checks],
                                 "binding_positions": [int(j) for j in v.binding],
                                 "repair_cost": v.repair_cost}
        print(json.dumps(d, default=str))
    else:
        print(_summary(f, res, args, saved))
    if not res.success:
        sys.stderr.write(f"advbound: solve {res.status}: {res.message}\n")
        return 1
    return 0


def _fmt(v, digits=10):
    return "-" if v is None else f"{v:.{digits}g}"


def _summary(f, res, args, saved) -> str:
    st = res.solver_stats
    lines = [
        f"function  {f.description or args.file}",
        f"domain    {f.size} inputs, {f.n} positions, {len(f.labels)} output values",
        f"bound     {_BOUND_NAMES.get(res.bound, res.bound)}",
        f"lower     {_fmt(res.lower)}   (recomputed from the adversary matrix)",
        f"upper     {_fmt(res.upper)}   (verified dual bound)",
    ]
    if res.gap is not None:
        lines.append(f"gap       {res.gap:.3g}   (relative {res.relative_gap:.3g})")
    else:
        lines.append("gap       -")
    lines.append(f"status    {res.status}: {res.message}")
    lines.append(f"program   {res.method or args.method}: {res.method_reason or 'asked for'}")
    it = "" if st.iterations is None else f", {st.iterations} iterations"
    lines.append(f"solver    {st.name} {st.version}, {st.time:.2f} s{it}")
    if saved:
        lines.append(f"saved     certificate to {saved}")
    return "\n".join(lines)
