"""``advbound gamma FILE``: evaluate (and optionally improve) a researcher's own adversary matrix.

Typical use::

    advbound gamma instances/or_search.toml --set T=7 --callable mygamma.py:gamma --improve
    advbound gamma instances/or3_sum_T.toml --set T=6 --callable examples/gamma_star.py:gamma \
        --param cross=0 --fit --save-params cross.json
    advbound gamma instances/or3_sum_T.toml --set T=8 --callable examples/gamma_star.py:gamma \
        --params-file cross.json

Free constants: ``--param NAME=VALUE`` (repeatable) and ``--params-file`` pass keyword arguments
to the callable, ``gamma(x, y, **params)``; ``--fit`` chooses them to maximise the certified
bound (:mod:`advbound.programs.gammafit`), and the bound printed is then recomputed at the
fitted values by the same evaluation as without ``--fit``.

Exit codes: 0 ok, 2 bad input (unknown module or function, a spec naming a folder or a file
that is not ``.py``, a callable that raises, calls ``sys.exit``, returns a non-number or
entries so large that the norms overflow, an entries file naming inputs outside the domain,
a ``--save-certificate`` or ``--save-params`` path that cannot be written or already exists
without ``--force``, a callable Γ too large for this machine's memory without ``--allow-large``,
a malformed ``--param`` or parameter file, a constant the callable does not accept).
"""

from __future__ import annotations

import json
import keyword
import math

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
    src.add_argument("--lift", metavar="CERT", help="Γ carried from the orbit certificate CERT of a smaller instance "
                                                    "with as many position-search rows (see --rule)")
    p.add_argument("--rule", choices=("same", "shift"), default="shift",
                   help="with --lift: how a pair orbit of FILE finds its source orbit (default shift: lower the "
                        "positions to the source's sum; same: only orbits the source has)")
    p.add_argument("--improve", action="store_true", help="local improvement by projected gradient ascent")
    p.add_argument("--iterations", type=int, default=100, metavar="N", help="improvement iterations (default 100)")
    p.add_argument("--save-certificate", metavar="PATH", default=None,
                   help="write Γ (improved, with --improve) as a certificate for 'advbound verify --rigorous'")
    p.add_argument("--force", action="store_true", help="overwrite an existing --save-certificate file")
    p.add_argument("--allow-large", action="store_true",
                   help="evaluate a callable even when the dense Γ exceeds the memory this machine has available")
    p.add_argument("--vectorised", action="store_true",
                   help="the callable takes two (|D|, N) arrays of symbols, X and Y, and returns the |D| values "
                        "Γ(X[i], Y[i]) (one call per input instead of one per pair)")
    p.add_argument("--orbits", action="store_true",
                   help="for interchangeable rows: evaluate a row-invariant callable once per pair orbit, "
                        "without listing the inputs (checked on random row permutations)")
    p.add_argument("--blocks", action="store_true",
                   help="with --orbits: norms from the representative set (exact for signed Γ; slower; "
                        "needed for --save-certificate) instead of quotient matrices")
    p.add_argument("--samples", type=int, default=200, metavar="N",
                   help="with --orbits: random pairs of the row-invariance check (default 200)")
    _register_params(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def _register_params(p) -> None:
    """The options for free constants of a callable Γ and for fitting them."""
    g = p.add_argument_group("free constants of a callable Γ(x, y, **params)")
    g.add_argument("--param", dest="gamma_params", action="append", default=[], metavar="NAME=VALUE",
                   help="pass the keyword argument NAME=VALUE (a float) to the callable; with --fit, a start "
                        "value (repeatable; overrides --params-file)")
    g.add_argument("--params-file", metavar="PATH", default=None,
                   help="read the constants from a JSON object {\"NAME\": number, ...} (as --save-params writes; "
                        "default: none)")
    g.add_argument("--fit", action="store_true",
                   help="choose the constants maximising the certified bound, starting from the given values")
    g.add_argument("--fit-method", choices=("nelder-mead", "powell"), default="nelder-mead",
                   help="derivative-free scipy.optimize method (default nelder-mead: the bound is a maximum of "
                        "norms, not smooth, and the simplex method only compares values)")
    g.add_argument("--starts", type=int, default=4, metavar="K",
                   help="starts: the given values and K-1 perturbations of them (default 4)")
    g.add_argument("--seed", type=int, default=0, metavar="N",
                   help="random generator seed of the perturbed starts (default 0)")
    g.add_argument("--max-evals", type=int, default=300, metavar="N",
                   help="evaluations of Γ in all, shared by the starts (default 300)")
    g.add_argument("--save-params", metavar="PATH", default=None,
                   help="write the (fitted) constants as JSON, for --params-file (default: none)")


def _lifted(args):
    """The lifted callable of ``--lift CERT`` (an orbit certificate)."""
    from advbound.errors import InvalidFunctionError
    from advbound.evidence.lift import lifted_gamma
    from advbound.evidence.orbitcert import OrbitCertificate, load_any_certificate

    cert = load_any_certificate(args.lift)
    if not isinstance(cert, OrbitCertificate):
        raise InvalidFunctionError(f"{args.lift}: --lift needs an orbit certificate (of interchangeable rows), "
                                   "not a dense one")
    return lifted_gamma(cert, args.rule)


def _load_function(args):
    from advbound.functions.instance import load_function, parse_params
    params = parse_params(args.params) if args.params else None
    return load_function(args.file, params=params)


def _parse_param_options(items) -> dict:
    """``{name: float}`` from the ``--param NAME=VALUE`` strings, with one-line errors."""
    from advbound.evidence.usergamma import GammaError

    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        name = name.strip()
        if not sep:
            raise GammaError(f"--param {item!r}: expected NAME=VALUE")
        if not name.isidentifier() or keyword.iskeyword(name):
            raise GammaError(f"--param {item!r}: {name!r} is not a Python identifier")
        try:
            val = float(value)
        except ValueError:
            raise GammaError(f"--param {item!r}: {value.strip()!r} is not a number") from None
        if not math.isfinite(val):
            raise GammaError(f"--param {item!r}: {value.strip()!r} is not a finite number")
        if name in out:
            raise GammaError(f"--param {name} is given twice")
        out[name] = val
    return out


def _check_options(args) -> None:
    """Refuse inconsistent options before any work is done."""
    from advbound.cli.paths import check_output_path
    from advbound.errors import InvalidFunctionError

    if args.iterations < 0:
        raise InvalidFunctionError(f"--iterations must be non-negative, got {args.iterations}")
    for opt, val in (("--starts", args.starts), ("--max-evals", args.max_evals)):
        if val < 1:
            raise InvalidFunctionError(f"{opt} must be a positive integer, got {val}")
    wants = [o for o, on in (("--param", args.gamma_params), ("--params-file", args.params_file),
                             ("--fit", args.fit), ("--save-params", args.save_params)) if on]
    if wants and not args.callable:
        raise InvalidFunctionError(f"{wants[0]} needs --callable: an entries file has no free constants")
    if (args.fit or args.save_params) and not (args.gamma_params or args.params_file):
        raise InvalidFunctionError(f"{'--fit' if args.fit else '--save-params'} needs constants: give "
                                   f"--param NAME=VALUE (the start values) or --params-file")
    if args.save_certificate:
        check_output_path(args.save_certificate, force=args.force)
    if args.save_params:
        check_output_path(args.save_params, force=args.force, option="--save-params")


def _callable_params(args, func) -> dict:
    """The constants for the callable: the parameter file's, overridden by ``--param``; checked."""
    from advbound.evidence.usergamma import check_params
    from advbound.programs.gammafit import read_params_file

    params = read_params_file(args.params_file, func, name=args.callable) if args.params_file else {}
    params.update(_parse_param_options(args.gamma_params))
    return check_params(func, params, name=args.callable)


def _gamma(args, f, func, params):
    """Γ at ``params`` (fitted first with ``--fit``), its source label and the fit (or None)."""
    from advbound.evidence.usergamma import gamma_from_callable, gamma_from_entries

    if not args.callable:
        return gamma_from_entries(f, args.entries), f"entries {args.entries}", None
    fit = None
    if args.fit:
        from advbound.programs.gammafit import fit_gamma_params
        fit = fit_gamma_params(f, func, params, method=args.fit_method, starts=args.starts,
                               random_state=args.seed, max_evaluations=args.max_evals,
                               name=args.callable, allow_large=args.allow_large, vectorised=args.vectorised)
        params = fit.params
    gamma = gamma_from_callable(f, func, name=args.callable, allow_large=args.allow_large, params=params,
                                vectorised=args.vectorised)
    return gamma, f"callable {args.callable}", fit


def run(args) -> int:
    """Handler of ``advbound gamma``; returns the exit code."""
    from advbound.evidence.usergamma import evaluate_gamma, improve_gamma, load_callable

    if args.vectorised and not args.callable:
        from advbound.errors import InvalidFunctionError
        raise InvalidFunctionError("--vectorised needs --callable (a function of the arrays X and Y)")
    lifted = None
    if args.lift:
        lifted = _lifted(args)
        args.callable = f"lift of {args.lift} (rule {args.rule})"
    _check_options(args)
    if args.orbits:
        from advbound.cli.gamma_orbits import check_orbit_options
        check_orbit_options(args)
    func = lifted or (load_callable(args.callable) if args.callable else None)
    params = _callable_params(args, func) if args.callable else {}
    if args.orbits:
        from advbound.cli.gamma_orbits import run_orbits
        return run_orbits(args, func, params)
    f = _load_function(args)
    if lifted is not None and len(f.groups or ()) != lifted.rows:
        from advbound.errors import InvalidFunctionError
        raise InvalidFunctionError(f"--lift: the certificate has {lifted.rows} rows but {args.file} has "
                                   f"{len(f.groups or ())} row(s); lift to an instance with as many rows")
    gamma, source, fit = _gamma(args, f, func, params)
    if fit is not None:
        params = fit.params
    rep = evaluate_gamma(f, gamma)
    imp = improve_gamma(f, gamma, iterations=args.iterations) if args.improve else None
    if args.save_certificate:
        import numpy as np
        from advbound.evidence.certificate import Certificate, save_certificate
        from advbound.evidence.usergamma import _prepare
        g = imp.gamma if imp is not None else _prepare(f, gamma)[0]
        meta = {"description": f.description, "bound": "general", "source": source}
        if params:
            meta["params"] = dict(params)
        save_certificate(Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs, dtype=float), g,
                                     metadata=meta), args.save_certificate)
    if args.save_params:
        from advbound.programs.gammafit import write_params_file
        write_params_file(args.save_params, params)
    if args.json:
        d = {"function": f.description, "source": source, **rep.to_dict(), "lower": rep.certified_ratio}
        if args.callable:
            d["params"] = dict(params)
        if fit is not None:
            d["fit"] = {k: v for k, v in fit.to_dict().items() if k != "params"}
        if imp is not None:
            d["improve"] = {"original_ratio": imp.original_ratio, "improved_ratio": imp.improved_ratio,
                            "iterations": imp.iterations, "accepted_steps": imp.accepted_steps,
                            "binding": [int(j) for j in imp.report.binding]}
        print(json.dumps(d, indent=1))
        return 0
    _print_report(args, f, rep, source)
    if params:
        _print_params(args, rep, params, fit)
    if imp is not None:
        print(f"improve: original ratio {imp.original_ratio:.12g} -> improved {imp.improved_ratio:.12g} "
              f"({imp.iterations} iterations, {imp.accepted_steps} accepted steps; binding now "
              f"{', '.join(imp.report.binding_names) or 'none'})")
    return 0


def _print_report(args, f, rep, source) -> None:
    """The text report of what Γ proves."""
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


def _print_params(args, rep, params, fit) -> None:
    """The constants used and, with ``--fit``, how they were found."""
    shown = ", ".join(f"{k} = {v:.10g}" for k, v in params.items())
    if fit is None:
        print(f"constants: {shown}")
        return
    start = ", ".join(f"{k} = {v:.10g}" for k, v in fit.start.items())
    print(f"fit: {fit.method} from {len(fit.starts)} starts (seed {fit.random_state}), "
          f"{fit.evaluations} of at most {fit.max_evaluations} evaluations"
          + (f" ({fit.failed_evaluations} failed)" if fit.failed_evaluations else ""))
    print(f"start: {start} gives {fit.start_lower:.12g}")
    print(f"fitted: {shown}")
    print(f"lower bound at the fitted constants = {rep.certified_ratio:.12g} (recomputed above, not the "
          f"optimiser's number)")
    if args.save_params:
        print(f"constants saved to {args.save_params} (reuse with --params-file)")
