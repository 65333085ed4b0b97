"""Tests for advbound.studies.study: planning, resumable execution, failures, durability under SIGKILL, pools, dask."""

import hashlib
import itertools
import json
import math
import os
import signal
import subprocess
import sys
import textwrap
import time
from types import SimpleNamespace

import numpy as np
import pytest

from advbound.evidence.certificate import Certificate, load_certificate
from advbound.errors import AdvboundError, InvalidInstanceError
from advbound.studies.store import Store
from advbound.studies.study import Progress, StudySpec, load_study, plan, run_study, solve_point, solver_settings


def fake_api(grid):
    """A stand-in for advbound.functions.instance over a plain cartesian grid (keys in the order given)."""
    keys = list(grid)

    def grid_points(spec):
        return [dict(zip(keys, v)) for v in itertools.product(*(grid[k] for k in keys))]

    def resolved(spec, params):
        return {"family": "synthetic", "params": dict(params)}

    def spec_key(spec, params):
        return hashlib.sha256(json.dumps(resolved(spec, params), sort_keys=True).encode()).hexdigest()

    return SimpleNamespace(grid_points=grid_points, resolved=resolved, spec_key=spec_key)


def fake_runner(task):
    """Pretend solve: ADV±(OR_T) = sqrt(T) (common knowledge), with a 2x2 certificate."""
    T = task["params"]["T"]
    cert = Certificate(("0", "1"), ("0", "1"), ("0", "1"), np.ones(1), np.array([[0.0, 1.0], [1.0, 0.0]]))
    res = {"status": "optimal", "message": "ok", "lower": math.sqrt(T), "upper": math.sqrt(T) + 1e-9,
           "objective": math.sqrt(T), "domain_size": 2 * T, "relative_gap": 1e-9, "success": True,
           "solver": {"name": "fake", "time": 0.01}}
    return {"ok": True, "result": res, "certificate": cert, "time_total": 0.01, "versions": {"advbound": "x"}}


def failing_runner(task):
    """Fails at T = 5 unless the environment variable ADVBOUND_TEST_HEAL is set."""
    if task["params"]["T"] == 5 and not os.environ.get("ADVBOUND_TEST_HEAL"):
        return {"ok": False, "error": "ValueError: synthetic failure at T=5", "time_total": 0.0, "versions": {}}
    return fake_runner(task)


def _study(tmp_path, **kw):
    return StudySpec(name="syn", instance=None, store=str(tmp_path / "syn.sqlite"), **kw)


def test_plan_order_and_keys(tmp_path):
    """Points come grid-major, bounds inner; run keys are distinct per bound and per settings."""
    api = fake_api({"rows": [2], "T": [4, 5]})
    st = _study(tmp_path, bounds=("general", "positive"))
    pts = plan(st, api)
    assert [(p.params["T"], p.bound) for p in pts] == [(4, "general"), (4, "positive"), (5, "general"),
                                                     (5, "positive")]
    assert len({p.run_key for p in pts}) == 4
    other = plan(StudySpec(name="syn", instance=None, tol=1e-5, bounds=("general", "positive")), api)
    assert not {p.run_key for p in pts} & {p.run_key for p in other}


def test_run_then_rerun_skips(tmp_path):
    """A second run computes nothing; each point has one row with a loadable certificate."""
    api = fake_api({"T": [4, 5, 6]})
    st = _study(tmp_path)
    first = run_study(st, runner=fake_runner, api=api)
    assert (first.planned, first.solved, first.skipped, first.failed) == (3, 3, 0, 0)
    again = run_study(st, runner=fake_runner, api=api)
    assert (again.solved, again.skipped) == (0, 3)
    with Store(st.store) as s:
        rows = s.rows()
        assert len(rows) == 3
        assert sorted(r.lower for r in rows) == pytest.approx([2.0, math.sqrt(5), math.sqrt(6)])
        for r in rows:
            assert not os.path.isabs(r.certificate)  # recorded relative to the store's folder
            assert load_certificate(s.certificate_path(r)).gamma.shape == (2, 2)
            assert r.solver == solver_settings(st)
        assert s.get_meta("study")["name"] == "syn"
    assert not [f for f in os.listdir(st.certificates) if f.endswith(".tmp")]


def test_stale_temporary_removed(tmp_path):
    """A certificate temp file of a dead writer (pid that does not exist) is removed by the next run."""
    st = _study(tmp_path)
    os.makedirs(st.certificates)
    stale = os.path.join(st.certificates, ".0123456789ab.999999999.tmp")
    open(stale, "wb").write(b"half a certificate")
    run_study(st, runner=fake_runner, api=fake_api({"T": [4]}))
    assert not os.path.exists(stale)


def test_failure_recorded_and_retried_only_on_request(tmp_path, monkeypatch):
    """A failing point is stored with its error, skipped on rerun, recomputed with retry_failed."""
    api = fake_api({"T": [4, 5, 6]})
    st = _study(tmp_path)
    r1 = run_study(st, runner=failing_runner, api=api)
    assert (r1.solved, r1.failed) == (2, 1)
    with Store(st.store) as s:
        bad = [r for r in s.rows() if r.failed]
        assert len(bad) == 1 and "synthetic failure" in bad[0].error and bad[0].status == "failed"
    monkeypatch.setenv("ADVBOUND_TEST_HEAL", "1")
    r2 = run_study(st, runner=failing_runner, api=api)
    assert (r2.solved, r2.failed, r2.skipped) == (0, 0, 3)
    r3 = run_study(st, runner=failing_runner, api=api, retry_failed=True)
    assert (r3.solved, r3.failed, r3.skipped) == (1, 0, 2)
    with Store(st.store) as s:
        assert s.count() == 3 and not s.failed_keys()


class _Recorder(Progress):
    def __init__(self):
        self.events = []

    def start(self, total, skipped):
        self.events.append(("start", total, skipped))

    def begin(self, point):
        self.events.append(("begin", point.label))

    def done(self, point, row):
        self.events.append(("done", point.label, row.status))


def test_progress_callbacks(tmp_path):
    """The progress object gets start once, then begin and done per point, naming the point."""
    rec = _Recorder()
    run_study(_study(tmp_path), runner=fake_runner, api=fake_api({"T": [4, 5]}), progress=rec)
    assert rec.events == [("start", 2, 0), ("begin", "T=4 general"), ("done", "T=4 general", "optimal"),
                          ("begin", "T=5 general"), ("done", "T=5 general", "optimal")]


def test_process_pool(tmp_path):
    """jobs=2 gives the same rows as the in-process run."""
    api = fake_api({"T": [4, 5, 6, 7]})
    st = _study(tmp_path)
    run = run_study(st, runner=fake_runner, api=api, jobs=2)
    assert run.solved == 4
    with Store(st.store) as s:
        assert sorted(r.params["T"] for r in s.rows()) == [4, 5, 6, 7]


def test_dask_local_cluster(tmp_path):
    """The scheduler path runs the points on a dask LocalCluster (one in-process worker)."""
    distributed = pytest.importorskip("dask.distributed")
    api = fake_api({"T": [4, 9]})
    st = _study(tmp_path)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        run = run_study(st, runner=fake_runner, api=api, scheduler=cluster.scheduler_address)
    assert run.solved == 2
    with Store(st.store) as s:
        assert sorted(r.lower for r in s.rows()) == pytest.approx([2.0, 3.0])


_KILL_SCRIPT = textwrap.dedent("""
    import sys, time
    sys.path.insert(0, {tests!r})
    import test_study as t
    from advbound.studies.study import StudySpec, run_study

    def slow(task):
        time.sleep(0.15)
        return t.fake_runner(task)

    st = StudySpec(name="syn", instance=None, store={store!r})
    run_study(st, runner=slow, api=t.fake_api({{"T": list(range(2, 42))}}))
""")


def test_sigkill_mid_run_then_resume(tmp_path):
    """SIGKILL during a run leaves only complete rows; a rerun finishes with no duplicates and no loss."""
    store = str(tmp_path / "syn.sqlite")
    script = tmp_path / "run.py"
    script.write_text(_KILL_SCRIPT.format(tests=os.path.dirname(__file__), store=store))
    proc = subprocess.Popen([sys.executable, str(script)], env=dict(os.environ, OMP_NUM_THREADS="1"))
    try:
        deadline = time.time() + 30
        n = 0
        while time.time() < deadline and n < 5:
            time.sleep(0.1)
            if os.path.exists(store):
                try:
                    with Store(store, readonly=True) as s:
                        n = s.count()
                except Exception:
                    n = 0
        assert proc.poll() is None, "the run ended before it could be killed"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    with Store(store) as s:
        killed = s.rows()
        paths = [s.certificate_path(r) for r in killed]
    assert 5 <= len(killed) < 40
    for r, path in zip(killed, paths):  # every stored row is complete
        assert r.status == "optimal" and r.lower == pytest.approx(math.sqrt(r.params["T"]))
        assert load_certificate(path).gamma.shape == (2, 2)
    st = StudySpec(name="syn", instance=None, store=store)
    rerun = run_study(st, runner=fake_runner, api=fake_api({"T": list(range(2, 42))}))
    assert rerun.skipped == len(killed) and rerun.solved == 40 - len(killed)
    with Store(store) as s:
        rows = s.rows()
    assert sorted(r.params["T"] for r in rows) == list(range(2, 42))
    assert {r.run_key for r in killed} <= {r.run_key for r in rows}


def _write(tmp_path, study_table):
    p = tmp_path / "s.toml"
    p.write_text(textwrap.dedent("""
        [instance]
        name = "or2"
        outer = "or"
        rows = 2
        inner = "position_search"
        row_length = "T - 1"
        time = "sqrt"
        budget = { sum_squares = "T" }

        [grid]
        T = { from = 3, to = 5 }

        [study]
        """) + study_table)
    return p


def test_load_study_keys(tmp_path):
    """The [study] keys are read; store, certificates and report default from the name."""
    p = _write(tmp_path, 'name = "demo"\nbounds = ["general", "positive"]\ntol = 1e-6\noffsets = false\n')
    st = load_study(p)
    assert (st.name, st.bounds, st.tol, st.offsets) == ("demo", ("general", "positive"), 1e-6, (False,))
    assert (st.store, st.certificates, st.report) == ("studies/demo.sqlite", "studies/demo-certificates",
                                                     "reports/demo")
    st2 = load_study(p, store=str(tmp_path / "x.sqlite"))
    assert st2.certificates == str(tmp_path / "x-certificates")
    assert len(plan(st)) == 6


@pytest.mark.parametrize("table, where", [
    ('colour = "red"\n', "colour"),
    ('bounds = ["upper"]\n', "bounds"),
    ('tol = -1\n', "tol"),
    ('growth = "N"\n', "growth"),
    ('laws = ["cubic"]\n', "laws"),
])
def test_load_study_rejects(tmp_path, table, where):
    """A bad [study] entry raises InvalidInstanceError naming the file and the key."""
    p = _write(tmp_path, table)
    with pytest.raises(InvalidInstanceError, match=rf"s\.toml: \[study\].*{where}"):
        load_study(p)


def fake_exact_runner(task):
    """Pretend exact solve: search among N = 4 items, t queries succeed with sin^2((2t+1)·arcsin(1/2))
    ("Grover's quantum searching algorithm is optimal", 1997, arXiv:quant-ph/9711070): 1/4, 1, ...;
    adversary tasks go to fake_runner."""
    if task.get("kind") != "exact":
        return fake_runner(task)
    s = task["settings"]
    if s.get("queries") == 2 and not os.environ.get("ADVBOUND_TEST_HEAL"):
        return {"ok": False, "error": "SolverError: synthetic exact failure", "time_total": 0.0, "versions": {}}
    t = s.get("queries", 1)
    p = min(1.0, math.sin((2 * t + 1) * math.asin(0.5)) ** 2)
    d = {"kind": "exact", "status": "optimal", "message": "ok", "queries": t, "success_probability": p,
         "upper_bound": p + 1e-9, "objective": p, "domain_size": 4, "target_error": s.get("error"),
         "reached": None if s.get("error") is None else True, "solver": {"name": "fake", "time": 0.01}}
    return {"ok": True, "exact": d, "time_total": 0.01, "versions": {"advbound": "x"}}


_EXACT = {"queries": (1, 2), "error": 0.1, "max_queries": 3, "solver": "CLARABEL", "tol": 1e-8,
          "decision_tol": 1e-4, "symmetry": True}


def test_plan_with_exact_points(tmp_path):
    """Each grid point gets its bounds, then one exact point per t and one per ε, all with distinct keys."""
    st = _study(tmp_path, exact=_EXACT)
    pts = plan(st, fake_api({"T": [4, 5]}))
    assert [p.label for p in pts[:4]] == ["T=4 general", "T=4 exact t=1", "T=4 exact t=2", "T=4 exact eps=0.1"]
    assert [p.kind for p in pts] == ["adversary", "exact", "exact", "exact"] * 2
    assert len({p.run_key for p in pts}) == 8
    assert pts[3].request == {"error": 0.1, "max_queries": 3, "decision_tol": 1e-4, "solver": "CLARABEL",
                              "tol": 1e-8, "symmetry": True}
    other = plan(_study(tmp_path, exact=dict(_EXACT, tol=1e-6)), fake_api({"T": [4, 5]}))
    assert {p.run_key for p in pts if p.kind == "adversary"} == {p.run_key for p in other if p.kind == "adversary"}
    assert not {p.run_key for p in pts if p.kind == "exact"} & {p.run_key for p in other}


def test_exact_rows_stored_failed_and_retried(tmp_path, monkeypatch):
    """Exact rows have kind "exact", lower/upper = verified success / upper bound, the result dict in
    values; a failing exact point is stored, skipped on rerun and recomputed only with retry_failed."""
    st = _study(tmp_path, exact=_EXACT)
    api = fake_api({"T": [4]})
    r1 = run_study(st, runner=fake_exact_runner, api=api)
    assert (r1.planned, r1.solved, r1.failed) == (4, 3, 1)
    with Store(st.store) as s:
        ex = {(r.solver.get("queries"), r.solver.get("error")): r for r in s.rows(kind="exact")}
        assert s.rows(kind="adversary")[0].bound == "general"
    one = ex[(1, None)]
    assert one.bound is None and one.status == "optimal" and one.values["kind"] == "exact"
    assert one.lower == pytest.approx(1.0) and one.upper == pytest.approx(1.0 + 1e-9)  # Grover, N = 4, t = 1
    assert one.lower == one.values["success_probability"] and one.upper == one.values["upper_bound"]
    assert ex[(None, 0.1)].values["target_error"] == 0.1
    assert ex[(2, None)].failed and "synthetic exact failure" in ex[(2, None)].error
    monkeypatch.setenv("ADVBOUND_TEST_HEAL", "1")
    assert (run_study(st, runner=fake_exact_runner, api=api).solved) == 0
    r3 = run_study(st, runner=fake_exact_runner, api=api, retry_failed=True)
    assert (r3.solved, r3.failed, r3.skipped) == (1, 0, 3)
    with Store(st.store) as s:
        two = [r for r in s.rows(kind="exact") if r.solver.get("queries") == 2][0]
        n = s.count()
    # t = 2 for N = 4: sin^2(5·π/6) = 1/4 (same source as fake_exact_runner)
    assert n == 4 and two.success and two.lower == pytest.approx(0.25)


def test_load_study_exact(tmp_path):
    """[study] exact is normalised (defaults filled) and yields 3 exact points per grid point."""
    p = _write(tmp_path, 'exact = { queries = [1, 2], error = 0.1, max_queries = 4 }\n')
    st = load_study(p)
    assert st.exact == dict(_EXACT, max_queries=4)
    assert len(plan(st)) == 3 * 4
    assert load_study(_write(tmp_path, 'exact = { queries = 2, solver = "SCS" }\n')).exact["queries"] == (2,)


@pytest.mark.parametrize("table, where", [
    ('exact = 3\n', "must be a table"),
    ('exact = { colour = 1 }\n', "colour"),
    ('exact = { queries = [-1] }\n', "queries"),
    ('exact = { queries = [1], max_queries = 3 }\n', "max_queries"),
    ('exact = { error = 1.5 }\n', "error"),
    ('exact = { solver = "SCS" }\n', "queries"),
])
def test_load_study_rejects_exact(tmp_path, table, where):
    """A bad [study] exact entry raises InvalidInstanceError naming the file and the key."""
    p = _write(tmp_path, table)
    with pytest.raises(InvalidInstanceError, match=rf"s\.toml: \[study\] exact.*{where}"):
        load_study(p)


# -- invalid points, defective rows, certificate paths ----------------------------------------------
def invalid_api(grid, bad):
    """fake_api whose instance cannot be resolved at T in ``bad``, as advbound.functions.instance refuses a row
    length below 1 (the message names the grid point)."""
    api = fake_api(grid)
    base_key, base_resolved = api.spec_key, api.resolved

    def check(params):
        if params["T"] in bad:
            raise InvalidInstanceError(f"s.toml [grid point T={params['T']}]: [instance] row_length = \"T - 3\" "
                                       f"evaluates to {params['T'] - 3}, must be >= 1")

    def spec_key(spec, params):
        check(params)
        return base_key(spec, params)

    def resolved(spec, params):
        check(params)
        return base_resolved(spec, params)

    return SimpleNamespace(grid_points=api.grid_points, resolved=resolved, spec_key=spec_key)


class _Counting:
    """A runner that records the T of every point it is asked to compute (in this process)."""

    def __init__(self, inner=None):
        self.calls = []
        self.inner = inner or fake_runner

    def __call__(self, task):
        self.calls.append(task["params"]["T"])
        return self.inner(task)


def test_unresolvable_grid_point_stored_invalid_never_computed(tmp_path):
    """A grid point whose instance cannot be resolved is stored with status "invalid" and its one-line
    message, never handed to the solver, not retried by retry_failed; once the instance is fixed the
    point gets a new key and is computed, and the old invalid row is removed (and would count as
    replaced in a report)."""
    from advbound.studies.report import invalid_points
    st = _study(tmp_path)
    runner = _Counting()
    pts = plan(st, invalid_api({"T": [3, 4, 5]}, {3}))
    assert [p.invalid is not None for p in pts] == [True, False, False]
    r1 = run_study(st, runner=runner, api=invalid_api({"T": [3, 4, 5]}, {3}))
    assert runner.calls == [4, 5] and (r1.solved, r1.failed, r1.invalid) == (2, 0, 1) and not r1.ok
    with Store(st.store) as s:
        (bad,) = [r for r in s.rows() if r.invalid]
        assert s.invalid_keys() == {bad.run_key} and not s.failed_keys()
    assert bad.status == "invalid" and bad.error is None and bad.params == {"T": 3}
    assert bad.message == 's.toml [grid point T=3]: [instance] row_length = "T - 3" evaluates to 0, must be >= 1'
    r2 = run_study(st, runner=runner, api=invalid_api({"T": [3, 4, 5]}, {3}), retry_failed=True)
    assert runner.calls == [4, 5] and (r2.solved, r2.invalid, r2.skipped) == (0, 1, 2)
    r3 = run_study(st, runner=runner, api=invalid_api({"T": [3, 4, 5]}, set()))   # the instance was fixed
    assert runner.calls == [4, 5, 3] and (r3.solved, r3.invalid) == (1, 0)
    with Store(st.store) as s:
        rows = s.rows()
    assert sorted(r.params["T"] for r in rows) == [3, 4, 5] and all(r.success for r in rows)
    assert bad.run_key not in {r.run_key for r in rows}  # the input it described no longer exists
    assert invalid_points([bad, *rows]) == []                      # a later row replaces it
    assert invalid_points([*rows, bad]) == [({"T": 3}, bad.message, ["general"])]


def invalid_runner(task):
    """At T = 5 the instance cannot be built (as solve_point reports an AdvboundError of build_instance)."""
    if task["params"]["T"] == 5:
        return {"ok": False, "invalid": True, "error": "s.toml [grid point T=5]: the budget (sum t_i^2 = 1.5) "
                "allows no time profile", "time_total": 0.0, "versions": {}}
    return fake_runner(task)


def test_build_failure_stored_invalid_and_not_retried(tmp_path):
    """A point whose instance cannot be built is stored as invalid with the message (not as a solver
    failure), and retry_failed does not recompute it: only a changed instance does."""
    st = _study(tmp_path)
    runner = _Counting(invalid_runner)
    r1 = run_study(st, runner=runner, api=fake_api({"T": [4, 5]}))
    assert (r1.solved, r1.failed, r1.invalid) == (1, 0, 1)
    r2 = run_study(st, runner=runner, api=fake_api({"T": [4, 5]}), retry_failed=True)
    assert runner.calls == [4, 5] and (r2.skipped, r2.invalid) == (2, 0)
    with Store(st.store) as s:
        bad = [r for r in s.rows() if r.params["T"] == 5][0]
    assert bad.status == "invalid" and "allows no time profile" in bad.message and bad.failed


def test_solve_point_reports_build_errors_as_invalid(tmp_path):
    """solve_point turns an AdvboundError of build_instance into invalid = True with the one-line message:
    two position-search rows need sum t_i^2 >= 2 with t_k = sqrt(k) (derived), so a budget of 1.5 is empty."""
    import advbound.functions.instance as inst
    p = tmp_path / "b.toml"
    p.write_text(textwrap.dedent("""
        [instance]
        outer = "or"
        rows = 2
        inner = "position_search"
        row_length = "T - 1"
        time = "sqrt"
        budget = { sum_squares = "T - 3.5" }

        [grid]
        T = [5]
        """))
    spec = inst.load_instance(p)
    out = solve_point({"instance": spec, "params": {"T": 5}, "bound": "general", "kind": "adversary",
                       "settings": solver_settings(StudySpec(name="x", instance=None))})
    assert out["ok"] is False and out["invalid"] is True
    assert "b.toml" in out["error"] and "T=5" in out["error"] and "\n" not in out["error"]


def test_defective_row_is_recomputed(tmp_path):
    """A row edited by hand into an unreadable state (lower = 'abc') is recomputed by the next run."""
    import sqlite3
    st = _study(tmp_path)
    run_study(st, runner=fake_runner, api=fake_api({"T": [4, 5]}))
    con = sqlite3.connect(st.store)
    con.execute("UPDATE results SET lower='abc' WHERE params_json='{\"T\":4}'")
    con.commit()
    con.close()
    runner = _Counting()
    again = run_study(st, runner=runner, api=fake_api({"T": [4, 5]}))
    assert runner.calls == [4] and (again.solved, again.skipped) == (1, 1)
    with Store(st.store) as s:
        assert sorted(r.lower for r in s.rows()) == pytest.approx([2.0, math.sqrt(5)]) and not s.check_rows()


def test_contradictory_solver_numbers_stored_unverified(tmp_path):
    """A success whose verified lower bound exceeds its verified upper bound is stored as unverified."""
    def runner(task):
        out = fake_runner(task)
        out["result"] = dict(out["result"], lower=3.0, upper=2.0)
        return out
    st = _study(tmp_path)
    run_study(st, runner=runner, api=fake_api({"T": [4]}))
    with Store(st.store) as s:
        (row,) = s.rows()
    assert row.status == "unverified" and "exceeds verified upper" in row.message


def test_certificate_paths_relative_and_folder_checked(tmp_path):
    """Certificates are recorded relative to the store's folder, so moving the folder keeps them usable; a
    certificate directory outside that folder is refused before anything is computed."""
    import shutil
    st = StudySpec(name="syn", instance=None, store=str(tmp_path / "a" / "syn.sqlite"))
    run_study(st, runner=fake_runner, api=fake_api({"T": [4]}))
    shutil.move(str(tmp_path / "a"), str(tmp_path / "moved"))
    with Store(tmp_path / "moved" / "syn.sqlite", readonly=True) as s:
        (row,) = s.rows()
        assert row.certificate == "syn-certificates/T=4_general-" + row.run_key[:12] + ".npz"
        assert s.certificate_problem(row) is None
        assert load_certificate(s.certificate_path(row)).gamma.shape == (2, 2)
    runner = _Counting()
    outside = StudySpec(name="syn", instance=None, store=str(tmp_path / "b" / "syn.sqlite"),
                        certificates=str(tmp_path / "elsewhere"))
    with pytest.raises(AdvboundError, match="elsewhere is not inside the folder of the store"):
        run_study(outside, runner=runner, api=fake_api({"T": [4]}))
    assert runner.calls == []


@pytest.mark.parametrize("lease", [0, -1, float("nan")])
def test_lease_must_be_positive(tmp_path, lease):
    """A lease that is not a positive number of seconds is refused with one line."""
    with pytest.raises(AdvboundError, match="lease must be a positive number"):
        run_study(_study(tmp_path), runner=fake_runner, api=fake_api({"T": [4]}), lease=lease)
