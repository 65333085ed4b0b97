"""The rows of a result store: what one stored point is, its identity, and the checks on reading it.

This module owns the ``results`` table's columns, :class:`StoredRow` (one finished
point, JSON columns decoded), :func:`run_key` (the identity of a point),
:func:`make_row`, :func:`package_versions`, and the decoding of a stored row with its
checks: a row edited by hand into something advbound would never write is a
:class:`RowDefect` (named by row id, run key and column), and :class:`RowState`
says what a stored row means for a sweep.  The sqlite file itself is
:mod:`advbound.studies.store_file`; the API over both is :class:`advbound.studies.store.Store`.

>>> make_row("k", kind="adversary", spec_key="s", spec={}, params={"T": 4}, status="optimal",
...          lower=2.0, upper=2.5, created="2024-01-01T00:00:00+00:00").gap
0.5
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import json
import math
from typing import Any

from advbound import status as _status

__all__ = ["BOUND_SLACK", "KNOWN_STATUSES", "ERROR_STATUS", "SKIPPED", "StoredRow", "RowDefect", "RowState", "run_key",
           "make_row", "package_versions"]

#: Relative slack allowed in ``lower <= upper`` (both verified in floating point).
BOUND_SLACK = 1e-9

#: Status word of a point whose computation raised an exception (its ``error`` holds the text).
ERROR_STATUS = _status.FAILED

#: Status word of a point deliberately not computed (a conjecture point whose function is above the dense
#: limit of :func:`advbound.evidence.usergamma.evaluate_gamma`): neither a success nor a failure, never rerun.
SKIPPED = "skipped"

#: Every status word a row may hold.
KNOWN_STATUSES = frozenset({_status.OPTIMAL, _status.INACCURATE, _status.INFEASIBLE, _status.FAILED,
                            _status.UNVERIFIED, _status.INVALID, SKIPPED})

_COLUMNS = (
    ("run_key", "TEXT PRIMARY KEY"),
    ("study", "TEXT"),
    ("kind", "TEXT NOT NULL"),
    ("spec_key", "TEXT NOT NULL"),
    ("spec_json", "TEXT NOT NULL"),
    ("params_json", "TEXT NOT NULL"),
    ("bound", "TEXT"),
    ("status", "TEXT NOT NULL"),
    ("message", "TEXT"),
    ("lower", "REAL"),
    ("upper", "REAL"),
    ("gap", "REAL"),
    ("objective", "REAL"),
    ("domain_size", "INTEGER"),
    ("values_json", "TEXT NOT NULL"),
    ("solver_json", "TEXT NOT NULL"),
    ("versions_json", "TEXT NOT NULL"),
    ("time_solve", "REAL"),
    ("time_total", "REAL"),
    ("certificate", "TEXT"),
    ("error", "TEXT"),
    ("created", "TEXT NOT NULL"),
)
_NAMES = tuple(c for c, _ in _COLUMNS)
_REQUIRED_TEXT = ("run_key", "kind", "spec_key", "status", "created")
_OPTIONAL_TEXT = ("study", "bound", "message", "certificate", "error")
_REALS = ("lower", "upper", "gap", "objective", "time_solve", "time_total")


def _canon(obj) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)


def run_key(kind: str, spec_key: str, bound: str | None, solver: dict, version: str) -> str:
    """The identity of one point: sha256 of kind, instance hash, bound, solver settings and version.

    >>> run_key("adversary", "0" * 64, "general", {"tol": 1e-6}, "0.1.0") == run_key(
    ...     "adversary", "0" * 64, "general", {"tol": 1e-6}, "0.1.0")
    True
    >>> run_key("adversary", "0" * 64, "general", {}, "0.1.0") == run_key("adversary", "0" * 64, "positive", {}, "0.1.0")
    False
    """
    payload = _canon({"kind": kind, "spec_key": spec_key, "bound": bound, "solver": solver, "version": version})
    return hashlib.sha256(payload.encode()).hexdigest()


def package_versions() -> dict:
    """Versions of advbound, Python and the numerical packages, as strings (``""`` if absent)."""
    import importlib.metadata as md
    import platform

    from advbound import __version__
    out = {"advbound": __version__, "python": platform.python_version()}
    for name in ("numpy", "scipy", "cvxpy", "scs", "clarabel"):
        try:
            out[name] = md.version(name)
        except md.PackageNotFoundError:
            out[name] = ""
    return out


@dataclasses.dataclass(frozen=True)
class StoredRow:
    """One stored point; JSON columns are decoded (``spec``, ``params``, ``values``, ``solver``, ``versions``).

    ``failed`` is true for rows whose status is not a success status (including computations that
    raised, whose ``error`` is set, and points whose input is ``invalid``), except ``skipped`` rows
    (not computed on purpose, e.g. too large); failed rows are rerun only
    on request, invalid ones only once their instance changes, skipped ones never.  ``certificate`` is relative to the
    store's folder (:meth:`Store.certificate_path` resolves it).
    """

    run_key: str
    kind: str
    spec_key: str
    spec: dict
    params: dict
    status: str
    created: str
    study: str | None = None
    bound: str | None = None
    message: str | None = None
    lower: float | None = None
    upper: float | None = None
    gap: float | None = None
    objective: float | None = None
    domain_size: int | None = None
    values: dict = dataclasses.field(default_factory=dict)
    solver: dict = dataclasses.field(default_factory=dict)
    versions: dict = dataclasses.field(default_factory=dict)
    time_solve: float | None = None
    time_total: float | None = None
    certificate: str | None = None
    error: str | None = None

    @property
    def success(self) -> bool:
        """True when the status allows the numbers to be reported."""
        return self.status in _status.SUCCESS and self.error is None

    @property
    def failed(self) -> bool:
        """Not a success, and not :attr:`skipped`."""
        return not self.success and not self.skipped

    @property
    def skipped(self) -> bool:
        """True when the point was deliberately not computed (status ``skipped``, e.g. too large)."""
        return self.status == SKIPPED

    @property
    def invalid(self) -> bool:
        """True when the point's input could not be built (status ``invalid``)."""
        return self.status == _status.INVALID

    def to_dict(self) -> dict:
        """Plain JSON-ready dict of every field."""
        return dataclasses.asdict(self)


def _num(v):
    if v is None:
        return None
    v = float(v)
    return None if math.isnan(v) else v


def _now_iso() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="microseconds")


def make_row(run_key: str, *, kind: str, spec_key: str, spec: dict, params: dict, status: str,
             study: str | None = None, bound: str | None = None, message: str | None = None,
             lower=None, upper=None, gap=None, objective=None, domain_size=None, values: dict | None = None,
             solver: dict | None = None, versions: dict | None = None, time_solve=None, time_total=None,
             certificate: str | None = None, error: str | None = None, created: str | None = None) -> StoredRow:
    """Build a :class:`StoredRow`, filling ``gap`` from ``upper - lower`` and ``created`` with now (UTC)."""
    lower, upper = _num(lower), _num(upper)
    if gap is None and lower is not None and upper is not None:
        gap = upper - lower
    if created is None:
        created = _now_iso()
    return StoredRow(run_key=run_key, kind=kind, spec_key=spec_key, spec=dict(spec), params=dict(params),
                     status=status, created=created, study=study, bound=bound, message=message, lower=lower,
                     upper=upper, gap=_num(gap), objective=_num(objective),
                     domain_size=None if domain_size is None else int(domain_size), values=dict(values or {}),
                     solver=dict(solver or {}), versions=dict(versions or {}), time_solve=_num(time_solve),
                     time_total=_num(time_total), certificate=certificate, error=error)


# -- reading text that may not be UTF-8 ---------------------------------------------------------
class _Undecodable:
    """A TEXT value whose bytes are not UTF-8 (kept so the defect can be named)."""

    def __init__(self, raw: bytes, err: UnicodeDecodeError):
        self.raw = raw
        self.where = f"byte 0x{raw[err.start]:02x} at offset {err.start} is not UTF-8"


def _text_factory(raw: bytes):
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as err:
        return _Undecodable(raw, err)


@dataclasses.dataclass(frozen=True)
class RowDefect:
    """A stored row that advbound would never have written; it is left out of every result.

    ``rowid`` is sqlite's row id (``SELECT * FROM results WHERE rowid = ...`` finds it), ``run_key``
    the row's key (``None`` when unreadable), ``column`` the first offending column.
    """

    store: str
    rowid: int
    run_key: str | None
    column: str
    problem: str

    @property
    def label(self) -> str:
        """``"row 3 (run_key 1a2b3c4d5e6f)"``."""
        key = "unreadable" if self.run_key is None else self.run_key[:12]
        return f"row {self.rowid} (run_key {key})"

    def __str__(self) -> str:
        return f"{self.store}: {self.label}: column {self.column}: {self.problem}; the row is left out"


@dataclasses.dataclass(frozen=True)
class RowState:
    """What a run key's stored row means for a sweep.

    ``state`` is ``"ok"`` (success: never recomputed), ``"skipped"`` (not computed on purpose: never
    recomputed), ``"failed"`` (recomputed on request),
    ``"invalid"`` (input invalid: recomputed once the instance changes its hash) or
    ``"defective"`` (see :class:`RowDefect`: recomputed); ``seen`` identifies this version of the
    row (its status and creation time) for :meth:`Store.claim`.
    """

    state: str
    seen: tuple


class _BadRow(Exception):
    def __init__(self, column, problem):
        super().__init__(problem)
        self.column, self.problem = column, problem


def _show(v, limit=40) -> str:
    s = repr(v)
    return s if len(s) <= limit else s[:limit - 3] + "..."


def _check_text(name, v, required):
    if v is None:
        if required:
            raise _BadRow(name, "missing (NULL)")
        return None
    if isinstance(v, _Undecodable):
        raise _BadRow(name, f"text is not UTF-8 ({v.where})")
    if isinstance(v, (bytes, bytearray)):
        raise _BadRow(name, "a binary value where text is expected")
    if not isinstance(v, str):
        raise _BadRow(name, f"{_show(v)} is not text")
    if required and not v:
        raise _BadRow(name, "empty")
    return v


def _check_json(name, v):
    text = _check_text(name, v, True)
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        obj = json.loads(text)
    except (json.JSONDecodeError, RecursionError) as err:
        msg = err.msg if isinstance(err, json.JSONDecodeError) else "nested too deeply"
        raise _BadRow(name, f"malformed JSON ({msg})") from None
    if not isinstance(obj, dict):
        raise _BadRow(name, f"JSON {type(obj).__name__} where an object is expected")
    return obj


def _check_real(name, v):
    if v is None:
        return None
    if isinstance(v, _Undecodable) or isinstance(v, (bytes, bytearray)):
        raise _BadRow(name, "a binary value is not a number")
    if isinstance(v, str) or isinstance(v, bool) or not isinstance(v, (int, float)):
        raise _BadRow(name, f"{_show(v)} is not a number")
    v = float(v)
    if not math.isfinite(v):
        raise _BadRow(name, f"{v} is not a finite number")
    return v


def _check_params(params):
    for k, v in params.items():
        if isinstance(v, float) and not math.isfinite(v):
            raise _BadRow("params_json", f"parameter {k} = {v} is not finite")
        if not (v is None or isinstance(v, (str, int, float, bool))):
            raise _BadRow("params_json", f"parameter {k} = {_show(v)} is not a number or text")


def _decode_row(values) -> StoredRow:
    """The :class:`StoredRow` of one ``results`` row, or :class:`_BadRow` naming the first defect."""
    d = dict(zip(_NAMES, values))
    kw: dict[str, Any] = {}
    for name in _REQUIRED_TEXT:
        kw[name] = _check_text(name, d[name], True)
    for name in _OPTIONAL_TEXT:
        kw[name] = _check_text(name, d[name], False)
    if kw["status"] not in KNOWN_STATUSES:
        raise _BadRow("status", f"unknown status word {kw['status']!r} (known: {', '.join(sorted(KNOWN_STATUSES))})")
    for name in _NAMES:
        if name.endswith("_json"):
            kw[name[:-5]] = _check_json(name, d[name])
    _check_params(kw["params"])
    for name in _REALS:
        kw[name] = _check_real(name, d[name])
    ds = d["domain_size"]
    if ds is not None:
        if isinstance(ds, bool) or not isinstance(ds, int):
            raise _BadRow("domain_size", f"{_show(ds)} is not an integer")
        if ds < 0:
            raise _BadRow("domain_size", f"{ds} is negative")
    kw["domain_size"] = ds
    _check_numbers(kw)
    return StoredRow(**kw)


def _check_numbers(kw):
    lo, up = kw["lower"], kw["upper"]
    for name, v in (("lower", lo), ("upper", up), ("time_solve", kw["time_solve"]),
                    ("time_total", kw["time_total"])):
        if v is not None and v < 0:
            raise _BadRow(name, f"{v!r} is negative")
    success = kw["status"] in _status.SUCCESS
    if success and lo is not None and up is not None and lo > up + BOUND_SLACK * max(1.0, abs(up)):
        raise _BadRow("lower", f"lower {lo!r} exceeds upper {up!r}")
    if kw["kind"] == "exact" and lo is not None and lo > 1 + BOUND_SLACK:
        raise _BadRow("lower", f"success probability {lo!r} exceeds 1")
    if success and kw["error"] is None and lo is None:
        raise _BadRow("lower", f"status {kw['status']!r} but no lower value")


def _check_json_value(v):
    text = _check_text("value", v, True)
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        return json.loads(text)
    except (json.JSONDecodeError, RecursionError) as err:
        msg = err.msg if isinstance(err, json.JSONDecodeError) else "nested too deeply"
        raise _BadRow("value", f"malformed JSON ({msg})") from None
