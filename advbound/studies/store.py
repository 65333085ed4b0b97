"""The durable result store of studies: one sqlite row per finished point, and leases on points.

This module owns the file format of a study's results.  A :class:`Store` wraps
one sqlite database (standard library :mod:`sqlite3`, rollback journal,
``synchronous=FULL``).  Each row is a finished point: which instance (its resolved
spec as JSON and its hash), which parameters, which *kind* of computation
(``"adversary"`` for ADV/ADV± solves, ``"exact"`` for exact t-query points, whose
lower/upper are the verified achievable success probability and its verified upper
bound), the common numbers (lower, upper, gap, status), a JSON ``values`` column for
anything kind-specific, the solver settings, the package versions, timings, the
certificate path (relative to the store's folder), the error text of a failed point
and the time it was written.

Durability rules: a row is inserted in a single transaction only once the point
is complete (its certificate, if any, has already been renamed into place), so
an interrupted run never leaves a half-finished point.  A point is identified by
its *run key* (:func:`run_key`): the hash of the kind, the instance spec hash,
the bound, the solver settings and the advbound version.

Several processes may work on one store.  Before computing a point a process
*claims* it (:meth:`Store.claim`): a row in the ``leases`` table naming the holder
(pid, host) and an expiry time, renewed while the point is computed
(:class:`LeaseKeeper`) and deleted in the transaction that writes the point's row.
Another process skips a point under a live lease and takes over an expired one, or
one whose holder process is gone (checked only on the holder's own machine).

What is refused: a file that is not an advbound store (another program's
database, an empty database opened for reading, a text or binary file, a store of
a newer schema) raises :class:`StoreError` with one line, and is never extended.
Rows that were edited by hand into something advbound would never write (a number
that is text, NaN or infinite; malformed JSON; an unknown status word; ``lower >
upper`` for a success; a negative bound; text that is not UTF-8) are *defective*: :meth:`Store.rows`
leaves them out and logs one warning per row naming its key and column
(:class:`RowDefect`), and a study recomputes them.  A certificate path that leaves
the store's folder or names a missing file is only flagged
(:meth:`Store.certificate_problem`): the numbers were verified when the row was
written, but they cannot be rechecked from this folder.

Read-only opens (``readonly=True``, used by reports and fits) use the sqlite URI
``mode=ro`` and never create files next to the store, so a store on read-only media
can be read; see :meth:`Store.__init__`.

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

import contextlib
import dataclasses
import datetime as _dt
import functools
import hashlib
import json
import logging
import math
import os
import socket
import sqlite3
import threading
import time
import urllib.parse
import uuid
from typing import Any, Iterable

from advbound import status as _status
from advbound.errors import AdvboundError

__all__ = ["SCHEMA_VERSION", "READABLE_SCHEMAS", "DEFAULT_LEASE", "BOUND_SLACK", "KNOWN_STATUSES",
           "StoreError", "StoredRow", "RowDefect", "RowState", "Store", "LeaseHolder", "Lease", "Claim",
           "LeaseKeeper", "run_key", "make_row", "package_versions", "ERROR_STATUS"]

log = logging.getLogger("advbound")

#: Version of the table layout written into the ``meta`` table (2: ``leases`` table, certificate
#: paths relative to the store's folder, status ``invalid``).
SCHEMA_VERSION = 2
#: Schema versions this version reads (version 1 stores are upgraded when opened for writing).
READABLE_SCHEMAS = (1, 2)

#: Default lease duration in seconds; a lease is renewed every third of it while its point is computed.
DEFAULT_LEASE = 60.0

#: Relative slack allowed in ``lower <= upper`` (both verified in floating point).
BOUND_SLACK = 1e-9

#: Status word of a point whose computation raised an exception (its ``error`` holds the text).
ERROR_STATUS = _status.FAILED

#: Every status word a row may hold.
KNOWN_STATUSES = frozenset({_status.OPTIMAL, _status.INACCURATE, _status.INFEASIBLE, _status.FAILED,
                            _status.UNVERIFIED, _status.INVALID})

_MAGIC = b"SQLite format 3\x00"

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

_LEASE_COLUMNS = (
    ("run_key", "TEXT PRIMARY KEY"),
    ("holder", "TEXT NOT NULL"),
    ("pid", "INTEGER NOT NULL"),
    ("host", "TEXT NOT NULL"),
    ("ns", "TEXT NOT NULL"),
    ("started", "TEXT NOT NULL"),
    ("acquired", "REAL NOT NULL"),
    ("expires", "REAL NOT NULL"),
)
_LEASE_NAMES = tuple(c for c, _ in _LEASE_COLUMNS)


class StoreError(AdvboundError, ValueError):
    """A result store is missing, unreadable, not an advbound store, or cannot be written."""


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
    raised, whose ``error`` is set, and points whose input is ``invalid``); failed rows are rerun only
    on request, invalid ones only once their instance changes.  ``certificate`` is relative to the
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
        """Opposite of :attr:`success`."""
        return not self.success

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

    ``state`` is ``"ok"`` (success: never recomputed), ``"failed"`` (recomputed on request),
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


# -- leases ------------------------------------------------------------------------------------
def _read(path) -> str:
    try:
        with open(path) as fh:
            return fh.read().strip()
    except OSError:
        return ""


def _proc_stat(pid: int) -> tuple[str, str] | None:
    """(state letter, start time in clock ticks) of process ``pid`` from /proc; ``None`` if no such process."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            text = fh.read()
    except FileNotFoundError:
        return None
    except OSError:
        return ("?", "")
    rest = text[text.rindex(")") + 2:].split()
    return rest[0], rest[19]


def _machine() -> str:
    """Host name, boot id and pid namespace: where a pid means the same process."""
    ns = ""
    with contextlib.suppress(OSError):
        ns = str(os.stat("/proc/self/ns/pid").st_ino)
    return f"{socket.gethostname()}|{_read('/proc/sys/kernel/random/boot_id')}|{ns}"


@dataclasses.dataclass(frozen=True)
class LeaseHolder:
    """Who holds leases: this process (pid, host, machine identity, start time) and a token per sweep."""

    pid: int
    host: str
    ns: str
    started: str
    token: str

    @classmethod
    def current(cls) -> "LeaseHolder":
        """The holder identity of the calling process, with a fresh token."""
        stat = _proc_stat(os.getpid())
        return cls(os.getpid(), socket.gethostname(), _machine(), stat[1] if stat else "", uuid.uuid4().hex)

    def __str__(self) -> str:
        return f"pid {self.pid} on {self.host}"


@dataclasses.dataclass(frozen=True)
class Lease:
    """A claim on one point: its holder, when it was taken and when it expires (Unix time, s)."""

    run_key: str
    holder: str
    pid: int
    host: str
    ns: str
    started: str
    acquired: float
    expires: float

    def holder_alive(self, me: LeaseHolder) -> bool:
        """False only when the holder's process is known to be gone (same machine, no such process).

        On another machine (or pid namespace) nothing can be known, and the expiry time decides.
        """
        if self.ns != me.ns:
            return True
        if self.pid == me.pid and self.holder != me.token:
            return True  # another sweep in this very process
        stat = _proc_stat(self.pid)
        if stat is None:
            if os.path.isdir("/proc/self"):
                return False
            try:
                os.kill(self.pid, 0)
            except ProcessLookupError:
                return False
            except OSError:
                return True
            return True
        state, started = stat
        if state in ("Z", "X"):
            return False
        return not (self.started and started and started != self.started)

    def live(self, me: LeaseHolder, now: float | None = None) -> bool:
        """True while the lease blocks others: not expired and its holder not known to be gone."""
        now = time.time() if now is None else now
        return self.expires > now and self.holder_alive(me)

    def describe(self) -> str:
        """``"pid 123 on host, lease until 12:00:05 UTC"``."""
        until = _dt.datetime.fromtimestamp(self.expires, _dt.timezone.utc).strftime("%H:%M:%S")
        return f"pid {self.pid} on {self.host}, lease until {until} UTC"


@dataclasses.dataclass(frozen=True)
class Claim:
    """Outcome of :meth:`Store.claim`: ``"claimed"`` (compute it), ``"held"`` (a live lease of another
    holder, in ``lease``) or ``"stored"`` (its row changed since it was planned: someone finished it).
    ``took_over`` is the expired lease that was replaced, if any."""

    outcome: str
    lease: Lease | None = None
    took_over: Lease | None = None


def _renew(conn, holder: LeaseHolder, duration: float) -> int:
    conn.execute("BEGIN IMMEDIATE")
    try:
        n = conn.execute("UPDATE leases SET expires=? WHERE holder=?", (time.time() + duration, holder.token)).rowcount
    except BaseException:
        conn.rollback()
        raise
    conn.commit()
    return n


class LeaseKeeper:
    """Renews the leases of ``holder`` every ``duration / 3`` seconds.

    Use :meth:`start` for a background thread (its own connection; for sweeps that compute in
    this process) or call :meth:`tick` from a loop that waits on workers.
    """

    def __init__(self, store: "Store", holder: LeaseHolder, duration: float):
        self.path = store.path
        self.store = store
        self.holder = holder
        self.duration = float(duration)
        self.period = self.duration / 3.0
        self._last = time.monotonic()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def tick(self) -> None:
        """Renew now if a third of the lease has passed since the last renewal (same thread as the store)."""
        if self._thread is None and time.monotonic() - self._last >= self.period:
            self._last = time.monotonic()
            try:
                _renew(self.store._conn, self.holder, self.duration)
            except sqlite3.Error as err:
                log.warning("%s: could not renew leases (%s); will retry", self.path, err)

    def start(self) -> "LeaseKeeper":
        """Start renewing in a daemon thread."""
        self._thread = threading.Thread(target=self._run, name="advbound-lease", daemon=True)
        self._thread.start()
        return self

    def _run(self) -> None:
        conn = _connect(self.path)
        try:
            while not self._stop.wait(self.period):
                try:
                    _renew(conn, self.holder, self.duration)
                except sqlite3.Error as err:
                    log.warning("%s: could not renew leases (%s); will retry", self.path, err)
        finally:
            conn.close()

    def stop(self) -> None:
        """Stop the thread (if any) and wait for it."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
            self._thread = None


# -- opening ------------------------------------------------------------------------------------
def _connect(target: str, uri: bool = False) -> sqlite3.Connection:
    conn = sqlite3.connect(target, uri=uri, timeout=30, isolation_level=None)
    conn.text_factory = _text_factory
    return conn


def _header(path: str) -> bytes:
    """The first 100 bytes of ``path`` (``b""`` for an empty file); refuses folders and non-sqlite files."""
    if os.path.isdir(path):
        raise StoreError(f"{path}: is a folder, not a result store")
    try:
        with open(path, "rb") as fh:
            head = fh.read(100)
    except OSError as err:
        raise StoreError(f"{path}: cannot read the result store ({err.strerror})") from None
    if head and not head.startswith(_MAGIC):
        kind = "a text file" if _looks_like_text(head) else "a binary file"
        raise StoreError(f"{path}: not an advbound result store ({kind}, not an SQLite database)")
    if head and len(head) < 100:
        raise StoreError(f"{path}: not an advbound result store (a truncated SQLite header)")
    return head


def _looks_like_text(head: bytes) -> bool:
    try:
        head.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return b"\x00" not in head


def _guarded(method):
    """Turn sqlite errors of a Store method into one-line :class:`StoreError`."""
    @functools.wraps(method)
    def wrapper(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except sqlite3.Error as err:
            raise StoreError(f"{self.path}: {_sqlite_words(err)}") from None
    return wrapper


def _sqlite_words(err: sqlite3.Error) -> str:
    text = str(err)
    if "readonly" in text or "read-only" in text:
        return f"cannot write the result store ({text}); is its folder read-only?"
    if "malformed" in text or "not a database" in text:
        return f"the result store is damaged ({text})"
    return f"result store error ({text})"


class Store:
    """A sqlite result store (created on first use).

    Parameters
    ----------
    path : str or os.PathLike
        The database file; its directory is created if missing (when writing).
    readonly : bool
        Open an existing store for reading only (reports and fits use this).

    Raises
    ------
    StoreError
        The file is missing (read-only), a folder, not an SQLite database, an SQLite database of
        another program (or an empty one, read-only), a store of a newer schema, or unreadable.

    Notes
    -----
    Tables: ``results`` (one row per point, columns as in :class:`StoredRow`, JSON columns
    suffixed ``_json``), ``meta`` (``key``/``value`` text pairs, e.g. the study spec as JSON under
    ``study``, and ``schema_version``) and ``leases`` (one row per claimed point).

    A read-only open uses ``file:...?mode=ro`` (the attribute :attr:`uri` records it): sqlite
    takes only shared locks on the file and creates nothing next to it.  A store still in the WAL
    journal mode of older versions is read with ``immutable=1`` when no write-ahead log is pending
    (``mode=ro`` would create ``-wal``/``-shm`` files); with a pending log it is read with
    ``mode=ro`` if its folder is writable and refused otherwise.  When the folder is read-only and
    sqlite cannot lock the file there, the read falls back to ``immutable=1``.
    """

    def __init__(self, path, readonly: bool = False):
        self.path = os.fspath(path)
        self.readonly = bool(readonly)
        self.uri: str | None = None
        self._conn = None
        self._noted: set = set()
        #: Defective rows met so far (see :meth:`rows`, :meth:`check_rows`).
        self.defects: list[RowDefect] = []
        #: Every warning logged about this store's content so far, one line each (defects included).
        self.warnings: list[str] = []
        if readonly:
            self._open_readonly()
        else:
            self._open_writable()

    @property
    def folder(self) -> str:
        """Absolute path of the folder holding the store (certificate paths are relative to it)."""
        return os.path.dirname(os.path.abspath(self.path))

    # -- set-up -------------------------------------------------------------------------
    def _open_readonly(self):
        if not os.path.exists(self.path):
            raise StoreError(f"{self.path}: no such result store")
        head = _header(self.path)
        if not head:
            raise StoreError(f"{self.path}: not an advbound result store (an empty file)")
        wal_mode = head[18] == 2 or head[19] == 2
        base = "file:" + urllib.parse.quote(os.path.abspath(self.path))
        wal = self.path + "-wal"
        pending = os.path.exists(wal) and os.path.getsize(wal) > 0
        if wal_mode and not pending:
            self._connect_uri(base + "?mode=ro&immutable=1")
        elif wal_mode:
            if not os.access(self.folder, os.W_OK) and not os.path.exists(self.path + "-shm"):
                raise StoreError(f"{self.path}: has a pending write-ahead log ({wal}) that cannot be read in a "
                                 "read-only folder; open the store once where its folder is writable")
            self._connect_uri(base + "?mode=ro")
        else:
            try:
                self._connect_uri(base + "?mode=ro")
            except StoreError:
                if os.access(self.folder, os.W_OK) or os.path.exists(self.path + "-journal"):
                    raise
                self._connect_uri(base + "?mode=ro&immutable=1")

    def _connect_uri(self, uri):
        conn = None
        try:
            conn = _connect(uri, uri=True)
            conn.execute("PRAGMA query_only=ON")
            tables = self._tables(conn)
            self._conn, self.uri = conn, uri
        except sqlite3.Error as err:
            if conn is not None:
                conn.close()
            text = str(err)
            if "readonly" in text or "read-only" in text or "unable to open" in text:
                hint = ("it has an unfinished transaction (a -journal file); open it once for writing, "
                        "e.g. by rerunning the study" if os.path.exists(self.path + "-journal") else text)
                raise StoreError(f"{self.path}: cannot read the result store ({hint})") from None
            raise StoreError(f"{self.path}: not a readable SQLite database ({text})") from None
        if not tables:
            self.close()
            raise StoreError(f"{self.path}: not an advbound result store (an SQLite database with no tables)")
        try:
            self._check(tables)
        except BaseException:
            self.close()
            raise

    def _open_writable(self):
        if os.path.exists(self.path):
            _header(self.path)
        try:
            os.makedirs(self.folder, exist_ok=True)
        except OSError as err:
            raise StoreError(f"{self.path}: cannot create the store's folder ({err.strerror})") from None
        try:
            self._conn = _connect(self.path)
        except sqlite3.Error as err:
            raise StoreError(f"{self.path}: cannot open the result store ({err})") from None
        try:
            self._set_up()
        except sqlite3.Error as err:
            self.close()
            raise StoreError(f"{self.path}: {_sqlite_words(err)}") from None
        except BaseException:
            self.close()
            raise

    @staticmethod
    def _tables(conn) -> set:
        return {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")}

    def _set_up(self):
        c = self._conn
        tables = self._tables(c)
        if tables:
            self._check(tables)  # before anything is changed: another program's database stays untouched
        mode = c.execute("PRAGMA journal_mode").fetchone()[0]
        if str(mode).lower() == "wal":
            try:  # stores of older versions used WAL; the rollback journal lets read-only media read them
                c.execute("PRAGMA journal_mode=DELETE")
            except sqlite3.OperationalError as err:
                log.info("%s: left in WAL journal mode (%s)", self.path, err)
        c.execute("PRAGMA synchronous=FULL")
        if not tables:
            with self._transaction():
                tables = self._tables(c)
                if not tables:
                    self._create()
                    return
            self._check(tables)  # another process created it meanwhile
        if self._schema < SCHEMA_VERSION:
            with self._transaction():
                self._create()
                c.execute("UPDATE meta SET value=? WHERE key='schema_version'", (str(SCHEMA_VERSION),))
            log.info("%s: upgraded the store to schema version %d", self.path, SCHEMA_VERSION)
            self._schema = SCHEMA_VERSION

    @contextlib.contextmanager
    def _transaction(self):
        c = self._conn
        c.execute("BEGIN IMMEDIATE")
        try:
            yield c
        except BaseException:
            c.rollback()
            raise
        c.commit()

    def _create(self):
        cols = ",\n  ".join(f"{n} {t}" for n, t in _COLUMNS)
        lcols = ", ".join(f"{n} {t}" for n, t in _LEASE_COLUMNS)
        c = self._conn
        c.execute(f"CREATE TABLE IF NOT EXISTS results (\n  {cols}\n)")
        c.execute("CREATE INDEX IF NOT EXISTS results_spec ON results(spec_key)")
        c.execute("CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)")
        c.execute(f"CREATE TABLE IF NOT EXISTS leases ({lcols})")
        c.execute("INSERT OR IGNORE INTO meta(key, value) VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        self._schema = SCHEMA_VERSION

    def _check(self, tables: set):
        """Refuse anything but an advbound store of a readable schema."""
        missing = [t for t in ("meta", "results") if t not in tables]
        if missing:
            shown = ", ".join(sorted(str(t) for t in tables))
            raise StoreError(f"{self.path}: not an advbound result store (it has table(s) {shown} but no "
                             f"{' and '.join(missing)}); refusing to read or extend it")
        got = self._conn.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        raw = None if got is None else got[0]
        try:
            version = int(raw)
        except (TypeError, ValueError):
            raise StoreError(f"{self.path}: not an advbound result store (meta schema_version is "
                             f"{_show(raw) if not isinstance(raw, _Undecodable) else 'not UTF-8'})") from None
        if version > SCHEMA_VERSION:
            raise StoreError(f"{self.path}: written by a newer advbound (store schema {version}; this version "
                             f"reads schemas {READABLE_SCHEMAS[0]} to {READABLE_SCHEMAS[-1]}); upgrade advbound")
        if version not in READABLE_SCHEMAS:
            raise StoreError(f"{self.path}: store schema version {version} is not readable by this version")
        cols = {r[1] for r in self._conn.execute("PRAGMA table_info(results)")}
        lacking = [n for n in _NAMES if n not in cols]
        if lacking:
            raise StoreError(f"{self.path}: not an advbound result store (table results lacks column "
                             f"{lacking[0]})")
        if version >= 2 and "leases" not in tables:
            raise StoreError(f"{self.path}: store schema {version} without its leases table")
        self._schema = version

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
    @_guarded
    def set_meta(self, key: str, value: Any) -> None:
        """Store ``value`` (JSON-encoded) under ``key`` in one transaction."""
        with self._transaction() as c:
            c.execute("INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)", (key, json.dumps(value)))

    @_guarded
    def get_meta(self, key: str, default=None):
        """The JSON-decoded value under ``key``, or ``default``.

        Raises
        ------
        StoreError
            When the value is not UTF-8 text or not JSON (naming the key).
        """
        got = self._conn.execute("SELECT value FROM meta WHERE key=?", (key,)).fetchone()
        if got is None:
            return default
        if key == "schema_version":
            return int(got[0])
        try:
            return _check_json_value(got[0])
        except _BadRow as err:
            raise StoreError(f"{self.path}: meta key {key!r}: {err.problem}") from None

    def study_meta(self) -> dict:
        """The ``study`` meta value (an object; ``{}`` when absent); :class:`StoreError` if it is not one."""
        meta = self.get_meta("study")
        if meta is None:
            return {}
        if not isinstance(meta, dict):
            raise StoreError(f"{self.path}: meta key 'study': JSON {type(meta).__name__} where an object "
                             "is expected")
        return meta

    # -- rows ---------------------------------------------------------------------------
    def put(self, row: StoredRow, release: LeaseHolder | None = None) -> None:
        """Insert ``row`` in one transaction, replacing a previous row with the same run key.

        With ``release``, the holder's lease on the row's point is deleted in the same transaction.
        """
        self.put_many([row], release=release)

    @_guarded
    def put_many(self, rows: Iterable[StoredRow], release: LeaseHolder | None = None) -> None:
        """Insert several rows in one transaction (all or none)."""
        rows = list(rows)
        data = [self._encode(r) for r in rows]
        ph = ", ".join("?" for _ in _NAMES)
        with self._transaction() as c:
            c.executemany(f"INSERT OR REPLACE INTO results({', '.join(_NAMES)}) VALUES ({ph})", data)
            if release is not None:
                c.executemany("DELETE FROM leases WHERE run_key=? AND holder=?",
                              [(r.run_key, release.token) for r in rows])

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

    def _note(self, defect: RowDefect) -> None:
        if defect.rowid not in self._noted:
            self._noted.add(defect.rowid)
            self.defects.append(defect)
            self.warn(str(defect))

    def warn(self, message: str) -> None:
        """Log a one-line warning about the store's content once and keep it in :attr:`warnings`."""
        if message not in self.warnings:
            self.warnings.append(message)
            log.warning("%s", message)

    def _scan(self, where: str = "", args=()):
        """(rowid, StoredRow or None, RowDefect or None) for each selected row, oldest first."""
        sql = f"SELECT rowid, {', '.join(_NAMES)} FROM results{where} ORDER BY created, rowid"
        for rowid, *vals in self._conn.execute(sql, args):
            try:
                yield rowid, _decode_row(vals), None
            except _BadRow as bad:
                key = vals[0] if isinstance(vals[0], str) else None
                yield rowid, None, RowDefect(self.path, rowid, key, bad.column, bad.problem)

    @_guarded
    def rows(self, kind: str | None = None, bound: str | None = None, study: str | None = None,
             successful_only: bool = False) -> list[StoredRow]:
        """Stored rows, oldest first, optionally filtered by kind, bound and study name.

        Defective rows are left out; each is logged once and kept in :attr:`defects`.
        """
        where, args = [], []
        for col, val in (("kind", kind), ("bound", bound), ("study", study)):
            if val is not None:
                where.append(f"{col}=?")
                args.append(val)
        clause = (" WHERE " + " AND ".join(where)) if where else ""
        out = []
        for _, row, defect in self._scan(clause, args):
            if defect is not None:
                self._note(defect)
            elif not successful_only or row.success:
                out.append(row)
        return out

    @_guarded
    def check_rows(self) -> list[RowDefect]:
        """Every defective row of the store (each also logged once)."""
        out = []
        for _, _, defect in self._scan():
            if defect is not None:
                self._note(defect)
                out.append(defect)
        return out

    @_guarded
    def get(self, key: str) -> StoredRow | None:
        """The row with run key ``key``, or ``None`` (also for a defective row, which is logged)."""
        for _, row, defect in self._scan(" WHERE run_key=?", (key,)):
            if defect is not None:
                self._note(defect)
                return None
            return row
        return None

    @_guarded
    def states(self) -> dict[str, RowState]:
        """Every readable run key mapped to its :class:`RowState`."""
        out = {}
        for _, row, defect in self._scan():
            if defect is not None:
                self._note(defect)
                if defect.run_key is not None:
                    out[defect.run_key] = RowState("defective", ("defective", defect.rowid))
                continue
            state = "ok" if row.success else ("invalid" if row.invalid else "failed")
            out[row.run_key] = RowState(state, (row.status, row.created))
        return out

    def keys(self) -> dict[str, bool]:
        """Every stored run key mapped to whether its row succeeded."""
        return {k: s.state == "ok" for k, s in self.states().items()}

    def completed_keys(self) -> set[str]:
        """Run keys of rows that succeeded (these are never recomputed)."""
        return {k for k, s in self.states().items() if s.state == "ok"}

    def failed_keys(self) -> set[str]:
        """Run keys of rows whose computation failed (recomputed only when retrying failed points)."""
        return {k for k, s in self.states().items() if s.state == "failed"}

    def invalid_keys(self) -> set[str]:
        """Run keys of points whose input is invalid (recomputed once the instance changes)."""
        return {k for k, s in self.states().items() if s.state == "invalid"}

    @_guarded
    def delete(self, keys: Iterable[str]) -> int:
        """Delete the rows with these run keys in one transaction; returns how many were deleted."""
        with self._transaction() as c:
            return sum(c.execute("DELETE FROM results WHERE run_key=?", (k,)).rowcount for k in keys)

    @_guarded
    def count(self) -> int:
        """Number of stored rows."""
        return int(self._conn.execute("SELECT COUNT(*) FROM results").fetchone()[0])

    # -- certificates -------------------------------------------------------------------
    def certificate_path(self, row: StoredRow) -> str | None:
        """The row's certificate as a path usable from the current directory (``None`` if it has none).

        The stored path is relative to the store's folder (stores of schema 1 hold absolute paths).
        """
        if not row.certificate:
            return None
        return os.path.normpath(os.path.join(self.folder, row.certificate))

    def certificate_problem(self, row: StoredRow) -> str | None:
        """One line saying why the row's certificate cannot be used from this folder, or ``None``.

        A path that leaves the store's folder, or names no file, is flagged; a row without a
        certificate is not.
        """
        path = self.certificate_path(row)
        if path is None:
            return None
        label = f"{self.path}: row run_key {row.run_key[:12]}: column certificate: {row.certificate!r}"
        if os.path.commonpath([self.folder, os.path.abspath(path)]) != self.folder:
            return f"{label} points outside the store's folder"
        if not os.path.isfile(path):
            return f"{label} is missing"
        return None

    # -- leases -------------------------------------------------------------------------
    @_guarded
    def claim(self, key: str, holder: LeaseHolder, duration: float = DEFAULT_LEASE,
              seen: tuple | None = None) -> Claim:
        """Claim the point ``key`` for ``holder`` for ``duration`` seconds (one transaction).

        ``seen`` is the :attr:`RowState.seen` of the point's row when the sweep was planned
        (``None``: no row).  If the row changed since, another process finished the point
        (``"stored"``).  A live lease of another holder gives ``"held"``; an expired one, or one
        whose holder process is gone, is taken over.
        """
        now = time.time()
        with self._transaction() as c:
            got = None
            for _, row, defect in self._scan(" WHERE run_key=?", (key,)):
                got = ("defective", defect.rowid) if defect is not None else (row.status, row.created)
            if got != seen:
                return Claim("stored")
            old = c.execute(f"SELECT {', '.join(_LEASE_NAMES)} FROM leases WHERE run_key=?", (key,)).fetchone()
            old = None if old is None else Lease(*old)
            if old is not None and old.holder != holder.token and old.live(holder, now):
                return Claim("held", old)
            c.execute(f"INSERT OR REPLACE INTO leases({', '.join(_LEASE_NAMES)}) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                      (key, holder.token, holder.pid, holder.host, holder.ns, holder.started, now, now + duration))
        took = old if old is not None and old.holder != holder.token else None
        if took is not None:
            log.info("%s: took over point %s from %s", self.path, key[:12], took.describe())
        return Claim("claimed", took_over=took)

    @_guarded
    def release(self, holder: LeaseHolder, key: str | None = None) -> int:
        """Delete the holder's lease on ``key`` (every lease of the holder when ``key`` is None)."""
        with self._transaction() as c:
            if key is None:
                return c.execute("DELETE FROM leases WHERE holder=?", (holder.token,)).rowcount
            return c.execute("DELETE FROM leases WHERE holder=? AND run_key=?", (holder.token, key)).rowcount

    @_guarded
    def leases(self) -> list[Lease]:
        """Every lease in the store (expired ones included)."""
        if self._schema < 2:
            return []
        return [Lease(*r) for r in self._conn.execute(f"SELECT {', '.join(_LEASE_NAMES)} FROM leases")]


def _check_json_value(v):
    text = _check_text("value", v, True)
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        return json.loads(text)
    except (json.JSONDecodeError, RecursionError) as err:
        msg = err.msg if isinstance(err, json.JSONDecodeError) else "nested too deeply"
        raise _BadRow("value", f"malformed JSON ({msg})") from None
