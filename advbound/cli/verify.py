"""``advbound verify CERT.npz``: recompute a certificate's lower bound from the file alone.

The float path (:func:`advbound.evidence.verify.verify_certificate`, built on
:mod:`advbound.quantities`) always runs; ``--rigorous`` adds the exact rational
check of :mod:`advbound.evidence.rigorous`.  Typical use::

    advbound verify or4.npz --rigorous --json
    advbound verify or3-T6.npz --against instances/or3_sum_T.toml --set T=6

A file that breaks the acceptance rule (:func:`advbound.evidence.certificate.check_acceptance`)
is refused with one line before anything is computed.  ``--against`` also checks that
the certificate's function is exactly the instance's (:func:`advbound.evidence.export.match_instance`).

Exit codes: 0 verified, 1 a check failed (including a function that is not the
instance's), 2 unreadable or malformed file, bad instance or bad option.
"""

from __future__ import annotations

import json

import numpy as np

__all__ = ["register", "run"]


def register(subparsers) -> None:
    """Add the ``verify`` parser to ``subparsers``."""
    p = subparsers.add_parser("verify", help="re-check a certificate file (float, or exact with --rigorous)",
                              description="Recompute the lower bound ||Γ|| / max_j ||Γ∘Δ_j||/c_j from a "
                                          "certificate file alone and print what was checked. With --rigorous, "
                                          "also certify a rational lower bound by exact arithmetic.")
    p.add_argument("certificate", metavar="CERT.npz")
    p.add_argument("--rigorous", action="store_true", help="certify an exact rational lower bound")
    p.add_argument("--denominator", type=int, default=None, metavar="Q",
                   help="denominator for rounding Γ (default: automatic, a power of two with Q·max|Γ| ≈ 2^28)")
    p.add_argument("--safety", type=float, default=None, metavar="S",
                   help="safety scaling of the proved constraint bounds (default 1e-6)")
    p.add_argument("--method", choices=("auto", "ldl", "cholesky", "residual"), default="auto",
                   help="positive-definiteness proofs: exact LDLᵀ, verified float Cholesky, exact residual of a float Cholesky, or auto (default)")
    p.add_argument("--against", metavar="INSTANCE", default=None,
                   help="also check that the certificate is for exactly this instance (.toml) or table file")
    p.add_argument("--set", dest="params", action="append", default=[], metavar="NAME=VALUE",
                   help="grid parameter of the --against instance (repeatable); without it every grid point "
                        "is tried")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def run(args) -> int:
    """Handler of ``advbound verify``; returns the exit code."""
    from advbound.errors import AdvboundError
    from advbound.evidence.orbitcert import OrbitCertificate, load_any_certificate
    from advbound.evidence.rigorous import DEFAULT_SAFETY, verify_rigorous
    from advbound.evidence.verify import verify_certificate

    if args.denominator is not None and args.denominator < 1:
        raise AdvboundError(f"--denominator must be a positive integer, got {args.denominator}")
    safety = DEFAULT_SAFETY if args.safety is None else args.safety
    if not safety > 0:
        raise AdvboundError(f"--safety must be positive, got {safety}")
    if args.params and not args.against:
        raise AdvboundError("--set is only used with --against INSTANCE")
    cert = load_any_certificate(args.certificate)
    orbit = isinstance(cert, OrbitCertificate)
    match = None
    if args.against:
        from advbound.evidence.export import match_instance
        from advbound.functions.instance import parse_params
        # A certificate that declares a sub-domain is matched as a restriction (checked, not trusted).
        sub = orbit and isinstance(cert.metadata.get("subdomain"), dict)
        match = match_instance(cert.function_view() if orbit else cert, args.against, parse_params(args.params),
                               restriction=sub)
        if not match.matched:
            return _mismatch(args, match)
    if orbit:
        return _run_orbit(args, cert, match, safety)
    fl = verify_certificate(cert)
    rig = None
    if args.rigorous:
        rig = verify_rigorous(cert, denominator=args.denominator, safety=safety, method=args.method)
    verified = fl.passed and (rig is None or rig.verified)
    if args.json:
        return _print_json(args, verified, rig, match, lower=fl.lower, float=fl.to_dict())
    desc = cert.metadata.get("description") or "(no description)"
    print(f"certificate {args.certificate}: {desc}; |D| = {len(cert.inputs)}, {len(cert.costs)} positions, "
          f"bound {fl.bound}")
    _print_match(match)
    _print_checks("float check (advbound.quantities):", fl.checks)
    print(f"  ||Γ|| = {fl.gamma_norm:.12g}")
    for j, (nj, c) in enumerate(zip(fl.position_norms, cert.costs)):
        mark = "  *binding" if j in fl.binding else ""
        print(f"  ||Γ∘Δ_{j + 1}|| = {nj:.12g}   (cost {c:g}){mark}")
    print(f"  ratio (float lower bound) = {fl.lower:.12g}")
    if fl.upper is not None:
        print(f"  upper bound (repaired dual witness, float) = {fl.upper:.12g}")
    if rig is not None:
        _print_rigorous("rigorous check (exact rationals):", rig)
    print(f"verdict: {'VERIFIED' if verified else 'NOT VERIFIED'}")
    return 0 if verified else 1


def _run_orbit(args, cert, match, safety) -> int:
    """Verify an orbit certificate in the reduced basis (and, with --rigorous, its expanded Γ exactly)."""
    from advbound.errors import AdvboundError
    from advbound.evidence.orbitcheck import DENSE_CHECK_LIMIT, verify_orbit_certificate

    rep = verify_orbit_certificate(cert)
    rig = None
    if args.rigorous:
        if cert.size > DENSE_CHECK_LIMIT:
            raise AdvboundError(f"--rigorous on an orbit certificate expands Γ to |D| x |D|; this one has "
                                f"{cert.size} inputs (at most {DENSE_CHECK_LIMIT})")
        from advbound.evidence.certificate import Certificate
        from advbound.evidence.rigorous import verify_rigorous
        from advbound.evidence.orbitcheck import expanded_gamma

        f, G = expanded_gamma(cert)
        dense = Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs), G,
                            metadata={"bound": cert.bound, "claimed_lower": cert.metadata.get("claimed_lower")})
        rig = verify_rigorous(dense, denominator=args.denominator, safety=safety, method=args.method)
    verified = rep.passed and (rig is None or rig.verified)
    if args.json:
        return _print_json(args, verified, rig, match, kind="orbits", lower=rep.lower, upper=rep.upper,
                           checks=[[n, bool(ok), d] for n, ok, d in rep.checks])
    desc = cert.metadata.get("description") or "(no description)"
    n = np.asarray(cert.contents).shape[1]
    print(f"orbit certificate {args.certificate}: {desc}; |D| = {cert.size} in {len(cert.contents)} orbits, "
          f"{n} rows of {len(cert.costs)} positions, {len(cert.gamma)} pair orbits, bound {rep.bound}")
    _print_match(match)
    _print_checks("reduced-basis check (advbound.evidence.orbitcheck):", rep.checks)
    print(f"  ||Γ|| >= {rep.gamma_lower:.12g}   (Rayleigh quotient of the stored test vector)")
    for j, nj in enumerate(rep.position_norms):
        mark = "  *binding" if j in rep.binding else ""
        print(f"  ||Γ∘Δ_(row, {j + 1})|| = {nj:.12g}   (cost {cert.costs[j]:g}){mark}")
    print(f"  ratio (float lower bound) = {rep.lower:.12g}")
    if rep.upper is not None:
        how = ("the minimax witness of the stored query weights" if cert.query_weights is not None
               else "weak duality from the stored reduced dual")
        print(f"  upper bound ({how}, float) = {rep.upper:.12g}")
    if rig is not None:
        _print_rigorous("rigorous check of the expanded Γ (exact rationals):", rig)
    print(f"verdict: {'VERIFIED' if verified else 'NOT VERIFIED'}")
    return 0 if verified else 1


def _print_json(args, verified, rig, match, *, lower, **fields) -> int:
    """The one JSON object of ``verify --json``: the exact lower bound replaces the float one with --rigorous."""
    out = {"certificate": str(args.certificate), "verified": verified,
           "lower": rig.lower if rig is not None else lower, **fields}
    if rig is not None:
        out["lower_exact"] = rig.to_dict()["lower_exact"]
        out["rigorous"] = rig.to_dict()
    if match is not None:
        out["against"] = match.to_dict()
    print(json.dumps(out, indent=1))
    return 0 if verified else 1


def _print_rigorous(title: str, rig) -> None:
    print(title)
    print(f"  Γ rounded to denominator Q = {rig.denominator}; equal-output entries zeroed exactly "
          f"(largest in file {rig.equal_output_mass:.3g})")
    print(f"  Rayleigh quotient vᵀΓv/vᵀv = {float(rig.rayleigh):.12g} (exact rational, <= ||Γ_q||)")
    print(f"  safety scaling s = {rig.safety:g}; common scale K = {float(rig.scale):.12g}")
    for p in rig.positions:
        print(f"  [{'ok' if p.proved else 'FAIL'}] position {p.position + 1}: ||Γ_q∘Δ|| = {p.float_norm:.12g}"
              f" < {float(p.bound):.12g} ({p.method}; {p.detail}; {p.seconds:.2f} s)")
    for name, ok, det in rig.checks:
        if name != "constraints":
            print(f"  [{'ok' if ok else 'FAIL'}] {name}: {det}")
    if rig.lower_exact is not None:
        print(f"  lower_exact = {rig.lower_exact.numerator}/{rig.lower_exact.denominator}")
        print(f"  lower (rounded down) = {rig.lower!r}")
    print(f"  time {rig.seconds:.2f} s ({rig.method}, backend {rig.backend})")


def _print_match(match) -> None:
    if match is not None:
        spec = f"spec hash {match.spec_key}" if match.spec_key else f"table sha256 {match.table_sha256}"
        if match.restriction:
            print(f"against {match.label()}: {match.message} ({spec}): the lower bound holds for this "
                  "instance, the upper bound only for the restriction")
        else:
            print(f"against {match.label()}: same function ({spec})")


def _print_checks(title: str, checks) -> None:
    print(title)
    for name, ok, det in checks:
        print(f"  [{'ok' if ok else 'FAIL'}] {name}: {det}")


def _mismatch(args, match) -> int:
    """Report a certificate whose function is not the instance's: a failed check, exit 1."""
    if args.json:
        print(json.dumps({"certificate": str(args.certificate), "verified": False, "lower": None,
                          "against": match.to_dict()}, indent=1))
        return 1
    print(f"against {match.label()}: not this instance's function: {match.message}")
    print("verdict: NOT VERIFIED")
    return 1
