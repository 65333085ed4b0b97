"""Tests for advbound.studies.store: schema, keys, round trips, durability of single transactions."""

import os
import sqlite3

import pytest

from advbound.errors import AdvboundError
from advbound.studies.store import SCHEMA_VERSION, Store, StoreError, make_row, package_versions, run_key

SPEC = "c" * 64


def _row(key, **kw):
    base = dict(kind="adversary", spec_key=SPEC, spec={"rows": 3}, params={"T": 4}, bound="general",
                status="optimal", lower=2.0, upper=2.0 + 1e-7)
    base.update(kw)
    return make_row(key, **base)


def test_rollback_journal_full_sync(tmp_path):
    """A new store uses the rollback journal (sqlite docs: PRAGMA journal_mode returns 'delete'), so a
    read-only open needs no -wal/-shm files; closing it leaves only the database file."""
    p = tmp_path / "s.sqlite"
    Store(p).close()
    con = sqlite3.connect(p)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "delete"
    con.close()
    assert sorted(os.listdir(tmp_path)) == ["s.sqlite"]


def test_round_trip(tmp_path):
    """A row read back equals the row written, JSON columns decoded; gap = upper - lower (derived)."""
    with Store(tmp_path / "s.sqlite") as st:
        r = _row("k1", values={"queries": 3}, solver={"solver": "SCS", "tol": 1e-6})
        st.put(r)
        got = st.get("k1")
    assert got == r
    assert got.gap == pytest.approx(1e-7)
    assert got.values == {"queries": 3}


def test_new_kind_needs_no_schema_change(tmp_path):
    """A row of another kind with its own values is stored in the same table."""
    with Store(tmp_path / "s.sqlite") as st:
        st.put(_row("a"))
        st.put(_row("e", kind="exact", bound=None, lower=0.75, upper=0.75,
                    values={"t": 2, "success_probability": 0.75}))
        assert [r.run_key for r in st.rows(kind="exact")] == ["e"]
        assert st.count() == 2


def test_completed_and_failed_keys(tmp_path):
    """Success statuses count as completed; 'failed' rows or rows with an error count as failed."""
    with Store(tmp_path / "s.sqlite") as st:
        st.put(_row("ok"))
        st.put(_row("bad", status="failed", lower=None, upper=None, error="ValueError: boom"))
        st.put(_row("unv", status="unverified"))
        assert st.completed_keys() == {"ok"}
        assert st.failed_keys() == {"bad", "unv"}
        st.put(_row("bad"))  # a retry replaces the failed row
        assert st.completed_keys() == {"ok", "bad"}
        assert st.count() == 3


def test_run_key_depends_on_each_part():
    """Changing any of kind, spec hash, bound, solver settings or version changes the key."""
    base = ("adversary", SPEC, "general", {"solver": "SCS", "tol": 1e-6}, "0.1.0")
    keys = {run_key(*base)}
    for i, alt in enumerate(["exact", "d" * 64, "positive", {"solver": "SCS", "tol": 1e-7}, "0.2.0"]):
        args = list(base)
        args[i] = alt
        keys.add(run_key(*args))
    assert len(keys) == 6


def test_meta_round_trip(tmp_path):
    """Meta values are JSON round-tripped; schema_version is 2."""
    with Store(tmp_path / "s.sqlite") as st:
        st.set_meta("study", {"name": "x", "laws": ["sqrt"]})
        assert st.get_meta("study") == {"name": "x", "laws": ["sqrt"]}
        assert st.get_meta("schema_version") == 2 == SCHEMA_VERSION
        assert st.get_meta("missing", 5) == 5


def test_readonly_missing_file(tmp_path):
    """Opening a missing store read-only raises a one-line AdvboundError naming the file."""
    with pytest.raises(AdvboundError, match="no such result store"):
        Store(tmp_path / "none.sqlite", readonly=True)


def test_put_many_is_atomic(tmp_path):
    """If one row of a batch cannot be encoded, none of the batch is written."""
    with Store(tmp_path / "s.sqlite") as st:
        bad = _row("b2")
        object.__setattr__(bad, "kind", None)  # violates NOT NULL
        with pytest.raises(StoreError, match="NOT NULL"):
            st.put_many([_row("b1"), bad])
        assert st.count() == 0


def test_package_versions_names_advbound():
    """package_versions reports the installed advbound version (advbound.__version__)."""
    import advbound
    assert package_versions()["advbound"] == advbound.__version__


# -- read-only opens -----------------------------------------------------------------------------
def _snapshot(folder):
    """Names, bytes and modification times of every file in ``folder``."""
    return {n: ((folder / n).read_bytes(), os.stat(folder / n).st_mtime_ns) for n in sorted(os.listdir(folder))}


def test_readonly_opens_mode_ro_and_changes_nothing(tmp_path):
    """A read-only open uses the sqlite URI mode=ro, refuses writes, and leaves the folder byte-identical."""
    p = tmp_path / "s.sqlite"
    with Store(p) as st:
        st.put(_row("k1"))
    before = _snapshot(tmp_path)
    with Store(p, readonly=True) as st:
        assert st.uri.startswith("file:") and st.uri.endswith("?mode=ro")
        assert [r.run_key for r in st.rows()] == ["k1"]
        with pytest.raises(sqlite3.OperationalError, match="readonly|read-only"):
            st._conn.execute("DELETE FROM results")
    assert _snapshot(tmp_path) == before


def _legacy_wal_store(path, keep_open=False):
    """A schema-1 store in WAL mode as earlier versions wrote it (row "old", absolute certificate path);
    with ``keep_open``, a second row "logged" is left in the write-ahead log by the returned open
    connection (no checkpoint)."""
    with Store(path) as st:
        st.put(_row("old", certificate=str(path) + ".npz"))
    con = sqlite3.connect(path, isolation_level=None)
    assert con.execute("PRAGMA journal_mode=WAL").fetchone()[0] == "wal"
    con.execute("DROP TABLE leases")
    con.execute("UPDATE meta SET value='1' WHERE key='schema_version'")
    if not keep_open:
        con.close()
        return None
    con.execute("PRAGMA wal_autocheckpoint=0")
    con.execute("INSERT INTO results SELECT 'logged', study, kind, spec_key, spec_json, params_json, bound, "
                "status, message, lower, upper, gap, objective, domain_size, values_json, solver_json, "
                "versions_json, time_solve, time_total, certificate, error, created FROM results")
    return con


def test_legacy_wal_store_read_without_creating_files(tmp_path):
    """A WAL-mode schema-1 store with no pending log is read with immutable=1: no -wal/-shm appear
    (mode=ro alone would create both, see the sqlite WAL documentation)."""
    p = tmp_path / "old.sqlite"
    _legacy_wal_store(p)
    assert sorted(os.listdir(tmp_path)) == ["old.sqlite"]
    before = _snapshot(tmp_path)
    with Store(p, readonly=True) as st:
        assert "immutable=1" in st.uri and "mode=ro" in st.uri
        assert [r.run_key for r in st.rows()] == ["old"] and st.get_meta("schema_version") == 1
    assert _snapshot(tmp_path) == before


def test_legacy_wal_store_with_pending_log(tmp_path, monkeypatch):
    """A pending write-ahead log is read (mode=ro, so its rows are seen) when the folder is writable, and
    refused with one line when the folder is read-only (immutable would silently ignore the log)."""
    p = tmp_path / "old.sqlite"
    con = _legacy_wal_store(p, keep_open=True)
    try:
        with Store(p, readonly=True) as st:
            assert "immutable" not in st.uri
            assert sorted(r.run_key for r in st.rows()) == ["logged", "old"]
        monkeypatch.setattr(os, "access", lambda path, mode: False)
        monkeypatch.setattr(os.path, "exists", lambda q, _e=os.path.exists: False if str(q).endswith("-shm")
                            else _e(q))
        with pytest.raises(StoreError, match=r"old\.sqlite: has a pending write-ahead log"):
            Store(p, readonly=True)
    finally:
        con.close()


def test_readonly_folder_falls_back_to_immutable(tmp_path, monkeypatch):
    """When the folder is read-only and sqlite cannot take its shared lock there (as on some read-only
    media), the open falls back to immutable=1 and still reads the rows."""
    import advbound.studies.store_file as store_mod
    p = tmp_path / "s.sqlite"
    with Store(p) as st:
        st.put(_row("k1"))
    real = store_mod._connect

    def no_locks(target, uri=False):
        if uri and "immutable" not in target:
            raise sqlite3.OperationalError("locking protocol")
        return real(target, uri)

    monkeypatch.setattr(store_mod, "_connect", no_locks)
    monkeypatch.setattr(os, "access", lambda path, mode: False)
    with Store(p, readonly=True) as st:
        assert st.uri.endswith("?mode=ro&immutable=1") and st.count() == 1


def test_writable_open_upgrades_legacy_store(tmp_path):
    """Opening a schema-1 WAL store for writing switches it to the rollback journal and schema 2 (adds the
    leases table), keeping its rows."""
    p = tmp_path / "old.sqlite"
    _legacy_wal_store(p)
    with Store(p) as st:
        assert st.get_meta("schema_version") == SCHEMA_VERSION and st.leases() == []
        assert [r.run_key for r in st.rows()] == ["old"]
    con = sqlite3.connect(p)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "delete"
    con.close()


# -- what is not a store --------------------------------------------------------------------------
def _other_app(p):
    con = sqlite3.connect(p)
    con.execute("CREATE TABLE contacts (name TEXT, phone TEXT)")
    con.execute("INSERT INTO contacts VALUES ('a', '1')")
    con.commit()
    con.close()


def _newer(p):
    with Store(p) as st:
        st.put(_row("k1"))
    con = sqlite3.connect(p)
    con.execute("UPDATE meta SET value='7' WHERE key='schema_version'")
    con.commit()
    con.close()


def _sqlite_without_our_columns(p):
    con = sqlite3.connect(p)
    con.execute("CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT)")
    con.execute("INSERT INTO meta VALUES ('schema_version', '2')")
    con.execute("CREATE TABLE results (run_key TEXT, x REAL)")
    con.execute("CREATE TABLE leases (run_key TEXT)")
    con.commit()
    con.close()


@pytest.mark.parametrize("make, message", [
    (lambda p: p.write_text("hello, this is not sqlite\n" * 50), "a text file, not an SQLite database"),
    (lambda p: p.write_bytes(bytes(range(256)) * 8), "a binary file, not an SQLite database"),
    (lambda p: p.write_bytes(b"SQLite format 3\x00" + b"\x00" * 20), "truncated SQLite header"),
    (_other_app, "has table(s) contacts but no meta and results); refusing"),
    (_newer, "written by a newer advbound (store schema 7"),
    (_sqlite_without_our_columns, "table results lacks column study"),
])
@pytest.mark.parametrize("readonly", [True, False])
def test_not_a_store_is_refused_and_untouched(tmp_path, make, message, readonly):
    """A file that is not an advbound store of a readable schema is refused with one line naming it, for
    reading and for writing, and its bytes are left exactly as they were."""
    p = tmp_path / "x.sqlite"
    make(p)
    before = _snapshot(tmp_path)
    with pytest.raises(StoreError) as info:
        Store(p, readonly=readonly)
    text = str(info.value)
    assert text.startswith(f"{p}: ") and message in text and "\n" not in text
    assert _snapshot(tmp_path) == before


@pytest.mark.parametrize("make, message", [
    (lambda p: p.write_bytes(b""), "an empty file"),
    (lambda p: sqlite3.connect(p).execute("VACUUM"), "an SQLite database with no tables"),
    (lambda p: p.mkdir(), "is a folder"),
])
def test_empty_files_refused_for_reading(tmp_path, make, message):
    """Reading an empty file, an empty sqlite database or a folder is refused with one line."""
    p = tmp_path / "x.sqlite"
    make(p)
    with pytest.raises(StoreError, match=message):
        Store(p, readonly=True)


def test_new_or_empty_path_for_writing_becomes_a_store(tmp_path):
    """Writing to a new path (folder created), a zero-byte file or an sqlite database without tables
    creates a store there: there is nothing of another program's to extend."""
    for p in (tmp_path / "new" / "a.sqlite", tmp_path / "zero.sqlite", tmp_path / "empty.sqlite"):
        if p.name == "zero.sqlite":
            p.write_bytes(b"")
        if p.name == "empty.sqlite":
            sqlite3.connect(p).execute("VACUUM")
        with Store(p) as st:
            st.put(_row("k"))
        with Store(p, readonly=True) as st:
            assert st.count() == 1


def test_write_in_readonly_location_is_one_line(tmp_path):
    """A store whose folder cannot be created gives a one-line StoreError (a file stands in the way)."""
    (tmp_path / "blocker").write_text("x")
    with pytest.raises(StoreError, match=r"blocker/s\.sqlite: cannot create the store's folder"):
        Store(tmp_path / "blocker" / "s.sqlite")


# -- hand-edited rows -----------------------------------------------------------------------------
@pytest.mark.parametrize("sql, column, problem", [
    ("UPDATE results SET lower='NaN'", "lower", "'NaN' is not a number"),
    ("UPDATE results SET lower='abc'", "lower", "'abc' is not a number"),
    ("UPDATE results SET upper=9e999", "upper", "inf is not a finite number"),
    ("UPDATE results SET lower=X'00ff'", "lower", "a binary value is not a number"),
    ("UPDATE results SET params_json='{\"T\": 4'", "params_json", "malformed JSON"),
    ("UPDATE results SET solver_json='[1, 2]'", "solver_json", "JSON list where an object is expected"),
    ("UPDATE results SET spec_json='{\"a\": 1,}'", "spec_json", "malformed JSON"),
    ("UPDATE results SET status='great'", "status", "unknown status word 'great'"),
    ("UPDATE results SET lower=3.0, upper=2.0", "lower", "lower 3.0 exceeds upper 2.0"),
    ("UPDATE results SET lower=-1.0", "lower", "-1.0 is negative"),
    ("UPDATE results SET upper=-0.5, lower=NULL", "upper", "-0.5 is negative"),
    ("UPDATE results SET lower=NULL", "lower", "status 'optimal' but no lower value"),
    ("UPDATE results SET domain_size='many'", "domain_size", "'many' is not an integer"),
    ("UPDATE results SET params_json='{\"T\": NaN}'", "params_json", "parameter T = nan is not finite"),
    ("UPDATE results SET message=CAST(X'4772fc6e' AS TEXT)", "message",
     "text is not UTF-8 (byte 0xfc at offset 2"),          # 'Grün' in Latin-1
    ("UPDATE results SET kind=CAST(X'ff' AS TEXT)", "kind", "text is not UTF-8"),
    ("UPDATE results SET study=X'0102'", "study", "a binary value where text is expected"),
])
def test_hand_edited_row_is_left_out_with_one_warning(tmp_path, caplog, sql, column, problem):
    """A row edited into something advbound never writes is left out of rows(), logged once in one line
    naming the store, the row and the column, reported by check_rows() and marked defective (a study
    recomputes it); the other rows are unaffected."""
    p = tmp_path / "s.sqlite"
    with Store(p) as st:
        st.put(_row("good"))
        st.put(_row("k1"))
    con = sqlite3.connect(p)
    con.execute(sql + " WHERE run_key='k1'")
    con.commit()
    con.close()
    with caplog.at_level("WARNING", logger="advbound"), Store(p, readonly=True) as st:
        assert [r.run_key for r in st.rows()] == ["good"]
        assert [r.run_key for r in st.rows(kind="adversary")] in (["good"], [])
        assert st.get("k1") is None
        defects = st.check_rows()
        states = st.states()
    assert [(d.run_key, d.column) for d in defects] == [("k1", column)]
    assert problem in defects[0].problem
    assert states["k1"].state == "defective" and states["good"].state == "ok"
    warned = [r.getMessage() for r in caplog.records]
    assert len(warned) == 1 and "\n" not in warned[0]
    assert warned[0].startswith(f"{p}: row 2 (run_key k1): column {column}: ") and "left out" in warned[0]


def test_unreadable_run_key_is_named_by_rowid(tmp_path):
    """A run key that is not UTF-8 is named by the row id, since the key itself cannot be shown."""
    p = tmp_path / "s.sqlite"
    with Store(p) as st:
        st.put(_row("k1"))
    con = sqlite3.connect(p)
    con.execute("UPDATE results SET run_key=CAST(X'6bff' AS TEXT)")
    con.commit()
    con.close()
    with Store(p, readonly=True) as st:
        assert st.rows() == [] and st.states() == {}
        (d,) = st.check_rows()
    assert str(d).startswith(f"{p}: row 1 (run_key unreadable): column run_key: text is not UTF-8")


def test_byte_order_mark_in_json_is_accepted(tmp_path):
    """A UTF-8 byte-order mark in front of a JSON column (as some editors write) is simply accepted."""
    p = tmp_path / "s.sqlite"
    with Store(p) as st:
        st.put(_row("k1"))
    con = sqlite3.connect(p)
    con.execute("UPDATE results SET params_json=?", ("\ufeff{\"T\": 4}",))
    con.commit()
    con.close()
    with Store(p, readonly=True) as st:
        assert st.get("k1").params == {"T": 4}


@pytest.mark.parametrize("value, problem", [("'{oops'", "malformed JSON"), ("'[1]'", "JSON list where an object"),
                                            ("CAST(X'7b22e9223a317d' AS TEXT)", "text is not UTF-8")])
def test_bad_study_meta_is_fatal(tmp_path, value, problem):
    """The study settings in meta are needed by every report, so a malformed value (bad JSON, not an object,
    Latin-1 bytes) is one fatal line naming the key."""
    p = tmp_path / "s.sqlite"
    with Store(p) as st:
        st.put(_row("k1"))
    con = sqlite3.connect(p)
    con.execute(f"INSERT INTO meta VALUES ('study', {value})")
    con.commit()
    con.close()
    with Store(p, readonly=True) as st, pytest.raises(StoreError, match=rf"s\.sqlite: meta key 'study': {problem}"):
        st.study_meta()


def test_certificate_paths_are_checked_against_the_store_folder(tmp_path):
    """Certificate paths resolve against the store's folder; one outside it or missing is flagged in one
    line naming the row and the column, one inside that exists is not."""
    p = tmp_path / "s.sqlite"
    (tmp_path / "certs").mkdir()
    (tmp_path / "certs" / "a.npz").write_bytes(b"x")
    (tmp_path.parent / "outside.npz").write_bytes(b"x")
    with Store(p) as st:
        rows = {c: _row(c[:3] + str(i), certificate=c) for i, c in enumerate(
            ["certs/a.npz", "certs/gone.npz", "../outside.npz", str(tmp_path.parent / "outside.npz")])}
        rows["none"] = _row("none", certificate=None)
        st.put_many(rows.values())
    with Store(p, readonly=True) as st:
        got = {c: st.certificate_problem(r) for c, r in rows.items()}
        assert st.certificate_path(rows["certs/a.npz"]) == str(tmp_path / "certs" / "a.npz")
    assert got["certs/a.npz"] is None and got["none"] is None
    assert got["certs/gone.npz"] == f"{p}: row run_key cer1: column certificate: 'certs/gone.npz' is missing"
    assert got["../outside.npz"].endswith("'../outside.npz' points outside the store's folder")
    assert got[str(tmp_path.parent / "outside.npz")].endswith("points outside the store's folder")


# -- leases (one process; several processes: tests/test_store_concurrency.py) ------------------------
def _holder(token, pid=None, ns=None):
    from advbound.studies.store import LeaseHolder
    me = LeaseHolder.current()
    return LeaseHolder(me.pid if pid is None else pid, me.host, me.ns if ns is None else ns, "", token)


def test_claim_held_stored_and_release(tmp_path):
    """A claimed point is held against another live holder, released by the row's transaction, and a point
    whose row appeared after planning is reported as stored."""
    p = tmp_path / "s.sqlite"
    a, b = _holder("a"), _holder("b")
    with Store(p) as st:
        assert st.claim("k1", a, 30).outcome == "claimed"
        assert st.claim("k1", a, 30).outcome == "claimed"  # renewing one's own claim
        c = st.claim("k1", b, 30)
        assert c.outcome == "held" and c.lease.holder == "a" and c.lease.expires > c.lease.acquired
        st.put(_row("k1"), release=a)
        assert st.leases() == []
        assert st.claim("k1", b, 30, seen=None).outcome == "stored"
        seen = st.states()["k1"].seen
        assert st.claim("k1", b, 30, seen=seen).outcome == "claimed"
        assert st.release(b) == 1 and st.leases() == []


def test_expired_lease_and_dead_holder_are_taken_over(tmp_path):
    """An expired lease is taken over; so is a live-looking one whose holder pid does not exist on this
    machine; a lease from another machine is trusted until it expires."""
    import subprocess
    import sys
    import time
    p = tmp_path / "s.sqlite"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                          text=True).stdout.strip()
    me = _holder("me")
    with Store(p) as st:
        st.claim("short", _holder("x"), 0.2)
        st.claim("gone", _holder("y", pid=int(dead)), 300)
        st.claim("far", _holder("z", pid=int(dead), ns="other-host|boot|1"), 300)
        time.sleep(0.3)
        short, gone, far = (st.claim(k, me, 30) for k in ("short", "gone", "far"))
    assert short.outcome == "claimed" and short.took_over.holder == "x"
    assert gone.outcome == "claimed" and gone.took_over.holder == "y"
    assert far.outcome == "held" and far.lease.holder == "z"


def test_lease_keeper_renews(tmp_path):
    """The keeper thread pushes the expiry forward while a point is computed."""
    import time

    from advbound.studies.store import LeaseKeeper
    p = tmp_path / "s.sqlite"
    me = _holder("me")
    with Store(p) as st:
        st.claim("k", me, 0.6)
        first = st.leases()[0].expires
        keeper = LeaseKeeper(st, me, 0.6).start()
        time.sleep(1.0)
        keeper.stop()
        assert st.leases()[0].expires > first + 0.5
        assert st.claim("k", _holder("other"), 0.6).outcome == "held"
