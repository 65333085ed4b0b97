"""The sqlite file of a result store: recognising, opening, creating and upgrading it.

This module owns the schema version (:data:`SCHEMA_VERSION`, :data:`READABLE_SCHEMAS`),
:class:`StoreError`, the sqlite connection settings, the refusal of files that are not
advbound stores (another program's database, a text or binary file, a newer schema),
read-only opens through the sqlite URI ``mode=ro`` (``immutable=1`` where needed), the
creation of the tables and the upgrade of schema-1 stores, and :func:`_guarded`, which turns
sqlite errors of a store method into one-line :class:`StoreError`.  :class:`_StoreFile` is
the part of :class:`advbound.studies.store.Store` that does this.

>>> _looks_like_text(b"hello"), _looks_like_text(b"\\x00\\x01")
(True, False)
"""

from __future__ import annotations

import contextlib
import functools
import logging
import os
import sqlite3
import urllib.parse

from advbound.errors import AdvboundError
from advbound.studies.store_rows import _COLUMNS, _NAMES, _Undecodable, _show, _text_factory

__all__ = ["SCHEMA_VERSION", "READABLE_SCHEMAS", "StoreError"]

log = logging.getLogger("advbound")

#: Version of the table layout written into the ``meta`` table (2: ``leases`` table, certificate
#: paths relative to the store's folder, status ``invalid``).
SCHEMA_VERSION = 2
#: Schema versions this version reads (version 1 stores are upgraded when opened for writing).
READABLE_SCHEMAS = (1, 2)

_MAGIC = b"SQLite format 3\x00"

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


class _StoreFile:
    """Opening, checking, creating and closing the sqlite file of a :class:`advbound.studies.store.Store`.

    The store sets ``path``, ``folder``, ``uri`` and ``_conn`` before calling :meth:`_open_readonly`
    or :meth:`_open_writable`; :meth:`_check` and :meth:`_create` set ``_schema``.
    """

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
