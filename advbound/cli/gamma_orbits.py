"""``advbound gamma FILE --orbits``: a row-invariant callable Γ evaluated once per pair orbit.

The instance is read as a row family (:func:`advbound.functions.specfamily.family_from_spec`), so
its inputs are never listed: OR of 12 position-search rows at T = 24 (17.6 million inputs with at
most one row of value 1) is 348 input orbits.  By default the norms come from quotient matrices
(:func:`advbound.evidence.orbitquotient.quotient_gamma`: exact for Γ ≥ 0, an upper bound on each
‖Γ∘Δ‖ otherwise); ``--blocks`` uses the representative set instead
(:func:`advbound.evidence.orbitgamma.orbit_gamma`: exact for any Γ, slower, and it can write an
orbit certificate).
"""

from __future__ import annotations

import json

__all__ = ["run_orbits", "check_orbit_options"]


def check_orbit_options(args) -> None:
    """Refuse options that the orbit form does not take."""
    from advbound.errors import InvalidFunctionError

    if not args.callable:
        raise InvalidFunctionError("--orbits needs --callable: an entries file lists pairs, not orbits")
    if args.vectorised:
        raise InvalidFunctionError("--vectorised does not combine with --orbits: the orbit form calls Γ(x, y) once "
                                   "per pair orbit")
    for opt, on in (("--improve", args.improve), ("--fit", args.fit)):
        if on:
            raise InvalidFunctionError(f"{opt} does not combine with --orbits: fit or improve at a size the dense "
                                       f"path handles, save the constants with --save-params, and evaluate them "
                                       f"here with --params-file")
    if args.samples < 0:
        raise InvalidFunctionError(f"--samples must be non-negative, got {args.samples}")
    if args.save_certificate and not args.blocks:
        raise InvalidFunctionError("--save-certificate with --orbits needs --blocks (the certificate stores Γ "
                                   "per pair orbit of the representative set)")
    if args.blocks and not args.orbits:
        raise InvalidFunctionError("--blocks needs --orbits")
    if not str(args.file).endswith(".toml"):
        raise InvalidFunctionError(f"{args.file}: --orbits needs an instance file (.toml) with interchangeable rows")


def _family(args):
    from advbound.functions.instance import load_instance, parse_params
    from advbound.functions.specfamily import family_from_spec

    spec = load_instance(args.file)
    return family_from_spec(spec, parse_params(args.params) if args.params else None)


def run_orbits(args, func, params) -> int:
    """Evaluate by orbits and print (text or JSON); return the exit code."""
    fam = _family(args)
    rows = getattr(func, "rows", None)
    if rows is not None and rows != fam.n:
        from advbound.errors import InvalidFunctionError
        raise InvalidFunctionError(f"--lift: the certificate has {rows} rows but {args.file} has {fam.n} at this "
                                   f"grid point; lift to an instance with as many rows")
    code = (_run_blocks if args.blocks else _run_quotient)(args, fam, func, params)
    if args.save_params:
        from advbound.programs.gammafit import write_params_file
        write_params_file(args.save_params, params)
    return code


def _run_quotient(args, fam, func, params) -> int:
    from advbound.evidence.orbitquotient import quotient_gamma

    rep = quotient_gamma(fam, func, params, samples=args.samples, seed=args.seed, name=args.callable)
    norms = "exact (Γ >= 0)" if rep.exact_norms else "upper bounds from |Γ| (Γ has negative values)"
    if args.json:
        print(json.dumps(_json(args, fam, rep, params, "orbits-quotient", position_upper=list(rep.position_upper),
                               exact_norms=rep.exact_norms), indent=1))
        return 0 if rep.passed else 1
    _print_head(args, fam, rep, params)
    print(f"||Γ|| >= {rep.gamma_lower:.12g} (invariant test vector)")
    for p, nrm in enumerate(rep.position_upper):
        mark = "  *binding" if p == rep.binding else ""
        print(f"||Γ∘Δ_(row, {p + 1})|| <= {nrm:.12g}{mark}")
    print(f"norms of Γ∘Δ: {norms}")
    _print_tail(rep, f"evaluation {rep.seconds['evaluate']:.1f} s, norms {rep.seconds['norms']:.1f} s")
    return 0 if rep.passed else 1


def _json(args, fam, rep, params, mode: str, **norms) -> dict:
    """The ``--json`` object of an orbit evaluation (either kind of norms)."""
    return {"function": fam.description, "source": f"callable {args.callable}", "mode": mode,
            "lower": rep.lower if rep.passed else None, "gamma_lower": rep.gamma_lower, **norms,
            "binding": rep.binding + 1, "inputs": rep.inputs, "orbits": rep.orbits, "pair_orbits": rep.pair_orbits,
            "calls": rep.calls, "invariance_samples": rep.invariance_samples, "asymmetric_orbits": rep.asymmetric_orbits,
            "checks": [{"name": n, "passed": ok, "detail": dt} for n, ok, dt in rep.checks],
            "seconds": rep.seconds, "params": dict(params)}


def _print_head(args, fam, rep, params) -> None:
    print(f"function: {fam.description}; |D| = {rep.inputs:,} in {rep.orbits:,} row orbits; "
          f"Γ from callable {args.callable}, by orbits")
    print(f"evaluated: {rep.pair_orbits:,} pair orbits (both orders; {rep.asymmetric_orbits} asymmetric, "
          f"symmetrised), {rep.calls:,} calls; row invariance checked on {rep.invariance_samples} random pairs")
    if params:
        print("constants: " + ", ".join(f"{k} = {v:.10g}" for k, v in params.items()))
    for name, ok, detail in rep.checks:
        print(f"  [{'ok' if ok else 'FAILED'}] {name}: {detail}")


def _print_tail(rep, times: str) -> None:
    if not rep.passed:
        print("a check failed: the ratio below is not a proved bound")
    print(f"lower bound = {rep.lower:.12g} on ADV± of this function ({times})")


def _run_blocks(args, fam, func, params) -> int:
    from advbound.evidence.orbitgamma import orbit_gamma
    from advbound.functions.rowbasis import BASIS_VERSION, row_basis

    basis = row_basis(fam)
    rep = orbit_gamma(fam, func, params, basis=basis, samples=args.samples, seed=args.seed, name=args.callable)
    if args.save_certificate:
        from advbound.evidence.orbitcert import certificate_from_basis, save_orbit_certificate
        meta = {"description": fam.description, "bound": "general", "source": f"callable {args.callable}",
                "basis": BASIS_VERSION, "claimed_lower": rep.lower}
        if params:
            meta["params"] = dict(params)
        save_orbit_certificate(certificate_from_basis(basis, rep.gamma, rep.rho, None, meta), args.save_certificate)
    if args.json:
        print(json.dumps(_json(args, fam, rep, params, "orbits", position_norms=list(rep.position_norms)), indent=1))
        return 0 if rep.passed else 1
    _print_head(args, fam, rep, params)
    print(f"||Γ|| >= {rep.gamma_lower:.12g} (invariant test vector)")
    for p, nrm in enumerate(rep.position_norms):
        mark = "  *binding" if p == rep.binding else ""
        print(f"||Γ∘Δ_(row, {p + 1})|| = {nrm:.12g} (from the reduced blocks){mark}")
    _print_tail(rep, f"basis {rep.seconds['basis']:.1f} s, evaluation {rep.seconds['evaluate']:.1f} s, "
                     f"norms {rep.seconds['norms']:.1f} s")
    if args.save_certificate:
        print(f"orbit certificate written to {args.save_certificate} (check it with 'advbound verify')")
    return 0 if rep.passed else 1
