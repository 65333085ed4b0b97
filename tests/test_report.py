"""Tests for advbound.report: series from the store, well-formed report files (figures, LaTeX, CSV, JSON)."""

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
from advbound.report import collect_series, fit_series, latex_fit_table, latex_results_table, write_report
from advbound.store import Store, make_row, run_key

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
    spec = re.search(r"\\begin\{tabular\}\{([lcr]+)\}", text).group(1)
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
    from advbound.report import Series
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
