"""``advbound orbits CERT.npz``: the optimal Γ by orbits, as tables and a figure.

For an orbit certificate (what a solve of interchangeable rows writes) it lists every pair orbit
(representative pair, multiplicity, value, time profiles, outputs, differing rows, Δ positions) and
every input orbit (profile, output, size, the adversary's weight), and with ``--out DIR`` writes
``pair_orbits.csv``, ``input_orbits.csv``, ``orbits.json`` and ``orbits.png``/``.pdf``.  See
:mod:`advbound.evidence.orbittable`.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import os

__all__ = ["register", "run"]


def register(subparsers) -> None:
    """Add the ``orbits`` parser to ``subparsers``."""
    p = subparsers.add_parser("orbits", help="list an orbit certificate's Γ by pair orbit and input orbit",
                              description="Show the structure of an invariant adversary matrix: one row per pair "
                                          "orbit and per input orbit, optionally written as CSV/JSON and a figure.")
    p.add_argument("certificate", metavar="CERT.npz", help="an orbit certificate (advbound solve --save-certificate)")
    p.add_argument("--out", metavar="DIR", default=None, help="write the tables and the figure into DIR")
    p.add_argument("--top", type=int, default=20, metavar="N",
                   help="pair orbits printed, largest |Γ| first (default 20; the files hold all)")
    p.add_argument("--json", action="store_true", help="print one JSON object with both tables")
    p.set_defaults(run=run)


def run(args) -> int:
    """Handler of ``advbound orbits``; returns the exit code."""
    from advbound.errors import AdvboundError
    from advbound.evidence.orbitcert import OrbitCertificate, load_any_certificate
    from advbound.evidence.orbittable import orbit_tables

    cert = load_any_certificate(args.certificate)
    if not isinstance(cert, OrbitCertificate):
        raise AdvboundError(f"{args.certificate}: a dense certificate; orbits are listed for orbit certificates "
                            "(solve a function of interchangeable rows, whose certificate is written by orbits)")
    if args.top < 0:
        raise AdvboundError(f"--top must be >= 0, got {args.top}")
    tables = orbit_tables(cert)
    written = _write(tables, args.out) if args.out else []
    if args.json:
        print(json.dumps(dict(tables.to_dict(), files=written), indent=1))
        return 0
    print(f"{args.certificate}: {len(tables.pairs)} pair orbits, {len(tables.inputs)} input orbits; "
          f"‖Γ‖ on invariant vectors = {tables.norm_invariant:.10g}")
    print(f"{'#':>5} {'mult':>6} {'gamma':>11}  {'profile x':<24} {'profile z':<24} {'out':>7} {'rows':>4}  Δ positions")
    for r in sorted(tables.pairs, key=lambda r: -abs(r.gamma))[:args.top]:
        print(f"{r.index:>5} {r.multiplicity:>6} {r.gamma:>11.6g}  {r.profile_x:<24} {r.profile_z:<24} "
              f"{r.output_x + '/' + r.output_z:>7} {r.rows_differ:>4}  {r.delta_positions}")
    print(f"{'#':>5} {'size':>6} {'weight':>11}  profile (output)")
    for r in tables.inputs:
        print(f"{r.index:>5} {r.size:>6} {r.weight:>11.6g}  {r.profile} ({r.output})")
    for path in written:
        print(f"wrote {path}")
    return 0


def _write(tables, out: str) -> list[str]:
    from advbound.studies.orbit_figures import draw_orbit_figure

    os.makedirs(out, exist_ok=True)
    paths = []
    for name, rows in (("pair_orbits.csv", tables.pairs), ("input_orbits.csv", tables.inputs)):
        path = os.path.join(out, name)
        with open(path, "w", newline="") as fh:
            fields = [f.name for f in dataclasses.fields(rows[0])] if rows else []
            w = csv.DictWriter(fh, fieldnames=fields)
            w.writeheader()
            for r in rows:
                w.writerow(dataclasses.asdict(r))
        paths.append(path)
    path = os.path.join(out, "orbits.json")
    with open(path, "w") as fh:
        json.dump(tables.to_dict(), fh, indent=1)
    paths.append(path)
    paths += draw_orbit_figure(tables, out)
    return paths
