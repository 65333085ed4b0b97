"""Studies: a parameter sweep over an instance template, solved point by point into a durable store.

This module owns the study spec (the ``[study]`` table of a study TOML file, read
through :func:`advbound.functions.instance.load_instance`), the expansion of a study into
points (:func:`plan`), and their execution (:func:`run_study`): in process, on a
local process pool (``jobs``) or on a dask.distributed cluster (``scheduler``).  Besides the adversary
bounds a study may ask for exact t-query points (``exact = {queries = [1, 2]}``
and/or ``exact = {error = 0.1, max_queries = 4}``, solved with
:mod:`advbound.programs.exact`), stored as rows of kind ``"exact"``.
Workers compute and return; only the calling process writes certificates and
rows (see :mod:`advbound.studies.store`).  Several sweeps may run on one store at once:
each claims a point (a lease in the store) before computing it, so every point is
computed once.  A grid point whose instance cannot be built is stored with status
``invalid`` and its one-line message (fix the instance; retrying cannot help).
Certificate paths are recorded relative to the store's folder, so the certificate
directory must lie inside that folder.  The library never prints: progress goes to
an optional callback object.

Typical call::

    study = load_study("instances/studies/default.toml")
    summary = run_study(study, jobs=2)
    summary.solved, summary.skipped, summary.failed

>>> s = StudySpec(name="demo", instance=None)
>>> s.store, s.certificates, s.growth
('studies/demo.sqlite', 'studies/demo-certificates', 'T')
"""

from __future__ import annotations

import collections
import contextlib
import dataclasses
import hashlib
import json
import logging
import math
import os
import re
import time
import traceback
import uuid
from pathlib import Path
from typing import Any, Callable, Sequence

from advbound import status as _status
from advbound.errors import AdvboundError, InvalidInstanceError
from advbound.studies.store import (BOUND_SLACK, DEFAULT_LEASE, ERROR_STATUS, LeaseHolder, LeaseKeeper, RowState, Store, StoredRow,
                                    make_row, package_versions, run_key)

__all__ = ["StudySpec", "Point", "StudyRun", "Progress", "load_study", "default_study_path", "plan",
           "solver_settings", "exact_settings", "solve_point", "run_study", "study_meta", "KIND", "EXACT_KIND",
           "EXACT_DEFAULTS"]

log = logging.getLogger("advbound")

#: The kind of the rows this module writes.
KIND = "adversary"

#: The kind of the rows of exact t-query points (:mod:`advbound.programs.exact`).
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
    """A study: instance template and grid (``instance``, an :class:`advbound.functions.instance.InstanceSpec`)
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
    (:func:`exact_settings`): ``queries`` (one t) or ``error`` and ``max_queries``.  ``invalid`` is the
    one-line message when the instance cannot be resolved at this grid point (then ``spec_key`` is
    a hash of the instance template and the parameters).
    """

    index: int
    params: dict
    bound: str | None
    spec_key: str
    run_key: str
    spec: dict
    kind: str = KIND
    request: dict | None = None
    invalid: str | None = None

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
    """What :func:`run_study` did: numbers of points planned, skipped (already stored, or stored by
    another process meanwhile), solved successfully and failed in this run, the rows written, and the
    store path; ``invalid`` counts the points of this run whose input is invalid, ``held`` lists the
    points left to another live process as ``(Point, Lease)``."""

    name: str
    store: str
    planned: int
    skipped: int
    solved: int
    failed: int
    rows: tuple = ()
    invalid: int = 0
    held: tuple = ()

    @property
    def ok(self) -> bool:
        """True when nothing failed and no input was invalid in this run."""
        return self.failed == 0 and self.invalid == 0


class Progress:
    """Callback interface for :func:`run_study` (all methods optional no-ops here)."""

    def start(self, total: int, skipped: int) -> None:
        """Called once with the number of points to compute and the number already stored."""

    def begin(self, point: Point) -> None:
        """Called when ``point`` is started (in process) or submitted (pool, cluster)."""

    def done(self, point: Point, row: StoredRow) -> None:
        """Called after ``point``'s row was committed."""

    def skip(self, point: Point, why: str) -> None:
        """Called for a planned point this run leaves to another process (``why`` says which)."""


def _err(path, msg):
    return InvalidInstanceError(f"{path}: [study] {msg}")


def default_study_path() -> Path:
    """``instances/studies/default.toml`` of the repository checkout this package was imported from.

    Raises
    ------
    AdvboundError
        When the package does not sit in a checkout with that file (e.g. a non-editable install).
    """
    here = Path(__file__).resolve().parents[2] / "instances" / "studies" / "default.toml"
    if not here.exists():
        raise AdvboundError(f"no default study at {here}; pass a study file (advbound study FILE)")
    return here


def _instance_api():
    from advbound.functions import instance
    return instance


def load_study(path, *, store: str | None = None, certificates: str | None = None,
               report: str | None = None, api=None) -> StudySpec:
    """Read a study TOML file: ``[instance]`` and ``[grid]`` as for :mod:`advbound.functions.instance`, plus ``[study]``.

    Parameters
    ----------
    path : str or Path
    store, certificates, report : str, optional
        Override the corresponding ``[study]`` keys (the ``--store`` etc. options).
    api : module, optional
        Provider of ``load_instance`` (default :mod:`advbound.functions.instance`).

    Raises
    ------
    InvalidInstanceError
        Unknown ``[study]`` key or a value of the wrong type, naming file and key.
    """
    api = api or _instance_api()
    spec = api.load_instance(path, check_points=False)
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


def _invalid_key(study: StudySpec, params: dict) -> str:
    """Hash standing in for the spec hash of a grid point whose instance cannot be resolved:
    the raw instance template and the parameters (it changes whenever the template does)."""
    inst = getattr(study.instance, "instance", None)
    doc = {"invalid": True, "instance": _jsonable(inst), "params": _jsonable(params)}
    return hashlib.sha256(json.dumps(doc, sort_keys=True, default=str).encode()).hexdigest()


def plan(study: StudySpec, api=None) -> list[Point]:
    """Every point of the study in a fixed order: grid points (in :func:`grid_points` order) × (bounds,
    then the exact requests of :func:`exact_settings`).

    A grid point whose instance cannot be resolved (an :class:`~advbound.errors.AdvboundError`, e.g.
    a row length below 1 at small T) still gives its points, with ``invalid`` set to the one-line
    message; they are stored with status ``invalid`` and never computed.
    """
    from advbound import __version__
    api = api or _instance_api()
    settings = solver_settings(study)
    points = []
    for params in api.grid_points(study.instance):
        params = dict(params)
        invalid = None
        try:
            key = api.spec_key(study.instance, params)
            spec = api.resolved(study.instance, params)
        except AdvboundError as err:
            invalid = _one_line(err)
            key, spec = _invalid_key(study, params), {"params": params}
        for bound in study.bounds:
            rk = run_key(KIND, key, bound, settings, __version__)
            points.append(Point(len(points), params, bound, key, rk, spec, invalid=invalid))
        for req in exact_settings(study):
            rk = run_key(EXACT_KIND, key, None, req, __version__)
            points.append(Point(len(points), params, None, key, rk, spec, EXACT_KIND, req, invalid=invalid))
    return points


def _one_line(err: BaseException) -> str:
    return " ".join(str(err).split()) or type(err).__name__


def solve_point(task: dict) -> dict:
    """Compute one point (runs in a worker; never raises for a failing computation).

    ``task`` has ``instance`` (an InstanceSpec), ``params``, ``bound`` and ``settings``
    (:func:`solver_settings`).  Returns a dict with ``ok``; on success ``result``
    (``SolveResult.to_dict()``), ``certificate`` (or ``None``); on failure ``error``, and
    ``invalid = True`` when building the instance raised an
    :class:`~advbound.errors.AdvboundError` (the input is wrong, not the solver); always
    ``time_total`` (s) and ``versions``.  A task with ``kind == "exact"`` carries the
    request (one entry of :func:`exact_settings`) as ``settings`` and returns ``exact``
    (``ExactResult.to_dict()``) instead of ``result``.
    """
    t0 = time.perf_counter()
    try:
        out = _compute(task)
    except Exception as err:  # a failing point is data, recorded by the parent
        tb = traceback.format_exception_only(type(err), err)[-1].strip()
        out = {"ok": False, "error": tb}
    out["time_total"] = time.perf_counter() - t0
    out["versions"] = package_versions()
    return out


def _compute(task: dict) -> dict:
    from advbound.functions.instance import build_instance
    s = task["settings"]
    try:
        f = build_instance(task["instance"], task["params"])
    except AdvboundError as err:
        return {"ok": False, "invalid": True, "error": _one_line(err)}
    if task.get("kind") == EXACT_KIND:
        return {"ok": True, "exact": _solve_exact(f, s).to_dict()}
    from advbound.programs.solve import solve
    res = solve(f, bound=task["bound"], solver=s["solver"], tol=s["tol"], max_iters=s["max_iters"],
                method=s["method"], **s["options"])
    return {"ok": True, "result": res.to_dict(), "certificate": res.certificate}


def _solve_exact(f, s: dict):
    from advbound.programs.exact import exact_success, least_queries
    kw = dict(solver=s["solver"], tol=s["tol"], use_symmetry=s["symmetry"])
    if s.get("queries") is not None:
        return exact_success(f, int(s["queries"]), **kw)
    return least_queries(f, s["error"], max_queries=s.get("max_queries"), decision_tol=s["decision_tol"], **kw)


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.=-]+", "_", text)[:80]


def _common(study: StudySpec, point: Point, out: dict) -> dict:
    exact = point.kind == EXACT_KIND
    return dict(kind=point.kind, spec_key=point.spec_key, spec=point.spec, params=point.params,
                bound=None if exact else point.bound, study=study.name,
                solver=dict(point.request or {}) if exact else solver_settings(study),
                versions=out.get("versions", {}), time_total=out.get("time_total"))


def _failed_row(point: Point, out: dict, common: dict) -> StoredRow:
    if out.get("invalid"):
        return make_row(point.run_key, status=_status.INVALID, message=str(out.get("error")), **common)
    return make_row(point.run_key, status=ERROR_STATUS, message="the computation raised an exception",
                    error=str(out.get("error", "unknown error")), **common)


def _record(store: Store, study: StudySpec, point: Point, out: dict, holder: LeaseHolder | None = None
            ) -> StoredRow:
    """Write the certificate (temp file, then rename) and then the row (one transaction, which also
    releases ``holder``'s lease on the point)."""
    common = _common(study, point, out)
    if not out.get("ok"):
        row = _failed_row(point, out, common)
    elif point.kind == EXACT_KIND:
        row = _exact_row(point, out["exact"], common)
    else:
        row = _adversary_row(store, study, point, out, common)
    store.put(row, release=holder)
    return row


def _consistent(status: str, message, lower, upper):
    """A success status whose verified lower bound exceeds its verified upper bound is a contradiction."""
    if status in _status.SUCCESS and lower is not None and upper is not None and \
            lower > upper + BOUND_SLACK * max(1.0, abs(upper)):
        return _status.UNVERIFIED, f"verified lower {lower!r} exceeds verified upper {upper!r}"
    return status, message


def _adversary_row(store: Store, study: StudySpec, point: Point, out: dict, common: dict) -> StoredRow:
    from advbound.evidence.certificate import save_certificate
    res = out["result"]
    cert = out.get("certificate")
    cert_path = None
    if cert is not None:
        final = os.path.join(study.certificates, f"{_safe(point.label)}-{point.run_key[:12]}.npz")
        tmp = os.path.join(study.certificates, f".{point.run_key[:12]}.{os.getpid()}.tmp")
        try:
            os.makedirs(study.certificates, exist_ok=True)
            save_certificate(cert, tmp)
            os.replace(tmp, final)
        except OSError as err:
            raise AdvboundError(f"{final}: cannot write the certificate ({err.strerror or err})") from None
        cert_path = os.path.relpath(os.path.abspath(final), store.folder)
    solver = res.get("solver", {})
    values = {"relative_gap": res.get("relative_gap"), "success": res.get("success"),
              "solver_stats": solver}
    status, message = _consistent(res["status"], res.get("message"), _num(res.get("lower")), _num(res.get("upper")))
    return make_row(point.run_key, status=status, message=message, lower=res.get("lower"),
                    upper=res.get("upper"), objective=res.get("objective"), domain_size=res.get("domain_size"),
                    values=values, time_solve=solver.get("time"), certificate=cert_path, **common)


def _exact_row(point: Point, d: dict, common: dict) -> StoredRow:
    """The row of an exact point: lower/upper = verified achievable success / verified upper bound."""
    status, message = _consistent(d["status"], d.get("message"), _num(d.get("success_probability")),
                                  _num(d.get("upper_bound")))
    return make_row(point.run_key, status=status, message=message, lower=d.get("success_probability"),
                    upper=d.get("upper_bound"), objective=d.get("objective"), domain_size=d.get("domain_size"),
                    values=d, time_solve=(d.get("solver") or {}).get("time"), **common)


def _num(v):
    try:
        return None if v is None else float(v)
    except (TypeError, ValueError):
        return None


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
            with contextlib.suppress(FileNotFoundError):
                os.remove(os.path.join(directory, fn))
                removed += 1
    return removed


def _check_certificate_folder(study: StudySpec, store: Store) -> None:
    """Certificates are recorded relative to the store's folder, so they must live inside it."""
    cert_dir = os.path.abspath(study.certificates)
    if os.path.commonpath([store.folder, cert_dir]) != store.folder:
        raise AdvboundError(f"certificate directory {study.certificates} is not inside the folder of the store "
                            f"{store.path} ({store.folder}); certificates are recorded relative to it, so "
                            "choose a certificate directory inside that folder")


def run_study(study: StudySpec, *, store: Store | None = None, jobs: int = 1, scheduler=None,
              retry_failed: bool = False, progress: Progress | None = None,
              runner: Callable[[dict], dict] | None = None, api=None, points: Sequence[Point] | None = None,
              lease: float = DEFAULT_LEASE, wait: bool = False) -> StudyRun:
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
        Also recompute points whose stored computation failed (default: keep them).  Points
        stored as ``invalid`` are not retried: their instance must change first.
    progress : Progress, optional
        Receives ``start``, ``begin``, ``done`` and ``skip`` calls.
    runner : callable, optional
        The per-point function (default :func:`solve_point`); must be picklable for pools/clusters.
    api : module, optional
        Provider of the instance functions (default :mod:`advbound.functions.instance`).
    points : sequence of Point, optional
        Use these instead of :func:`plan`.
    lease : float
        Lease duration in seconds (see :mod:`advbound.studies.store`); renewed every third of it.
    wait : bool
        Wait for points that another live process holds, and compute those whose lease
        expires (default: skip them, after one last look once everything else is done).

    Notes
    -----
    Each point is claimed (a lease in the store) before it is computed, so several sweeps on
    one store share the work.  Each point's row is committed on its own, after its certificate
    file is in place, and releases the lease; an interrupted run loses at most the points in
    flight, and a rerun continues where it stopped.  On ``KeyboardInterrupt`` pending work is
    cancelled, the leases are released and the exception propagates.
    """
    if jobs < 1:
        raise AdvboundError(f"jobs must be at least 1, got {jobs}")
    if not (isinstance(lease, (int, float)) and math.isfinite(lease) and lease > 0):
        raise AdvboundError(f"lease must be a positive number of seconds, got {lease!r}")
    progress = progress or Progress()
    runner = runner or solve_point
    own = store is None
    store = store or Store(study.store)
    holder = LeaseHolder.current()
    keeper = None
    try:
        store.set_meta("study", study_meta(study))
        pts = list(points) if points is not None else plan(study, api)
        states = store.states()
        stale = _stale_invalid(store, pts, study.name)
        if stale:
            store.delete(stale)
            log.info("%s: removed %d invalid row(s) of points whose instance has changed", store.path, len(stale))
        rows: list[StoredRow] = []
        for p in pts:
            if p.invalid is not None:
                rows.append(_record_invalid_plan(store, study, p, states.get(p.run_key)))
        todo = []
        for p in pts:
            s = states.get(p.run_key)
            if p.invalid is None and (s is None or s.state == "defective" or (retry_failed and s.state == "failed")):
                todo.append((p, None if s is None else s.seen))
        invalid_planned = sum(1 for p in pts if p.invalid is not None)
        skipped = len(pts) - len(todo) - invalid_planned
        progress.start(len(todo), skipped)
        held: list = []
        others = 0
        if todo:
            _check_certificate_folder(study, store)
            if _remove_stale_temporaries(study.certificates):
                log.info("removed unfinished certificate files of an interrupted run")
            settings = solver_settings(study)

            def task_of(p):
                return {"instance": study.instance, "params": p.params, "bound": p.bound, "kind": p.kind,
                        "settings": settings if p.kind != EXACT_KIND else dict(p.request or {})}

            def finish(p, out):
                row = _record(store, study, p, out, holder)
                rows.append(row)
                progress.done(p, row)

            keeper = LeaseKeeper(store, holder, lease)
            executor = _executor(scheduler, jobs, len(todo), runner)
            if isinstance(executor, _Inline):
                keeper.start()
            try:
                held, others = _drive(todo, store, holder, lease, executor, keeper, task_of, progress, finish,
                                      wait)
            finally:
                executor.close()
        computed = [r for r in rows if not r.invalid]
        failed = sum(1 for r in computed if r.failed)
        return StudyRun(study.name, store.path, len(pts), skipped + others, len(computed) - failed, failed,
                        tuple(rows), invalid=sum(1 for r in rows if r.invalid),
                        held=tuple((p, ls) for p, _, ls in held))
    finally:
        if keeper is not None:
            keeper.stop()
        with contextlib.suppress(AdvboundError):
            store.release(holder)
        if own:
            store.close()


def _identity(kind, params, bound, request) -> tuple:
    what = bound if kind != EXACT_KIND else json.dumps(request or {}, sort_keys=True, default=str)
    return kind, json.dumps(params, sort_keys=True, default=str), what


def _stale_invalid(store: Store, pts: Sequence[Point], name: str) -> list[str]:
    """Run keys of this study's invalid rows for planned points that now have another run key (their
    instance changed, e.g. it was fixed): such rows describe an input that no longer exists."""
    current = {_identity(p.kind, p.params, p.bound, p.request): p.run_key for p in pts}
    out = []
    for r in store.rows(study=name):
        if r.invalid:
            key = current.get(_identity(r.kind, r.params, r.bound, r.solver if r.kind == EXACT_KIND else None))
            if key is not None and key != r.run_key:
                out.append(r.run_key)
    return out


def _record_invalid_plan(store: Store, study: StudySpec, p: Point, state: RowState | None) -> StoredRow:
    """Store (or refresh) the row of a point whose instance cannot be resolved."""
    old = store.get(p.run_key) if state is not None and state.state == "invalid" else None
    if old is not None and old.message == p.invalid:
        return old
    row = _failed_row(p, {"invalid": True, "error": p.invalid}, _common(study, p, {"versions": package_versions()}))
    store.put(row)
    return row


def _drive(todo, store, holder, lease, executor, keeper, task_of, progress, finish, wait):
    """Claim and compute the points of ``todo`` with at most ``executor.window`` in flight.

    Returns ``(held, others)``: the points left to live holders as ``(point, seen, lease)``, and
    the number of points another process finished meanwhile.
    """
    pending = collections.deque(todo)
    inflight: dict = {}
    held: dict = {}
    others = 0
    poll = min(1.0, lease / 4.0)
    last_look = time.monotonic()
    looked_again = False
    while True:
        while pending and len(inflight) < executor.window:
            p, seen = pending.popleft()
            c = store.claim(p.run_key, holder, lease, seen)
            if c.outcome == "stored":
                others += 1
                progress.skip(p, "stored by another process")
            elif c.outcome == "held":
                held[p.run_key] = (p, seen, c.lease)
            else:
                progress.begin(p)
                inflight[executor.submit(task_of(p))] = p
        if inflight:
            for fut in executor.wait(list(inflight), timeout=keeper.period):
                finish(inflight.pop(fut), executor.outcome(fut))
            keeper.tick()
            if wait and held and time.monotonic() - last_look >= poll:
                pending.extend((p, seen) for p, seen, _ in held.values())
                held.clear()
                last_look = time.monotonic()
            continue
        if not held:
            break
        if not wait:
            if looked_again:
                break
            looked_again = True
        else:
            time.sleep(max(0.0, poll - (time.monotonic() - last_look)))
            keeper.tick()
        pending.extend((p, seen) for p, seen, _ in held.values())
        held.clear()
        last_look = time.monotonic()
    for p, _, ls in held.values():
        progress.skip(p, f"held by {ls.describe()}")
    return list(held.values()), others


class _Done:
    """A finished computation (the in-process executor's future)."""

    def __init__(self, out):
        self.out = out


class _Inline:
    """Computes each point in this process, at submission."""

    window = 1

    def __init__(self, runner):
        self.runner = runner

    def submit(self, task):
        try:
            return _Done(self.runner(task))
        except Exception as err:  # a runner that raises is a failed point, as in a pool
            return _Done({"ok": False, "error": f"{type(err).__name__}: {_one_line(err)}"})

    def wait(self, futs, timeout=None):
        return futs

    def outcome(self, fut):
        return fut.out

    def close(self):
        pass


class _Pool:
    """A local process pool; at most ``jobs`` points in flight (so other sweeps can claim the rest)."""

    def __init__(self, runner, jobs):
        import concurrent.futures as cf
        import multiprocessing as mp
        self.cf = cf
        ctx = mp.get_context("fork") if "fork" in mp.get_all_start_methods() else None
        self.ex = cf.ProcessPoolExecutor(max_workers=jobs, mp_context=ctx)
        self.runner = runner
        self.window = jobs
        self.futs: list = []
        self.clean = False

    def submit(self, task):
        fut = self.ex.submit(self.runner, task)
        self.futs.append(fut)
        return fut

    def wait(self, futs, timeout=None):
        return self.cf.wait(futs, timeout=timeout, return_when=self.cf.FIRST_COMPLETED).done

    def outcome(self, fut):
        return _outcome(fut)

    def close(self):
        if all(f.done() for f in self.futs):
            self.ex.shutdown(wait=True)
        else:
            for f in self.futs:
                f.cancel()
            self.ex.shutdown(wait=False, cancel_futures=True)


def _outcome(fut) -> dict:
    try:
        return fut.result()
    except Exception as err:  # the worker itself died (e.g. out of memory)
        return {"ok": False, "error": f"worker failed: {type(err).__name__}: {err}"}


class _Dask:
    """A dask.distributed cluster; as many points in flight as it has worker threads."""

    def __init__(self, runner, scheduler, jobs):
        try:
            from dask.distributed import Client
        except ImportError:  # pragma: no cover
            raise AdvboundError("--scheduler needs dask.distributed, which is not installed") from None
        try:
            self.client = scheduler if isinstance(scheduler, Client) else Client(scheduler, timeout=30)
        except (OSError, TimeoutError, ValueError) as err:
            raise AdvboundError(f"cannot reach the dask scheduler {scheduler!r}: {_one_line(err)}") from None
        self.own = self.client is not scheduler
        self.runner = runner
        try:
            threads = sum(self.client.nthreads().values())
        except Exception:  # an unreachable scheduler surfaces on submit
            threads = 0
        self.window = max(jobs, threads, 1)
        self.futs: list = []

    def submit(self, task):
        fut = self.client.submit(self.runner, task, pure=False, key=f"advbound-{uuid.uuid4().hex}")
        self.futs.append(fut)
        return fut

    def wait(self, futs, timeout=None):
        from dask.distributed import wait as dwait
        try:
            return dwait(futs, timeout=timeout, return_when="FIRST_COMPLETED").done
        except TimeoutError:
            return set()

    def outcome(self, fut):
        try:
            return fut.result()
        except Exception as err:
            return {"ok": False, "error": f"worker failed: {type(err).__name__}: {err}"}

    def close(self):
        pending = [f for f in self.futs if not f.done()]
        if pending:
            self.client.cancel(pending)
        if self.own:
            self.client.close()


def _executor(scheduler, jobs, n, runner):
    if scheduler is not None:
        return _Dask(runner, scheduler, jobs)
    if jobs > 1 and n > 1:
        return _Pool(runner, jobs)
    return _Inline(runner)
