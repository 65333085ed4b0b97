"""Tests for advbound.studies.report: series from the store, well-formed report files (figures, LaTeX, CSV, JSON)."""

import csv
import json
import math
import os
import re
import shutil
import subprocess

import numpy as np
import pytest

from advbound.errors import AdvboundError
from advbound.studies.report import collect_series, fit_series, latex_fit_table, latex_results_table, write_report
from advbound.studies.store import Store, make_row, run_key

META = {"name": "syn", "growth": "T", "series": "rows", "laws": ["sqrt", "sqrt_log", "power"],
        "offsets": [False, True], "bootstrap": 20, "seed": 0, "bounds": ["general"],
        "settings": {"method": "dense", "solver": "SCS", "tol": 1e-7, "max_iters": None, "options": {}},
        "description": "synthetic rows: L = sqrt(rows * T) (the known-times search value sqrt(sum c_i^2))"}


def _fill(path, fail_one=True):
    """Rows with L = sqrt(rows*T): ADV±(OR_n) = sqrt(n) (common knowledge) with n = rows*T."""
    with Store(path) as st:
        st.set_meta("study", META)
        for rows in (2, 3):
            for T in range(4, 10):
                key = run_key("adversary", f"{rows}-{T}", "general", META["settings"], "0")
                v = math.sqrt(rows * T)
                st.put(make_row(key, kind="adversary", spec_key=f"{rows}-{T}", spec={"rows": rows},
                                params={"rows": rows, "T": T}, bound="general", status="optimal", lower=v,
                                upper=v + 1e-8, domain_size=rows * T, study="syn", certificate=f"c/{rows}-{T}.npz",
                                solver=META["settings"]))
        if fail_one:
            st.put(make_row("bad", kind="adversary", spec_key="x", spec={}, params={"rows": 3, "T": 10},
                            bound="general", status="failed", error="SolverError: synthetic", study="syn",
                            solver=META["settings"]))
        st.put(make_row("ex", kind="exact", spec_key="y", spec={}, params={"T": 4}, status="optimal",
                        values={"queries": 2}))


def test_collect_series(tmp_path):
    """Two series (rows = 2, 3), sorted by T, failed and other-kind rows left out."""
    p = tmp_path / "s.sqlite"
    _fill(p)
    with Store(p, readonly=True) as st:
        ser = collect_series(st)
    assert [(s.bound, s.key, len(s.T)) for s in ser] == [("general", 2, 6), ("general", 3, 6)]
    assert ser[1].T == (4.0, 5.0, 6.0, 7.0, 8.0, 9.0)
    assert ser[1].lower[0] == pytest.approx(math.sqrt(12))


def test_report_files_well_formed(tmp_path):
    """Every report file exists and parses: PNGs decode, CSV and JSON load, LaTeX tabular is balanced."""
    from matplotlib.image import imread
    p = tmp_path / "s.sqlite"
    _fill(p)
    files = write_report(p, out=tmp_path / "rep")
    for f in files.all():
        assert os.path.getsize(f) > 0, f
    pngs = [f for f in files.figures if f.endswith(".png")]
    assert {os.path.basename(f) for f in pngs} == {"bound_vs_T.png", "ratios.png", "residuals.png"}
    for f in pngs:
        img = imread(f)
        assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100
    for f in files.figures:
        if f.endswith(".pdf"):
            assert open(f, "rb").read(5) == b"%PDF-"
    with open(tmp_path / "rep" / "data.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 13 and {r["status"] for r in rows} == {"optimal", "failed"}
    data = json.loads(open(tmp_path / "rep" / "data.json").read())
    assert len(data["rows"]) == 13
    fits = json.loads(open(tmp_path / "rep" / "fits.json").read())
    assert set(fits) == {"general, rows=2", "general, rows=3"}
    # L = sqrt(rows) * sqrt(T) exactly, so the sqrt fit has c = sqrt(rows) (derived)
    sq = next(f for f in fits["general, rows=3"]["fits"] if f["model"] == "sqrt")
    assert sq["params"]["c"] == pytest.approx(math.sqrt(3), rel=1e-9)
    prov = json.loads(open(files.provenance).read())
    assert {pt["certificate"] for pt in prov["points"]} >= {"c/2-4.npz"}
    assert prov["solver_settings"] == [META["settings"]]
    summary = open(files.summary).read()
    assert "not a proof" in summary and "cannot tell" in summary and "SolverError: synthetic" in summary
    for tex in files.tables:
        _check_tabular(open(tex).read())


def _check_tabular(text):
    """Structural check of a booktabs tabular: one begin/end, rules in order, column counts match."""
    assert text.count(r"\begin{tabular}") == 1 and text.count(r"\end{tabular}") == 1
    spec = re.findall(r"[lcr]|p\{[^}]*\}", re.search(r"\\begin\{tabular\}\{((?:[lcr]|p\{[^}]*\})+)\}", text).group(1))
    i_top, i_mid, i_bot = (text.index(r) for r in (r"\toprule", r"\midrule", r"\bottomrule"))
    assert i_top < i_mid < i_bot
    for line in text.splitlines():
        if line.endswith(r"\\"):
            cells = re.split(r"(?<!\\)&", line)
            assert len(cells) == len(spec), line
    assert text.count("{") - text.count(r"\{") == text.count("}") - text.count(r"\}")


def test_latex_compiles_when_pdflatex_exists(tmp_path):
    """Both tables compile with pdflatex and booktabs (skipped when pdflatex is absent)."""
    if shutil.which("pdflatex") is None:
        pytest.skip("pdflatex not installed; the structural check in test_report_files_well_formed applies")
    p = tmp_path / "s.sqlite"
    _fill(p)
    with Store(p, readonly=True) as st:
        ser = collect_series(st)
    table = latex_results_table(ser) + "\n\n" + latex_fit_table(fit_series(ser, META, bootstrap=0))
    (tmp_path / "doc.tex").write_text("\\documentclass{article}\\usepackage{booktabs}\\begin{document}\n"
                                      "\\tiny\n" + table + "\\end{document}\n")
    r = subprocess.run(["pdflatex", "-interaction=nonstopmode", "doc.tex"], cwd=tmp_path, capture_output=True,
                       timeout=60)
    assert r.returncode == 0, r.stdout[-2000:]


def test_latex_escapes_underscores():
    """Underscores in labels are escaped for LaTeX."""
    from advbound.studies.report import Series
    s = Series("my_bound", "a_b", (4.0,), (2.0,), (None,), (8,), ())
    text = latex_results_table([s])
    assert r"my\_bound" in text and r"a\_b" in text and "--" in text


def test_report_of_empty_store(tmp_path):
    """A store with no adversary rows gives a one-line AdvboundError."""
    p = tmp_path / "e.sqlite"
    Store(p).close()
    with pytest.raises(AdvboundError, match="no adversary results"):
        write_report(p, out=tmp_path / "rep")


def test_too_few_points_not_fitted(tmp_path):
    """A series with 2 points is listed as not fitted, and the report is still written."""
    p = tmp_path / "s.sqlite"
    with Store(p) as st:
        st.set_meta("study", dict(META, series=None))
        for T in (4, 5):
            st.put(make_row(f"k{T}", kind="adversary", spec_key=str(T), spec={}, params={"T": T},
                            bound="general", status="optimal", lower=np.sqrt(T), upper=np.sqrt(T)))
    files = write_report(p, out=tmp_path / "rep")
    assert "not fitted: 2 point(s)" in open(files.summary).read()


EXACT_META = dict(META, series=None, growth="n", grid={"n": [2, 3, 16]},
                  exact={"queries": [1, 2], "error": 0.1, "max_queries": 1, "solver": "CLARABEL", "tol": 1e-8,
                         "decision_tol": 1e-4, "symmetry": True})


def _exact_row(key, n, request, status="optimal", **values):
    """An exact row as advbound.studies.study stores it: lower/upper = verified success / upper bound."""
    if status == "failed":
        return make_row(key, kind="exact", spec_key=str(n), spec={}, params={"n": n}, status="failed",
                        error="SolverError: synthetic", solver=request)
    p = values.get("success_probability")
    return make_row(key, kind="exact", spec_key=str(n), spec={}, params={"n": n}, status=status, lower=p,
                    upper=values.get("upper_bound"), domain_size=2 ** n,
                    values={"kind": "exact", "status": status, **values}, solver=request)


def _fill_exact(path):
    """OR_n rows with ADV±(OR_n) = sqrt(n) (common knowledge), plus exact rows.

    n = 2, t = 1: success 9/10 (docs/exact.md: achievable by the derivation in tests/test_exact.py,
    optimal from memory); n = 3: made-up success 0.45 (<= 1/2, no check possible) and ε = 0.1
    not reached with max_queries = 1; n = 16: made-up, inconsistent success 0.999999 with one query,
    which the check must flag (ADV± = 4 asks for t >= 1.996).
    """
    t1 = {"queries": 1, "solver": "CLARABEL", "tol": 1e-8, "symmetry": True}
    t2 = dict(t1, queries=2)
    eps = {"error": 0.1, "max_queries": 1, "decision_tol": 1e-4, "solver": "CLARABEL", "tol": 1e-8,
           "symmetry": True}
    with Store(path) as st:
        st.set_meta("study", EXACT_META)
        for n in (2, 3, 16):
            st.put(make_row(f"a{n}", kind="adversary", spec_key=str(n), spec={}, params={"n": n}, bound="general",
                            status="optimal", lower=math.sqrt(n), upper=math.sqrt(n) + 1e-8, domain_size=2 ** n))
        st.put(_exact_row("e2", 2, t1, queries=1, success_probability=0.9, upper_bound=0.9 + 1e-7))
        st.put(_exact_row("f2", 2, t2, status="failed"))
        st.put(_exact_row("g2", 2, eps, queries=1, success_probability=0.9, upper_bound=0.9 + 1e-7,
                          target_error=0.1, reached=True))
        st.put(_exact_row("e3", 3, t1, queries=1, success_probability=0.45, upper_bound=0.45 + 1e-7))
        st.put(_exact_row("g3", 3, eps, status="inaccurate", queries=1, success_probability=0.45,
                          upper_bound=0.45 + 1e-7, target_error=0.1, reached=False))
        st.put(_exact_row("e16", 16, t1, queries=1, success_probability=0.999999, upper_bound=1.0))


def test_adversary_check_values():
    """factor(0) = 1/2 and factor(1/2) = 0 (from the formula); OR_2 with one query at success 9/10:
    ε = 1/10, factor = (1 - 2·0.3)/2 = 0.2, so t >= 0.2·sqrt(2) = 0.28284 ("Negative weights make
    adversaries stronger", 2007, arXiv:quant-ph/0611054; ADV±(OR_2) = sqrt(2), common knowledge)."""
    from advbound.studies.report import adversary_check, adversary_factor
    assert adversary_factor(0.0) == 0.5 and adversary_factor(0.5) == 0.0
    eps, need, verdict = adversary_check(1, math.sqrt(2), success=0.9)
    assert eps == pytest.approx(0.1) and need == pytest.approx(0.2 * math.sqrt(2)) and verdict == "pass"
    assert adversary_check(0, math.sqrt(2), error=0.1, reached=True)[2] == "fail"  # 0 < 0.28284
    assert adversary_check(1, 2.0, success=0.5) == (None, None, "n/a")
    assert adversary_check(None, 2.0, error=0.1, reached=False)[2] == "n/a"
    assert adversary_check(1, None, success=0.9)[2] == "n/a"


def test_exact_table_and_figure(tmp_path):
    """Exact rows appear next to ADV± with the right check per point, in Markdown, LaTeX and exact.json."""
    from matplotlib.image import imread
    p = tmp_path / "s.sqlite"
    _fill_exact(p)
    files = write_report(p, out=tmp_path / "rep")
    assert {os.path.basename(f) for f in files.figures if f.endswith(".png")} == {
        "bound_vs_T.png", "ratios.png", "residuals.png", "exact_vs_T.png"}
    assert imread(str(tmp_path / "rep" / "exact_vs_T.png")).shape[1] > 100
    summary = open(files.summary).read()
    section = summary.split("## Exact t-query points")[1]
    row = {n: next(line for line in section.splitlines() if line.startswith(f"| {n} | {2 ** n} |"))
           for n in (2, 3, 16)}
    need2 = 0.2 * math.sqrt(2)  # see test_adversary_check_values
    assert f"| [0.900000, 0.900000] | pass: 1 ≥ {need2:.4f} (ε = 0.1000) | failed | n/a |" in row[2]
    assert row[2].endswith(f"| 1 | pass: 1 ≥ {need2:.4f} (ε = 0.1000) |")
    assert "| n/a (p ≤ 1/2) |" in row[3] and row[3].endswith("| > 1 | n/a (not reached) |")
    # n = 16: ε = 1e-6, (1 - 2 sqrt(ε(1-ε)))/2 · 4 = 2 - 4·sqrt(1e-6 - 1e-12) ≈ 1.996
    need16 = 2 - 4 * math.sqrt(1e-6 * (1 - 1e-6))
    assert f"| fail: 1 < {need16:.4f} (ε = 0.0000) | -- | -- | -- | -- |" in row[16]
    assert "Checks: 2 pass, 1 fail, 3 n/a." in summary  # missing cells (--) are not checks
    tex = open(tmp_path / "rep" / "table_exact.tex").read()
    _check_tabular(tex)
    assert rf"fail ($1 < {need16:.4f}$)" in tex and r"$>1$" in tex
    ex = json.loads(open(tmp_path / "rep" / "exact.json").read())
    assert ex["columns"] == ["t=1", "t=2", "eps=0.1"]
    assert [e and e["check"] for e in ex["points"][0]["entries"]] == ["pass", "n/a", "pass"]
    prov = json.loads(open(files.provenance).read())
    assert len(prov["exact_points"]) == 6 and len(prov["exact_settings"]) == 3
    assert files.data[-1].endswith("fits.json")


def test_exact_latex_compiles_when_pdflatex_exists(tmp_path):
    """The exact table compiles with pdflatex and booktabs (skipped when pdflatex is absent)."""
    if shutil.which("pdflatex") is None:
        pytest.skip("pdflatex not installed; test_exact_table_and_figure checks the structure")
    from advbound.studies.report import collect_exact, latex_exact_table
    p = tmp_path / "s.sqlite"
    _fill_exact(p)
    with Store(p, readonly=True) as st:
        cols, pts = collect_exact(st)
    (tmp_path / "doc.tex").write_text("\\documentclass{article}\\usepackage{booktabs}\\begin{document}\n\\tiny\n"
                                      + latex_exact_table(cols, pts, EXACT_META) + "\\end{document}\n")
    r = subprocess.run(["pdflatex", "-interaction=nonstopmode", "doc.tex"], cwd=tmp_path, capture_output=True,
                       timeout=60)
    assert r.returncode == 0, r.stdout[-2000:]


def test_loose_points_left_out_of_fits():
    """A point whose verified gap is wide (a loose lower bound) is not fitted; tight points are."""
    import math as _m

    from advbound.studies.report_series import FIT_MAX_GAP, Series, _fit_points
    T = (4.0, 8.0, 16.0, 32.0)
    lower = tuple(_m.sqrt(t) for t in T)
    upper = (lower[0], lower[1] * (1 + FIT_MAX_GAP / 10), lower[2] * 1.2, None)   # third is loose
    s = Series("general", None, T, lower, upper, (1, 2, 3, 4), ("a", "b", "c", "d"))
    kept = _fit_points(s, FIT_MAX_GAP)
    assert kept.T == (4.0, 8.0, 32.0) and kept.rows == ("a", "b", "d")


# -- read-only stores, hand-edited rows, invalid points -----------------------------------------------
SHIPPED = os.path.join(os.path.dirname(__file__), "..", "reports", "scaling_rows2", "results.sqlite")


def test_shipped_store_fit_and_report_read_only(tmp_path, monkeypatch, capsys):
    """`advbound fit` and `advbound report` on a copy of a shipped store in a read-only folder open it only
    with mode=ro and leave the folder byte-for-byte unchanged (no -wal/-shm/-journal, same mtime)."""
    import stat

    import advbound.studies.store_file as store_mod
    from advbound.cli import main
    if not os.path.exists(SHIPPED):
        pytest.skip("reports/scaling_rows2/results.sqlite is not in this checkout")
    ro = tmp_path / "ro"
    ro.mkdir()
    shutil.copy2(SHIPPED, ro / "results.sqlite")
    os.chmod(ro / "results.sqlite", stat.S_IRUSR | stat.S_IRGRP | stat.S_IROTH)
    os.chmod(ro, stat.S_IRUSR | stat.S_IXUSR | stat.S_IRGRP | stat.S_IXGRP)
    before = {n: ((ro / n).read_bytes(), os.stat(ro / n).st_mtime_ns) for n in os.listdir(ro)}
    opened = []
    real = store_mod._connect
    monkeypatch.setattr(store_mod, "_connect", lambda target, uri=False: opened.append(target) or real(target, uri))
    try:
        assert main(["fit", str(ro / "results.sqlite"), "--json", "--bootstrap", "0"]) == 0
        fits = json.loads(capsys.readouterr().out)
        assert main(["report", str(ro / "results.sqlite"), "--out", str(tmp_path / "rep"), "--bootstrap", "0"]) == 0
        after = {n: ((ro / n).read_bytes(), os.stat(ro / n).st_mtime_ns) for n in os.listdir(ro)}
    finally:
        os.chmod(ro, stat.S_IRWXU)
    assert opened and all(t.startswith("file:") and "mode=ro" in t for t in opened)
    assert after == before and sorted(after) == ["results.sqlite"]
    assert "general" in fits
    assert (tmp_path / "rep" / "summary.md").exists()
    prov = json.loads((tmp_path / "rep" / "provenance.json").read_text())
    assert not os.path.isabs(prov["store"])


def _hand_edit(path, sql):
    import sqlite3
    con = sqlite3.connect(path)
    con.execute(sql)
    con.commit()
    con.close()


def test_report_lists_invalid_defective_and_certificate_rows(tmp_path, caplog):
    """An invalid point appears in its own short list with its message; a hand-edited row is listed as left
    out and is not fitted (5 points remain in its series); missing certificates are listed, numbers kept."""
    p = tmp_path / "s.sqlite"
    _fill(p)
    with Store(p) as st:
        st.put(make_row("inv", kind="adversary", spec_key="z", spec={}, params={"rows": 2, "T": 3},
                        bound="general", status="invalid", study="syn", solver=META["settings"],
                        message='s.toml [grid point rows=2, T=3]: the budget allows no time profile'))
    key = run_key("adversary", "3-5", "general", META["settings"], "0")
    _hand_edit(p, f"UPDATE results SET upper='1e-3 or so' WHERE run_key='{key}'")
    with caplog.at_level("WARNING", logger="advbound"):
        files = write_report(p, out=tmp_path / "rep", bootstrap=0)
    summary = open(files.summary).read()
    inv = summary.split("Invalid points")[1].split("\n\n")[1]
    assert inv == ('* `{"T": 3, "rows": 2}` (general): '
                   's.toml [grid point rows=2, T=3]: the budget allows no time profile')
    left = summary.split("Stored rows left out")[1].split("\n\n")[1]
    assert f"(run_key {key[:12]}): column upper: '1e-3 or so' is not a number" in left
    assert "Rows whose certificate cannot be found" in summary and "'c/2-4.npz' is missing" in summary
    assert "13 stored points: 11 with verified bounds, 1 failed or unverified, 1 with invalid input" in summary
    fits = json.loads(open(tmp_path / "rep" / "fits.json").read())
    sq = next(f for f in fits["general, rows=3"]["fits"] if f["model"] == "sqrt")
    assert sq["T"] == [4.0, 6.0, 7.0, 8.0, 9.0]
    assert any("column upper" in r.getMessage() for r in caplog.records)


@pytest.mark.parametrize("key, value, words", [
    ("bootstrap", "many", "bootstrap = 'many' must be an integer >= 0"),
    ("laws", "sqrt", "laws = 'sqrt' must be a list of law names"),
    ("grid", [1, 2], "grid = [1, 2] must be a table"),
])
def test_bad_study_settings_are_one_line(tmp_path, key, value, words):
    """A hand-edited study setting of the wrong type is a one-line StoreError naming the store and key."""
    from advbound.studies.store import StoreError
    p = tmp_path / "s.sqlite"
    _fill(p)
    with Store(p) as st:
        st.set_meta("study", dict(META, **{key: value}))
    with pytest.raises(StoreError, match=re.escape(f"{p}: meta key 'study': {words}")):
        write_report(p, out=tmp_path / "rep")


def test_report_out_that_is_a_file(tmp_path):
    """An output path that is an existing file is one AdvboundError naming it, before anything is drawn."""
    p = tmp_path / "s.sqlite"
    _fill(p)
    (tmp_path / "taken").write_text("x")
    with pytest.raises(AdvboundError, match="taken: cannot create the report folder"):
        write_report(p, out=tmp_path / "taken")
