"""``advbound gamma FILE``: evaluate (and optionally improve) a researcher's own adversary matrix.

Typical use::

    advbound gamma instances/or_search.toml --set T=7 --callable mygamma.py:gamma --improve

Exit codes: 0 ok, 2 bad input (unknown module or function, a spec naming a folder or a file
that is not ``.py``, a callable that raises, calls ``sys.exit``, returns a non-number or
entries so large that the norms overflow, an entries file naming inputs outside the domain,
a ``--save-certificate`` path that cannot be written or already exists without ``--force``,
a callable Γ too large for this machine's memory without ``--allow-large``).
"""

from __future__ import annotations

import json

__all__ = ["register", "run"]


def register(subparsers) -> None:
    """Add the ``gamma`` parser to ``subparsers``."""
    p = subparsers.add_parser("gamma", help="evaluate a user-supplied adversary matrix Γ for a function",
                              description="Evaluate the lower bound ||Γ|| / max_j ||Γ∘Δ_j||/c_j on ADV± proved "
                                          "by your own adversary matrix Γ (a Python callable or an entries file).")
    p.add_argument("file", metavar="FILE", help="instance (.toml) or table file")
    p.add_argument("--set", dest="params", action="append", default=[], metavar="NAME=VALUE",
                   help="set an instance parameter (repeatable)")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--callable", metavar="MOD:FUNC",
                     help="Γ(x, y) -> float, from path/to/mod.py:func or package.module:func")
    src.add_argument("--entries", metavar="PATH", help=".npz (gamma, or gamma_row/gamma_col/gamma_val) or "
                                                       "text file with 'x y value' lines")
    p.add_argument("--improve", action="store_true", help="local improvement by projected gradient ascent")
    p.add_argument("--iterations", type=int, default=100, metavar="N", help="improvement iterations (default 100)")
    p.add_argument("--save-certificate", metavar="PATH", default=None,
                   help="write Γ (improved, with --improve) as a certificate for 'advbound verify --rigorous'")
    p.add_argument("--force", action="store_true", help="overwrite an existing --save-certificate file")
    p.add_argument("--allow-large", action="store_true",
                   help="evaluate a callable even when the dense Γ exceeds the memory this machine has available")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def _load_function(args):
    from advbound.functions.instance import load_function, parse_params
    params = parse_params(args.params) if args.params else None
    return load_function(args.file, params=params)


def run(args) -> int:
    """Handler of ``advbound gamma``; returns the exit code."""
    from advbound.cli.paths import check_output_path
    from advbound.errors import InvalidFunctionError
    from advbound.evidence.usergamma import evaluate_gamma, gamma_from_callable, gamma_from_entries, improve_gamma, \
        load_callable

    if args.iterations < 0:
        raise InvalidFunctionError(f"--iterations must be non-negative, got {args.iterations}")
    if args.save_certificate:
        check_output_path(args.save_certificate, force=args.force)
    f = _load_function(args)
    if args.callable:
        func = load_callable(args.callable)
        gamma = gamma_from_callable(f, func, name=args.callable, allow_large=args.allow_large)
        source = f"callable {args.callable}"
    else:
        gamma = gamma_from_entries(f, args.entries)
        source = f"entries {args.entries}"
    rep = evaluate_gamma(f, gamma)
    imp = improve_gamma(f, gamma, iterations=args.iterations) if args.improve else None
    if args.save_certificate:
        import numpy as np
        from advbound.evidence.certificate import Certificate, save_certificate
        from advbound.evidence.usergamma import _prepare
        g = imp.gamma if imp is not None else _prepare(f, gamma)[0]
        save_certificate(Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs, dtype=float), g,
                                     metadata={"description": f.description, "bound": "general",
                                               "source": source}), args.save_certificate)
    if args.json:
        d = {"function": f.description, "source": source, **rep.to_dict()}
        if imp is not None:
            d["improve"] = {"original_ratio": imp.original_ratio, "improved_ratio": imp.improved_ratio,
                            "iterations": imp.iterations, "accepted_steps": imp.accepted_steps,
                            "binding": [int(j) for j in imp.report.binding]}
        print(json.dumps(d, indent=1))
        return 0
    print(f"function: {f.description or args.file}; |D| = {rep.size}, {rep.n} positions; Γ from {source}")
    print(f"symmetric: {'yes' if rep.was_symmetric else f'no (max |Γ - Γᵀ| = {rep.asymmetry:.3g}; symmetrised)'}")
    print(f"equal-output entries zeroed: {rep.zeroed_entries} (max |Γ| {rep.zeroed_max:.3g}, "
          f"Frobenius mass {rep.zeroed_mass:.3g})")
    label = "" if rep.method == "dense" else " (estimate)"
    print(f"||Γ|| = {rep.norm:.12g}{label if rep.method == 'dense' else ' (certified lower bound)'}")
    for j, (nj, c) in enumerate(zip(rep.constraint_norms, rep.costs)):
        mark = "  *binding" if j in rep.binding else ""
        extra = "" if rep.method == "dense" else f", certified <= {rep.constraint_upper[j]:.6g}"
        print(f"||Γ∘Δ_{j + 1}|| = {nj:.12g}{label} (cost {c:g}, {f.position_names[j]}){extra}{mark}")
    print(f"ratio = {rep.ratio:.12g}{label}: a lower bound on ADV±_c for this function")
    if rep.method != "dense":
        print(f"certified lower bound = {rep.certified_ratio:.12g} "
              f"({'; '.join(sorted(set(rep.bound_methods)))})")
    print(f"binding positions: {', '.join(rep.binding_names) or 'none'}")
    if imp is not None:
        print(f"improve: original ratio {imp.original_ratio:.12g} -> improved {imp.improved_ratio:.12g} "
              f"({imp.iterations} iterations, {imp.accepted_steps} accepted steps; binding now "
              f"{', '.join(imp.report.binding_names) or 'none'})")
    return 0
