"""A conjectured Γ in a study (``[study.conjecture]``): its points, rows, resumption, errors and report.

Covers advbound.studies.study_spec (the table and the planning of conjecture points),
advbound.studies.study_point (the worker and the row), advbound.studies.study (running, fit = "once")
and the report (bound_vs_T, conjecture_ratio, summary.md, data files, the LaTeX results table).

Outside values used: the same-profile star of examples/gamma_star.py at cross = 0 proves exactly √n for
OR of n position-search rows at any T (derived in tests/test_gamma_params.py, test_position_search_same_profile_star),
and the verified ADV± lower bounds of OR of 2 and 3 position-search rows under Σ k_i = T, from the table
in docs/studies.md (measured with the shipped default study).
"""

import csv
import json
import math
import os
import shutil
import textwrap

import pytest

from advbound.errors import InvalidInstanceError
from advbound.studies.report import write_report
from advbound.studies.store import Store
from advbound.studies.study import load_study, plan, run_study, solve_point

ROOT = os.path.join(os.path.dirname(__file__), "..")
EXAMPLE = os.path.join(ROOT, "examples", "gamma_star.py")

#: Verified ADV± lower bounds (docs/studies.md, table of the default study): {rows: {T: value}}.
ADV = {2: {4: 1.849335, 5: 2.045646, 6: 2.231356}, 3: {4: 2.027212, 5: 2.314397, 6: 2.588881}}


def _study_file(tmp_path, conjecture: str, rows="[2, 3]", T="{ from = 4, to = 6 }"):
    shutil.copy(EXAMPLE, tmp_path / "gamma_star.py")
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent(f"""
        [instance]
        name = "orn"
        outer = "or"
        rows = "rows"
        inner = "position_search"
        row_length = "T - rows + 1"
        time = "sqrt"
        budget = {{ sum_squares = "T" }}

        [grid]
        rows = {rows}
        T = {T}

        [study]
        bounds = ["general"]
        method = "auto"
        series = "rows"
        laws = ["sqrt", "sqrt_log"]
        offsets = false
        bootstrap = 10

        [study.conjecture]
        """) + textwrap.dedent(conjecture))
    return p


def _load(tmp_path, p):
    return load_study(p, store=str(tmp_path / "s.sqlite"), report=str(tmp_path / "rep"))


def _conj_rows(store):
    with Store(store, readonly=True) as st:
        return st.rows(kind="conjecture")


def test_end_to_end_star_at_cross_zero(tmp_path):
    """cross = 0: the stored conjecture is √n at every T (derived), its ratio to the optimum is √n / ADV±
    (ADV± from docs/studies.md), and the report has the series, the ratio figure and the summary section."""
    p = _study_file(tmp_path, 'callable = "gamma_star.py:gamma"\nparams = { cross = 0.0 }\n')
    study = _load(tmp_path, p)
    run = run_study(study, jobs=2)
    assert (run.planned, run.solved, run.failed, run.too_large) == (12, 12, 0, 0)
    rows = _conj_rows(study.store)
    assert len(rows) == 6
    for r in rows:
        n = r.params["rows"]
        assert r.status == "optimal" and r.bound == "general"
        assert abs(r.lower - math.sqrt(n)) < 1e-12
        assert r.values["params"] == {"cross": 0.0} and r.values["fitted"] is False
        assert r.values["callable"] == "gamma_star.py:gamma" and r.time_solve is not None
        assert r.solver["fit"] == "none" and len(r.solver["sha256"]) == 64
    files = write_report(study.store, out=study.report)
    names = {os.path.basename(f) for f in files.figures}
    assert {"conjecture_ratio.png", "conjecture_ratio.pdf", "bound_vs_T.png"} <= names
    text = open(files.summary).read()
    assert "## Conjectured Γ: gamma_star, cross = 0" in text
    assert "verified lower bound" in text
    for n in (2, 3):
        first, last = math.sqrt(n) / ADV[n][4], math.sqrt(n) / ADV[n][6]
        assert f"rows={n}: over T = 4..6 the ratio falls from {first:.4f} to {last:.4f}" in text
    with open(tmp_path / "rep" / "data.csv") as fh:
        data = [r for r in csv.DictReader(fh) if r["kind"] == "conjecture"]
    assert len(data) == 6 and all(json.loads(r["gamma_params"]) == {"cross": 0.0} for r in data)
    tex = open(tmp_path / "rep" / "table_results.tex").read()
    assert tex.count("conjecture &") == 6
    assert f"{math.sqrt(3) / ADV[3][5]:.4f}" in tex
    fits = json.load(open(tmp_path / "rep" / "fits.json"))
    assert "conjecture (gamma_star, cross = 0), rows=2" in fits


def test_fit_once_reuses_the_constants_of_the_smallest_T(tmp_path):
    """fit = "once": the fit runs at T = 4 of each series, the larger T reuse its constants; the fit
    starts at cross = 0 (√n, derived) and keeps the best point, so its bound is at least √n."""
    p = _study_file(tmp_path, 'callable = "gamma_star.py:gamma"\nparams = { cross = 0.0 }\nfit = "once"\n'
                              'max_evals = 40\nstarts = 1\n', rows="[3]")
    study = _load(tmp_path, p)
    pts = [q for q in plan(study) if q.kind == "conjecture"]
    assert [q.params["T"] for q in pts] == [4, 5, 6]
    assert pts[0].depends is None and pts[1].depends == pts[0].run_key == pts[2].depends
    run_study(study)
    rows = {r.params["T"]: r for r in _conj_rows(study.store)}
    assert rows[4].values["fit"]["evaluations"] <= 40 and rows[4].lower >= math.sqrt(3) - 1e-12
    for T in (5, 6):
        assert rows[T].values["fit"] is None and rows[T].values["fitted"] is True
        assert rows[T].values["params"] == rows[4].values["params"]
        assert rows[T].values["fitted_at"] == {"rows": 3, "T": 4}
    # --set T=6 alone still plans the anchor at T = 4 (after the chosen point)
    chosen = [q for q in plan(study, choices={"T": [6]}) if q.kind == "conjecture"]
    assert [q.params["T"] for q in chosen] == [6, 4]


class _Interrupt:
    """Runs solve_point, then raises KeyboardInterrupt before the ``stop``-th point."""

    def __init__(self, stop):
        self.stop, self.calls = stop, 0

    def __call__(self, task):
        self.calls += 1
        if self.calls == self.stop:
            raise KeyboardInterrupt
        return solve_point(task)


def test_interrupted_study_keeps_conjecture_rows_and_resumes(tmp_path):
    p = _study_file(tmp_path, 'callable = "gamma_star.py:gamma"\nparams = { cross = 0.0 }\n', rows="[2]")
    study = _load(tmp_path, p)
    with pytest.raises(KeyboardInterrupt):
        run_study(study, runner=_Interrupt(5))
    kept = {r.run_key: r.created for r in _conj_rows(study.store)}
    assert len(kept) == 2                       # points: T=4 general, conjecture, T=5 general, conjecture, ...
    rerun = run_study(study)
    assert (rerun.skipped, rerun.solved) == (4, 2)
    after = {r.run_key: r.created for r in _conj_rows(study.store)}
    assert len(after) == 3 and all(after[k] == c for k, c in kept.items())
    assert run_study(study).skipped == 6


def test_failing_callable_is_a_failed_row_with_one_line(tmp_path):
    """A callable that raises at T = 5 (inputs of length 2·(T − 1) = 8) gives a failed row with the
    one-line message; the other points are computed."""
    p = _study_file(tmp_path, 'callable = "bad.py:gamma"\n', rows="[2]")
    (tmp_path / "bad.py").write_text("def gamma(x, y):\n    if len(x) == 8:\n        raise ValueError('no T=5')\n"
                                     "    return float(('1' in x) != ('1' in y))\n")
    study = _load(tmp_path, p)
    run = run_study(study)
    assert run.failed == 1
    bad = [r for r in _conj_rows(study.store) if r.failed]
    assert [r.params["T"] for r in bad] == [5]
    assert "raised ValueError: no T=5" in bad[0].message and "\n" not in bad[0].message
    assert "Traceback" not in (bad[0].error or "")
    text = open(write_report(study.store, out=study.report).summary).read()
    assert "Conjecture points without a value" in text and "no T=5" in text


def test_function_above_the_dense_limit_is_evaluated_by_orbits_or_skipped(tmp_path, monkeypatch):
    """With the dense limit lowered to 15 inputs, T = 5 and 6 (16 and 20 inputs: 4·(T − 1), docs/studies.md)
    are evaluated by orbits (interchangeable rows, constants given): √2 as at T = 4 (the same-profile star
    gives √n at any T, tests/test_gamma_params.py).  A conjecture fitted at every point cannot be fitted
    there: stored as skipped, counted neither as solved nor as failed, and not recomputed."""
    import advbound.evidence.gammainput as gi
    monkeypatch.setattr(gi, "DENSE_LIMIT", 15)
    p = _study_file(tmp_path, 'callable = "gamma_star.py:gamma"\n', rows="[2]")
    study = _load(tmp_path, p)
    run = run_study(study)
    assert (run.solved, run.failed, run.too_large) == (6, 0, 0) and run.ok
    rows = {r.params["T"]: r for r in _conj_rows(study.store)}
    for T in (4, 5, 6):
        assert rows[T].success and abs(rows[T].lower - math.sqrt(2)) < 1e-12
    (tmp_path / "each").mkdir()
    p = _study_file(tmp_path / "each", 'callable = "gamma_star.py:gamma"\nparams = { cross = 0.1 }\nfit = "each"\n',
                    rows="[2]")
    study = _load(tmp_path / "each", p)
    run = run_study(study)
    assert (run.solved, run.failed, run.too_large) == (4, 0, 2) and run.ok
    rows = {r.params["T"]: r for r in _conj_rows(study.store)}
    for T, size in ((5, 16), (6, 20)):
        assert rows[T].status == "skipped" and rows[T].message.startswith("skipped: too large")
        assert "fitting needs the dense path" in rows[T].message
        assert rows[T].domain_size == size and not rows[T].failed
    assert run_study(study, retry_failed=True).skipped == 6


def test_editing_the_callable_gives_new_conjecture_points(tmp_path):
    p = _study_file(tmp_path, 'callable = "gamma_star.py:gamma"\n', rows="[2]")
    before = {(q.kind, q.params["T"]): q.run_key for q in plan(_load(tmp_path, p))}
    with open(tmp_path / "gamma_star.py", "a") as fh:
        fh.write("\n# edited\n")
    after = {(q.kind, q.params["T"]): q.run_key for q in plan(_load(tmp_path, p))}
    assert all((before[k] == after[k]) == (k[0] != "conjecture") for k in before)


@pytest.mark.parametrize("table,where", [
    ('callable = "gamma_star.py:gamma"\ncolour = 1\n', "conjecture: unknown key 'colour'"),
    ('params = { cross = 0.0 }\n', "conjecture.callable must be a string"),
    ('callable = 3\n', "conjecture.callable must be a string"),
    ('callable = "gamma_star.py"\n', "conjecture.callable = 'gamma_star.py': expected MODULE:FUNCTION"),
    ('callable = "missing.py:gamma"\n', "conjecture.callable = 'missing.py:gamma': no such file"),
    ('callable = "gamma_star.py:nope"\n', "conjecture.callable = 'gamma_star.py:nope': .*has no function 'nope'"),
    ('callable = "gamma_star.py:gamma"\nparams = 3\n', "conjecture.params = 3 must be a table"),
    ('callable = "gamma_star.py:gamma"\nparams = { depth = 1 }\n', "conjecture.params: .*does not accept a "
                                                                    "parameter 'depth'"),
    ('callable = "gamma_star.py:gamma"\nparams = { cross = "a" }\n', "conjecture.params: parameter cross"),
    ('callable = "gamma_star.py:gamma"\nfit = "sometimes"\n', "conjecture.fit = 'sometimes'"),
    ('callable = "gamma_star.py:gamma"\nfit = "each"\n', "conjecture.fit = 'each' needs at least one constant"),
    ('callable = "gamma_star.py:gamma"\nparams = { cross = 0.0 }\nstarts = 0\n', "conjecture.starts = 0"),
    ('callable = "gamma_star.py:gamma"\nfit_method = "bfgs"\n', "conjecture.fit_method = 'bfgs'"),
    ('callable = "gamma_star.py:gamma"\nlabel = ""\n', "conjecture.label"),
])
def test_bad_conjecture_keys_refused(tmp_path, table, where):
    p = _study_file(tmp_path, table)
    with pytest.raises(InvalidInstanceError, match=rf"s\.toml: \[study\] {where}") as err:
        _load(tmp_path, p)
    assert "\n" not in str(err.value)


def test_conjecture_must_be_a_table(tmp_path):
    p = _study_file(tmp_path, "")
    p.write_text(p.read_text().replace("[study.conjecture]\n", "conjecture = 3\n"))
    with pytest.raises(InvalidInstanceError, match=r"s\.toml: \[study\] conjecture = 3 must be a table"):
        _load(tmp_path, p)
