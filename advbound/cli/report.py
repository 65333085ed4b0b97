"""``advbound report STUDY``: write the report directory of a study from its result store (never solves).

Typical use::

    advbound report instances/studies/default.toml          # the store the study file names
    advbound report studies/default.sqlite --out /tmp/rep

The store is opened read-only (nothing is created next to it), so stores on read-only media can
be reported on.  Rows that are not as advbound writes them are left out with a warning and listed
in ``summary.md``.
"""

from __future__ import annotations

__all__ = ["register", "run"]


def register(subparsers) -> None:
    """Add the ``report`` parser to ``subparsers``."""
    p = subparsers.add_parser(
        "report", help="write summary, figures, tables and data of a study from its store",
        description="Read a study's result store (STUDY is the study .toml or the .sqlite store) and write "
                    "summary.md, figures (PNG, PDF), LaTeX tables, CSV/JSON data and provenance.")
    p.add_argument("study", metavar="STUDY", help="study .toml file or .sqlite store")
    p.add_argument("--store", metavar="PATH", default=None, help="store path overriding the study file's")
    p.add_argument("--out", metavar="DIR", default=None,
                   help="output directory (default: [study] report, else reports/<name>)")
    p.add_argument("--bootstrap", type=int, default=None, metavar="N",
                   help="bootstrap resamples per fit (default: the study's bootstrap setting, else 200)")
    p.add_argument("--seed", type=int, default=None, metavar="N",
                   help="bootstrap seed (default: the study's seed setting, else 0)")
    p.set_defaults(run=run)


def run(args) -> int:
    """Handler of ``advbound report``; returns the exit code."""
    from advbound.studies.report import write_report

    files = write_report(args.study, out=args.out, store=args.store, bootstrap=args.bootstrap, seed=args.seed)
    from advbound.cli.study import _print_exact, _print_preferences
    print(f"report written to {files.out}/")
    for p in files.all():
        print(f"  {p}")
    _print_preferences(files)
    _print_exact(files)
    return 0
