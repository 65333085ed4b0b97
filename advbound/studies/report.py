"""Reports of a study, built from its result store only (never solves).

This module owns turning stored rows into series (:func:`collect_series`), fitting
them (:func:`fit_series`, through :func:`advbound.studies.fit.compare_models`) and
writing the report directory (:func:`write_report`): ``summary.md``; figures in
PNG and PDF (bound vs growth variable with fitted curves and the upper-bound
band, the ratios ``L/√T`` and ``L/√(T log T)``, fit residuals); LaTeX tables
(booktabs); the data as CSV and JSON; and provenance.  When the store holds exact
t-query rows (kind ``"exact"``), it adds a table of them next to ADV± with the check
``t ≥ ((1 − 2√(ε(1−ε)))/2)·ADV±`` (:func:`collect_exact`, :func:`adversary_check`) and the
figure ``exact_vs_T``.  matplotlib is imported
inside the drawing functions (Agg canvas, no pyplot state).

Typical call::

    files = write_report("studies/default.sqlite", out="reports/default")
    files.summary          # 'reports/default/summary.md'

>>> Series("general", 3, (4.0, 5.0), (2.0, 2.2), (2.0, 2.3), (24, 48), (), "rows").label
'general, rows=3'
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as _dt
import io
import json
import math
import logging
import os
from pathlib import Path
from typing import Any

from advbound.errors import AdvboundError
from advbound.studies.store import Store, StoredRow

log = logging.getLogger("advbound")

__all__ = ["Series", "ReportFiles", "open_store", "collect_series", "fit_series", "write_report", "study_settings",
           "invalid_points", "certificate_problems",
           "latex_results_table", "latex_fit_table", "ExactEntry", "ExactPoint", "collect_exact",
           "adversary_factor", "adversary_check", "markdown_exact_table", "latex_exact_table", "CHECK_SLACK", "FIT_MAX_GAP"]

_KIND = "adversary"
_EXACT_KIND = "exact"


@dataclasses.dataclass(frozen=True)
class Series:
    """The successful points of one bound kind and one series value, sorted by the growth variable.

    ``upper`` entries are ``None`` where no upper bound verified.
    """

    bound: str
    key: Any
    T: tuple
    lower: tuple
    upper: tuple
    domain_size: tuple
    rows: tuple
    name: str | None = None

    @property
    def label(self) -> str:
        """E.g. ``"general, rows=3"`` (``"series 3"`` without a name), or ``"general"`` without a key."""
        if self.key is None:
            return self.bound
        return f"{self.bound}, {self.name}={self.key}" if self.name else f"{self.bound}, series {self.key}"


@dataclasses.dataclass(frozen=True)
class ReportFiles:
    """Paths written by :func:`write_report` (all inside ``out``)."""

    out: str
    summary: str
    figures: tuple
    tables: tuple
    data: tuple
    provenance: str

    def all(self) -> list[str]:
        """Every written path."""
        return [self.summary, *self.figures, *self.tables, *self.data, self.provenance]


def open_store(source, store: str | None = None) -> Store:
    """Open the store named by ``source``: a ``.sqlite`` store, or a study ``.toml`` (its ``store``).

    ``store`` overrides the path taken from a study file.  The store is opened read-only (sqlite
    ``mode=ro``; nothing is created next to it, see :class:`advbound.studies.store.Store`), so stores on
    read-only media can be reported on.
    """
    source = os.fspath(source)
    if store is not None:
        return Store(store, readonly=True)
    if source.endswith(".toml"):
        from advbound.studies.study import load_study
        return Store(load_study(source).store, readonly=True)
    return Store(source, readonly=True)


def _latest(rows: list[StoredRow]) -> list[StoredRow]:
    best: dict = {}
    for r in rows:  # rows come oldest first; later rows win
        best[(r.spec_key, r.bound)] = r
    return list(best.values())


def _real(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def collect_series(store: Store, meta: dict | None = None) -> list[Series]:
    """Group the successful adversary rows into :class:`Series` by bound and series value.

    When several stored rows describe the same instance and bound (other solver settings or
    versions), the most recent one is used.  Defective rows are left out by the store (with a
    warning each); so is a row whose growth parameter is not a number (warned here).
    """
    meta = study_settings(meta if meta is not None else store.study_meta(), store.path)
    growth = meta.get("growth") or "T"
    skey = meta.get("series")
    groups: dict = {}
    for r in _latest(store.rows(kind=_KIND, successful_only=True)):
        if r.lower is None or growth not in r.params:
            continue
        if not _real(r.params[growth]):
            store.warn(f"{store.path}: row run_key {r.run_key[:12]}: column params_json: {growth} = "
                       f"{r.params[growth]!r} is not a number; the row is left out of the series")
            continue
        key = r.params.get(skey) if skey else None
        groups.setdefault((r.bound, key), []).append(r)
    out = []
    order = {"general": 0, "positive": 1}
    for (bound, key), rows in sorted(groups.items(), key=lambda kv: (order.get(kv[0][0], 9), str(kv[0][0]),
                                                                     _sortable(kv[0][1]))):
        rows.sort(key=lambda r: float(r.params[growth]))
        out.append(Series(bound, key, tuple(float(r.params[growth]) for r in rows), tuple(r.lower for r in rows),
                          tuple(r.upper for r in rows), tuple(r.domain_size for r in rows), tuple(rows),
                          skey))
    return out


def _sortable(v):
    return (0, float(v), "") if isinstance(v, (int, float)) else (1, 0.0, str(v))


_SETTING_CHECKS = {
    "name": (lambda v: isinstance(v, str), "must be text"),
    "description": (lambda v: isinstance(v, str), "must be text"),
    "report": (lambda v: isinstance(v, str), "must be text"),
    "growth": (lambda v: isinstance(v, str), "must be text"),
    "series": (lambda v: isinstance(v, str), "must be text"),
    "laws": (lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v), "must be a list of law names"),
    "offsets": (lambda v: isinstance(v, list) and all(isinstance(x, bool) for x in v),
                "must be a list of true/false"),
    "bounds": (lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v), "must be a list of text"),
    "bootstrap": (lambda v: isinstance(v, int) and not isinstance(v, bool) and v >= 0, "must be an integer >= 0"),
    "seed": (lambda v: isinstance(v, int) and not isinstance(v, bool) and v >= 0, "must be an integer >= 0"),
    "fit_max_gap": (lambda v: _real(v) and v >= 0, "must be a number >= 0"),
    "settings": (lambda v: isinstance(v, dict), "must be a table"),
    "instance": (lambda v: isinstance(v, dict), "must be a table"),
    "grid": (lambda v: isinstance(v, dict), "must be a table"),
    "exact": (lambda v: isinstance(v, dict), "must be a table"),
}


def study_settings(meta: dict | None, source: str = "study settings") -> dict:
    """``meta`` (the store's ``study`` value) after checking the keys reports and fits use.

    Raises
    ------
    StoreError
        One line naming ``source`` and the key, when a value has the wrong type (a hand edit).
    """
    from advbound.studies.store import StoreError
    meta = {} if meta is None else meta
    if not isinstance(meta, dict):
        raise StoreError(f"{source}: meta key 'study' must be an object")
    for key, (ok, what) in _SETTING_CHECKS.items():
        v = meta.get(key)
        if v is not None and not ok(v):
            shown = repr(v) if len(repr(v)) <= 40 else repr(v)[:37] + "..."
            raise StoreError(f"{source}: meta key 'study': {key} = {shown} {what}")
    return meta


def fit_series(series: list[Series], meta: dict | None = None, *, bootstrap: int | None = None,
               seed: int | None = None) -> dict:
    """Fit each series' verified lower bounds; returns ``{label: Comparison or reason-string}``.

    A series with fewer than 3 points, or with a growth value <= 1, gets a string saying why
    it was not fitted.
    """
    from advbound.studies.fit import compare_models
    meta = study_settings(meta)
    laws = tuple(meta.get("laws") or ("sqrt", "sqrt_log", "power"))
    offsets = tuple(bool(o) for o in (meta.get("offsets") or (False, True)))
    bootstrap = int(meta.get("bootstrap", 200) if bootstrap is None else bootstrap)
    seed = int(meta.get("seed", 0) if seed is None else seed)
    max_gap = float(meta.get("fit_max_gap", FIT_MAX_GAP))
    out = {}
    for s in series:
        s = _fit_points(s, max_gap)
        if len(s.T) < 3:
            out[s.label] = f"not fitted: {len(s.T)} point(s), at least 3 needed"
        elif min(s.T) <= 1:
            out[s.label] = "not fitted: the laws with log T need every growth value > 1"
        elif min(s.lower) <= 0:
            out[s.label] = "not fitted: a lower bound is not positive"
        else:
            out[s.label] = compare_models(s.T, s.lower, laws, offsets, bootstrap=bootstrap, seed=seed,
                                          variable=str(meta.get("growth") or "T"))
    return out


#: Points whose verified relative gap (upper - lower) / upper exceeds this are shown in tables and
#: figures but left out of fits: a loose lower bound would bend the fitted law.  Points without an
#: upper bound (lower-bound-only methods) are kept.
FIT_MAX_GAP = 1e-3


def _fit_points(s: Series, max_gap: float) -> Series:
    keep = [i for i, (lo, up) in enumerate(zip(s.lower, s.upper))
            if up is None or (up - lo) <= max_gap * max(abs(up), 1e-300)]
    if len(keep) == len(s.T):
        return s
    pick = lambda seq: tuple(seq[i] for i in keep)  # noqa: E731
    return dataclasses.replace(s, T=pick(s.T), lower=pick(s.lower), upper=pick(s.upper),
                               domain_size=pick(s.domain_size), rows=pick(s.rows))


# -- LaTeX ---------------------------------------------------------------------------------
def _tex(s) -> str:
    s = str(s)
    for a, b in (("\\", r"\textbackslash{}"), ("_", r"\_"), ("%", r"\%"), ("&", r"\&"), ("#", r"\#"),
                 ("$", r"\$"), ("{", r"\{"), ("}", r"\}"), ("^", r"\^{}"), ("~", r"\~{}")):
        s = s.replace(a, b) if a != "\\" else s.replace(a, "\0")
    return s.replace("\0", r"\textbackslash{}")


def _f(v, digits=6) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "--"
    return f"{v:.{digits}f}"


def _gtex(v, digits=3) -> str:
    t = _g(v, digits)
    if "e" in t:
        m, e = t.split("e")
        t = f"{m}\\times 10^{{{int(e)}}}"
    return t


def _g(v, digits=3) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "--"
    return f"{v:.{digits}g}"


def latex_results_table(series: list[Series], growth: str = "T") -> str:
    """A booktabs ``tabular`` of bound, series, growth value, domain size, lower, upper and gap."""
    sname = next((x.name for x in series if x.name), None) or "series"
    lines = [r"\begin{tabular}{llrrrrr}", r"\toprule",
             rf"bound & {_tex(sname)} & ${_tex(growth)}$ & $|D|$ & lower & upper & gap \\", r"\midrule"]
    for i, s in enumerate(series):
        if i:
            lines.append(r"\addlinespace")
        for t, lo, up, d in zip(s.T, s.lower, s.upper, s.domain_size):
            gap = None if up is None else up - lo
            lines.append(f"{_tex(s.bound)} & {_tex('' if s.key is None else s.key)} & {t:g} & "
                         f"{'--' if d is None else d} & {_f(lo)} & {_f(up)} & "
                         f"{'--' if gap is None else '$' + _gtex(gap, 2) + '$'} \\\\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


def latex_fit_table(fits: dict) -> str:
    """A booktabs ``tabular`` of every fitted model: series, model, parameters ± s.e., AICc, weight."""
    lines = [r"\begin{tabular}{lllrr}", r"\toprule",
             r"series & model & parameters ($\pm$ s.e.) & AICc & weight \\", r"\midrule"]
    first = True
    for label, cmp in fits.items():
        if isinstance(cmp, str):
            continue
        if not first:
            lines.append(r"\addlinespace")
        first = False
        for fr in cmp.fits:
            ps = ", ".join(f"${_tex(k)} = {_gtex(v, 4)} \\pm {_gtex(fr.stderr.get(k), 2)}$"
                           for k, v in fr.params.items())
            lines.append(f"{_tex(label)} & {_tex(fr.model)} & {ps} & {_g(fr.aicc, 4)} & "
                         f"{cmp.weights.get(fr.model, 0.0):.3f} \\\\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


# -- figures --------------------------------------------------------------------------------
def _figure(ncols: int):
    import matplotlib
    matplotlib.rcParams.setdefault("pdf.fonttype", 42)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=(5.2 * ncols, 4.0), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig, out: Path, stem: str) -> list[str]:
    paths = []
    for ext in ("png", "pdf"):
        p = out / f"{stem}.{ext}"
        fig.savefig(p, dpi=130 if ext == "png" else None)
        paths.append(str(p))
    return paths


def _by_bound(series):
    bounds = []
    for s in series:
        if s.bound not in bounds:
            bounds.append(s.bound)
    return bounds


_BOUND_TITLE = {"general": "ADV± (general)", "positive": "ADV (positive)"}


def _plot_bounds(series, fits, growth, out) -> list[str]:
    import numpy as np

    from advbound.studies.fit import evaluate
    bounds = _by_bound(series) or ["general"]
    fig = _figure(len(bounds))
    axes = fig.subplots(1, len(bounds), squeeze=False)[0]
    for ax, bound in zip(axes, bounds):
        gaps = [u - lo for x in series if x.bound == bound for lo, u in zip(x.lower, x.upper) if u is not None]
        for i, s in enumerate(x for x in series if x.bound == bound):
            color = f"C{i}"
            T = np.array(s.T)
            lo = np.array(s.lower)
            up = np.array([u if u is not None else np.nan for u in s.upper])
            ax.plot(T, lo, "o", color=color,
                    label="lower" if s.key is None else f"lower, {s.name or 'series'}={s.key}")
            ax.fill_between(T, lo, np.where(np.isnan(up), lo, up), color=color, alpha=0.25, linewidth=0)
            ax.plot(T, up, "_", color=color, markersize=10)
            cmp = fits.get(s.label)
            if cmp is not None and not isinstance(cmp, str):
                grid = np.linspace(T.min(), T.max(), 200)
                models = list(dict.fromkeys([cmp.best.model, "sqrt", "sqrt_log"]))
                for model in models:
                    ls = "-" if model == cmp.best.model else (":" if model == "sqrt" else "--")
                    fr = cmp.fit(model)
                    if fr is not None and fr.success:
                        best = " (best)" if model == cmp.best.model else ""
                        ax.plot(grid, evaluate(model, fr.params, grid), ls, color=color, linewidth=1,
                                label=f"{model} fit{best}")
        ax.set_xlabel(growth)
        ax.set_ylabel("bound")
        gap = f" (widest {max(gaps):.1g})" if gaps else " (no upper bounds)"
        ax.set_title(f"{_BOUND_TITLE.get(bound, bound)}: lower points, upper band{gap}", fontsize="medium")
        ax.legend(fontsize="small")
    return _save(fig, out, "bound_vs_T")


def _plot_ratios(series, growth, out) -> list[str]:
    import numpy as np
    fig = _figure(2)
    axes = fig.subplots(1, 2, squeeze=False)[0]
    for i, s in enumerate(series):
        T = np.array(s.T)
        lo = np.array(s.lower)
        ok = T > 1
        mk = "o-" if s.bound == "general" else "s--"
        lab = s.label
        axes[0].plot(T, lo / np.sqrt(T), mk, color=f"C{i}", label=lab)
        axes[1].plot(T[ok], lo[ok] / np.sqrt(T[ok] * np.log(T[ok])), mk, color=f"C{i}", label=lab)
    axes[0].set_title(f"L / sqrt({growth})")
    axes[1].set_title(f"L / sqrt({growth} log {growth})")
    for ax in axes:
        ax.set_xlabel(growth)
        ax.legend(fontsize="small")
    return _save(fig, out, "ratios")


def _plot_residuals(fits, growth, out) -> list[str]:
    import numpy as np
    fig = _figure(1)
    ax = fig.subplots()
    i = 0
    markers = {"sqrt": "o", "sqrt_log": "s"}
    for si, (label, cmp) in enumerate(fits.items()):
        if isinstance(cmp, str):
            continue
        for model in dict.fromkeys(["sqrt", "sqrt_log", cmp.best.model]):
            fr = cmp.fit(model)
            if fr is None or not fr.success:
                continue
            rel = np.array(fr.residuals) / np.array(fr.y)
            best = " (best)" if model == cmp.best.model else ""
            ax.plot(fr.T, rel, markers.get(model, "^") + ("-" if best else ":"), color=f"C{si % 10}",
                    linewidth=0.8, label=f"{label}: {model}{best}")
            i += 1
    ax.axhline(0, color="k", linewidth=0.6)
    ax.set_xlabel(growth)
    ax.set_ylabel("relative residual (L - fit) / L")
    ax.set_title("fit residuals")
    if i:
        ax.legend(fontsize="x-small")
    return _save(fig, out, "residuals")


# -- exact t-query points ------------------------------------------------------------------
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


def _col_title(c: str, tex: bool = False) -> tuple[str, str]:
    if c.startswith("t="):
        return ((f"${c}$ success", f"${c}$ check") if tex else (f"{c} success", f"{c} check"))
    e = c[4:]
    return ((rf"$\varepsilon={e}$ least $t$", rf"$\varepsilon={e}$ check") if tex
            else (f"ε={e} least t", f"ε={e} check"))


def _cells(e: ExactEntry | None, tex: bool = False) -> tuple[str, str]:
    """(value cell, check cell) of one entry."""
    if e is None:
        return "--", "--"
    if e.failed:
        return e.status, "n/a"
    if e.request.startswith("t="):
        value = f"[{_f(e.success)}, {_f(e.upper)}]"
    elif e.reached:
        value = str(e.queries)
    else:
        value = (f"$>{e.max_queries}$" if tex else f"> {e.max_queries}") if e.max_queries is not None else "not reached"
    if e.check == "n/a":
        if e.request.startswith("t="):
            why = ("$p \\leq 1/2$" if tex else "p ≤ 1/2") if e.epsilon is None else None
        else:
            why = "not reached" if not e.reached else None
        why = why or ("no ADV$^\\pm$" if tex else "no ADV±")
        return value, f"n/a ({why})"
    t = e.queries
    if tex:
        rel = r"\geq" if e.check == "pass" else "<"
        return value, rf"{e.check} (${t} {rel} {e.required:.4f}$)"
    rel = "≥" if e.check == "pass" else "<"
    return value, f"{e.check}: {t} {rel} {e.required:.4f} (ε = {e.epsilon:.4f})"


def _param_keys(points: list[ExactPoint], meta: dict) -> list[str]:
    keys = [k for k in (meta.get("grid") or {})]
    for p in points:
        for k in p.params:
            if k not in keys:
                keys.append(k)
    return [k for k in keys if any(k in p.params for p in points)]


def markdown_exact_table(columns: list[str], points: list[ExactPoint], meta: dict | None = None) -> str:
    """Markdown table: grid parameters, domain size, ADV± lower/upper, then per request value and check."""
    keys = _param_keys(points, meta or {})
    head = [*keys, "domain size", "ADV± lower", "ADV± upper"]
    for c in columns:
        head += list(_col_title(c))
    lines = ["| " + " | ".join(head) + " |", "|" + "|".join("---:" for _ in head) + "|"]
    for p in points:
        row = [str(p.params.get(k, "")) for k in keys]
        row += ["--" if p.domain_size is None else str(p.domain_size), _f(p.adv_lower), _f(p.adv_upper)]
        for e in p.entries:
            row += list(_cells(e))
        lines.append("| " + " | ".join(row) + " |")
    return "\n".join(lines) + "\n"


def latex_exact_table(columns: list[str], points: list[ExactPoint], meta: dict | None = None) -> str:
    """The same table as :func:`markdown_exact_table` as a booktabs ``tabular``."""
    keys = _param_keys(points, meta or {})
    spec = "r" * (len(keys) + 3 + 2 * len(columns))
    head = [f"${_tex(k)}$" for k in keys] + [r"$|D|$", r"ADV$^\pm$ lower", r"ADV$^\pm$ upper"]
    for c in columns:
        head += list(_col_title(c, tex=True))
    lines = [rf"\begin{{tabular}}{{{spec}}}", r"\toprule", " & ".join(head) + r" \\", r"\midrule"]
    for p in points:
        row = [_tex(p.params.get(k, "")) for k in keys]
        row += ["--" if p.domain_size is None else str(p.domain_size), _f(p.adv_lower), _f(p.adv_upper)]
        for e in p.entries:
            v, c = _cells(e, tex=True)
            row += [v if v.startswith("$") else _tex(v), c if "$" in c else _tex(c)]
        lines.append(" & ".join(row) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


def _plot_exact(columns, points, growth, series_key, out) -> list[str]:
    import numpy as np
    fig = _figure(2)
    ax_q, ax_p = fig.subplots(1, 2, squeeze=False)[0]
    groups: dict = {}
    for p in points:
        if growth not in p.params or not _real(p.params[growth]):
            continue
        key = p.params.get(series_key) if series_key else None
        groups.setdefault(key, []).append(p)
    ci = 0
    for key, pts in groups.items():
        pts.sort(key=lambda p: float(p.params[growth]))
        T = np.array([float(p.params[growth]) for p in pts])
        sfx = "" if key is None else f", {series_key}={key}"
        lo = np.array([np.nan if p.adv_lower is None else p.adv_lower for p in pts])
        up = np.array([np.nan if p.adv_upper is None else p.adv_upper for p in pts])
        color = f"C{ci % 10}"
        ci += 1
        ax_q.plot(T, lo, "o-", color=color, label=f"ADV± lower{sfx}")
        ax_q.fill_between(T, lo, np.where(np.isnan(up), lo, up), color=color, alpha=0.25, linewidth=0)
        for j, c in enumerate(columns):
            if not c.startswith("eps="):
                continue
            color = f"C{ci % 10}"
            ci += 1
            eps = float(c[4:])
            ax_q.plot(T, adversary_factor(eps) * lo, "--", color=color, linewidth=1,
                      label=f"(1-2√(ε(1-ε)))/2·ADV±, ε={eps:g}{sfx}")
            least = np.array([np.nan if (e := p.entries[j]) is None or not e.reached else e.queries for p in pts],
                             dtype=float)
            ax_q.plot(T, least, "s", color=color, label=f"least t, ε={eps:g}{sfx}")
        for j, c in enumerate(columns):
            if not c.startswith("t="):
                continue
            color = f"C{ci % 10}"
            ci += 1
            ents = [p.entries[j] for p in pts]
            s = np.array([np.nan if e is None or e.failed or e.success is None else e.success for e in ents])
            u = np.array([np.nan if e is None or e.failed or e.upper is None else e.upper for e in ents])
            ax_p.plot(T, s, "o-", color=color, label=f"{c}{sfx}")
            ax_p.fill_between(T, s, np.where(np.isnan(u), s, u), color=color, alpha=0.25, linewidth=0)
    ax_q.set_xlabel(growth)
    ax_q.set_ylabel("queries")
    ax_q.set_title("ADV± (band: [lower, upper]) and least t", fontsize="medium")
    ax_p.set_xlabel(growth)
    ax_p.set_ylabel("success probability")
    ax_p.set_title("best t-query success probability (verified)", fontsize="medium")
    from matplotlib.ticker import MaxNLocator
    for ax in (ax_q, ax_p):
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize="x-small")
    return _save(fig, out, "exact_vs_T")


_EXACT_PROVES = """\
Exact points solve the t-query semidefinite program of "Quantum query complexity and semi-definite
programming" (2003) for the same function (see `docs/exact.md`). **success** is `[p, u]`: `p` is
achieved by an explicit algorithm rebuilt from the solver's point (verified with numpy), `u` is a
verified upper bound on every t-query algorithm. **least t** is the least t whose verified
achievable success is at least 1 − ε − decision tolerance (`> N`: none up to `max_queries`).
The **check** evaluates t ≥ ((1 − 2·sqrt(ε(1−ε)))/2)·L with L the verified ADV± lower bound
("Negative weights make adversaries stronger", 2007, arXiv:quant-ph/0611054): for least-t
columns with the target ε, for fixed-t columns with ε = 1 − p, the largest error consistent with
success p (only when p > 1/2). A `fail` would mean an inconsistency between the two computations.
"""


# -- the report -----------------------------------------------------------------------------
_PROVES = """\
## What these numbers mean

* Each **lower** value is ‖Γ‖ / max_j ‖Γ∘Δ_j‖/c_j recomputed from the stored adversary matrix Γ,
  independently of the solver. It is a lower bound on ADV± (or on ADV for the positive-weight bound)
  of *that finite function*, hence, up to the constant of the adversary theorem, a lower bound on its
  bounded-error quantum query complexity: Q_ε(f) ≥ ((1 − 2√(ε(1−ε)))/2)·ADV±(f) ("Negative weights
  make adversaries stronger", 2007, arXiv:quant-ph/0611054), and ADV± is tight up to a constant
  factor ("Quantum query complexity of state conversion", 2011, arXiv:1011.3020).
* Each **upper** value is a verified dual witness objective: ADV±/ADV of that finite function is
  at most this number. The shaded band in the figures is the interval [lower, upper].
* Nothing here is a statement about the growth variable beyond the computed range. A growth-law **fit is evidence about
  growth, not a proof**: finite-size effects and lower-order terms can imitate or hide a slowly
  varying factor such as √(log T).
"""


def write_report(source, out: str | os.PathLike | None = None, *, store: str | None = None,
                 bootstrap: int | None = None, seed: int | None = None) -> ReportFiles:
    """Write the report of the study whose store is named by ``source`` (``.sqlite`` or study ``.toml``).

    Parameters
    ----------
    source : str or Path
    out : str or Path, optional
        Output directory (default: the study's ``report`` setting, else ``reports/<name>``).
    store : str, optional
        Store path overriding the one a study file names.
    bootstrap, seed : int, optional
        Override the study's fit settings.

    Returns
    -------
    ReportFiles

    Raises
    ------
    AdvboundError
        When the store is missing or holds no study rows.
    """
    with open_store(source, store) as st:
        meta = study_settings(st.study_meta(), st.path)
        rows = st.rows(kind=_KIND)
        series = collect_series(st, meta)
        exact_rows = st.rows(kind=_EXACT_KIND)
        exact = collect_exact(st, meta) if _has_exact(meta, exact_rows) else None
        st.check_rows()
        invalid = invalid_points(st.rows(), meta.get("grid"))
        certs = certificate_problems(st, rows)
        left_out = list(st.warnings)
        store_path = st.path
        certificate = {r.run_key: _report_certificate(st, r) for r in rows}
    if not rows:
        raise AdvboundError(f"{store_path}: the store holds no adversary results yet; run the study first")
    name = meta.get("name") or Path(store_path).stem
    out = Path(out if out is not None else (meta.get("report") or f"reports/{name}"))
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise AdvboundError(f"{out}: cannot create the report folder ({err.strerror or err})") from None
    if not os.access(out, os.W_OK):
        raise AdvboundError(f"{out}: the report folder is not writable")
    growth = meta.get("growth") or "T"
    fits = fit_series(series, meta, bootstrap=bootstrap, seed=seed)

    figures = (_plot_bounds(series, fits, growth, out) + _plot_ratios(series, growth, out)
               + _plot_residuals(fits, growth, out))
    t1 = out / "table_results.tex"
    t1.write_text(latex_results_table(series, growth))
    t2 = out / "table_fits.tex"
    t2.write_text(latex_fit_table(fits))
    tables = [t1, t2]
    exact_json = None
    if exact is not None:
        figures += _plot_exact(exact[0], exact[1], growth, meta.get("series"), out)
        t3 = out / "table_exact.tex"
        t3.write_text(latex_exact_table(exact[0], exact[1], meta))
        tables.append(t3)
        exact_json = out / "exact.json"
        exact_json.write_text(json.dumps({"columns": exact[0], "points": [p.to_dict() for p in exact[1]],
                                          "rows": [r.to_dict() for r in exact_rows]},
                                         indent=1, sort_keys=True, default=str))

    data_rows = [dict(r.to_dict(), certificate=certificate[r.run_key]) for r in rows]
    csv_path = out / "data.csv"
    cols = ["run_key", "kind", "bound", "params", "status", "lower", "upper", "gap", "domain_size",
            "time_solve", "time_total", "spec_key", "certificate", "error", "created"]
    with open(csv_path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in rows:
            w.writerow([json.dumps(r.params, sort_keys=True) if c == "params" else
                        ("" if certificate[r.run_key] is None else certificate[r.run_key]) if c == "certificate" else
                        ("" if getattr(r, c) is None else getattr(r, c)) for c in cols])
    json_path = out / "data.json"
    json_path.write_text(json.dumps({"study": meta, "rows": data_rows}, indent=1, sort_keys=True, default=str))
    fits_path = out / "fits.json"
    fits_path.write_text(json.dumps({k: (v if isinstance(v, str) else v.to_dict()) for k, v in fits.items()},
                                    indent=1, allow_nan=False, default=str))

    generated = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    versions = sorted({json.dumps(r.versions, sort_keys=True) for r in rows})
    prov = {
        "generated": generated, "store": os.path.relpath(os.path.abspath(store_path), os.path.abspath(out)),
        "paths": "store: relative to this report's folder; certificate: relative to the store's folder",
        "study": meta,
        "solver_settings": sorted({json.dumps(r.solver, sort_keys=True) for r in rows}),
        "versions": [json.loads(v) for v in versions],
        "points": [{"run_key": r.run_key, "spec_key": r.spec_key, "params": r.params, "bound": r.bound,
                    "status": r.status, "certificate": certificate[r.run_key], "created": r.created}
                   for r in rows],
    }
    prov["solver_settings"] = [json.loads(s) for s in prov["solver_settings"]]
    if exact is not None:
        prov["exact_settings"] = [json.loads(x) for x in sorted({json.dumps(r.solver, sort_keys=True)
                                                                 for r in exact_rows})]
        prov["exact_points"] = [{"run_key": r.run_key, "spec_key": r.spec_key, "params": r.params,
                                 "request": r.solver, "status": r.status, "created": r.created,
                                 "versions": r.versions} for r in exact_rows]
    prov_path = out / "provenance.json"
    prov_path.write_text(json.dumps(prov, indent=1, sort_keys=True, default=str))

    summary = out / "summary.md"
    data = [csv_path, json_path, *([exact_json] if exact_json else []), fits_path]
    summary.write_text(_summary(meta, name, rows, series, fits, growth, generated, store_path, figures,
                                tables, data, prov_path, out, exact, invalid=invalid, left_out=left_out,
                                certs=certs))
    return ReportFiles(str(out), str(summary), tuple(figures), tuple(str(t) for t in tables),
                       tuple(str(d) for d in data), str(prov_path))


def _report_certificate(st: Store, r: StoredRow) -> str | None:
    """The row's certificate path relative to the store's folder (stores of schema 1 hold absolute
    paths: those inside the folder are made relative, others are shown as stored)."""
    if not r.certificate or not os.path.isabs(r.certificate):
        return r.certificate
    path = os.path.normpath(r.certificate)
    if os.path.commonpath([st.folder, path]) == st.folder:
        return os.path.relpath(path, st.folder)
    return r.certificate


def certificate_problems(st: Store, rows: list[StoredRow]) -> list[str]:
    """One line per successful row whose certificate is missing or outside the store's folder.

    Such rows keep their numbers (verified when they were written) but cannot be rechecked from this
    folder; one warning summarises them.
    """
    out = [m for m in (st.certificate_problem(r) for r in rows if r.success) if m]
    if out:
        st.warn(f"{st.path}: {len(out)} row(s) name a certificate that is missing or outside the store's "
                f"folder (first: {out[0].split(': ', 1)[1]}); their numbers are kept but cannot be rechecked "
                "from this folder")
    return out


def _point_key(r: StoredRow) -> tuple:
    what = r.bound if r.kind != _EXACT_KIND else json.dumps(r.solver, sort_keys=True, default=str)
    return r.kind, json.dumps(r.params, sort_keys=True, default=str), what


def invalid_points(rows: list[StoredRow], grid: dict | None = None) -> list[tuple[dict, str, list[str]]]:
    """The invalid points that no later row replaced: ``(params, message, [what, ...])`` per grid point
    and message, in store order (``rows`` oldest first, as :meth:`Store.rows` returns them).

    A point is replaced when a later row of the same kind, parameters and bound (or exact request)
    exists, e.g. after the instance was fixed (its hash, hence its run key, changed).  With ``grid``
    (the study's ``{parameter: [values]}``), points outside the grid are left out too.
    """
    last = {}
    for r in rows:
        last[_point_key(r)] = r
    groups: dict = {}
    for r in rows:
        if r.invalid and last[_point_key(r)] is r and _in_grid(r.params, grid):
            what = r.bound if r.kind != _EXACT_KIND else "exact " + _exact_label(r.solver)
            g = groups.setdefault((json.dumps(r.params, sort_keys=True, default=str), r.message),
                                  (r.params, r.message or "", []))
            g[2].append(str(what))
    return list(groups.values())


def _in_grid(params: dict, grid: dict | None) -> bool:
    if not grid:
        return True
    return all(isinstance(vals, list) and k in params and params[k] in vals for k, vals in grid.items())


def _exact_label(req: dict) -> str:
    return f"t={req.get('queries')}" if req.get("queries") is not None else f"eps={req.get('error')}"


#: At most this many entries per list of invalid or left-out rows in ``summary.md``.
SUMMARY_LIST_LIMIT = 20


def _listing(w, items) -> None:
    for line in items[:SUMMARY_LIST_LIMIT]:
        w(f"* {line}\n")
    if len(items) > SUMMARY_LIST_LIMIT:
        w(f"* ... and {len(items) - SUMMARY_LIST_LIMIT} more\n")
    w("\n")


def _summary(meta, name, rows, series, fits, growth, generated, store_path, figures, tables, data, prov,
             out, exact=None, invalid=(), left_out=(), certs=()) -> str:
    b = io.StringIO()
    w = b.write
    w(f"# Study `{name}`\n\n")
    if meta.get("description"):
        w(f"{meta['description']}\n\n")
    w(f"Generated {generated} from the store `{store_path}` (the report reads only the store).\n\n")
    w("## What was computed\n\n")
    settings = meta.get("settings") or {}
    if meta.get("instance"):
        inst = {k: v for k, v in meta["instance"].items() if k != "description"}
        w("Instance template and grid:\n\n```json\n"
          + json.dumps({"instance": inst, "grid": meta.get("grid")}, sort_keys=True) + "\n```\n\n")
    w(f"Bounds: {', '.join(meta.get('bounds') or sorted({r.bound for r in rows if r.bound}))}; "
      f"method {settings.get('method', '?')}, solver {settings.get('solver', '?')}, "
      f"tol {settings.get('tol', '?')}, max_iters {settings.get('max_iters')}. "
      f"Growth variable `{growth}`" + (f", series by `{meta['series']}`" if meta.get("series") else "") + ".\n\n")
    ok = [r for r in rows if r.success]
    bad = [r for r in rows if r.failed and not r.invalid]
    n_invalid = sum(1 for r in rows if r.invalid)
    w(f"{len(rows)} stored points: {len(ok)} with verified bounds, {len(bad)} failed or unverified"
      + (f", {n_invalid} with invalid input" if n_invalid else "") + ".\n\n")
    if bad:
        w("Failed or unverified points (their numbers are not used):\n\n")
        for r in bad:
            w(f"* `{json.dumps(r.params, sort_keys=True)}` {r.bound}: {r.status} — {r.error or r.message}\n")
        w("\n")
    if invalid:
        w("Invalid points (the instance cannot be built there; fix the instance, then rerun the study):\n\n")
        _listing(w, [f"`{json.dumps(p, sort_keys=True)}` ({', '.join(what)}): {msg}" for p, msg, what in invalid])
    other = [m for m in left_out if m not in certs and "certificate that is missing" not in m]
    if other:
        w("Stored rows left out because they are not as advbound writes them (edited by hand?):\n\n")
        _listing(w, [f"`{m}`" for m in other])
    if certs:
        w("Rows whose certificate cannot be found from the store's folder (their numbers were verified "
          "when written, but cannot be rechecked from here):\n\n")
        _listing(w, [f"`{m}`" for m in certs])
    for s in series:
        w(f"### {s.label}\n\n| {growth} | domain size | lower | upper | gap |\n|---:|---:|---:|---:|---:|\n")
        for t, lo, up, d in zip(s.T, s.lower, s.upper, s.domain_size):
            gap = None if up is None else up - lo
            w(f"| {t:g} | {d} | {_f(lo)} | {_f(up)} | {_g(gap, 2)} |\n")
        w("\n")
    w(_PROVES + "\n")
    if exact is not None:
        w("## Exact t-query points next to ADV±\n\n")
        ex = meta.get("exact") or {}
        if ex:
            w(f"Exact settings: solver {ex.get('solver')}, tol {ex.get('tol')}, symmetry {ex.get('symmetry')}, "
              f"decision tolerance {ex.get('decision_tol')}.\n\n")
        w(markdown_exact_table(exact[0], exact[1], meta) + "\n")
        checks = [e.check for p in exact[1] for e in p.entries if e is not None]
        w(f"Checks: {checks.count('pass')} pass, {checks.count('fail')} fail, {checks.count('n/a')} n/a.\n\n")
        w(_EXACT_PROVES + "\n")
    w("## Growth-law fits (verified lower bounds)\n\n")
    w("Least squares with relative weights; parameters ± standard errors from the Jacobian; "
      "bracketed intervals are seeded residual-bootstrap 95% intervals. Ranked by the information "
      "criterion named below; Akaike weights. Points whose verified relative gap exceeds "
      f"{FIT_MAX_GAP:g} stay in the tables above but are left out of the fits.\n\n")
    for label, cmp in fits.items():
        w(f"### {label}\n\n")
        if isinstance(cmp, str):
            w(cmp + "\n\n")
            continue
        w(f"| model | parameters | {cmp.criterion} | BIC | weight |\n|---|---|---:|---:|---:|\n")
        for fr in cmp.fits:
            ps = "; ".join(f"{k} = {_g(v, 4)} ± {_g(fr.stderr.get(k), 2)}"
                           + (f" [{_g(fr.intervals[k][0], 4)}, {_g(fr.intervals[k][1], 4)}]"
                              if k in fr.intervals else "") for k, v in fr.params.items())
            crit = fr.aicc if cmp.criterion == "AICc" else fr.aic
            w(f"| {fr.model} | {ps} | {_g(crit, 4)} | {_g(fr.bic, 4)} | {cmp.weights.get(fr.model, 0):.3f} |\n")
        w(f"\n{cmp.verdict}\n\n")
    w("## Files\n\n")
    for p in [*figures, *tables, *data, prov]:
        w(f"* `{os.path.relpath(p, out)}`\n")
    w("\nProvenance (versions, solver settings, instance hashes, certificate paths) is in "
      "`provenance.json`.\n")
    return b.getvalue()
