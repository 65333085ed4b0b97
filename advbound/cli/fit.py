"""``advbound fit STUDY``: fit growth laws to a study's verified lower bounds and print the comparison.

Typical use::

    advbound fit studies/default.sqlite
    advbound fit instances/studies/default.toml --json

The store is opened read-only.  Rows that are not as advbound writes them are left out of
the fits, with one warning line each on stderr.
"""

from __future__ import annotations

import json
import math

__all__ = ["register", "run"]


def register(subparsers) -> None:
    """Add the ``fit`` parser to ``subparsers``."""
    p = subparsers.add_parser(
        "fit", help="compare sqrt(T), sqrt(T log T) and power laws on a study's lower bounds",
        description="Fit the candidate growth laws to each series of verified lower bounds in a study's "
                    "store (STUDY is the study .toml or the .sqlite store), rank them and print a verdict.")
    p.add_argument("study", metavar="STUDY", help="study .toml file or .sqlite store")
    p.add_argument("--store", metavar="PATH", default=None, help="store path overriding the study file's")
    p.add_argument("--bootstrap", type=int, default=None, metavar="N",
                   help="bootstrap resamples per fit (default: the study's bootstrap setting, else 200)")
    p.add_argument("--seed", type=int, default=None, metavar="N",
                   help="bootstrap seed (default: the study's seed setting, else 0)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def _g(v, d=4):
    return "--" if v is None or (isinstance(v, float) and not math.isfinite(v)) else f"{v:.{d}g}"


def run(args) -> int:
    """Handler of ``advbound fit``; returns the exit code."""
    from advbound.errors import AdvboundError
    from advbound.studies.report import collect_series, fit_series, open_store

    with open_store(args.study, args.store) as st:  # read-only: works on read-only media
        meta = st.study_meta()
        series = collect_series(st, meta)
        left_out = len(st.defects)
    if not series:
        why = f" ({left_out} defective row(s) left out, see the warnings)" if left_out else ""
        raise AdvboundError(f"{args.study}: no verified adversary results to fit{why}")
    fits = fit_series(series, meta, bootstrap=args.bootstrap, seed=args.seed)
    if args.json:
        print(json.dumps({k: (v if isinstance(v, str) else v.to_dict()) for k, v in fits.items()},
                         indent=1, allow_nan=False))
        return 0
    for label, cmp in fits.items():
        print(f"== {label}")
        if isinstance(cmp, str):
            print(f"   {cmp}")
            continue
        print(f"   {'model':<18} {'parameters (± s.e.)':<46} {cmp.criterion:>9} {'weight':>7}")
        for fr in cmp.fits:
            ps = ", ".join(f"{k}={_g(v)}±{_g(fr.stderr.get(k), 2)}" for k, v in fr.params.items())
            crit = fr.aicc if cmp.criterion == "AICc" else fr.aic
            weight = "too few points" if cmp.too_few(fr.model) else f"{cmp.weights.get(fr.model, 0):.3f}"
            print(f"   {fr.model:<18} {ps:<46} {'--' if cmp.too_few(fr.model) else _g(crit):>9} {weight:>7}")
        print(f"   preference: {cmp.preference}")
        print(f"   {cmp.verdict}")
    return 0
