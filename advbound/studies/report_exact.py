"""Exact t-query points next to ADV± in a report: the adversary check and the points read from the store.

This module owns the check ``t ≥ ((1 − 2√(ε(1−ε)))/2)·ADV±`` (:func:`adversary_factor`,
:func:`adversary_check`, :data:`CHECK_SLACK`) and the collection of the store's exact rows
(kind ``"exact"``) into :class:`ExactPoint` objects, one per grid point, each with one
:class:`ExactEntry` per request column (:func:`collect_exact`).  Their tables are in
:mod:`advbound.studies.report_tables`, their figure in :mod:`advbound.studies.report_figures`.
"""

from __future__ import annotations

import dataclasses
import json
import math

from advbound.studies.report_series import _EXACT_KIND, _KIND, _sortable, study_settings
from advbound.studies.store import Store, StoredRow

__all__ = ["adversary_factor", "CHECK_SLACK", "adversary_check", "ExactEntry", "ExactPoint", "collect_exact"]


def adversary_factor(error: float) -> float:
    """``(1 − 2·sqrt(ε(1−ε)))/2``, the factor in ``Q_ε ≥ factor · ADV±`` ("Negative weights make
    adversaries stronger", 2007, arXiv:quant-ph/0611054).

    >>> adversary_factor(0.0), adversary_factor(0.5)
    (0.5, 0.0)
    """
    e = min(max(float(error), 0.0), 1.0)
    return (1.0 - 2.0 * math.sqrt(e * (1.0 - e))) / 2.0


#: Slack in the comparison ``t ≥ factor · ADV±`` (``t`` is an integer; the bound is a float).
CHECK_SLACK = 1e-9


def adversary_check(queries, adv_lower, *, success=None, error=None, reached=None):
    """The check ``t ≥ ((1 − 2·sqrt(ε(1−ε)))/2) · ADV±`` with verified numbers.

    Parameters
    ----------
    queries : int or None
        ``t``: the fixed query count, or the least ``t`` found for ``error``.
    adv_lower : float or None
        Verified lower bound on ADV± of the same function.
    success : float, optional
        Fixed-t points: verified achievable success probability ``p``; the check uses ``ε = 1 − p``
        (the largest error consistent with ``p``) and needs ``p > 1/2``.
    error, reached : optional
        Least-t points: the target ``ε`` (used as is) and whether some ``t`` reached it.

    Returns
    -------
    (epsilon, required, verdict)
        ``required = factor(ε) · adv_lower``; ``verdict`` is ``"pass"``, ``"fail"`` or ``"n/a"``
        (then ``epsilon``/``required`` may be ``None``).

    >>> adversary_check(1, 2.0, success=0.9)[2], adversary_check(1, 2.0, success=0.5)[2]
    ('pass', 'n/a')
    >>> adversary_check(0, 2.0, error=0.0, reached=True)     # 0 queries cannot compute a function with ADV± = 2
    (0.0, 1.0, 'fail')
    """
    if error is not None:
        eps = float(error)
        if not reached or queries is None:
            return eps, None, "n/a"
    else:
        if success is None or not success > 0.5:
            return None, None, "n/a"
        eps = 1.0 - float(success)
    if adv_lower is None or queries is None:
        return eps, None, "n/a"
    need = adversary_factor(eps) * float(adv_lower)
    return eps, need, ("pass" if queries >= need - CHECK_SLACK else "fail")


@dataclasses.dataclass(frozen=True)
class ExactEntry:
    """One exact request at one grid point (numbers from its stored row) and its adversary check.

    ``request`` is ``"t=2"`` (best success of 2 queries) or ``"eps=0.1"`` (least t for error 0.1);
    ``queries`` is t (for ``eps=`` requests the least t found, ``None`` when not reached);
    ``success``/``upper`` are the row's ``lower``/``upper`` (verified achievable success
    probability, verified upper bound); ``epsilon``, ``required``, ``check`` are from
    :func:`adversary_check`.
    """

    request: str
    status: str
    queries: int | None = None
    success: float | None = None
    upper: float | None = None
    error: float | None = None
    max_queries: int | None = None
    reached: bool | None = None
    epsilon: float | None = None
    required: float | None = None
    check: str = "n/a"
    failed: bool = False
    run_key: str | None = None

    def to_dict(self) -> dict:
        """Plain dict of every field."""
        return dataclasses.asdict(self)


@dataclasses.dataclass(frozen=True)
class ExactPoint:
    """A grid point with its ADV± numbers and one :class:`ExactEntry` (or ``None``) per request column."""

    params: dict
    domain_size: int | None
    adv_lower: float | None
    adv_upper: float | None
    entries: tuple

    def to_dict(self) -> dict:
        """Plain dict (entries as dicts)."""
        return {"params": self.params, "domain_size": self.domain_size, "adv_lower": self.adv_lower,
                "adv_upper": self.adv_upper,
                "entries": [None if e is None else e.to_dict() for e in self.entries]}


def _request_of(r: StoredRow) -> tuple | None:
    """``(sort key, label)`` of an exact row's request, from its settings (else from its values)."""
    req = r.solver or {}
    if req.get("queries") is not None and req.get("error") is None:
        return (0, float(req["queries"])), f"t={int(req['queries'])}"
    if req.get("error") is not None:
        return (1, float(req["error"])), f"eps={float(req['error']):g}"
    v = r.values or {}
    if v.get("target_error") is not None:
        return (1, float(v["target_error"])), f"eps={float(v['target_error']):g}"
    if v.get("queries") is not None:
        return (0, float(v["queries"])), f"t={int(v['queries'])}"
    return None


def _has_exact(meta: dict, rows: list[StoredRow]) -> bool:
    return bool(meta.get("exact")) or any("success_probability" in (r.values or {}) for r in rows)


def collect_exact(store: Store, meta: dict | None = None) -> tuple[list[str], list[ExactPoint]]:
    """The exact rows next to ADV±: ``(request columns, one ExactPoint per grid point)``.

    Columns are the fixed-t requests by t, then the least-t requests by ε.  The ADV± numbers are
    those of the latest successful ``general`` adversary row of the same instance (``None`` if absent).
    """
    meta = study_settings(meta if meta is not None else store.study_meta(), store.path)
    growth = meta.get("growth") or "T"
    adv = {}
    for r in store.rows(kind=_KIND, bound="general", successful_only=True):
        adv[r.spec_key] = r
    cells: dict = {}
    points: dict = {}
    columns: dict = {}
    for r in store.rows(kind=_EXACT_KIND):
        req = _request_of(r)
        if req is None:
            continue
        columns[req[1]] = req[0]
        points.setdefault(r.spec_key, r.params)
        cells[(r.spec_key, req[1])] = r  # oldest first: later rows win
    cols = sorted(columns, key=lambda c: columns[c])
    out = []
    for spec_key, params in points.items():
        a = adv.get(spec_key)
        adv_lower = None if a is None else a.lower
        entries = []
        dsize = None if a is None else a.domain_size
        for c in cols:
            r = cells.get((spec_key, c))
            if r is None:
                entries.append(None)
                continue
            dsize = dsize if dsize is not None else r.domain_size
            entries.append(_entry(r, c, adv_lower))
        out.append(ExactPoint(dict(params), dsize, adv_lower, None if a is None else a.upper, tuple(entries)))
    keys = [k for k in (meta.get("grid") or {}) if k != growth]
    out.sort(key=lambda p: (tuple(_sortable(p.params.get(k)) for k in keys), _sortable(p.params.get(growth)),
                            json.dumps(p.params, sort_keys=True, default=str)))
    return cols, out


def _entry(r: StoredRow, label: str, adv_lower) -> ExactEntry:
    v = r.values or {}
    req = r.solver or {}
    least = label.startswith("eps=")
    if r.failed:
        return ExactEntry(label, r.status, failed=True, run_key=r.run_key,
                          error=v.get("target_error", req.get("error")) if least else None)
    q = v.get("queries", req.get("queries"))
    q = None if q is None else int(q)
    if least:
        err = v.get("target_error", req.get("error"))
        reached = bool(v.get("reached"))
        eps, need, verdict = adversary_check(q if reached else None, adv_lower, error=err, reached=reached)
        return ExactEntry(label, r.status, q if reached else None, r.lower, r.upper, err,
                          req.get("max_queries", q), reached, eps, need, verdict, run_key=r.run_key)
    eps, need, verdict = adversary_check(q, adv_lower, success=r.lower)
    return ExactEntry(label, r.status, q, r.lower, r.upper, None, None, None, eps, need, verdict,
                      run_key=r.run_key)
