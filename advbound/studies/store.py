"""The durable result store of studies: one sqlite row per finished point, and leases on points.

This module owns :class:`Store`, the reading and writing of a study's results.  A :class:`Store` wraps
one sqlite database (standard library :mod:`sqlite3`, rollback journal,
``synchronous=FULL``).  Each row is a finished point: which instance (its resolved
spec as JSON and its hash), which parameters, which *kind* of computation
(``"adversary"`` for ADV/ADV± solves, ``"exact"`` for exact t-query points, whose
lower/upper are the verified achievable success probability and its verified upper
bound, ``"conjecture"`` for a researcher's own Γ, whose lower is its certified ratio), the
common numbers (lower, upper, gap, status), a JSON ``values`` column for
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

The work is shared with sibling modules, whose names this module re-exports:
:mod:`advbound.studies.store_rows` (the rows, their keys and the checks on reading them),
:mod:`advbound.studies.store_file` (the sqlite file: opening, schema, upgrades) and
:mod:`advbound.studies.store_leases` (the leases and their renewal).

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
import json
import logging
import os
import time
from typing import Any, Iterable

from advbound.studies.store_file import (READABLE_SCHEMAS, SCHEMA_VERSION, StoreError, _guarded, _LEASE_NAMES,
                                         _StoreFile)
from advbound.studies.store_leases import DEFAULT_LEASE, Claim, Lease, LeaseHolder, LeaseKeeper
from advbound.studies.store_rows import (BOUND_SLACK, ERROR_STATUS, KNOWN_STATUSES, SKIPPED, RowDefect, RowState,
                                         StoredRow, _BadRow, _canon, _check_json_value, _decode_row, _NAMES, make_row,
                                         package_versions, run_key)

__all__ = ["SCHEMA_VERSION", "READABLE_SCHEMAS", "DEFAULT_LEASE", "BOUND_SLACK", "KNOWN_STATUSES",
           "StoreError", "StoredRow", "RowDefect", "RowState", "Store", "LeaseHolder", "Lease", "Claim",
           "LeaseKeeper", "run_key", "make_row", "package_versions", "ERROR_STATUS", "SKIPPED"]

log = logging.getLogger("advbound")


class Store(_StoreFile):
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
            state = ("ok" if row.success else "invalid" if row.invalid else "skipped" if row.skipped
                     else "failed")
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
