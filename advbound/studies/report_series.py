"""What a report takes from a study's result store: the series of verified bounds, their fits, and
the points and rows it must name.

This module owns :class:`Series` (the successful adversary points of one bound and one
series value) and :func:`collect_series`, :func:`open_store` (read-only), the check of the
store's study settings (:func:`study_settings`), the fits of the series (:func:`fit_series`,
through :func:`advbound.studies.fit.compare_models`, leaving out loose points beyond
:data:`FIT_MAX_GAP`), the invalid points no later row replaced (:func:`invalid_points`) and the
rows whose certificate cannot be found from the store's folder (:func:`certificate_problems`), and
the conjecture series (rows of kind ``"conjecture"``: :func:`collect_conjecture`, compared with the
optimum by :func:`conjecture_ratios`).  The report itself is :func:`advbound.studies.report.write_report`.

>>> s = Series("general", None, (4.0, 8.0), (2.0, 2.9), (2.0, 3.5), (24, 48), ("a", "b"))
>>> s.label, _fit_points(s, FIT_MAX_GAP).T
('general', (4.0,))
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
from typing import Any

from advbound.studies.store import Store, StoredRow

__all__ = ["Series", "open_store", "collect_series", "study_settings", "fit_series", "FIT_MAX_GAP",
           "invalid_points", "certificate_problems", "collect_conjecture", "conjecture_title", "conjecture_ratios",
           "Ratio"]

_KIND = "adversary"
_EXACT_KIND = "exact"
_CONJ_KIND = "conjecture"


@dataclasses.dataclass(frozen=True)
class Series:
    """The successful points of one bound kind and one series value, sorted by the growth variable.

    ``upper`` entries are ``None`` where no upper bound verified.  A conjecture series (the certified
    bounds of a researcher's Γ, :func:`collect_conjecture`) has ``conjecture`` set to its description,
    e.g. ``"gamma_star, fitted each"``, and no upper bounds.
    """

    bound: str
    key: Any
    T: tuple
    lower: tuple
    upper: tuple
    domain_size: tuple
    rows: tuple
    name: str | None = None
    envelope: str | None = None
    argmax: tuple = ()
    at_edge: tuple = ()
    conjecture: str | None = None

    @property
    def label(self) -> str:
        """E.g. ``"general, rows=3"`` (``"series 3"`` without a name), ``"general"`` without a key,
        ``"general, envelope over rows"`` for an envelope series, or ``"conjecture (gamma_star, fitted
        each), rows=3"``."""
        if self.conjecture:
            head = f"conjecture ({self.conjecture})"
            if self.key is None:
                return head
            return f"{head}, {self.name}={self.key}" if self.name else f"{head}, series {self.key}"
        if self.envelope:
            return f"{self.bound}, envelope over {self.envelope}"
        if self.key is None:
            return self.bound
        return f"{self.bound}, {self.name}={self.key}" if self.name else f"{self.bound}, series {self.key}"


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
        from advbound.studies.study_spec import load_study
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
    env = meta.get("envelope")
    if env:
        everything = [r for rows in groups.values() for r in rows]
        out += [s for s in (_envelope(everything, bound, growth, env) for bound in _bounds_of(groups)) if s]
    return out


def _bounds_of(groups: dict) -> list[str]:
    order = {"general": 0, "positive": 1}
    return sorted({bound for bound, _ in groups}, key=lambda b: (order.get(b, 9), b))


def _envelope(rows: list[StoredRow], bound: str, growth: str, param: str) -> Series | None:
    """The envelope ``E(T) = max over param`` of one bound: at each growth value the row with the
    largest verified lower bound.  Its upper bound is the largest upper bound over the computed values
    of ``param`` (None when one is missing): a bound on the maximum over those values only.
    ``at_edge`` marks growth values whose best ``param`` is the smallest or largest computed one,
    where the maximum over all values may lie outside the computed range."""
    byT: dict = {}
    for r in rows:
        if r.bound == bound and param in r.params and _real(r.params[param]):
            byT.setdefault(float(r.params[growth]), []).append(r)
    if not byT:
        return None
    Ts = sorted(byT)
    best = [max(byT[T], key=lambda r: r.lower) for T in Ts]
    uppers = [None if any(r.upper is None for r in byT[T]) else max(r.upper for r in byT[T]) for T in Ts]
    edge = []
    for T, b in zip(Ts, best):
        vals = [r.params[param] for r in byT[T]]
        edge.append(len(vals) < 2 or b.params[param] in (min(vals), max(vals)))
    return Series(bound, None, tuple(Ts), tuple(r.lower for r in best), tuple(uppers),
                  tuple(r.domain_size for r in best), tuple(best), param, envelope=param,
                  argmax=tuple(r.params[param] for r in best), at_edge=tuple(edge))


def _sortable(v):
    return (0, float(v), "") if isinstance(v, (int, float)) else (1, 0.0, str(v))


_SETTING_CHECKS = {
    "name": (lambda v: isinstance(v, str), "must be text"),
    "description": (lambda v: isinstance(v, str), "must be text"),
    "report": (lambda v: isinstance(v, str), "must be text"),
    "growth": (lambda v: isinstance(v, str), "must be text"),
    "series": (lambda v: isinstance(v, str), "must be text"),
    "envelope": (lambda v: isinstance(v, str), "must be text"),
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
    "conjecture": (lambda v: isinstance(v, dict), "must be a table"),
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
    what = r.bound if r.kind not in (_EXACT_KIND, _CONJ_KIND) else json.dumps(r.solver, sort_keys=True, default=str)
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
            what = ("conjecture" if r.kind == _CONJ_KIND else r.bound if r.kind != _EXACT_KIND
                    else "exact " + _exact_label(r.solver))
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


# -- the conjecture -------------------------------------------------------------------------
def conjecture_title(meta: dict) -> str:
    """How the report names the conjecture: ``"gamma_star, fitted each"``, ``"gamma_star, fitted once"``,
    ``"gamma_star, cross = 0.05"`` (constants as given) or just the label without constants.

    >>> conjecture_title({"conjecture": {"label": "g", "fit": "none", "params": {"c": 0.5}}})
    'g, c = 0.5'
    """
    cj = meta.get("conjecture") or {}
    label = str(cj.get("label") or cj.get("callable") or "Γ")
    fit = cj.get("fit", "none")
    if fit in ("each", "once"):
        return f"{label}, fitted {fit}"
    params = cj.get("params") or {}
    return ", ".join([label, *(f"{k} = {v:g}" for k, v in params.items() if _real(v))])


def collect_conjecture(store: Store, meta: dict | None = None) -> list[Series]:
    """The successful conjecture rows as :class:`Series`, one per series value (latest row per instance)."""
    meta = study_settings(meta if meta is not None else store.study_meta(), store.path)
    growth = meta.get("growth") or "T"
    skey = meta.get("series")
    title = conjecture_title(meta)
    groups: dict = {}
    for r in _latest(store.rows(kind=_CONJ_KIND, successful_only=True)):
        if r.lower is None or growth not in r.params or not _real(r.params[growth]):
            continue
        groups.setdefault(r.params.get(skey) if skey else None, []).append(r)
    out = []
    for key in sorted(groups, key=_sortable):
        rows = sorted(groups[key], key=lambda r: float(r.params[growth]))
        out.append(Series("general", key, tuple(float(r.params[growth]) for r in rows), tuple(r.lower for r in rows),
                          (None,) * len(rows), tuple(r.domain_size for r in rows), tuple(rows), skey,
                          conjecture=title))
    return out


@dataclasses.dataclass(frozen=True)
class Ratio:
    """Conjecture ÷ optimum along one series: at each growth value both have, the conjecture's certified
    bound over the verified ADV± lower bound of the same instance (``optimum``, with its ``upper``)."""

    conjecture: Series
    T: tuple
    value: tuple
    optimum: tuple
    upper: tuple

    @property
    def label(self) -> str:
        """The conjecture series' label."""
        return self.conjecture.label


def conjecture_ratios(conj: list[Series], series: list[Series]) -> list[Ratio]:
    """One :class:`Ratio` per conjecture series that shares growth values with the ADV± (``general``)
    series of the same series value; envelope series are not used."""
    opt = {s.key: s for s in series if s.bound == "general" and not s.envelope and not s.conjecture}
    out = []
    for c in conj:
        o = opt.get(c.key)
        if o is None:
            continue
        at = {t: (lo, up) for t, lo, up in zip(o.T, o.lower, o.upper)}
        keep = [(t, v / at[t][0], at[t][0], at[t][1]) for t, v in zip(c.T, c.lower) if t in at and at[t][0] > 0]
        if keep:
            out.append(Ratio(c, *(tuple(x) for x in zip(*keep))))
    return out
