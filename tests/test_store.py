"""Tests for advbound.store: schema, keys, round trips, durability of single transactions."""

import sqlite3

import pytest

from advbound.errors import AdvboundError
from advbound.store import Store, make_row, package_versions, run_key

SPEC = "c" * 64


def _row(key, **kw):
    base = dict(kind="adversary", spec_key=SPEC, spec={"rows": 3}, params={"T": 4}, bound="general",
                status="optimal", lower=2.0, upper=2.0 + 1e-7)
    base.update(kw)
    return make_row(key, **base)


def test_wal_mode(tmp_path):
    """The store file is opened in WAL journal mode (sqlite docs: PRAGMA journal_mode returns 'wal')."""
    p = tmp_path / "s.sqlite"
    Store(p).close()
    con = sqlite3.connect(p)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    con.close()


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
        st.put(_row("e", kind="exact", bound=None, values={"t": 2, "success_probability": 0.75}))
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
    """Meta values are JSON round-tripped; schema_version is 1."""
    with Store(tmp_path / "s.sqlite") as st:
        st.set_meta("study", {"name": "x", "laws": ["sqrt"]})
        assert st.get_meta("study") == {"name": "x", "laws": ["sqrt"]}
        assert st.get_meta("schema_version") == 1
        assert st.get_meta("missing", 5) == 5


def test_readonly_missing_file(tmp_path):
    """Opening a missing store read-only raises a one-line AdvboundError naming the file."""
    with pytest.raises(AdvboundError, match="no such result store"):
        Store(tmp_path / "none.sqlite", readonly=True)


def test_not_a_store(tmp_path):
    """A file that is not sqlite is refused with AdvboundError."""
    p = tmp_path / "junk.sqlite"
    p.write_text("hello, this is not sqlite" * 50)
    with pytest.raises(AdvboundError):
        Store(p)


def test_put_many_is_atomic(tmp_path):
    """If one row of a batch cannot be encoded, none of the batch is written."""
    with Store(tmp_path / "s.sqlite") as st:
        bad = _row("b2")
        object.__setattr__(bad, "kind", None)  # violates NOT NULL
        with pytest.raises(sqlite3.IntegrityError):
            st.put_many([_row("b1"), bad])
        assert st.count() == 0


def test_package_versions_names_advbound():
    """package_versions reports the installed advbound version (advbound.__version__)."""
    import advbound
    assert package_versions()["advbound"] == advbound.__version__
