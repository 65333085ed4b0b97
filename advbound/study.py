"""Studies: a parameter sweep over an instance template, solved point by point into a durable store.

This module owns the study spec (the ``[study]`` table of a study TOML file, read
through :func:`advbound.instance.load_instance`), the expansion of a study into
points (:func:`plan`), and their execution (:func:`run_study`): in process, on a
local process pool (``jobs``) or on a dask.distributed cluster (``scheduler``).  Besides the adversary
bounds a study may ask for exact t-query points (``exact = {queries = [1, 2]}``
and/or ``exact = {error = 0.1, max_queries = 4}``, solved with
:mod:`advbound.exact`), stored as rows of kind ``"exact"``.
Workers compute and return; only the calling process writes certificates and
rows (see :mod:`advbound.store`).  The library never prints: progress goes to an
optional callback object.

Typical call::

    study = load_study("instances/studies/default.toml")
    summary = run_study(study, jobs=2)
    summary.solved, summary.skipped, summary.failed

>>> s = StudySpec(name="demo", instance=None)
>>> s.store, s.certificates, s.growth
('studies/demo.sqlite', 'studies/demo-certificates', 'T')
"""

from __future__ import annotations

import dataclasses
import json
import logging
import os
import re
import time
import traceback
from pathlib import Path
from typing import Any, Callable, Sequence

from .errors import AdvboundError, InvalidInstanceError
from .store import ERROR_STATUS, Store, StoredRow, make_row, package_versions, run_key

__all__ = ["StudySpec", "Point", "StudyRun", "Progress", "load_study", "default_study_path", "plan",
           "solver_settings", "exact_settings", "solve_point", "run_study", "study_meta", "KIND", "EXACT_KIND",
           "EXACT_DEFAULTS"]

log = logging.getLogger("advbound")

#: The kind of the rows this module writes.
KIND = "adversary"

#: The kind of the rows of exact t-query points (:mod:`advbound.exact`).
EXACT_KIND = "exact"

#: Defaults of the optional keys of ``[study] exact`` (besides ``queries``, ``error``, ``max_queries``).
EXACT_DEFAULTS = {"solver": "CLARABEL", "tol": 1e-8, "decision_tol": 1e-4, "symmetry": True}
_EXACT_KEYS = ("queries", "error", "max_queries", *EXACT_DEFAULTS)

_BOUNDS = ("general", "positive")
_LAWS = ("sqrt", "sqrt_log", "power", "power_log")

#: [study] keys and what they hold (used for validation and in the docs).
STUDY_KEYS = {
    "name": "study name (default: the instance name, else the file stem)",
    "description": "free text",
    "bounds": 'list of "general" (ADV±) and/or "positive" (ADV)',
    "method": '"dense", "symmetric" or "factored"',
    "solver": '"SCS" or "CLARABEL"',
    "tol": "solver tolerance",
    "max_iters": "solver iteration limit",
    "options": "table of extra solver options",
    "store": "result store path (default studies/<name>.sqlite)",
    "certificates": "certificate directory (default: the store path without .sqlite, plus -certificates)",
    "growth": 'grid parameter used as the growth variable (default "T")',
    "series": "grid parameter whose values form separate series (optional)",
    "laws": "candidate laws to fit",
    "offsets": '"both" (default), true (only with offset) or false (only without)',
    "bootstrap": "bootstrap resamples per fit (default 200)",
    "seed": "bootstrap seed (default 0)",
    "report": "report directory (default reports/<name>)",
    "exact": "table: exact t-query points (queries = [t, ...] and/or error = ε with max_queries = N; "
             "optional solver, tol, decision_tol, symmetry)",
}


@dataclasses.dataclass(frozen=True)
class StudySpec:
    """A study: instance template and grid (``instance``, an :class:`advbound.instance.InstanceSpec`)
    plus what to solve and how, where to store it, and what to fit.

    Path fields are relative to the current directory unless absolute.  ``store``,
    ``certificates`` and ``report`` default from ``name`` (see the module docstring example).
    ``exact`` is empty (no exact points) or the normalised ``[study] exact`` table: ``queries``
    (tuple of t), ``error`` and ``max_queries`` (or ``None``), and the keys of :data:`EXACT_DEFAULTS`.
    """

    name: str
    instance: Any
    path: str | None = None
    description: str = ""
    bounds: tuple = ("general",)
    method: str = "dense"
    solver: str = "SCS"
    tol: float | None = None
    max_iters: int | None = None
    options: dict = dataclasses.field(default_factory=dict)
    store: str = ""
    certificates: str = ""
    growth: str = "T"
    series: str | None = None
    laws: tuple = ("sqrt", "sqrt_log", "power")
    offsets: tuple = (False, True)
    bootstrap: int = 200
    seed: int = 0
    report: str = ""
    exact: dict = dataclasses.field(default_factory=dict)

    def __post_init__(self):
        if not self.store:
            object.__setattr__(self, "store", f"studies/{self.name}.sqlite")
        if not self.certificates:
            base = self.store[:-7] if self.store.endswith(".sqlite") else self.store
            object.__setattr__(self, "certificates", base + "-certificates")
        if not self.report:
            object.__setattr__(self, "report", f"reports/{self.name}")


@dataclasses.dataclass(frozen=True)
class Point:
    """One unit of work: an instance's parameters and one bound (or one exact request), with its keys.

    For ``kind == "exact"`` points ``bound`` is ``None`` and ``request`` holds the exact settings
    (:func:`exact_settings`): ``queries`` (one t) or ``error`` and ``max_queries``.
    """

    index: int
    params: dict
    bound: str | None
    spec_key: str
    run_key: str
    spec: dict
    kind: str = KIND
    request: dict | None = None

    @property
    def what(self) -> str:
        """The bound, or ``"exact t=2"`` / ``"exact eps=0.1"`` for an exact point."""
        if self.kind != EXACT_KIND:
            return str(self.bound)
        r = self.request or {}
        return f"exact t={r['queries']}" if r.get("queries") is not None else f"exact eps={r.get('error'):g}"

    @property
    def label(self) -> str:
        """Short human name, e.g. ``"T=5 rows=3 general"`` or ``"T=5 rows=3 exact t=2"``."""
        return " ".join([*(f"{k}={v}" for k, v in self.params.items()), self.what])


@dataclasses.dataclass(frozen=True)
class StudyRun:
    """What :func:`run_study` did: numbers of points planned, skipped (already stored), solved
    successfully and failed in this run, the rows written, and the store path."""

    name: str
    store: str
    planned: int
    skipped: int
    solved: int
    failed: int
    rows: tuple = ()

    @property
    def ok(self) -> bool:
        """True when nothing failed in this run."""
        return self.failed == 0


class Progress:
    """Callback interface for :func:`run_study` (all methods optional no-ops here)."""

    def start(self, total: int, skipped: int) -> None:
        """Called once with the number of points to compute and the number already stored."""

    def begin(self, point: Point) -> None:
        """Called when ``point`` is started (in process) or submitted (pool, cluster)."""

    def done(self, point: Point, row: StoredRow) -> None:
        """Called after ``point``'s row was committed."""


def _err(path, msg):
    return InvalidInstanceError(f"{path}: [study] {msg}")


def default_study_path() -> Path:
    """``instances/studies/default.toml`` of the repository checkout this package was imported from.

    Raises
    ------
    AdvboundError
        When the package does not sit in a checkout with that file (e.g. a non-editable install).
    """
    here = Path(__file__).resolve().parent.parent / "instances" / "studies" / "default.toml"
    if not here.exists():
        raise AdvboundError(f"no default study at {here}; pass a study file (advbound study FILE)")
    return here


def _instance_api():
    from . import instance
    return instance


def load_study(path, *, store: str | None = None, certificates: str | None = None,
               report: str | None = None, api=None) -> StudySpec:
    """Read a study TOML file: ``[instance]`` and ``[grid]`` as for :mod:`advbound.instance`, plus ``[study]``.

    Parameters
    ----------
    path : str or Path
    store, certificates, report : str, optional
        Override the corresponding ``[study]`` keys (the ``--store`` etc. options).
    api : module, optional
        Provider of ``load_instance`` (default :mod:`advbound.instance`).

    Raises
    ------
    InvalidInstanceError
        Unknown ``[study]`` key or a value of the wrong type, naming file and key.
    """
    api = api or _instance_api()
    spec = api.load_instance(path)
    raw = dict(getattr(spec, "study", None) or {})
    unknown = sorted(set(raw) - set(STUDY_KEYS))
    if unknown:
        raise _err(path, f"unknown key {unknown[0]!r}; known: {', '.join(STUDY_KEYS)}")
    name = raw.get("name") or getattr(spec, "name", None) or Path(path).stem
    if not isinstance(name, str) or not re.fullmatch(r"[A-Za-z0-9_.-]+", name):
        raise _err(path, f"name {name!r} must be letters, digits, '_', '-' or '.'")
    kw: dict[str, Any] = {"name": name, "instance": spec, "path": str(path),
                          "description": str(raw.get("description", getattr(spec, "description", "") or ""))}
    bounds = raw.get("bounds", ["general"])
    if isinstance(bounds, str):
        bounds = [bounds]
    if not isinstance(bounds, list) or not bounds or any(b not in _BOUNDS for b in bounds):
        raise _err(path, f"bounds = {bounds!r}: expected a list of 'general' and/or 'positive'")
    kw["bounds"] = tuple(dict.fromkeys(bounds))
    for key, typ in (("method", str), ("solver", str), ("growth", str), ("series", str)):
        if key in raw:
            if not isinstance(raw[key], typ):
                raise _err(path, f"{key} = {raw[key]!r} must be a string")
            kw[key] = raw[key]
    if "tol" in raw:
        if not isinstance(raw["tol"], (int, float)) or isinstance(raw["tol"], bool) or not raw["tol"] > 0:
            raise _err(path, f"tol = {raw['tol']!r} must be a positive number")
        kw["tol"] = float(raw["tol"])
    for key, lo in (("max_iters", 1), ("bootstrap", 0), ("seed", 0)):
        if key in raw:
            v = raw[key]
            if not isinstance(v, int) or isinstance(v, bool) or v < lo:
                raise _err(path, f"{key} = {v!r} must be an integer >= {lo}")
            kw[key] = v
    if "options" in raw:
        if not isinstance(raw["options"], dict):
            raise _err(path, "options must be a table")
        kw["options"] = dict(raw["options"])
    if "laws" in raw:
        laws = raw["laws"]
        if not isinstance(laws, list) or not laws or any(x not in _LAWS for x in laws):
            raise _err(path, f"laws = {laws!r}: expected a list drawn from {', '.join(_LAWS)}")
        kw["laws"] = tuple(laws)
    if "offsets" in raw:
        o = raw["offsets"]
        table = {"both": (False, True), True: (True,), False: (False,)}
        if not (isinstance(o, bool) or o == "both"):
            raise _err(path, f"offsets = {o!r}: expected 'both', true or false")
        kw["offsets"] = table[o]
    if "exact" in raw:
        kw["exact"] = _parse_exact(path, raw["exact"])
    grid = dict(getattr(spec, "grid", None) or {})
    for key in ("growth", "series"):
        v = kw.get(key, "T" if key == "growth" else None)
        if v is not None and grid and v not in grid:
            raise _err(path, f"{key} = {v!r} is not a [grid] parameter (grid has {', '.join(grid)})")
    for key, override in (("store", store), ("certificates", certificates), ("report", report)):
        v = override if override is not None else raw.get(key)
        if v is not None:
            if not isinstance(v, str) or not v:
                raise _err(path, f"{key} must be a non-empty path string")
            kw[key] = v
    return StudySpec(**kw)


def _is_int(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _parse_exact(path, ex) -> dict:
    """Validate and normalise ``[study] exact`` (see :data:`STUDY_KEYS`)."""
    if not isinstance(ex, dict):
        raise _err(path, f"exact = {ex!r} must be a table, e.g. {{ queries = [1, 2] }}")
    unknown = sorted(set(ex) - set(_EXACT_KEYS))
    if unknown:
        raise _err(path, f"exact: unknown key {unknown[0]!r}; known: {', '.join(_EXACT_KEYS)}")
    if "queries" not in ex and "error" not in ex:
        raise _err(path, "exact needs queries = [t, ...] and/or error = ε")
    out: dict[str, Any] = {"queries": (), "error": None, "max_queries": None}
    if "queries" in ex:
        q = ex["queries"]
        q = [q] if _is_int(q) else q
        if not isinstance(q, list) or not q or any(not _is_int(t) or t < 0 for t in q):
            raise _err(path, f"exact: queries = {ex['queries']!r} must be a list of integers >= 0")
        out["queries"] = tuple(dict.fromkeys(q))
    if "error" in ex:
        e = ex["error"]
        if not _is_num(e) or not 0 <= e < 1:
            raise _err(path, f"exact: error = {e!r} must be a number in [0, 1)")
        out["error"] = float(e)
    if "max_queries" in ex:
        m = ex["max_queries"]
        if out["error"] is None:
            raise _err(path, "exact: max_queries needs error = ε")
        if not _is_int(m) or m < 0:
            raise _err(path, f"exact: max_queries = {m!r} must be an integer >= 0")
        out["max_queries"] = m
    for key, default in EXACT_DEFAULTS.items():
        v = ex.get(key, default)
        if key == "solver" and v not in ("CLARABEL", "SCS"):
            raise _err(path, f"exact: solver = {v!r} must be 'CLARABEL' or 'SCS'")
        if key in ("tol", "decision_tol") and (not _is_num(v) or not v > 0):
            raise _err(path, f"exact: {key} = {v!r} must be a positive number")
        if key == "symmetry" and not isinstance(v, bool):
            raise _err(path, f"exact: symmetry = {v!r} must be true or false")
        out[key] = float(v) if key in ("tol", "decision_tol") else v
    return out


def exact_settings(study: StudySpec) -> list[dict]:
    """One settings dict per exact request of ``study`` (they identify the point with the instance hash).

    Each has ``solver``, ``tol`` and ``symmetry``, and either ``queries`` (one t) or ``error``,
    ``max_queries`` and ``decision_tol``.  Empty when the study asks for no exact points.

    >>> ex = {"queries": (1, 2), "error": 0.1, "max_queries": 4, **EXACT_DEFAULTS}
    >>> [sorted(s) for s in exact_settings(StudySpec(name="d", instance=None, exact=ex))][::2]
    [['queries', 'solver', 'symmetry', 'tol'], ['decision_tol', 'error', 'max_queries', 'solver', 'symmetry', 'tol']]
    """
    ex = study.exact
    if not ex:
        return []
    base = {"solver": ex.get("solver", EXACT_DEFAULTS["solver"]), "tol": float(ex.get("tol", EXACT_DEFAULTS["tol"])),
            "symmetry": bool(ex.get("symmetry", EXACT_DEFAULTS["symmetry"]))}
    out = [dict(base, queries=int(t)) for t in ex.get("queries") or ()]
    if ex.get("error") is not None:
        out.append(dict(base, error=float(ex["error"]), max_queries=ex.get("max_queries"),
                        decision_tol=float(ex.get("decision_tol", EXACT_DEFAULTS["decision_tol"]))))
    return out


def solver_settings(study: StudySpec) -> dict:
    """The settings that, with the instance hash, bound and version, identify a point."""
    return {"method": study.method, "solver": study.solver, "tol": None if study.tol is None else float(study.tol),
            "max_iters": study.max_iters, "options": dict(sorted(study.options.items()))}


def study_meta(study: StudySpec) -> dict:
    """JSON description of the study kept in the store's ``meta`` table (read by reports and fits)."""
    inst = study.instance
    return {
        "name": study.name, "path": study.path, "description": study.description,
        "bounds": list(study.bounds), "settings": solver_settings(study), "growth": study.growth,
        "series": study.series, "laws": list(study.laws), "offsets": list(study.offsets),
        "bootstrap": study.bootstrap, "seed": study.seed, "report": study.report,
        "certificates": study.certificates,
        "exact": _jsonable(study.exact) if study.exact else None,
        "instance": _jsonable(getattr(inst, "instance", None)), "grid": _jsonable(getattr(inst, "grid", None)),
    }


def _jsonable(obj):
    return json.loads(json.dumps(obj, default=str)) if obj is not None else None


def plan(study: StudySpec, api=None) -> list[Point]:
    """Every point of the study in a fixed order: grid points (in :func:`grid_points` order) × (bounds,
    then the exact requests of :func:`exact_settings`)."""
    from . import __version__
    api = api or _instance_api()
    settings = solver_settings(study)
    points = []
    for params in api.grid_points(study.instance):
        params = dict(params)
        key = api.spec_key(study.instance, params)
        spec = api.resolved(study.instance, params)
        for bound in study.bounds:
            rk = run_key(KIND, key, bound, settings, __version__)
            points.append(Point(len(points), params, bound, key, rk, spec))
        for req in exact_settings(study):
            rk = run_key(EXACT_KIND, key, None, req, __version__)
            points.append(Point(len(points), params, None, key, rk, spec, EXACT_KIND, req))
    return points


def solve_point(task: dict) -> dict:
    """Compute one point (runs in a worker; never raises for a failing computation).

    ``task`` has ``instance`` (an InstanceSpec), ``params``, ``bound`` and ``settings``
    (:func:`solver_settings`).  Returns a dict with ``ok``; on success ``result``
    (``SolveResult.to_dict()``), ``certificate`` (or ``None``); on failure ``error``;
    always ``time_total`` (s) and ``versions``.  A task with ``kind == "exact"`` carries the
    request (one entry of :func:`exact_settings`) as ``settings`` and returns ``exact``
    (``ExactResult.to_dict()``) instead of ``result``.
    """
    t0 = time.perf_counter()
    try:
        from .instance import build_instance
        s = task["settings"]
        f = build_instance(task["instance"], task["params"])
        if task.get("kind") == EXACT_KIND:
            out = {"ok": True, "exact": _solve_exact(f, s).to_dict()}
        else:
            from .solve import solve
            res = solve(f, bound=task["bound"], solver=s["solver"], tol=s["tol"], max_iters=s["max_iters"],
                        method=s["method"], **s["options"])
            out = {"ok": True, "result": res.to_dict(), "certificate": res.certificate}
    except Exception as err:  # a failing point is data, recorded by the parent
        tb = traceback.format_exception_only(type(err), err)[-1].strip()
        out = {"ok": False, "error": tb}
    out["time_total"] = time.perf_counter() - t0
    out["versions"] = package_versions()
    return out


def _solve_exact(f, s: dict):
    from .exact import exact_success, least_queries
    kw = dict(solver=s["solver"], tol=s["tol"], use_symmetry=s["symmetry"])
    if s.get("queries") is not None:
        return exact_success(f, int(s["queries"]), **kw)
    return least_queries(f, s["error"], max_queries=s.get("max_queries"), decision_tol=s["decision_tol"], **kw)


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.=-]+", "_", text)[:80]


def _record(store: Store, study: StudySpec, point: Point, out: dict) -> StoredRow:
    """Write the certificate (temp file, then rename) and then the row (one transaction)."""
    if point.kind == EXACT_KIND:
        return _record_exact(store, study, point, out)
    from .certificate import save_certificate
    cert_path = None
    common = dict(kind=KIND, spec_key=point.spec_key, spec=point.spec, params=point.params, bound=point.bound,
                  study=study.name, solver=solver_settings(study), versions=out.get("versions", {}),
                  time_total=out.get("time_total"))
    if not out.get("ok"):
        row = make_row(point.run_key, status=ERROR_STATUS, message="the computation raised an exception",
                       error=str(out.get("error", "unknown error")), **common)
        store.put(row)
        return row
    res = out["result"]
    cert = out.get("certificate")
    if cert is not None:
        os.makedirs(study.certificates, exist_ok=True)
        final = os.path.join(study.certificates, f"{_safe(point.label)}-{point.run_key[:12]}.npz")
        tmp = os.path.join(study.certificates, f".{point.run_key[:12]}.{os.getpid()}.tmp")
        save_certificate(cert, tmp)
        os.replace(tmp, final)
        cert_path = os.path.abspath(final)
    solver = res.get("solver", {})
    values = {"relative_gap": res.get("relative_gap"), "success": res.get("success"),
              "solver_stats": solver}
    row = make_row(point.run_key, status=res["status"], message=res.get("message"), lower=res.get("lower"),
                   upper=res.get("upper"), objective=res.get("objective"), domain_size=res.get("domain_size"),
                   values=values, time_solve=solver.get("time"), certificate=cert_path, **common)
    store.put(row)
    return row


def _record_exact(store: Store, study: StudySpec, point: Point, out: dict) -> StoredRow:
    """The row of an exact point: lower/upper = verified achievable success / verified upper bound."""
    common = dict(kind=EXACT_KIND, spec_key=point.spec_key, spec=point.spec, params=point.params, bound=None,
                  study=study.name, solver=dict(point.request or {}), versions=out.get("versions", {}),
                  time_total=out.get("time_total"))
    if not out.get("ok"):
        row = make_row(point.run_key, status=ERROR_STATUS, message="the computation raised an exception",
                       error=str(out.get("error", "unknown error")), **common)
    else:
        d = out["exact"]
        row = make_row(point.run_key, status=d["status"], message=d.get("message"),
                       lower=d.get("success_probability"), upper=d.get("upper_bound"), objective=d.get("objective"),
                       domain_size=d.get("domain_size"), values=d, time_solve=(d.get("solver") or {}).get("time"),
                       **common)
    store.put(row)
    return row


def _remove_stale_temporaries(directory: str) -> int:
    """Delete certificate temp files left by a killed run (their writer process is gone)."""
    removed = 0
    if not os.path.isdir(directory):
        return 0
    for fn in os.listdir(directory):
        m = re.fullmatch(r"\.[0-9a-f]{12}\.(\d+)\.tmp", fn)
        if not m:
            continue
        pid = int(m.group(1))
        try:
            os.kill(pid, 0)
            alive = pid != os.getpid()
        except ProcessLookupError:
            alive = False
        except PermissionError:
            alive = True
        if not alive:
            os.remove(os.path.join(directory, fn))
            removed += 1
    return removed


def run_study(study: StudySpec, *, store: Store | None = None, jobs: int = 1, scheduler=None,
              retry_failed: bool = False, progress: Progress | None = None,
              runner: Callable[[dict], dict] | None = None, api=None, points: Sequence[Point] | None = None,
              ) -> StudyRun:
    """Solve every point of ``study`` not yet in the store; return a :class:`StudyRun`.

    Parameters
    ----------
    study : StudySpec
    store : Store, optional
        Default: ``Store(study.store)`` (opened and closed here).
    jobs : int
        Local worker processes (1: in this process).
    scheduler : str or dask.distributed.Client, optional
        Address of a dask scheduler (or a client) to submit the points to instead.
    retry_failed : bool
        Also recompute points whose stored row failed (default: keep them).
    progress : Progress, optional
        Receives ``start``, ``begin`` and ``done`` calls.
    runner : callable, optional
        The per-point function (default :func:`solve_point`); must be picklable for pools/clusters.
    api : module, optional
        Provider of the instance functions (default :mod:`advbound.instance`).
    points : sequence of Point, optional
        Use these instead of :func:`plan`.

    Notes
    -----
    Each point's row is committed on its own, after its certificate file is in place; an
    interrupted run loses at most the points in flight, and a rerun continues where it stopped.
    On ``KeyboardInterrupt`` pending work is cancelled and the exception propagates.
    """
    if jobs < 1:
        raise AdvboundError(f"jobs must be at least 1, got {jobs}")
    progress = progress or Progress()
    runner = runner or solve_point
    own = store is None
    store = store or Store(study.store)
    try:
        store.set_meta("study", study_meta(study))
        if _remove_stale_temporaries(study.certificates):
            log.info("removed unfinished certificate files of an interrupted run")
        pts = list(points) if points is not None else plan(study, api)
        known = store.keys()
        todo = [p for p in pts if p.run_key not in known or (retry_failed and not known[p.run_key])]
        skipped = len(pts) - len(todo)
        progress.start(len(todo), skipped)
        settings = solver_settings(study)
        tasks = [(p, {"instance": study.instance, "params": p.params, "bound": p.bound, "kind": p.kind,
                      "settings": settings if p.kind != EXACT_KIND else dict(p.request or {})})
                 for p in todo]
        rows = []

        def finish(p, out):
            row = _record(store, study, p, out)
            rows.append(row)
            progress.done(p, row)

        if scheduler is not None:
            _run_dask(tasks, runner, scheduler, progress, finish)
        elif jobs > 1 and len(tasks) > 1:
            _run_pool(tasks, runner, jobs, progress, finish)
        else:
            for p, task in tasks:
                progress.begin(p)
                finish(p, runner(task))
        failed = sum(1 for r in rows if r.failed)
        return StudyRun(study.name, store.path, len(pts), skipped, len(rows) - failed, failed, tuple(rows))
    finally:
        if own:
            store.close()


def _run_pool(tasks, runner, jobs, progress, finish):
    import concurrent.futures as cf
    import multiprocessing as mp
    ctx = mp.get_context("fork") if "fork" in mp.get_all_start_methods() else None
    ex = cf.ProcessPoolExecutor(max_workers=jobs, mp_context=ctx)
    futs = {}
    try:
        for p, task in tasks:
            futs[ex.submit(runner, task)] = p
            progress.begin(p)
        for fut in cf.as_completed(futs):
            finish(futs[fut], _outcome(fut))
    except BaseException:
        for fut in futs:
            fut.cancel()
        ex.shutdown(wait=False, cancel_futures=True)
        raise
    ex.shutdown(wait=True)


def _outcome(fut) -> dict:
    try:
        return fut.result()
    except Exception as err:  # the worker itself died (e.g. out of memory)
        return {"ok": False, "error": f"worker failed: {type(err).__name__}: {err}"}


def _run_dask(tasks, runner, scheduler, progress, finish):
    try:
        from dask.distributed import Client, as_completed
    except ImportError:  # pragma: no cover
        raise AdvboundError("--scheduler needs dask.distributed, which is not installed") from None
    client = scheduler if isinstance(scheduler, Client) else Client(scheduler)
    futs = {}
    try:
        for p, task in tasks:
            futs[client.submit(runner, task, pure=False, key=f"advbound-{p.run_key[:16]}-{time.time_ns()}")] = p
            progress.begin(p)
        try:
            for fut in as_completed(list(futs)):
                try:
                    out = fut.result()
                except Exception as err:
                    out = {"ok": False, "error": f"worker failed: {type(err).__name__}: {err}"}
                finish(futs[fut], out)
        except BaseException:
            client.cancel(list(futs))
            raise
    finally:
        if client is not scheduler:
            client.close()
