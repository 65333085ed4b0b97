"""The spec of a study: the ``[study]`` table of a study TOML file, checked, and its points.

This module owns :class:`StudySpec` (what to solve and how, where to store it, what to fit),
:func:`load_study` (reading and checking ``[study]`` next to ``[instance]`` and ``[grid]``,
read through :func:`advbound.functions.instance.load_instance`), :data:`STUDY_KEYS`, the
``[study] exact`` table (:data:`EXACT_DEFAULTS`, :func:`exact_settings`), the settings that
identify a point (:func:`solver_settings`), the description kept in the store
(:func:`study_meta`), :func:`default_study_path`, and the expansion of a study into
:class:`Point` objects (:func:`plan`).  Running a study is :func:`advbound.studies.study.run_study`.

>>> s = StudySpec(name="demo", instance=None)
>>> s.store, s.certificates, s.report
('studies/demo.sqlite', 'studies/demo-certificates', 'reports/demo')
>>> Point(0, {"T": 5, "rows": 3}, "general", "s", "r", {}).label
'T=5 rows=3 general'
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re
from pathlib import Path
from typing import Any

from advbound.errors import AdvboundError, InvalidInstanceError
from advbound.programs.solve import METHODS
from advbound.studies.store import run_key

__all__ = ["StudySpec", "Point", "load_study", "default_study_path", "plan", "solver_settings", "exact_settings",
           "study_meta", "invalid_message", "KIND", "EXACT_KIND", "EXACT_DEFAULTS", "STUDY_KEYS"]

#: The kind of the rows of adversary bounds (ADV± and ADV).
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
    "method": '"auto" (default), "dense", "symmetric", "factored" or "rows"',
    "solver": '"SCS" or "CLARABEL" (default: the one the method picks)',
    "tol": "solver tolerance",
    "max_iters": "solver iteration limit",
    "options": "table of extra solver options",
    "store": "result store path (default studies/<name>.sqlite)",
    "certificates": "certificate directory (default: the store path without .sqlite, plus -certificates)",
    "growth": 'grid parameter used as the growth variable (default "T")',
    "series": "grid parameter whose values form separate series (optional)",
    "envelope": "grid parameter to maximise over at each growth value: adds the envelope series (optional)",
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
    method: str = "auto"
    solver: str | None = None
    tol: float | None = None
    max_iters: int | None = None
    options: dict = dataclasses.field(default_factory=dict)
    store: str = ""
    certificates: str = ""
    growth: str = "T"
    series: str | None = None
    envelope: str | None = None
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
    for key, typ in (("method", str), ("solver", str), ("growth", str), ("series", str), ("envelope", str)):
        if key in raw:
            if not isinstance(raw[key], typ):
                raise _err(path, f"{key} = {raw[key]!r} must be a string")
            kw[key] = raw[key]
    if kw.get("method", "auto") not in METHODS:
        raise _err(path, f"method = {kw['method']!r} is unknown; use one of {', '.join(METHODS)}")
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
    for key in ("growth", "series", "envelope"):
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
        "series": study.series, "envelope": study.envelope, "laws": list(study.laws), "offsets": list(study.offsets),
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


def plan(study: StudySpec, api=None, *, choices=None) -> list[Point]:
    """Every point of the study in a fixed order: grid points (in :func:`grid_points` order) × (bounds,
    then the exact requests of :func:`exact_settings`).

    ``choices`` (``{"T": [4, 5]}``, from ``advbound study --set T=4,5``; see
    :func:`advbound.functions.grid.parse_choices`) keeps only the grid points with one of the chosen
    values of each parameter named; a name the grid lacks, a value no grid point has, or a choice
    that leaves no grid point is refused with one line.

    A grid point whose instance cannot be resolved (an :class:`~advbound.errors.AdvboundError`, e.g.
    a row length below 1 at small T) still gives its points, with ``invalid`` set to the one-line
    message and, where the error names one, its fix; they are stored with status ``invalid`` and
    never computed.
    """
    from advbound import __version__
    from advbound.functions.grid import check_choices, chosen
    api = api or _instance_api()
    settings = solver_settings(study)
    if choices:
        check_choices(study.instance, choices)
    points = []
    for params in api.grid_points(study.instance):
        params = dict(params)
        if not chosen(params, choices):
            continue
        invalid = None
        try:
            key = api.spec_key(study.instance, params)
            spec = api.resolved(study.instance, params)
        except AdvboundError as err:
            invalid = invalid_message(err)
            key, spec = _invalid_key(study, params), {"params": params}
        for bound in study.bounds:
            rk = run_key(KIND, key, bound, settings, __version__)
            points.append(Point(len(points), params, bound, key, rk, spec, invalid=invalid))
        for req in exact_settings(study):
            rk = run_key(EXACT_KIND, key, None, req, __version__)
            points.append(Point(len(points), params, None, key, rk, spec, EXACT_KIND, req, invalid=invalid))
    if choices and not points:
        said = ", ".join(f"{k}={','.join(str(v) for v in vals)}" for k, vals in choices.items())
        raise InvalidInstanceError(f"{study.path}: --set {said}: no grid point has these values together")
    return points


def invalid_message(err: BaseException) -> str:
    """The one-line message stored for a point with invalid input: the error, then its fix when it names
    one (the ``fix`` attribute the instance functions set, e.g. ``raise T or lower rows``)."""
    msg = _one_line(err)
    fix = getattr(err, "fix", None)
    return f"{msg}; fix: {fix}" if fix and fix not in msg else msg


def _one_line(err: BaseException) -> str:
    return " ".join(str(err).split()) or type(err).__name__
