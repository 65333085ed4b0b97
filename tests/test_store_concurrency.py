"""Several real processes on one result store: leases make each point computed once, a killed or frozen
holder's point is taken over (at once when its process is gone, else when its lease expires)."""

import json
import math
import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest

from advbound.studies.store import Store
from advbound.studies.study import StudySpec, run_study

TESTS = os.path.dirname(__file__)

_SWEEP = textwrap.dedent("""
    import json, os, sys, time
    sys.path.insert(0, {tests!r})
    import test_study as t
    from advbound.studies.study import StudySpec, run_study

    calls = [0]

    def runner(task):
        calls[0] += 1
        with open({log!r}, "a") as fh:           # one line per computation: T and the computing pid
            fh.write(f"{{task['params']['T']}} {{os.getpid()}}\\n")
        time.sleep({first!r} if calls[0] == 1 else {slow!r})
        return t.fake_runner(task)

    st = StudySpec(name="syn", instance=None, store={store!r})
    run = run_study(st, runner=runner, api=t.fake_api({{"T": list(range(2, 2 + {n}))}}), lease={lease!r})
    print(json.dumps({{"solved": run.solved, "skipped": run.skipped, "held": len(run.held), "pid": os.getpid()}}))
""")


def _sweep(tmp_path, name, *, n, lease, first, slow):
    """Start a real process sweeping T = 2 .. n+1 with a slow fake solver (see test_study.fake_runner)."""
    script = tmp_path / f"{name}.py"
    script.write_text(_SWEEP.format(tests=TESTS, log=str(tmp_path / "computed.log"), first=first, slow=slow,
                                    store=str(tmp_path / "syn.sqlite"), n=n, lease=lease))
    return subprocess.Popen([sys.executable, str(script)], stdout=subprocess.PIPE, text=True,
                            env=dict(os.environ, OMP_NUM_THREADS="1"))


def _wait_for_lease(store, proc, timeout=30):
    """Poll the store (read-only) until a lease exists; return it."""
    deadline = time.time() + timeout
    while time.time() < deadline:
        assert proc.poll() is None, "the sweep ended before it claimed a point"
        if os.path.exists(store):
            try:
                with Store(store, readonly=True) as st:
                    leases = st.leases()
            except Exception:  # the store is still being created
                leases = []
            if leases:
                return leases[0]
        time.sleep(0.05)
    raise AssertionError("no lease appeared")


def _computed(tmp_path):
    """(T, pid) of every computation started, from the sweeps' log."""
    path = tmp_path / "computed.log"
    if not path.exists():
        return []
    return [tuple(int(x) for x in line.split()) for line in path.read_text().splitlines()]


def _fake_api(n):
    sys.path.insert(0, TESTS)
    import test_study
    return test_study, test_study.fake_api({"T": list(range(2, 2 + n))})


def test_two_sweeps_compute_each_point_once(tmp_path):
    """Two real processes sweeping the same 24 points on one store share them: every point is computed
    exactly once (the log of computations has 24 distinct T), both processes compute some, the solved
    counts add up to 24, every row is stored and no lease is left; ADV±(OR_T) = sqrt(T) is the fake
    solver's value (common knowledge)."""
    store = str(tmp_path / "syn.sqlite")
    a = _sweep(tmp_path, "a", n=24, lease=5.0, first=0.25, slow=0.25)
    try:
        _wait_for_lease(store, a)
        b = _sweep(tmp_path, "b", n=24, lease=5.0, first=0.25, slow=0.25)
        out_b, _ = b.communicate(timeout=120)
        out_a, _ = a.communicate(timeout=120)
    finally:
        for p in (a, locals().get("b")):
            if p is not None and p.poll() is None:
                p.kill()
    assert a.returncode == 0 and b.returncode == 0
    ra, rb = json.loads(out_a), json.loads(out_b)
    done = _computed(tmp_path)
    assert sorted(t for t, _ in done) == list(range(2, 26))            # each point once
    assert {pid for _, pid in done} == {ra["pid"], rb["pid"]}            # both did work
    assert ra["solved"] + rb["solved"] == 24
    assert ra["held"] + rb["held"] <= 1  # the first to finish leaves the other's last point in flight to it
    with Store(store, readonly=True) as st:
        rows = st.rows()
        assert st.leases() == []
    assert sorted(r.params["T"] for r in rows) == list(range(2, 26))
    assert all(r.lower == pytest.approx(math.sqrt(r.params["T"])) for r in rows)  # ADV±(OR_T) = sqrt(T)


def test_kill_9_holder_point_taken_over(tmp_path):
    """A holder killed with SIGKILL mid-point leaves its lease; a rerun on the same machine sees that the
    holder process is gone, takes the point over at once (the lease is long) and computes every point."""
    store = str(tmp_path / "syn.sqlite")
    a = _sweep(tmp_path, "a", n=5, lease=300.0, first=60.0, slow=0.0)
    try:
        lease = _wait_for_lease(store, a)
        os.kill(a.pid, signal.SIGKILL)
        a.wait(10)
    finally:
        if a.poll() is None:
            a.kill()
    assert lease.pid == a.pid and lease.expires > time.time() + 200
    with Store(store, readonly=True) as st:
        assert [x.pid for x in st.leases()] == [a.pid] and st.count() == 0
    t, api = _fake_api(5)
    rerun = run_study(StudySpec(name="syn", instance=None, store=store), runner=t.fake_runner, api=api)
    assert (rerun.solved, rerun.held) == (5, ())
    with Store(store, readonly=True) as st:
        assert sorted(r.params["T"] for r in st.rows()) == [2, 3, 4, 5, 6] and st.leases() == []


def test_frozen_holder_point_taken_over_after_expiry(tmp_path):
    """A holder that is alive but stopped (SIGSTOP) no longer renews: a rerun leaves its point alone while
    the lease lasts, and a rerun with wait=True computes it only after the lease has expired."""
    store = str(tmp_path / "syn.sqlite")
    a = _sweep(tmp_path, "a", n=4, lease=6.0, first=60.0, slow=0.0)
    try:
        _wait_for_lease(store, a)
        os.kill(a.pid, signal.SIGSTOP)
        with Store(store, readonly=True) as st:
            (lease,) = st.leases()
        t, api = _fake_api(4)
        study = StudySpec(name="syn", instance=None, store=store)
        first = run_study(study, runner=t.fake_runner, api=api, lease=6.0)
        assert time.time() < lease.expires, "the rerun was too slow to see the lease alive"
        assert first.solved == 3 and [p.run_key for p, _ in first.held] == [lease.run_key]
        second = run_study(study, runner=t.fake_runner, api=api, lease=6.0, wait=True)
        assert second.solved == 1 and second.held == ()
    finally:
        os.kill(a.pid, signal.SIGKILL)
        a.wait(10)
    with Store(store, readonly=True) as st:
        row = st.get(lease.run_key)
        assert st.count() == 4 and st.leases() == []
    from datetime import datetime
    assert datetime.fromisoformat(row.created).timestamp() >= lease.expires   # computed after expiry
    assert len(_computed(tmp_path)) == 1                                        # the frozen holder's start
