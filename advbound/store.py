"""The durable result store of studies: one sqlite row per solved point.

This module owns the file format of a study's results.  A :class:`Store` wraps
one sqlite database (standard library :mod:`sqlite3`, WAL journal).  Each row is
a finished point: which instance (its resolved spec as JSON and its hash), which
parameters, which *kind* of computation (``"adversary"`` for ADV/ADV± solves,
``"exact"`` for exact t-query points, whose lower/upper are the verified achievable
success probability and its verified upper bound), the common numbers (lower, upper, gap,
status), a JSON ``values`` column for anything kind-specific, the solver
settings, the package versions, timings, the certificate path, the error text of
a failed point and the time it was written.

Durability rules: a row is inserted in a single transaction only once the point
is complete (its certificate, if any, has already been renamed into place), so
an interrupted run never leaves a half-finished point.  A point is identified by
its *run key* (:func:`run_key`): the hash of the kind, the instance spec hash,
the bound, the solver settings and the advbound version.  Only one process (the
parent of a sweep) writes.

Typical call::

    with Store("studies/demo.sqlite") as st:
        st.put(row)
        rows = st.rows(kind="adversary")

>>> import tempfile, os
>>> st = Store(os.path.join(tempfile.mkdtemp(), "s.sqlite"))
>>> k = run_key("adversary", "ab" * 32, "general", {"solver": "SCS"}, "0.1.0")
>>> st.put(make_row(k, kind="adversary", spec_key="ab" * 32, spec={}, params={"T": 4},
...                 bound="general", status="optimal", lower=2.0, upper=2.0))
>>> st.completed_keys() == {k}, st.count()
(True, 1)
>>> st.close()
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import json
import logging
import math
import os
import sqlite3
from typing import Any, Iterable

from . import status as _status
from .errors import AdvboundError

__all__ = ["SCHEMA_VERSION", "StoredRow", "Store", "run_key", "make_row", "package_versions",
           "ERROR_STATUS"]

log = logging.getLogger("advbound")

#: Version of the table layout written into the ``meta`` table.
SCHEMA_VERSION = 1

#: Status word of a point whose computation raised an exception (its ``error`` holds the text).
ERROR_STATUS = _status.FAILED

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

    from . import __version__
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
    raised, whose ``error`` is set); such rows are rerun only on request.
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
        """Opposite of :attr:`success`."""
        return not self.success

    def to_dict(self) -> dict:
        """Plain JSON-ready dict of every field."""
        return dataclasses.asdict(self)


def _num(v):
    if v is None:
        return None
    v = float(v)
    return None if math.isnan(v) else v


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
        created = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    return StoredRow(run_key=run_key, kind=kind, spec_key=spec_key, spec=dict(spec), params=dict(params),
                     status=status, created=created, study=study, bound=bound, message=message, lower=lower,
                     upper=upper, gap=_num(gap), objective=_num(objective),
                     domain_size=None if domain_size is None else int(domain_size), values=dict(values or {}),
                     solver=dict(solver or {}), versions=dict(versions or {}), time_solve=_num(time_solve),
                     time_total=_num(time_total), certificate=certificate, error=error)


class Store:
    """A sqlite result store (created on first use, WAL mode).

    Parameters
    ----------
    path : str or os.PathLike
        The database file; its directory is created if missing.
    readonly : bool
        Open an existing store for reading only (reports use this); raises
        :class:`~advbound.errors.AdvboundError` if the file does not exist.

    Notes
    -----
    Tables: ``results`` (one row per point, columns as in :class:`StoredRow`, JSON columns
    suffixed ``_json``) and ``meta`` (``key``/``value`` text pairs, e.g. the study spec as JSON
    under ``study``, and ``schema_version``).
    """

    def __init__(self, path, readonly: bool = False):
        self.path = os.fspath(path)
        if readonly:
            if not os.path.exists(self.path):
                raise AdvboundError(f"{self.path}: no such result store")
            self._conn = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, timeout=30)
        else:
            d = os.path.dirname(os.path.abspath(self.path))
            os.makedirs(d, exist_ok=True)
            self._conn = sqlite3.connect(self.path, timeout=30)
            try:
                self._conn.execute("PRAGMA journal_mode=WAL")
                self._conn.execute("PRAGMA synchronous=FULL")
                self._create()
            except sqlite3.DatabaseError as err:
                self._conn.close()
                raise AdvboundError(f"{self.path}: not a usable sqlite result store ({err})") from None
        self._check()

    # -- set-up -------------------------------------------------------------------------
    def _create(self):
        cols = ",\n  ".join(f"{n} {t}" for n, t in _COLUMNS)
        with self._conn:
            self._conn.execute(f"CREATE TABLE IF NOT EXISTS results (\n  {cols}\n)")
            self._conn.execute("CREATE INDEX IF NOT EXISTS results_spec ON results(spec_key)")
            self._conn.execute("CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)")
            self._conn.execute("INSERT OR IGNORE INTO meta(key, value) VALUES ('schema_version', ?)",
                               (str(SCHEMA_VERSION),))

    def _check(self):
        try:
            got = self._conn.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError as err:
            raise AdvboundError(f"{self.path}: not an advbound result store ({err})") from None
        if got is None or int(got[0]) != SCHEMA_VERSION:
            raise AdvboundError(f"{self.path}: schema version {got and got[0]}, expected {SCHEMA_VERSION}")

    def close(self) -> None:
        """Close the connection (idempotent)."""
        if self._conn is not None:
            self._conn.close()
            self._conn = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- meta ---------------------------------------------------------------------------
    def set_meta(self, key: str, value: Any) -> None:
        """Store ``value`` (JSON-encoded) under ``key`` in one transaction."""
        with self._conn:
            self._conn.execute("INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)", (key, json.dumps(value)))

    def get_meta(self, key: str, default=None):
        """The JSON-decoded value under ``key``, or ``default``."""
        got = self._conn.execute("SELECT value FROM meta WHERE key=?", (key,)).fetchone()
        if got is None or key == "schema_version":
            return default if got is None else int(got[0])
        return json.loads(got[0])

    # -- rows ---------------------------------------------------------------------------
    def put(self, row: StoredRow) -> None:
        """Insert ``row`` in one transaction, replacing a previous row with the same run key."""
        self.put_many([row])

    def put_many(self, rows: Iterable[StoredRow]) -> None:
        """Insert several rows in one transaction (all or none)."""
        data = [self._encode(r) for r in rows]
        ph = ", ".join("?" for _ in _NAMES)
        with self._conn:
            self._conn.executemany(f"INSERT OR REPLACE INTO results({', '.join(_NAMES)}) VALUES ({ph})", data)

    @staticmethod
    def _encode(r: StoredRow) -> tuple:
        d = dataclasses.asdict(r)
        out = []
        for name in _NAMES:
            if name.endswith("_json"):
                out.append(_canon(d[name[:-5]]))
            else:
                out.append(d[name])
        return tuple(out)

    @staticmethod
    def _decode(values: tuple) -> StoredRow:
        d = dict(zip(_NAMES, values))
        kw = {}
        for name, v in d.items():
            if name.endswith("_json"):
                kw[name[:-5]] = json.loads(v)
            else:
                kw[name] = v
        return StoredRow(**kw)

    def rows(self, kind: str | None = None, bound: str | None = None, study: str | None = None,
             successful_only: bool = False) -> list[StoredRow]:
        """Stored rows, oldest first, optionally filtered by kind, bound and study name."""
        where, args = [], []
        for col, val in (("kind", kind), ("bound", bound), ("study", study)):
            if val is not None:
                where.append(f"{col}=?")
                args.append(val)
        sql = f"SELECT {', '.join(_NAMES)} FROM results"
        if where:
            sql += " WHERE " + " AND ".join(where)
        sql += " ORDER BY created, rowid"
        out = [self._decode(v) for v in self._conn.execute(sql, args)]
        return [r for r in out if r.success] if successful_only else out

    def get(self, key: str) -> StoredRow | None:
        """The row with run key ``key``, or ``None``."""
        v = self._conn.execute(f"SELECT {', '.join(_NAMES)} FROM results WHERE run_key=?", (key,)).fetchone()
        return None if v is None else self._decode(v)

    def keys(self) -> dict[str, bool]:
        """Every stored run key mapped to whether its row succeeded."""
        out = {}
        for k, st, err in self._conn.execute("SELECT run_key, status, error FROM results"):
            out[k] = st in _status.SUCCESS and err is None
        return out

    def completed_keys(self) -> set[str]:
        """Run keys of rows that succeeded (these are never recomputed)."""
        return {k for k, ok in self.keys().items() if ok}

    def failed_keys(self) -> set[str]:
        """Run keys of rows that failed (recomputed only when retrying failed points)."""
        return {k for k, ok in self.keys().items() if not ok}

    def count(self) -> int:
        """Number of stored rows."""
        return int(self._conn.execute("SELECT COUNT(*) FROM results").fetchone()[0])
