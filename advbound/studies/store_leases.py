"""Leases on the points of a result store: who computes a point, until when, and their renewal.

This module owns the lease records (:class:`LeaseHolder`, :class:`Lease`, :class:`Claim`),
whether a holder process is still alive (checked only on the holder's own machine), and
:class:`LeaseKeeper`, which renews a holder's leases while its points are computed.  The
leases are taken and released by :meth:`advbound.studies.store.Store.claim` and
:meth:`~advbound.studies.store.Store.release`.

>>> Lease("k", "t", 1, "h", "", "", 0.0, 0.0).describe()
'pid 1 on h, lease until 00:00:00 UTC'
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as _dt
import logging
import os
import socket
import sqlite3
import threading
import time
import uuid
from typing import TYPE_CHECKING

from advbound.studies.store_file import _connect

if TYPE_CHECKING:
    from advbound.studies.store import Store

__all__ = ["DEFAULT_LEASE", "LeaseHolder", "Lease", "Claim", "LeaseKeeper"]

log = logging.getLogger("advbound")

#: Default lease duration in seconds; a lease is renewed every third of it while its point is computed.
DEFAULT_LEASE = 60.0


def _read(path) -> str:
    try:
        with open(path) as fh:
            return fh.read().strip()
    except OSError:
        return ""


def _proc_stat(pid: int) -> tuple[str, str] | None:
    """(state letter, start time in clock ticks) of process ``pid`` from /proc; ``None`` if no such process."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            text = fh.read()
    except FileNotFoundError:
        return None
    except OSError:
        return ("?", "")
    rest = text[text.rindex(")") + 2:].split()
    return rest[0], rest[19]


def _machine() -> str:
    """Host name, boot id and pid namespace: where a pid means the same process."""
    ns = ""
    with contextlib.suppress(OSError):
        ns = str(os.stat("/proc/self/ns/pid").st_ino)
    return f"{socket.gethostname()}|{_read('/proc/sys/kernel/random/boot_id')}|{ns}"


@dataclasses.dataclass(frozen=True)
class LeaseHolder:
    """Who holds leases: this process (pid, host, machine identity, start time) and a token per sweep."""

    pid: int
    host: str
    ns: str
    started: str
    token: str

    @classmethod
    def current(cls) -> "LeaseHolder":
        """The holder identity of the calling process, with a fresh token."""
        stat = _proc_stat(os.getpid())
        return cls(os.getpid(), socket.gethostname(), _machine(), stat[1] if stat else "", uuid.uuid4().hex)

    def __str__(self) -> str:
        return f"pid {self.pid} on {self.host}"


@dataclasses.dataclass(frozen=True)
class Lease:
    """A claim on one point: its holder, when it was taken and when it expires (Unix time, s)."""

    run_key: str
    holder: str
    pid: int
    host: str
    ns: str
    started: str
    acquired: float
    expires: float

    def holder_alive(self, me: LeaseHolder) -> bool:
        """False only when the holder's process is known to be gone (same machine, no such process).

        On another machine (or pid namespace) nothing can be known, and the expiry time decides.
        """
        if self.ns != me.ns:
            return True
        if self.pid == me.pid and self.holder != me.token:
            return True  # another sweep in this very process
        stat = _proc_stat(self.pid)
        if stat is None:
            if os.path.isdir("/proc/self"):
                return False
            try:
                os.kill(self.pid, 0)
            except ProcessLookupError:
                return False
            except OSError:
                return True
            return True
        state, started = stat
        if state in ("Z", "X"):
            return False
        return not (self.started and started and started != self.started)

    def live(self, me: LeaseHolder, now: float | None = None) -> bool:
        """True while the lease blocks others: not expired and its holder not known to be gone."""
        now = time.time() if now is None else now
        return self.expires > now and self.holder_alive(me)

    def describe(self) -> str:
        """``"pid 123 on host, lease until 12:00:05 UTC"``."""
        until = _dt.datetime.fromtimestamp(self.expires, _dt.timezone.utc).strftime("%H:%M:%S")
        return f"pid {self.pid} on {self.host}, lease until {until} UTC"


@dataclasses.dataclass(frozen=True)
class Claim:
    """Outcome of :meth:`Store.claim`: ``"claimed"`` (compute it), ``"held"`` (a live lease of another
    holder, in ``lease``) or ``"stored"`` (its row changed since it was planned: someone finished it).
    ``took_over`` is the expired lease that was replaced, if any."""

    outcome: str
    lease: Lease | None = None
    took_over: Lease | None = None


def _renew(conn, holder: LeaseHolder, duration: float) -> int:
    conn.execute("BEGIN IMMEDIATE")
    try:
        n = conn.execute("UPDATE leases SET expires=? WHERE holder=?", (time.time() + duration, holder.token)).rowcount
    except BaseException:
        conn.rollback()
        raise
    conn.commit()
    return n


class LeaseKeeper:
    """Renews the leases of ``holder`` every ``duration / 3`` seconds.

    Use :meth:`start` for a background thread (its own connection; for sweeps that compute in
    this process) or call :meth:`tick` from a loop that waits on workers.
    """

    def __init__(self, store: "Store", holder: LeaseHolder, duration: float):
        self.path = store.path
        self.store = store
        self.holder = holder
        self.duration = float(duration)
        self.period = self.duration / 3.0
        self._last = time.monotonic()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def tick(self) -> None:
        """Renew now if a third of the lease has passed since the last renewal (same thread as the store)."""
        if self._thread is None and time.monotonic() - self._last >= self.period:
            self._last = time.monotonic()
            try:
                _renew(self.store._conn, self.holder, self.duration)
            except sqlite3.Error as err:
                log.warning("%s: could not renew leases (%s); will retry", self.path, err)

    def start(self) -> "LeaseKeeper":
        """Start renewing in a daemon thread."""
        self._thread = threading.Thread(target=self._run, name="advbound-lease", daemon=True)
        self._thread.start()
        return self

    def _run(self) -> None:
        conn = _connect(self.path)
        try:
            while not self._stop.wait(self.period):
                try:
                    _renew(conn, self.holder, self.duration)
                except sqlite3.Error as err:
                    log.warning("%s: could not renew leases (%s); will retry", self.path, err)
        finally:
            conn.close()

    def stop(self) -> None:
        """Stop the thread (if any) and wait for it."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
            self._thread = None
