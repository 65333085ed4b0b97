"""End-to-end tests of `advbound study`, `advbound report` and `advbound fit` on tiny real instances."""

import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time

import pytest

from advbound.cli import main  # noqa: E402
from advbound.studies.store import Store  # noqa: E402

OR_N = textwrap.dedent("""
    # OR_n written as OR of n position-search rows of length 1 (each row is one bit)
    [instance]
    name = "or-n"
    outer = "or"
    rows = "n"
    inner = "position_search"
    row_length = 1

    [grid]
    n = [2, 3, 4, 5]

    [study]
    growth = "n"
    solver = "CLARABEL"
    bounds = ["general"]
    bootstrap = 20
    """)


@pytest.fixture
def study_file(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    p = tmp_path / "or_n.toml"
    p.write_text(OR_N)
    return p


def test_study_report_fit_end_to_end(study_file, tmp_path, capsys):
    """ADV±(OR_n) = sqrt(n) (common knowledge) for n = 2..5; rerun skips; report and fit read the store."""
    assert main(["study", str(study_file), "--quiet", "--no-report"]) == 0
    out = capsys.readouterr().out
    assert "4 solved now" in out and "store studies/or-n.sqlite" in out
    with Store("studies/or-n.sqlite", readonly=True) as st:
        rows = st.rows()
        assert all(os.path.exists(st.certificate_path(r)) and not st.certificate_problem(r) for r in rows)
    assert sorted((r.params["n"], round(r.lower, 5)) for r in rows) == [
        (n, round(math.sqrt(n), 5)) for n in (2, 3, 4, 5)]
    assert main(["study", str(study_file), "--quiet", "--no-report"]) == 0
    assert "4 already stored, 0 solved now" in capsys.readouterr().out
    assert main(["report", str(study_file)]) == 0
    summary = (tmp_path / "reports" / "or-n" / "summary.md").read_text()
    assert "| 4 | 16 | 2.000000 |" in summary  # n = 4: 2^4 inputs, ADV±(OR_4) = 2
    capsys.readouterr()
    assert main(["fit", str(study_file), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    sqrt_fit = next(f for f in d["general"]["fits"] if f["model"] == "sqrt")
    assert sqrt_fit["params"]["c"] == pytest.approx(1.0, abs=1e-5)  # sqrt(n) = 1 * sqrt(n)


def test_failed_point_exit_code_and_retry(study_file, tmp_path, capsys):
    """A point whose solve fails is stored as failed (exit 1) and recomputed only with --retry-failed."""
    assert main(["study", str(study_file), "--quiet", "--no-report"]) == 0
    con = sqlite3.connect("studies/or-n.sqlite")
    with con:  # make one stored point look failed, as if its solve had raised
        con.execute("UPDATE results SET status='failed', error='SolverError: synthetic', lower=NULL "
                    "WHERE params_json='{\"n\":3}'")
    con.close()
    capsys.readouterr()
    assert main(["study", str(study_file), "--quiet", "--no-report"]) == 1
    assert "--retry-failed" in capsys.readouterr().out
    assert main(["study", str(study_file), "--quiet", "--no-report", "--retry-failed"]) == 0
    assert "1 solved now" in capsys.readouterr().out
    with Store("studies/or-n.sqlite", readonly=True) as st:
        assert st.count() == 4 and not st.failed_keys()


def test_bad_study_key_is_usage_error(tmp_path, monkeypatch, capsys):
    """An unknown [study] key gives exit 2 and a one-line message naming file and key."""
    monkeypatch.chdir(tmp_path)
    p = tmp_path / "bad.toml"
    p.write_text(OR_N + 'colour = "red"\n')
    assert main(["study", str(p), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "bad.toml: [study] unknown key 'colour'" in err and err.count("\n") == 1


def test_default_study_is_found():
    """`advbound study` without FILE uses instances/studies/default.toml of this checkout, which loads."""
    from advbound.studies.study import default_study_path, load_study, plan
    path = default_study_path()
    assert path.name == "default.toml" and path.parent.name == "studies"
    st = load_study(path)
    assert st.name == "default" and st.series == "rows" and st.growth == "T"
    assert len(plan(st)) == len(st.bounds) * 2 * 7        # rows in {2, 3}, T = 4..10


def test_report_of_missing_store(tmp_path, monkeypatch, capsys):
    """`advbound report` on a missing store is a usage error (exit 2)."""
    monkeypatch.chdir(tmp_path)
    assert main(["report", "nothing.sqlite"]) == 2
    assert "no such result store" in capsys.readouterr().err


SEARCH2 = textwrap.dedent("""
    [instance]
    name = "or2-search"
    outer = "or"
    rows = 2
    inner = "position_search"
    row_length = "T - 1"
    time = "sqrt"
    budget = { sum_squares = "T" }

    [grid]
    T = { from = 3, to = 14 }

    [study]
    solver = "CLARABEL"
    """)


@pytest.mark.slow
def test_sigkill_real_study_then_resume(tmp_path):
    """kill -9 of a real `advbound study` run keeps only complete, re-verifiable rows; a rerun completes it."""
    import signal
    import subprocess
    import sys
    import time

    from advbound.evidence.certificate import load_certificate
    from advbound.evidence.verify import verify_certificate

    p = tmp_path / "s.toml"
    p.write_text(SEARCH2)
    cmd = [sys.executable, "-m", "advbound", "study", str(p), "--quiet", "--no-report"]
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.Popen(cmd, cwd=tmp_path, env=env, stdout=subprocess.DEVNULL)
    store = tmp_path / "studies" / "or2-search.sqlite"
    n, deadline = 0, time.time() + 120
    while n < 3 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.2)
        if store.exists():
            try:
                with Store(store, readonly=True) as st:
                    n = st.count()
            except Exception:
                n = 0
    assert proc.poll() is None, "the study finished before it could be killed"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(10)
    with Store(store) as st:
        killed = st.rows()
        paths = [st.certificate_path(r) for r in killed]
    assert 3 <= len(killed) < 12
    for r, path in zip(killed, paths):
        rep = verify_certificate(load_certificate(path), bound="general")
        assert rep.lower == pytest.approx(r.lower, rel=1e-9)
    assert subprocess.run(cmd, cwd=tmp_path, env=env, capture_output=True).returncode == 0
    with Store(store) as st:
        rows = st.rows()
    assert sorted(r.params["T"] for r in rows) == list(range(3, 15))
    assert {r.run_key: r.created for r in killed}.items() <= {r.run_key: r.created for r in rows}.items()


def _tiny_exact_study(tmp_path):
    """instances/studies/exact_small.toml cut down to T = 3..4, one query count and ε = 0.1 up to t = 2."""
    here = os.path.join(os.path.dirname(__file__), "..", "instances", "studies", "exact_small.toml")
    text = open(here).read()
    for old, new in (("T = { from = 3, to = 5 }", "T = { from = 3, to = 4 }"),
                     ("exact = { queries = [1, 2], error = 0.1, max_queries = 4 }",
                      "exact = { queries = [1], error = 0.1, max_queries = 2 }"),
                     ("bootstrap = 50", "bootstrap = 0")):
        assert old in text, old
        text = text.replace(old, new)
    p = tmp_path / "exact_tiny.toml"
    p.write_text(text)
    return p


def test_exact_study_end_to_end(tmp_path, monkeypatch, capsys):
    """Tiny exact_small study: rows of kind "exact" hold ExactResult.to_dict(), and the report's check
    column matches t >= ((1 - 2 sqrt(ε(1-ε)))/2)·ADV± recomputed here from the stored numbers ("Negative
    weights make adversaries stronger", 2007, arXiv:quant-ph/0611054)."""
    monkeypatch.chdir(tmp_path)
    p = _tiny_exact_study(tmp_path)
    assert main(["study", str(p), "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "6 point(s); 0 already stored, 6 solved now, 0 failed now" in out
    assert "exact points: 4; adversary check t >= (1 - 2 sqrt(ε(1-ε)))/2 · ADV±: 4 pass, 0 fail, 0 n/a" in out
    with Store("studies/exact_small.sqlite", readonly=True) as st:
        adv = {r.params["T"]: r for r in st.rows(kind="adversary")}
        exact = st.rows(kind="exact")
    assert sorted(adv) == [3, 4] and len(exact) == 4
    section = (tmp_path / "reports" / "exact_small" / "summary.md").read_text().split("## Exact t-query")[1]
    for r in exact:
        T = r.params["T"]
        assert r.bound is None and r.success and r.values["kind"] == "exact"
        assert r.lower == r.values["success_probability"] and r.upper == r.values["upper_bound"]
        assert r.lower <= r.upper + 1e-12 and r.solver["solver"] == "CLARABEL"
        line = next(x for x in section.splitlines() if x.startswith(f"| {T} | {adv[T].domain_size} | "))
        cells = [c.strip() for c in line.strip("|").split("|")]
        assert cells[2] == f"{adv[T].lower:.6f}" and cells[3] == f"{adv[T].upper:.6f}"
        if r.solver.get("queries") == 1:
            # zero queries succeed with probability at most 1/2 on a function with both outputs
            # (common knowledge), and one query is an algorithm too, so p lies in [1/2, 1]
            assert 0.5 <= r.lower <= 1.0
            t, eps = 1, 1 - r.lower
            assert cells[4] == f"[{r.lower:.6f}, {r.upper:.6f}]"
            check = cells[5]
        else:
            assert r.values["target_error"] == 0.1 and r.values["reached"] is True
            t, eps = r.values["queries"], 0.1
            assert t >= 1 and r.lower >= 0.9 - 1e-4  # t = 0 gives at most 1/2 (as above)
            assert cells[6] == str(t)
            check = cells[7]
        need = (1 - 2 * math.sqrt(eps * (1 - eps))) / 2 * adv[T].lower
        verdict, rel = ("pass", "≥") if t >= need else ("fail", "<")
        assert check == f"{verdict}: {t} {rel} {need:.4f} (ε = {eps:.4f})"
        assert verdict == "pass"  # the adversary theorem (same paper) must hold for verified numbers
    assert os.path.exists(tmp_path / "reports" / "exact_small" / "exact_vs_T.png")
    assert main(["study", str(p), "--quiet", "--no-report"]) == 0
    assert "6 already stored, 0 solved now" in capsys.readouterr().out


# -- invalid input, hostile stores, several sweeps ----------------------------------------------------
BUDGET = textwrap.dedent("""
    # OR of 2 position-search rows, t_k = sqrt(k), sum t_i^2 = {budget}: two rows need sum k_i >= 2, so the
    # budget T - 2 allows no time profile at T = 3 (derived), and T - 1 allows one at T = 3 and 4
    [instance]
    name = "or2-budget"
    outer = "or"
    rows = 2
    inner = "position_search"
    row_length = "T - 1"
    time = "sqrt"
    budget = {{ sum_squares = "{budget}" }}

    [grid]
    T = [3, 4]

    [study]
    solver = "CLARABEL"
    bootstrap = 0
    """)


def test_invalid_point_says_fix_the_instance(tmp_path, monkeypatch, capsys):
    """A grid point whose instance cannot be built is stored as invalid with its one-line message; the
    command exits 2 and says to fix the instance (never --retry-failed), --retry-failed does not recompute
    it, the report lists it, and after the instance is fixed the rerun computes it (its hash changed)."""
    monkeypatch.chdir(tmp_path)
    p = tmp_path / "b.toml"
    p.write_text(BUDGET.format(budget="T - 2"))
    assert main(["study", str(p), "--quiet"]) == 2
    out = capsys.readouterr().out
    assert "1 solved now, 0 failed now, 1 with invalid input" in out
    line = next(x for x in out.splitlines() if x.startswith("  invalid: "))
    assert line.startswith("  invalid: {'T': 3} (general): ") and "b.toml" in line and "T=3" in line
    assert f"fix the instance in {p}" in out and "--retry-failed" not in out
    with Store("studies/or2-budget.sqlite", readonly=True) as st:
        (bad,) = [r for r in st.rows() if r.invalid]
        created = bad.created
    assert bad.params == {"T": 3} and bad.message in line
    summary = (tmp_path / "reports" / "or2-budget" / "summary.md").read_text()
    assert "Invalid points" in summary and bad.message in summary
    assert main(["study", str(p), "--quiet", "--no-report", "--retry-failed"]) == 2
    assert "0 solved now" in capsys.readouterr().out
    with Store("studies/or2-budget.sqlite", readonly=True) as st:
        assert st.get(bad.run_key).created == created
    p.write_text(BUDGET.format(budget="T - 1"))
    assert main(["study", str(p), "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "0 failed now; " in out and "invalid" not in out
    from advbound.studies.study import load_study, plan
    fixed = plan(load_study(p))
    with Store("studies/or2-budget.sqlite", readonly=True) as st:
        states = st.states()
        assert not st.invalid_keys()  # the old invalid row described an input that no longer exists
    assert bad.run_key not in {q.run_key for q in fixed}
    assert [states[q.run_key].state for q in fixed] == ["ok", "ok"]
    summary = (tmp_path / "reports" / "or2-budget" / "summary.md").read_text()
    assert "Invalid points" not in summary


@pytest.mark.parametrize("content, words", [
    ("text", "not an advbound result store (a text file, not an SQLite database)"),
    ("other", "not an advbound result store (it has table(s) notes but no meta and results)"),
])
@pytest.mark.parametrize("command", ["report", "fit", "study"])
def test_hostile_store_files_are_one_line_exit_2(tmp_path, monkeypatch, capsys, content, words, command):
    """`report`, `fit` and `study` refuse a text file or another program's database as a store: exit 2,
    one line on stderr naming the file, and the file is left unchanged."""
    monkeypatch.chdir(tmp_path)
    store = tmp_path / "x.sqlite"
    if content == "text":
        store.write_text("not a database\n" * 20)
    else:
        con = sqlite3.connect(store)
        con.execute("CREATE TABLE notes (t TEXT)")
        con.commit()
        con.close()
    before = store.read_bytes()
    (tmp_path / "or_n.toml").write_text(OR_N)
    argv = {"report": ["report", str(store)], "fit": ["fit", str(store)],
            "study": ["study", "or_n.toml", "--store", str(store), "--quiet"]}[command]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err == f"advbound: error: {store}: {words}; refusing to read or extend it\n" if content == "other" else \
        err == f"advbound: error: {store}: {words}\n"
    assert store.read_bytes() == before


def test_fit_leaves_out_hand_edited_row_with_warning(study_file, tmp_path, capsys, monkeypatch):
    """A stored row edited to a non-number is left out of the fit with one warning line naming the row and
    the column; the fit of the remaining points still runs."""
    import logging
    monkeypatch.setattr(logging.getLogger("advbound"), "handlers", [])  # log to this test's stderr
    assert main(["study", str(study_file), "--quiet", "--no-report"]) == 0
    con = sqlite3.connect("studies/or-n.sqlite")
    with con:
        key = con.execute("SELECT run_key FROM results WHERE params_json='{\"n\":3}'").fetchone()[0]
        con.execute("UPDATE results SET lower='1.73 (approx)' WHERE run_key=?", (key,))
    con.close()
    capsys.readouterr()
    assert main(["fit", str(study_file), "--json"]) == 0
    cap = capsys.readouterr()
    d = json.loads(cap.out)
    assert next(f for f in d["general"]["fits"] if f["model"] == "sqrt")["T"] == [2.0, 4.0, 5.0]
    warn = [x for x in cap.err.splitlines() if "column lower" in x]
    assert warn == [f"advbound: studies/or-n.sqlite: row 2 (run_key {key[:12]}): column lower: "
                    "'1.73 (approx)' is not a number; the row is left out"]


OR_MANY = OR_N.replace("n = [2, 3, 4, 5]", "n = [2, 3, 4, 5, 6, 7]")


def _start(args, cwd):
    return subprocess.Popen([sys.executable, "-m", "advbound", *args], cwd=cwd, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=dict(os.environ, OMP_NUM_THREADS="1"))


def test_two_real_studies_on_one_store(tmp_path):
    """Two `advbound study` processes started together on one store compute each of the 6 points once
    between them (their "solved now" counts add up to 6), store ADV±(OR_n) = sqrt(n) (common knowledge)
    for every n and leave no lease."""
    import re
    p = tmp_path / "or_many.toml"
    p.write_text(OR_MANY)
    args = ["study", str(p), "--quiet", "--no-report", "--lease", "10"]
    procs = [_start(args, tmp_path), _start(args, tmp_path)]
    outs = [proc.communicate(timeout=300) for proc in procs]
    assert [proc.returncode for proc in procs] == [0, 0], outs
    solved = [int(re.search(r"(\d+) solved now", out).group(1)) for out, _ in outs]
    assert sum(solved) == 6
    with Store(tmp_path / "studies" / "or-n.sqlite", readonly=True) as st:
        rows = st.rows()
        assert st.leases() == []
    assert sorted((r.params["n"], round(r.lower, 5)) for r in rows) == [
        (n, round(math.sqrt(n), 5)) for n in range(2, 8)]


def test_kill_9_real_study_then_rerun_takes_over(tmp_path):
    """kill -9 of `advbound study` while it holds a point leaves that lease behind; a rerun sees that the
    holder is gone, computes the point and the rest, and leaves no lease."""
    p = tmp_path / "or_many.toml"
    p.write_text(OR_MANY.replace("n = [2, 3, 4, 5, 6, 7]", "n = [7, 6]"))
    store = tmp_path / "studies" / "or-n.sqlite"
    proc = _start(["study", str(p), "--quiet", "--no-report", "--lease", "120"], tmp_path)
    try:
        leases, deadline = [], time.time() + 120
        while not leases and time.time() < deadline and proc.poll() is None:
            time.sleep(0.05)
            try:
                with Store(store, readonly=True) as st:
                    leases = st.leases()
            except Exception:  # not created yet
                leases = []
        assert leases, "the study never claimed a point"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    with Store(store, readonly=True) as st:
        left = st.leases()
        done = st.count()
    assert [x.pid for x in left] == [proc.pid] and done < 2
    rerun = subprocess.run([sys.executable, "-m", "advbound", "study", str(p), "--quiet", "--no-report"],
                           cwd=tmp_path, capture_output=True, text=True, env=dict(os.environ, OMP_NUM_THREADS="1"))
    assert rerun.returncode == 0, rerun.stderr
    assert f"{2 - done} solved now" in rerun.stdout
    with Store(store, readonly=True) as st:
        assert sorted(r.params["n"] for r in st.rows()) == [6, 7] and st.leases() == []
