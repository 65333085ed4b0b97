"""Studies: a parameter sweep over an instance template, solved point by point into a durable store.

This module owns the study spec (the ``[study]`` table of a study TOML file, read
through :func:`advbound.instance.load_instance`), the expansion of a study into
points (:func:`plan`), and their execution (:func:`run_study`): in process, on a
local process pool (``jobs``) or on a dask.distributed cluster (``scheduler``).
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
           "solver_settings", "solve_point", "run_study", "study_meta", "KIND"]

log = logging.getLogger("advbound")

#: The kind of the rows this module writes.
KIND = "adversary"

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
}


@dataclasses.dataclass(frozen=True)
class StudySpec:
    """A study: instance template and grid (``instance``, an :class:`advbound.instance.InstanceSpec`)
    plus what to solve and how, where to store it, and what to fit.

    Path fields are relative to the current directory unless absolute.  ``store``,
    ``certificates`` and ``report`` default from ``name`` (see the module docstring example).
    """

    name: str
    instance: Any
    path: str | None = None
    description: str = ""
    bounds: tuple = ("general",)
    method: str = "dense"
    solver: str = "SCS"
    tol: float = 1e-7
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
    """One unit of work: an instance's parameters and one bound, with its keys."""

    index: int
    params: dict
    bound: str
    spec_key: str
    run_key: str
    spec: dict

    @property
    def label(self) -> str:
        """Short human name, e.g. ``"T=5 rows=3 general"``."""
        return " ".join([*(f"{k}={v}" for k, v in self.params.items()), self.bound])


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


def solver_settings(study: StudySpec) -> dict:
    """The settings that, with the instance hash, bound and version, identify a point."""
    return {"method": study.method, "solver": study.solver, "tol": float(study.tol),
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
        "instance": _jsonable(getattr(inst, "instance", None)), "grid": _jsonable(getattr(inst, "grid", None)),
    }


def _jsonable(obj):
    return json.loads(json.dumps(obj, default=str)) if obj is not None else None


def plan(study: StudySpec, api=None) -> list[Point]:
    """Every point of the study in a fixed order: grid points (in :func:`grid_points` order) × bounds."""
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
    return points


def solve_point(task: dict) -> dict:
    """Compute one point (runs in a worker; never raises for a failing computation).

    ``task`` has ``instance`` (an InstanceSpec), ``params``, ``bound`` and ``settings``
    (:func:`solver_settings`).  Returns a dict with ``ok``; on success ``result``
    (``SolveResult.to_dict()``), ``certificate`` (or ``None``); on failure ``error``;
    always ``time_total`` (s) and ``versions``.
    """
    t0 = time.perf_counter()
    try:
        from .instance import build_instance
        from .solve import solve
        s = task["settings"]
        f = build_instance(task["instance"], task["params"])
        res = solve(f, bound=task["bound"], solver=s["solver"], tol=s["tol"], max_iters=s["max_iters"],
                    method=s["method"], **s["options"])
        out = {"ok": True, "result": res.to_dict(), "certificate": res.certificate}
    except Exception as err:  # a failing point is data, recorded by the parent
        tb = traceback.format_exception_only(type(err), err)[-1].strip()
        out = {"ok": False, "error": tb}
    out["time_total"] = time.perf_counter() - t0
    out["versions"] = package_versions()
    return out


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.=-]+", "_", text)[:80]


def _record(store: Store, study: StudySpec, point: Point, out: dict) -> StoredRow:
    """Write the certificate (temp file, then rename) and then the row (one transaction)."""
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
        tasks = [(p, {"instance": study.instance, "params": p.params, "bound": p.bound, "settings": settings})
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
