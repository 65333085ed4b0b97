"""``advbound export CERT.npz ...``: a LaTeX snippet (table, macros, hashes) for a proof draft.

Typical use::

    advbound export or4.npz or9.npz --out bounds.tex
    advbound export reports/x/certificates/*.npz --against instances/studies/x.toml --out evidence.tex

Runs the rigorous check on every certificate unless ``--no-check`` (then the
snippet says that the numbers were not re-checked).  ``--against INSTANCE`` matches
each certificate with a grid point of the instance and writes its spec hash beside
the certificate's SHA-256.  Exit codes: 0 ok, 1 a certificate failed the check or is
not for the instance (the snippet is still written), 2 a file that is unreadable or
breaks the acceptance rule (nothing is written), a bad instance or option.
"""

from __future__ import annotations

import sys

__all__ = ["register", "run"]


def register(subparsers) -> None:
    """Add the ``export`` parser to ``subparsers``."""
    p = subparsers.add_parser("export", help="LaTeX table and macros of rigorously checked bounds",
                              description="Write a LaTeX snippet (booktabs table, \\advLowerA-style macros, "
                                          "method sentence, SHA-256 of each file) for one or more certificates.")
    p.add_argument("certificates", nargs="+", metavar="CERT.npz")
    p.add_argument("--out", metavar="FILE.tex", default=None, help="write here instead of standard output")
    p.add_argument("--no-check", action="store_true", help="skip the rigorous check (stated in the snippet)")
    p.add_argument("--digits", type=int, default=4, metavar="K", help="decimals shown (rounded down; default 4)")
    p.add_argument("--method", choices=("auto", "ldl", "cholesky", "residual"), default="auto",
                   help="positive-definiteness proofs (see advbound verify)")
    p.add_argument("--against", metavar="INSTANCE", default=None,
                   help="match each certificate with this instance (.toml) or table file and write its spec hash")
    p.add_argument("--set", dest="params", action="append", default=[], metavar="NAME=VALUE",
                   help="grid parameter of the --against instance (repeatable)")
    p.set_defaults(run=run)


def run(args) -> int:
    """Handler of ``advbound export``; returns the exit code."""
    from advbound.errors import AdvboundError
    from advbound.evidence.export import export_rows, render_latex

    if not 0 <= args.digits <= 12:
        raise AdvboundError(f"--digits must be between 0 and 12, got {args.digits}")
    if args.params and not args.against:
        raise AdvboundError("--set is only used with --against INSTANCE")
    if args.out:
        _check_out(args.out)
    params = None
    if args.against:
        from advbound.functions.instance import parse_params
        params = parse_params(args.params)
    opts = {} if args.no_check else {"method": args.method}
    rows = export_rows(args.certificates, check=not args.no_check, digits=args.digits, against=args.against,
                       params=params, **opts)
    for r in rows:
        if r.instance_matched is False:
            sys.stderr.write(f"advbound: {r.path}: not for {r.instance}\n")
    tex = render_latex(rows, check=not args.no_check, digits=args.digits)
    if args.out:
        try:
            with open(args.out, "w", encoding="utf-8") as fh:
                fh.write(tex)
        except OSError as err:
            raise AdvboundError(f"--out {args.out}: cannot write ({err.strerror or err})") from None
        print(f"wrote {args.out} ({len(args.certificates)} certificate(s))")
    else:
        sys.stdout.write(tex)
    return 1 if any(r.verified is False for r in rows) else 0


def _check_out(path) -> None:
    """Refuse an --out path that cannot be written, before any certificate is checked."""
    import os

    from advbound.errors import AdvboundError

    if os.path.isdir(path):
        raise AdvboundError(f"--out {path}: is a folder; give a file name such as evidence.tex")
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise AdvboundError(f"--out {path}: the folder {os.path.dirname(path) or '.'} does not exist")
    if not os.access(folder, os.W_OK) or (os.path.exists(path) and not os.access(path, os.W_OK)):
        raise AdvboundError(f"--out {path}: not writable")
