"""The spec of a study: the ``[study]`` table of a study TOML file, checked, and its points.

This module owns :class:`StudySpec` (what to solve and how, where to store it, what to fit),
:func:`load_study` (reading and checking ``[study]`` next to ``[instance]`` and ``[grid]``,
read through :func:`advbound.functions.instance.load_instance`), :data:`STUDY_KEYS`, the
``[study] exact`` table (:data:`EXACT_DEFAULTS`, :func:`exact_settings`), the settings that
identify a point (:func:`solver_settings`), the description kept in the store
(:func:`study_meta`), :func:`default_study_path`, and the expansion of a study into
:class:`Point` objects (:func:`plan`).  It also reads the ``[study] conjecture`` table (a
researcher's own Γ evaluated at every grid point: :data:`CONJECTURE_KEYS`, :func:`conjecture_settings`)
and plans its points (kind :data:`CONJECTURE_KIND`).  Running a study is :func:`advbound.studies.study.run_study`.

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
import os
import re
from pathlib import Path
from typing import Any

from advbound.errors import AdvboundError, InvalidInstanceError
from advbound.programs.solve import METHODS
from advbound.studies.store import run_key

__all__ = ["StudySpec", "Point", "load_study", "default_study_path", "plan", "solver_settings", "exact_settings",
           "study_meta", "invalid_message", "KIND", "EXACT_KIND", "CONJECTURE_KIND", "EXACT_DEFAULTS", "STUDY_KEYS"]

#: The kind of the rows of adversary bounds (ADV± and ADV).
KIND = "adversary"

#: The kind of the rows of exact t-query points (:mod:`advbound.programs.exact`).
EXACT_KIND = "exact"

#: The kind of the rows of a conjectured Γ (``[study] conjecture``); their ``bound`` is ``"general"``:
#: the certified ratio of any Γ is a lower bound on ADV±.
CONJECTURE_KIND = "conjecture"

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
    "method": '"auto" (default), "dense", "symmetric", "factored", "rows" or "minimax"',
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
    "conjecture": "table: a conjectured Γ evaluated at every grid point (callable = \"path/mod.py:func\", "
                  "params, fit = \"none\" | \"each\" | \"once\"; optional label, fit_method, starts, max_evals, "
                  "seed)",
}


@dataclasses.dataclass(frozen=True)
class StudySpec:
    """A study: instance template and grid (``instance``, an :class:`advbound.functions.instance.InstanceSpec`)
    plus what to solve and how, where to store it, and what to fit.

    Path fields are relative to the current directory unless absolute.  ``store``,
    ``certificates`` and ``report`` default from ``name`` (see the module docstring example).
    ``exact`` is empty (no exact points) or the normalised ``[study] exact`` table: ``queries``
    (tuple of t), ``error`` and ``max_queries`` (or ``None``), and the keys of :data:`EXACT_DEFAULTS`.
    ``conjecture`` is empty or the normalised ``[study] conjecture`` table
    (:func:`_parse_conjecture`).
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
    conjecture: dict = dataclasses.field(default_factory=dict)

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
    """One unit of work: an instance's parameters and one bound (or one exact request, or the
    conjecture), with its keys.

    For ``kind == "exact"`` points ``bound`` is ``None`` and ``request`` holds the exact settings
    (:func:`exact_settings`): ``queries`` (one t) or ``error`` and ``max_queries``.  For
    ``kind == "conjecture"`` points ``bound`` is ``"general"`` and ``request`` holds
    :func:`conjecture_settings` (with ``fit = "once"``: plus ``anchor``, the grid point whose fitted
    constants it reuses, and ``depends``, that point's run key).  ``invalid`` is the
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
    depends: str | None = None

    @property
    def what(self) -> str:
        """The bound, ``"exact t=2"`` / ``"exact eps=0.1"`` for an exact point, ``"conjecture"``."""
        if self.kind == CONJECTURE_KIND:
            return "conjecture"
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
    if "conjecture" in raw:
        kw["conjecture"] = _parse_conjecture(path, raw["conjecture"])
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


#: Keys of ``[study] conjecture`` and what they hold (used for validation and in the docs).
CONJECTURE_KEYS = {
    "callable": '"path/to/mod.py:func" (relative to the study file\'s folder, else the current directory) '
                'or "package.module:func"; func(x, y, **params) -> float',
    "params": "table of the free constants: the values used (fit = \"none\") or the start values",
    "fit": '"none" (default: evaluate at params), "each" (fit at every grid point) or "once" (fit at the '
           'smallest value of the growth variable of each series and reuse the constants)',
    "label": "name in the report (default: the file or module name)",
    "fit_method": '"nelder-mead" (default) or "powell"',
    "starts": "starts of the fit (default 4)",
    "max_evals": "evaluations of Γ per fit (default 300)",
    "seed": "fixes the perturbed starts of the fit (default 0)",
}
_FIT_MODES = ("none", "each", "once")
_FIT_DEFAULTS = {"fit_method": "nelder-mead", "starts": 4, "max_evals": 300, "seed": 0}


def _resolve_callable(path, spec: str) -> tuple[str, str | None]:
    """``(spec to load, sha256 of the file or None)``: a file path is looked up relative to the study
    file's folder (as instance tables are), then relative to the current directory."""
    mod, sep, func = spec.rpartition(":")
    if not sep or not mod or not func:
        raise _err(path, f"conjecture.callable = {spec!r}: expected MODULE:FUNCTION (path/to/mod.py:func or "
                         "package.module:func)")
    if not (mod.endswith(".py") or "/" in mod or os.sep in mod):
        return spec, None
    here = os.path.dirname(os.path.abspath(str(path))) if path is not None else os.getcwd()
    tried = [mod] if os.path.isabs(mod) else [os.path.join(here, mod), os.path.abspath(mod)]
    found = next((t for t in tried if os.path.isfile(t)), None)
    if found is None:
        where = "" if os.path.isabs(mod) else " (looked in the study file's folder and the current directory)"
        raise _err(path, f"conjecture.callable = {spec!r}: no such file {mod!r}{where}")
    try:
        with open(found, "rb") as fh:
            digest = hashlib.sha256(fh.read()).hexdigest()
    except OSError as err:
        raise _err(path, f"conjecture.callable = {spec!r}: cannot read {found} ({err.strerror or err})") from None
    return f"{os.path.abspath(found)}:{func}", digest


def _gamma_message(err, resolved: str) -> str:
    """A :class:`GammaError` message without the ``--callable 'spec': `` prefix of the command line."""
    msg = " ".join(str(err).split())
    prefix = f"--callable {resolved!r}: "
    return msg[len(prefix):] if msg.startswith(prefix) else msg


def _parse_conjecture(path, cj) -> dict:
    """Validate and normalise ``[study] conjecture`` (see :data:`CONJECTURE_KEYS`); loads the callable once
    so that a missing file, an import error or a constant it does not take is refused before any solve."""
    from advbound.evidence.gammainput import GammaError, check_params, load_callable
    from advbound.programs.gammafit import FIT_METHODS
    if not isinstance(cj, dict):
        raise _err(path, f"conjecture = {cj!r} must be a table, e.g. conjecture = {{ callable = \"g.py:gamma\" }}")
    unknown = sorted(set(cj) - set(CONJECTURE_KEYS))
    if unknown:
        raise _err(path, f"conjecture: unknown key {unknown[0]!r}; known: {', '.join(CONJECTURE_KEYS)}")
    spec = cj.get("callable")
    if not isinstance(spec, str) or not spec:
        raise _err(path, "conjecture.callable must be a string \"path/to/mod.py:func\" or \"package.module:func\"")
    resolved, digest = _resolve_callable(path, spec)
    try:
        func = load_callable(resolved)
    except GammaError as err:
        raise _err(path, f"conjecture.callable = {spec!r}: {_gamma_message(err, resolved)}") from None
    params = cj.get("params", {})
    if not isinstance(params, dict):
        raise _err(path, f"conjecture.params = {params!r} must be a table of numbers, e.g. {{ cross = 0.05 }}")
    try:
        params = check_params(func, params, name=spec)
    except GammaError as err:
        raise _err(path, f"conjecture.params: {_gamma_message(err, resolved)}") from None
    fit = cj.get("fit", "none")
    if fit not in _FIT_MODES:
        raise _err(path, f"conjecture.fit = {fit!r} must be 'none', 'each' or 'once'")
    if fit != "none" and not params:
        raise _err(path, f"conjecture.fit = {fit!r} needs at least one constant in conjecture.params (the start "
                         "values)")
    out = {"callable": spec, "resolved": resolved, "sha256": digest, "params": params, "fit": fit}
    for key, default in _FIT_DEFAULTS.items():
        v = cj.get(key, default)
        if key == "fit_method" and v not in FIT_METHODS:
            raise _err(path, f"conjecture.fit_method = {v!r} must be one of {', '.join(FIT_METHODS)}")
        lo = 0 if key == "seed" else 1
        if key != "fit_method" and (not _is_int(v) or v < lo):
            raise _err(path, f"conjecture.{key} = {v!r} must be an integer >= {lo}")
        out[key] = v
    label = cj.get("label")
    if label is None:
        mod = spec.rpartition(":")[0]
        label = os.path.splitext(os.path.basename(mod))[0] if mod.endswith(".py") else mod.rpartition(".")[2]
    if not isinstance(label, str) or not label.strip() or len(label) > 60:
        raise _err(path, f"conjecture.label = {label!r} must be a non-empty string of at most 60 characters")
    out["label"] = label
    return out


def conjecture_settings(study: StudySpec) -> dict:
    """The settings that, with the instance hash and version, identify a conjecture point: the callable as
    written, the sha256 of its file (editing the file gives new points), the constants, the fit mode and,
    when fitting, the fit options.  Empty when the study has no conjecture.

    >>> cj = {"callable": "g.py:gamma", "sha256": "ab", "params": {"c": 0.0}, "fit": "none", "label": "g"}
    >>> sorted(conjecture_settings(StudySpec(name="d", instance=None, conjecture=cj)))
    ['callable', 'fit', 'params', 'sha256']
    """
    cj = study.conjecture
    if not cj:
        return {}
    out = {"callable": cj["callable"], "sha256": cj.get("sha256"), "params": dict(cj.get("params") or {}),
           "fit": cj.get("fit", "none")}
    if out["fit"] != "none":
        out.update({k: cj.get(k, d) for k, d in _FIT_DEFAULTS.items()})
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
        "conjecture": _jsonable({k: v for k, v in study.conjecture.items() if k != "resolved"})
        if study.conjecture else None,
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
    then the exact requests of :func:`exact_settings`, then the conjecture when the study has one).

    ``choices`` (``{"T": [4, 5]}``, from ``advbound study --set T=4,5``; see
    :func:`advbound.functions.grid.parse_choices`) keeps only the grid points with one of the chosen
    values of each parameter named; a name the grid lacks, a value no grid point has, or a choice
    that leaves no grid point is refused with one line.  With ``conjecture.fit = "once"`` the
    conjecture point whose fit a chosen point reuses is planned too (after the others) when the
    choice leaves it out.

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
    once = bool(study.conjecture) and study.conjecture.get("fit") == "once"
    grid = []
    for params in api.grid_points(study.instance):
        params = dict(params)
        picked = chosen(params, choices)
        if not picked and not once:
            continue
        invalid = None
        try:
            key = api.spec_key(study.instance, params)
            spec = api.resolved(study.instance, params)
        except AdvboundError as err:
            invalid = invalid_message(err)
            key, spec = _invalid_key(study, params), {"params": params}
        grid.append((params, key, spec, invalid, picked))
    points: list[Point] = []
    for params, key, spec, invalid, picked in grid:
        if not picked:
            continue
        for bound in study.bounds:
            rk = run_key(KIND, key, bound, settings, __version__)
            points.append(Point(len(points), params, bound, key, rk, spec, invalid=invalid))
        for req in exact_settings(study):
            rk = run_key(EXACT_KIND, key, None, req, __version__)
            points.append(Point(len(points), params, None, key, rk, spec, EXACT_KIND, req, invalid=invalid))
    if choices and not points:
        said = ", ".join(f"{k}={','.join(str(v) for v in vals)}" for k, vals in choices.items())
        raise InvalidInstanceError(f"{study.path}: --set {said}: no grid point has these values together")
    if study.conjecture:
        points = _with_conjecture(study, grid, points, __version__)
    return points


def _conjecture_anchors(study: StudySpec, grid: list) -> dict:
    """``fit = "once"``: for each series (the grid points equal in every parameter but the growth
    variable), the index in ``grid`` of its point with the smallest growth value whose instance resolves."""
    best: dict = {}
    g = study.growth
    for i, (params, _, _, invalid, _) in enumerate(grid):
        if invalid is not None or not _is_num(params.get(g)):
            continue
        line = json.dumps({k: v for k, v in params.items() if k != g}, sort_keys=True, default=str)
        if line not in best or params[g] < grid[best[line]][0][g]:
            best[line] = i
    return best


def _with_conjecture(study: StudySpec, grid: list, points: list[Point], version: str) -> list[Point]:
    """``points`` with one conjecture point inserted after each chosen grid point's other points."""
    base = conjecture_settings(study)
    once = base["fit"] == "once"
    anchors = _conjecture_anchors(study, grid) if once else {}

    def conj_point(i):
        params, key, spec, invalid, _ = grid[i]
        req = dict(base)
        depends = None
        if once:
            line = json.dumps({k: v for k, v in params.items() if k != study.growth}, sort_keys=True, default=str)
            a = anchors.get(line)
            if a is not None and a != i:
                aparams, akey = grid[a][0], grid[a][1]
                depends = run_key(CONJECTURE_KIND, akey, "general", dict(base, anchor=None), version)
                req["anchor"] = aparams
            else:
                req["anchor"] = None
        rk = run_key(CONJECTURE_KIND, key, "general", req, version)
        return Point(0, params, "general", key, rk, spec, CONJECTURE_KIND, req, invalid=invalid, depends=depends)

    out: list[Point] = []
    planned = set()
    by_params = {}
    for p in points:
        by_params.setdefault(json.dumps(p.params, sort_keys=True, default=str), []).append(p)
    for i, (params, _, _, _, picked) in enumerate(grid):
        if not picked:
            continue
        out.extend(by_params.get(json.dumps(params, sort_keys=True, default=str), []))
        cp = conj_point(i)
        out.append(cp)
        planned.add(cp.run_key)
    for i in sorted(set(anchors.values())):
        cp = conj_point(i)
        if cp.run_key not in planned and any(p.depends == cp.run_key for p in out):
            out.append(cp)
    return [dataclasses.replace(p, index=k) for k, p in enumerate(out)]


def invalid_message(err: BaseException) -> str:
    """The one-line message stored for a point with invalid input: the error, then its fix when it names
    one (the ``fix`` attribute the instance functions set, e.g. ``raise T or lower rows``)."""
    msg = _one_line(err)
    fix = getattr(err, "fix", None)
    return f"{msg}; fix: {fix}" if fix and fix not in msg else msg


def _one_line(err: BaseException) -> str:
    return " ".join(str(err).split()) or type(err).__name__
