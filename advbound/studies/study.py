"""Studies: a parameter sweep over an instance template, solved point by point into a durable store.

This module owns running a study (:func:`run_study`), resumable and point by point: in
process, on a local process pool (``jobs``) or on a dask.distributed cluster (``scheduler``).
The study spec (the ``[study]`` table of a study TOML file, read through
:func:`advbound.functions.instance.load_instance`) and its expansion into points (:func:`plan`)
are :mod:`advbound.studies.study_spec`; one point's computation and its stored row are
:mod:`advbound.studies.study_point`; the executors are :mod:`advbound.studies.study_pools`.
This module re-exports their public names.  Besides the adversary
bounds a study may ask for exact t-query points (``exact = {queries = [1, 2]}``
and/or ``exact = {error = 0.1, max_queries = 4}``, solved with
:mod:`advbound.programs.exact`), stored as rows of kind ``"exact"``, and a conjectured Γ
(``[study.conjecture]``, a callable ``gamma(x, y, **params)`` evaluated, and fitted on request, at
every grid point), stored as rows of kind ``"conjecture"``; with ``fit = "once"`` the points whose
fit the others reuse are computed first.
Workers compute and return; only the calling process writes certificates and
rows (see :mod:`advbound.studies.store`).  Several sweeps may run on one store at once:
each claims a point (a lease in the store) before computing it, so every point is
computed once.  A grid point whose instance cannot be built is stored with status
``invalid`` and its one-line message (fix the instance; retrying cannot help).
Certificate paths are recorded relative to the store's folder, so the certificate
directory must lie inside that folder.  The library never prints: progress goes to
an optional callback object.

Typical call::

    study = load_study("instances/studies/default.toml")
    summary = run_study(study, jobs=2)
    summary.solved, summary.skipped, summary.failed

>>> s = StudySpec(name="demo", instance=None)
>>> s.store, s.certificates, s.growth
('studies/demo.sqlite', 'studies/demo-certificates', 'T')
"""

from __future__ import annotations

import collections
import contextlib
import dataclasses
import json
import logging
import math
import os
import re
import time
from typing import Callable, Sequence

from advbound.errors import AdvboundError
from advbound.studies.store import DEFAULT_LEASE, LeaseHolder, LeaseKeeper, RowState, Store, StoredRow, package_versions
from advbound.studies.study_point import _common, _failed_row, _record, solve_point
from advbound.studies.study_pools import _executor, _Inline
from advbound.studies.study_spec import (CONJECTURE_KEYS, CONJECTURE_KIND, EXACT_DEFAULTS,  # noqa: F401
                                         EXACT_KIND, KIND, STUDY_KEYS, Point, StudySpec, conjecture_settings,
                                         default_study_path, exact_settings, load_study, plan, solver_settings,
                                         study_meta)

__all__ = ["StudySpec", "Point", "StudyRun", "Progress", "load_study", "default_study_path", "plan",
           "solver_settings", "exact_settings", "conjecture_settings", "solve_point", "run_study", "study_meta",
           "KIND", "EXACT_KIND", "CONJECTURE_KIND", "EXACT_DEFAULTS", "CONJECTURE_KEYS"]

log = logging.getLogger("advbound")


@dataclasses.dataclass(frozen=True)
class StudyRun:
    """What :func:`run_study` did: numbers of points planned, skipped (already stored, or stored by
    another process meanwhile), solved successfully and failed in this run, the rows written, and the
    store path; ``invalid`` counts the points of this run whose input is invalid, ``too_large`` the
    conjecture points of this run stored as skipped (above the dense limit; counted neither as solved
    nor as failed), ``held`` lists the points left to another live process as ``(Point, Lease)``."""

    name: str
    store: str
    planned: int
    skipped: int
    solved: int
    failed: int
    rows: tuple = ()
    invalid: int = 0
    held: tuple = ()
    too_large: int = 0

    @property
    def ok(self) -> bool:
        """True when nothing failed and no input was invalid in this run."""
        return self.failed == 0 and self.invalid == 0


class Progress:
    """Callback interface for :func:`run_study` (all methods optional no-ops here)."""

    def start(self, total: int, skipped: int) -> None:
        """Called once with the number of points to compute and the number already stored."""

    def begin(self, point: Point) -> None:
        """Called when ``point`` is started (in process) or submitted (pool, cluster)."""

    def done(self, point: Point, row: StoredRow) -> None:
        """Called after ``point``'s row was committed."""

    def skip(self, point: Point, why: str) -> None:
        """Called for a planned point this run leaves to another process (``why`` says which)."""


def _remove_stale_temporaries(directory: str) -> int:
    """Delete certificate temp files left by a killed run (their writer process is gone)."""
    removed = 0
    if not os.path.isdir(directory):
        return 0
    for fn in os.listdir(directory):
        m = re.fullmatch(r"\.[0-9a-f]{12}\.(\d+)\.tmp", fn)
        if not m:
            continue
        pid = int(m.group(1))
        try:
            os.kill(pid, 0)
            alive = pid != os.getpid()
        except ProcessLookupError:
            alive = False
        except PermissionError:
            alive = True
        if not alive:
            with contextlib.suppress(FileNotFoundError):
                os.remove(os.path.join(directory, fn))
                removed += 1
    return removed


def _check_certificate_folder(study: StudySpec, store: Store) -> None:
    """Certificates are recorded relative to the store's folder, so they must live inside it."""
    cert_dir = os.path.abspath(study.certificates)
    if os.path.commonpath([store.folder, cert_dir]) != store.folder:
        raise AdvboundError(f"certificate directory {study.certificates} is not inside the folder of the store "
                            f"{store.path} ({store.folder}); certificates are recorded relative to it, so "
                            "choose a certificate directory inside that folder")


def run_study(study: StudySpec, *, store: Store | None = None, jobs: int = 1, scheduler=None,
              retry_failed: bool = False, progress: Progress | None = None,
              runner: Callable[[dict], dict] | None = None, api=None, points: Sequence[Point] | None = None,
              lease: float = DEFAULT_LEASE, wait: bool = False) -> StudyRun:
    """Solve every point of ``study`` not yet in the store; return a :class:`StudyRun`.

    Parameters
    ----------
    study : StudySpec
    store : Store, optional
        Default: ``Store(study.store)`` (opened and closed here).
    jobs : int
        Local worker processes (1: in this process).
    scheduler : str or dask.distributed.Client, optional
        Address of a dask scheduler (or a client) to submit the points to instead.
    retry_failed : bool
        Also recompute points whose stored computation failed (default: keep them).  Points
        stored as ``invalid`` are not retried: their instance must change first.
    progress : Progress, optional
        Receives ``start``, ``begin``, ``done`` and ``skip`` calls.
    runner : callable, optional
        The per-point function (default :func:`solve_point`); must be picklable for pools/clusters.
    api : module, optional
        Provider of the instance functions (default :mod:`advbound.functions.instance`).
    points : sequence of Point, optional
        Use these instead of :func:`plan`.
    lease : float
        Lease duration in seconds (see :mod:`advbound.studies.store`); renewed every third of it.
    wait : bool
        Wait for points that another live process holds, and compute those whose lease
        expires (default: skip them, after one last look once everything else is done).

    Notes
    -----
    Each point is claimed (a lease in the store) before it is computed, so several sweeps on
    one store share the work.  Each point's row is committed on its own, after its certificate
    file is in place, and releases the lease; an interrupted run loses at most the points in
    flight, and a rerun continues where it stopped.  On ``KeyboardInterrupt`` pending work is
    cancelled, the leases are released and the exception propagates.
    """
    if jobs < 1:
        raise AdvboundError(f"jobs must be at least 1, got {jobs}")
    if not (isinstance(lease, (int, float)) and math.isfinite(lease) and lease > 0):
        raise AdvboundError(f"lease must be a positive number of seconds, got {lease!r}")
    progress = progress or Progress()
    runner = runner or solve_point
    own = store is None
    store = store or Store(study.store)
    holder = LeaseHolder.current()
    try:
        store.set_meta("study", study_meta(study))
        pts = list(points) if points is not None else plan(study, api)
        rows, todo = _plan_run(store, study, pts, retry_failed)
        invalid_planned = sum(1 for p in pts if p.invalid is not None)
        skipped = len(pts) - len(todo) - invalid_planned
        progress.start(len(todo), skipped)
        held: list = []
        others = 0
        anchors = {p.depends for p in pts if p.depends}
        for phase in ([t for t in todo if t[0].run_key in anchors], [t for t in todo if t[0].run_key not in anchors]):
            if phase:
                h, o = _compute_points(study, store, holder, phase, rows, progress, runner, scheduler=scheduler,
                                       jobs=jobs, lease=lease, wait=wait)
                held += h
                others += o
        computed = [r for r in rows if not r.invalid]
        failed = sum(1 for r in computed if r.failed)
        large = sum(1 for r in computed if r.skipped)
        return StudyRun(study.name, store.path, len(pts), skipped + others, len(computed) - failed - large, failed,
                        tuple(rows), invalid=sum(1 for r in rows if r.invalid),
                        held=tuple((p, ls) for p, _, ls in held), too_large=large)
    finally:
        with contextlib.suppress(AdvboundError):
            store.release(holder)
        if own:
            store.close()


def _plan_run(store: Store, study: StudySpec, pts: Sequence[Point], retry_failed: bool
              ) -> tuple[list[StoredRow], list]:
    """Set the store up for a run over ``pts``: drop the invalid rows of points whose instance changed,
    store the rows of the invalid planned points, and list the points to compute.

    Returns ``(rows, todo)``: the rows of the invalid planned points (the rows of this run so far) and
    ``(point, seen)`` per point to compute, ``seen`` being its :attr:`RowState.seen` (``None``: no row).
    """
    states = store.states()
    stale = _stale_invalid(store, pts, study.name)
    if stale:
        store.delete(stale)
        log.info("%s: removed %d invalid row(s) of points whose instance has changed", store.path, len(stale))
    rows: list[StoredRow] = []
    for p in pts:
        if p.invalid is not None:
            rows.append(_record_invalid_plan(store, study, p, states.get(p.run_key)))
    todo = []
    for p in pts:
        s = states.get(p.run_key)
        if p.invalid is None and (s is None or s.state == "defective" or (retry_failed and s.state == "failed")):
            todo.append((p, None if s is None else s.seen))
    return rows, todo


def _compute_points(study: StudySpec, store: Store, holder: LeaseHolder, todo: list, rows: list[StoredRow],
                    progress: Progress, runner: Callable[[dict], dict], *, scheduler, jobs: int, lease: float,
                    wait: bool) -> tuple[list, int]:
    """Claim, compute and record the points of ``todo`` (see :func:`_plan_run`), appending their rows to
    ``rows``; returns ``(held, others)`` as :func:`_drive` does.

    The leases are renewed while the points are computed (by a thread when they are computed in this
    process); the executor is closed and the renewal stopped before this returns or raises.
    """
    _check_certificate_folder(study, store)
    if _remove_stale_temporaries(study.certificates):
        log.info("removed unfinished certificate files of an interrupted run")
    settings = solver_settings(study)

    def task_of(p):
        task = {"instance": study.instance, "params": p.params, "bound": p.bound, "kind": p.kind,
                "settings": settings if p.kind not in (EXACT_KIND, CONJECTURE_KIND) else dict(p.request or {})}
        if p.kind == CONJECTURE_KIND:
            task.update(_conjecture_task(study, store, p))
        return task

    def finish(p, out):
        row = _record(store, study, p, out, holder)
        rows.append(row)
        progress.done(p, row)

    keeper = LeaseKeeper(store, holder, lease)
    try:
        executor = _executor(scheduler, jobs, len(todo), runner)
        if isinstance(executor, _Inline):
            keeper.start()
        try:
            return _drive(todo, store, holder, lease, executor, keeper, task_of, progress, finish, wait)
        finally:
            executor.close()
    finally:
        keeper.stop()

def _conjecture_task(study: StudySpec, store: Store, p: Point) -> dict:
    """What a conjecture task carries besides the settings: the callable to load (as resolved when the
    study was read), its label and, for a point that reuses another point's fit, the fitted constants
    (``reuse``) or why there are none (``reuse_error``)."""
    cj = study.conjecture
    out = {"callable": cj.get("resolved") or cj["callable"], "label": cj.get("label")}
    if p.depends is None:
        return out
    at = (p.request or {}).get("anchor") or {}
    where = " ".join(f"{k}={v}" for k, v in at.items())
    row = store.get(p.depends)
    if row is None:
        out["reuse_error"] = (f"conjecture {cj.get('label')}: the fit at {where} (fit = \"once\") is not stored "
                              "(another sweep may hold it); rerun the study")
    elif not row.success:
        out["reuse_error"] = (f"conjecture {cj.get('label')}: the fit at {where} (fit = \"once\") is {row.status}: "
                              f"{row.error or row.message}")
    else:
        out["reuse"] = {"params": dict(row.values.get("params") or {}), "at": at}
    return out


def _identity(kind, params, bound, request) -> tuple:
    what = bound if kind not in (EXACT_KIND, CONJECTURE_KIND) else json.dumps(request or {}, sort_keys=True,
                                                                              default=str)
    return kind, json.dumps(params, sort_keys=True, default=str), what


def _stale_invalid(store: Store, pts: Sequence[Point], name: str) -> list[str]:
    """Run keys of this study's invalid rows for planned points that now have another run key (their
    instance changed, e.g. it was fixed): such rows describe an input that no longer exists."""
    current = {_identity(p.kind, p.params, p.bound, p.request): p.run_key for p in pts}
    out = []
    for r in store.rows(study=name):
        if r.invalid:
            key = current.get(_identity(r.kind, r.params, r.bound,
                                        r.solver if r.kind in (EXACT_KIND, CONJECTURE_KIND) else None))
            if key is not None and key != r.run_key:
                out.append(r.run_key)
    return out


def _record_invalid_plan(store: Store, study: StudySpec, p: Point, state: RowState | None) -> StoredRow:
    """Store (or refresh) the row of a point whose instance cannot be resolved."""
    old = store.get(p.run_key) if state is not None and state.state == "invalid" else None
    if old is not None and old.message == p.invalid:
        return old
    row = _failed_row(p, {"invalid": True, "error": p.invalid}, _common(study, p, {"versions": package_versions()}))
    store.put(row)
    return row


def _drive(todo, store, holder, lease, executor, keeper, task_of, progress, finish, wait):
    """Claim and compute the points of ``todo`` with at most ``executor.window`` in flight.

    Returns ``(held, others)``: the points left to live holders as ``(point, seen, lease)``, and
    the number of points another process finished meanwhile.
    """
    pending = collections.deque(todo)
    inflight: dict = {}
    held: dict = {}
    others = 0
    poll = min(1.0, lease / 4.0)
    last_look = time.monotonic()
    looked_again = False
    while True:
        while pending and len(inflight) < executor.window:
            p, seen = pending.popleft()
            c = store.claim(p.run_key, holder, lease, seen)
            if c.outcome == "stored":
                others += 1
                progress.skip(p, "stored by another process")
            elif c.outcome == "held":
                held[p.run_key] = (p, seen, c.lease)
            else:
                progress.begin(p)
                inflight[executor.submit(task_of(p))] = p
        if inflight:
            for fut in executor.wait(list(inflight), timeout=keeper.period):
                finish(inflight.pop(fut), executor.outcome(fut))
            keeper.tick()
            if wait and held and time.monotonic() - last_look >= poll:
                pending.extend((p, seen) for p, seen, _ in held.values())
                held.clear()
                last_look = time.monotonic()
            continue
        if not held:
            break
        if not wait:
            if looked_again:
                break
            looked_again = True
        else:
            time.sleep(max(0.0, poll - (time.monotonic() - last_look)))
            keeper.tick()
        pending.extend((p, seen) for p, seen, _ in held.values())
        held.clear()
        last_look = time.monotonic()
    for p, _, ls in held.values():
        progress.skip(p, f"held by {ls.describe()}")
    return list(held.values()), others
