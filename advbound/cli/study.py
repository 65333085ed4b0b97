"""``advbound study [FILE]``: run a study (a parameter sweep) into its result store, then write its report.

Typical use::

    advbound study                                   # instances/studies/default.toml of this checkout
    advbound study instances/studies/default.toml --jobs 2
    advbound study my.toml --scheduler tcp://127.0.0.1:8786 --retry-failed --quiet
    advbound study my.toml --set T=4,5 --set rows=2     # only these grid points; the report covers the store
    advbound study my.toml --jobs 2 & advbound study my.toml --jobs 2    # two sweeps share one store

Exit codes: 0 every point stored with a success status (or left to another live sweep);
1 some point is stored as failed or unverified (``--retry-failed`` recomputes them);
2 bad input: the study file, or a grid point whose instance is invalid (stored as
``invalid``; fix the instance, the rest of the grid is computed).
"""

from __future__ import annotations

import sys

__all__ = ["register", "run", "TqdmProgress"]


def register(subparsers) -> None:
    """Add the ``study`` parser to ``subparsers``."""
    p = subparsers.add_parser(
        "study", help="sweep a study's parameter grid into a durable store, then report",
        description="Solve every point of a study file (instance template + [grid] + [study]) that is not "
                    "yet in its result store, one committed row per point, then write the report. "
                    "Without FILE, runs instances/studies/default.toml of the checkout advbound was "
                    "imported from.")
    p.add_argument("file", metavar="FILE", nargs="?", default=None,
                   help="study TOML file (default: instances/studies/default.toml of the checkout)")
    p.add_argument("--set", dest="params", action="append", default=[], metavar="NAME=VALUE",
                   help="run only the grid points with this value of a grid parameter; NAME=V1,V2 for several "
                        "values, repeatable for several parameters (default: every grid point); the store "
                        "keeps every point and the report covers the whole store")
    p.add_argument("--store", metavar="PATH", default=None,
                   help="result store (default: [study] store, else studies/<name>.sqlite)")
    p.add_argument("--certificates", metavar="DIR", default=None,
                   help="certificate directory (default: the store path without .sqlite plus -certificates)")
    p.add_argument("--jobs", type=int, default=1, metavar="N", help="local worker processes (default 1)")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="submit the points to this dask.distributed scheduler instead (default: none, "
                        "the points run locally with --jobs)")
    p.add_argument("--retry-failed", action="store_true",
                   help="also recompute points whose solve failed (not points with invalid input; "
                        "default: keep them)")
    p.add_argument("--lease", type=float, default=None, metavar="SECONDS",
                   help="lease on a point being computed, renewed every third of it; another sweep on the "
                        "same store takes the point over once it expires (default 60)")
    p.add_argument("--wait", action="store_true",
                   help="wait for points another live sweep is computing, and take over those whose lease "
                        "expires (default: leave them to it)")
    p.add_argument("--quiet", action="store_true", help="no progress bar (default: a progress bar on stderr)")
    p.add_argument("--no-report", action="store_true",
                   help="do not write the report afterwards (default: write it)")
    p.add_argument("--out", metavar="DIR", default=None,
                   help="report directory (default: [study] report, else reports/<name>)")
    p.set_defaults(run=run)


class TqdmProgress:
    """Progress bar on stderr naming the point being solved (see :class:`advbound.studies.study.Progress`)."""

    def __init__(self, name: str):
        self.name = name
        self.bar = None
        self.running: list = []
        self.failed = 0

    def start(self, total, skipped):
        from tqdm import tqdm
        if skipped:
            sys.stderr.write(f"{self.name}: {skipped} point(s) already stored, skipped\n")
        if total:
            self.bar = tqdm(total=total, desc=self.name, unit="pt", file=sys.stderr, dynamic_ncols=True,
                            bar_format="{desc}: {n_fmt}/{total_fmt} [{elapsed}<{remaining}]{postfix}")

    def _show(self):
        if self.bar is None:
            return
        if not self.running:
            self.bar.set_postfix_str("")
            return
        more = f" (+{len(self.running) - 1} queued/running)" if len(self.running) > 1 else ""
        fail = f", {self.failed} failed" if self.failed else ""
        self.bar.set_postfix_str(f"solving {self.running[0].label}{more}{fail}")

    def begin(self, point):
        self.running.append(point)
        self._show()

    def done(self, point, row):
        if point in self.running:
            self.running.remove(point)
        if row.failed:
            self.failed += 1
        if self.bar is not None:
            self.bar.update(1)
        self._show()

    def skip(self, point, why):
        if self.bar is not None:
            self.bar.update(1)

    def close(self):
        if self.bar is not None:
            self.bar.close()


def _print_preferences(files) -> None:
    import json
    fits = json.loads(open(files.data[-1]).read())
    names = {"sqrt": "prefers sqrt(T)", "sqrt_log": "prefers sqrt(T log T)", "neither": "neither law fits",
             "indistinguishable": "cannot tell sqrt(T) from sqrt(T log T)"}
    for label, d in fits.items():
        if isinstance(d, str):
            print(f"  fit {label}: {d}")
        else:
            best = (f" (best by {d['criterion']}: {d['ranking'][0]})" if d.get("ranking") else
                    " (too few points to rank any law)")
            print(f"  fit {label}: {names.get(d['preference'], d['preference'])}{best}")


def _print_exact(files) -> None:
    import json
    import os
    path = next((d for d in files.data if os.path.basename(d) == "exact.json"), None)
    if path is None:
        return
    points = json.loads(open(path).read())["points"]
    checks = [e["check"] for p in points for e in p["entries"] if e is not None]
    print(f"  exact points: {len(checks)}; adversary check t >= (1 - 2 sqrt(ε(1-ε)))/2 · ADV±: "
          f"{checks.count('pass')} pass, {checks.count('fail')} fail, {checks.count('n/a')} n/a")


def _request(req: dict) -> str:
    return f"t={req['queries']}" if req.get("queries") is not None else f"eps={req.get('error')}"


def _what(row_or_point) -> str:
    if row_or_point.kind == "conjecture":
        return "conjecture"
    if row_or_point.kind != "exact":
        return str(row_or_point.bound)
    req = getattr(row_or_point, "request", None) or getattr(row_or_point, "solver", None) or {}
    return f"exact {_request(req)}"


def _invalid_lines(rows) -> list[str]:
    """One line per grid point and message: ``{params} (general, positive): message``."""
    groups: dict = {}
    for r in rows:
        key = (str(r.params), r.message)
        groups.setdefault(key, []).append(_what(r))
    return [f"{params} ({', '.join(whats)}): {msg}" for (params, msg), whats in groups.items()]


def run(args) -> int:
    """Handler of ``advbound study``; returns the exit code."""
    import math

    from advbound.errors import AdvboundError
    from advbound.functions.grid import parse_choices
    from advbound.studies.store import DEFAULT_LEASE, Store
    from advbound.studies.study import default_study_path, load_study, plan, run_study

    if args.jobs < 1:
        raise AdvboundError(f"--jobs must be at least 1, got {args.jobs}")
    lease = DEFAULT_LEASE if args.lease is None else args.lease
    if not (math.isfinite(lease) and lease > 0):
        raise AdvboundError(f"--lease must be a positive number of seconds, got {args.lease}")
    choices = parse_choices(getattr(args, "params", None))
    path = args.file or default_study_path()
    study = load_study(path, store=args.store, certificates=args.certificates, report=args.out)
    points = plan(study, choices=choices)
    progress = None if args.quiet else TqdmProgress(study.name)
    try:
        summary = run_study(study, jobs=args.jobs, scheduler=args.scheduler, retry_failed=args.retry_failed,
                            progress=progress, lease=lease, wait=args.wait, points=points)
    finally:
        if progress is not None:
            progress.close()
    with Store(study.store, readonly=True) as st:
        states = st.states()
        invalid_rows = [r for r in (st.get(p.run_key) for p in points
                                    if getattr(states.get(p.run_key), "state", None) == "invalid") if r]
    kept = [p for p in points if getattr(states.get(p.run_key), "state", None) == "failed"]
    subset = (" chosen by --set " + " ".join(f"{k}={','.join(str(v) for v in vals)}" for k, vals in choices.items())
              if choices else "")
    print(f"study {study.name}: {summary.planned} point(s){subset}; {summary.skipped} already stored, "
          f"{summary.solved} solved now, {summary.failed} failed now"
          + (f", {len(invalid_rows)} with invalid input" if invalid_rows else "")
          + (f", {summary.too_large} conjecture(s) skipped as too large" if getattr(summary, "too_large", 0) else "")
          + f"; store {study.store}")
    for row in summary.rows:
        if row.failed and not row.invalid:
            print(f"  failed: {row.params} {_what(row)}: {row.status}: {row.error or row.message}")
    if invalid_rows:
        for line in _invalid_lines(invalid_rows):
            print(f"  invalid: {line}")
        print(f"  {len(invalid_rows)} point(s) have invalid input; fix the instance in {path} and rerun "
              "(points whose instance changes are computed afresh)")
    if kept and not args.retry_failed:
        print(f"  {len(kept)} point(s) are stored as failed; rerun with --retry-failed to recompute them")
    if summary.held:
        holders = sorted({lease.describe() for _, lease in summary.held})
        print(f"  {len(summary.held)} point(s) are being computed by another sweep ({'; '.join(holders)}); "
              "left to it (rerun later, or use --wait)")
    if not args.no_report:
        from advbound.studies.report import write_report
        try:
            files = write_report(study.store, out=study.report)
        except AdvboundError as err:
            print(f"no report: {err}")
        else:
            print(f"report: {files.summary}")
            _print_preferences(files)
            _print_exact(files)
    if invalid_rows:
        return 2
    return 1 if kept else 0
