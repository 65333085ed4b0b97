"""Where the points of a study are computed: in this process, on a local process pool, or on dask.

This module owns the three executors :func:`advbound.studies.study.run_study` drives through
one interface (``window``: how many points may be in flight; ``submit``, ``wait``,
``outcome``, ``close``): :class:`_Inline` (computes each point at submission),
:class:`_Pool` (a local process pool, at most ``jobs`` points in flight, so other sweeps can
claim the rest) and :class:`_Dask` (a dask.distributed cluster), and :func:`_executor`,
which picks one.  A worker that dies is a failed point, not an exception.

>>> ex = _executor(None, 1, 5, lambda task: {"ok": True, "n": task})
>>> ex.window, ex.outcome(ex.submit(3))
(1, {'ok': True, 'n': 3})
"""

from __future__ import annotations

import uuid

from advbound.errors import AdvboundError
from advbound.studies.study_spec import _one_line


class _Done:
    """A finished computation (the in-process executor's future)."""

    def __init__(self, out):
        self.out = out


class _Inline:
    """Computes each point in this process, at submission."""

    window = 1

    def __init__(self, runner):
        self.runner = runner

    def submit(self, task):
        try:
            return _Done(self.runner(task))
        except Exception as err:  # a runner that raises is a failed point, as in a pool
            return _Done({"ok": False, "error": f"{type(err).__name__}: {_one_line(err)}"})

    def wait(self, futs, timeout=None):
        return futs

    def outcome(self, fut):
        return fut.out

    def close(self):
        pass


class _Pool:
    """A local process pool; at most ``jobs`` points in flight (so other sweeps can claim the rest)."""

    def __init__(self, runner, jobs):
        import concurrent.futures as cf
        import multiprocessing as mp
        self.cf = cf
        ctx = mp.get_context("fork") if "fork" in mp.get_all_start_methods() else None
        self.ex = cf.ProcessPoolExecutor(max_workers=jobs, mp_context=ctx)
        self.runner = runner
        self.window = jobs
        self.futs: list = []
        self.clean = False

    def submit(self, task):
        fut = self.ex.submit(self.runner, task)
        self.futs.append(fut)
        return fut

    def wait(self, futs, timeout=None):
        return self.cf.wait(futs, timeout=timeout, return_when=self.cf.FIRST_COMPLETED).done

    def outcome(self, fut):
        return _outcome(fut)

    def close(self):
        if all(f.done() for f in self.futs):
            self.ex.shutdown(wait=True)
        else:
            for f in self.futs:
                f.cancel()
            self.ex.shutdown(wait=False, cancel_futures=True)


def _outcome(fut) -> dict:
    try:
        return fut.result()
    except Exception as err:  # the worker itself died (e.g. out of memory)
        return {"ok": False, "error": f"worker failed: {type(err).__name__}: {err}"}


class _Dask:
    """A dask.distributed cluster; as many points in flight as it has worker threads."""

    def __init__(self, runner, scheduler, jobs):
        try:
            from dask.distributed import Client
        except ImportError:  # pragma: no cover
            raise AdvboundError("--scheduler needs dask.distributed, which is not installed") from None
        try:
            self.client = scheduler if isinstance(scheduler, Client) else Client(scheduler, timeout=30)
        except (OSError, TimeoutError, ValueError) as err:
            raise AdvboundError(f"cannot reach the dask scheduler {scheduler!r}: {_one_line(err)}") from None
        self.own = self.client is not scheduler
        self.runner = runner
        try:
            threads = sum(self.client.nthreads().values())
        except Exception:  # an unreachable scheduler surfaces on submit
            threads = 0
        self.window = max(jobs, threads, 1)
        self.futs: list = []

    def submit(self, task):
        fut = self.client.submit(self.runner, task, pure=False, key=f"advbound-{uuid.uuid4().hex}")
        self.futs.append(fut)
        return fut

    def wait(self, futs, timeout=None):
        from dask.distributed import wait as dwait
        try:
            return dwait(futs, timeout=timeout, return_when="FIRST_COMPLETED").done
        except TimeoutError:
            return set()

    def outcome(self, fut):
        try:
            return fut.result()
        except Exception as err:
            return {"ok": False, "error": f"worker failed: {type(err).__name__}: {err}"}

    def close(self):
        pending = [f for f in self.futs if not f.done()]
        if pending:
            self.client.cancel(pending)
        if self.own:
            self.client.close()


def _executor(scheduler, jobs, n, runner):
    if scheduler is not None:
        return _Dask(runner, scheduler, jobs)
    if jobs > 1 and n > 1:
        return _Pool(runner, jobs)
    return _Inline(runner)
