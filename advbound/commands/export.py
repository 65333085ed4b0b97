"""``advbound export CERT.npz ...``: a LaTeX snippet (table, macros, hashes) for a proof draft.

Typical use::

    advbound export or4.npz or9.npz --out bounds.tex

Runs the rigorous check on every certificate unless ``--no-check`` (then the
snippet says that the numbers were not re-checked).  Exit codes: 0 ok, 1 a
certificate failed the check (the snippet is still written), 2 unreadable file.
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
    p.set_defaults(run=run)


def run(args) -> int:
    """Handler of ``advbound export``; returns the exit code."""
    from advbound.errors import AdvboundError
    from advbound.export import export_rows, render_latex

    if not 0 <= args.digits <= 12:
        raise AdvboundError(f"--digits must be between 0 and 12, got {args.digits}")
    opts = {} if args.no_check else {"method": args.method}
    rows = export_rows(args.certificates, check=not args.no_check, digits=args.digits, **opts)
    tex = render_latex(rows, check=not args.no_check, digits=args.digits)
    if args.out:
        with open(args.out, "w", encoding="utf-8") as fh:
            fh.write(tex)
        print(f"wrote {args.out} ({len(args.certificates)} certificate(s))")
    else:
        sys.stdout.write(tex)
    return 1 if any(r.verified is False for r in rows) else 0
