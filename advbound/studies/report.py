"""Reports of a study, built from its result store only (never solves).

A report turns stored rows into series (:func:`collect_series`), fits
them (:func:`fit_series`, through :func:`advbound.studies.fit.compare_models`) and
writes the report directory (:func:`write_report`): ``summary.md``; figures in
PNG and PDF (bound vs growth variable with fitted curves and the upper-bound
band, the ratios ``L/√T`` and ``L/√(T log T)``, fit residuals); LaTeX tables
(booktabs); the data as CSV and JSON; and provenance.  When the store holds exact
t-query rows (kind ``"exact"``), it adds a table of them next to ADV± with the check
``t ≥ ((1 − 2√(ε(1−ε)))/2)·ADV±`` (:func:`collect_exact`, :func:`adversary_check`) and the
figure ``exact_vs_T``.  When it holds conjecture rows (kind ``"conjecture"``, a researcher's Γ
evaluated at each grid point), the conjecture is drawn as its own series in ``bound_vs_T``, fitted like
the others, listed in the tables and data files, compared with the optimum in the figure
``conjecture_ratio`` and described in a section of ``summary.md``.  matplotlib is imported
inside the drawing functions (Agg canvas, no pyplot state).

The work is shared with sibling modules, whose names this module re-exports:
:mod:`advbound.studies.report_series` (series, settings and fits read from the store),
:mod:`advbound.studies.report_exact` (exact points and the adversary check),
:mod:`advbound.studies.report_figures` (the figures), :mod:`advbound.studies.report_tables`
(LaTeX, Markdown, CSV and JSON files, provenance) and :mod:`advbound.studies.report_summary`
(``summary.md``).  This module owns :func:`write_report`, the order of its steps, and
:class:`ReportFiles`.

Typical call::

    files = write_report("studies/default.sqlite", out="reports/default")
    files.summary          # 'reports/default/summary.md'

>>> Series("general", 3, (4.0, 5.0), (2.0, 2.2), (2.0, 2.3), (24, 48), (), "rows").label
'general, rows=3'
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import os
from pathlib import Path

from advbound.errors import AdvboundError
from advbound.studies.report_exact import (CHECK_SLACK, ExactEntry, ExactPoint, _has_exact, adversary_check,
                                           adversary_factor, collect_exact)
from advbound.studies.report_figures import (_plot_bounds, _plot_conjecture_ratio, _plot_exact, _plot_ratios,
                                             _plot_residuals)
from advbound.studies.report_series import (_CONJ_KIND, _EXACT_KIND, _KIND, FIT_MAX_GAP, Series, _latest,
                                            _report_certificate, certificate_problems, collect_conjecture,
                                            collect_series, conjecture_ratios, fit_series, invalid_points,
                                            open_store, study_settings)
from advbound.studies.report_summary import SUMMARY_LIST_LIMIT, _summary  # noqa: F401 (re-exported)
from advbound.studies.report_tables import (_write_data, _write_exact_files, _write_fit_tables, _write_provenance,
                                            latex_exact_table, latex_fit_table, latex_results_table,
                                            markdown_exact_table)
from advbound.studies.store import Store

__all__ = ["Series", "ReportFiles", "open_store", "collect_series", "fit_series", "write_report", "study_settings",
           "invalid_points", "certificate_problems",
           "latex_results_table", "latex_fit_table", "ExactEntry", "ExactPoint", "collect_exact",
           "adversary_factor", "adversary_check", "markdown_exact_table", "latex_exact_table", "CHECK_SLACK", "FIT_MAX_GAP"]


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


@dataclasses.dataclass(frozen=True)
class _StoreContents:
    """What a report reads from its store, in one read-only open (see :func:`_read_store`).

    ``rows`` are the adversary rows, ``exact`` is ``(columns, points)`` of :func:`collect_exact`
    (``None`` without exact points), ``conj`` the conjecture series and ``conj_rows`` the latest
    conjecture row of each instance (any status), ``left_out`` the store's warnings and ``certificate`` maps each
    adversary row's run key to its certificate path as the report shows it.
    """

    meta: dict
    rows: list
    series: list
    exact_rows: list
    exact: tuple | None
    invalid: list
    certs: list
    left_out: list
    store_path: str
    certificate: dict
    conj: list = dataclasses.field(default_factory=list)
    conj_rows: list = dataclasses.field(default_factory=list)


def _read_store(st: Store) -> _StoreContents:
    """Everything the report takes from the open store ``st`` (the order fixes the order of the warnings)."""
    meta = study_settings(st.study_meta(), st.path)
    rows = st.rows(kind=_KIND)
    series = collect_series(st, meta)
    exact_rows = st.rows(kind=_EXACT_KIND)
    exact = collect_exact(st, meta) if _has_exact(meta, exact_rows) else None
    conj = collect_conjecture(st, meta)
    conj_rows = _latest(st.rows(kind=_CONJ_KIND))
    st.check_rows()
    invalid = invalid_points(st.rows(), meta.get("grid"))
    certs = certificate_problems(st, rows)
    left_out = list(st.warnings)
    certificate = {r.run_key: _report_certificate(st, r) for r in rows}
    return _StoreContents(meta, rows, series, exact_rows, exact, invalid, certs, left_out, st.path, certificate,
                          conj, conj_rows)


def _report_folder(out) -> Path:
    """The report folder ``out``, created if missing; :class:`AdvboundError` when it cannot be written."""
    out = Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise AdvboundError(f"{out}: cannot create the report folder ({err.strerror or err})") from None
    if not os.access(out, os.W_OK):
        raise AdvboundError(f"{out}: the report folder is not writable")
    return out


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
        got = _read_store(st)
    meta, rows, series, exact = got.meta, got.rows, got.series, got.exact
    if not rows:
        raise AdvboundError(f"{got.store_path}: the store holds no adversary results yet; run the study first")
    name = meta.get("name") or Path(got.store_path).stem
    out = _report_folder(out if out is not None else (meta.get("report") or f"reports/{name}"))
    growth = meta.get("growth") or "T"
    conj = got.conj
    ratios = conjecture_ratios(conj, series)
    fits = fit_series(series + conj, meta, bootstrap=bootstrap, seed=seed)

    figures = (_plot_bounds(series, fits, growth, out, conj) + _plot_ratios(series, growth, out)
               + _plot_residuals(fits, growth, out))
    if ratios:
        figures += _plot_conjecture_ratio(ratios, series, growth, out)
    tables = _write_fit_tables(series, fits, growth, out, conj, ratios)
    exact_json = None
    if exact is not None:
        figures += _plot_exact(exact[0], exact[1], growth, meta.get("series"), out)
        t3, exact_json = _write_exact_files(exact, got.exact_rows, meta, out)
        tables.append(t3)

    csv_path, json_path, fits_path = _write_data(rows + got.conj_rows, got.certificate, meta, fits, out)
    generated = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    prov_path = _write_provenance(rows, got.certificate, None if exact is None else got.exact_rows, meta,
                                  got.store_path, out, generated, got.conj_rows)

    summary = out / "summary.md"
    data = [csv_path, json_path, *([exact_json] if exact_json else []), fits_path]
    summary.write_text(_summary(meta, name, rows, series, fits, growth, generated, got.store_path, figures,
                                tables, data, prov_path, out, exact, invalid=got.invalid, left_out=got.left_out,
                                certs=got.certs, conj=conj, ratios=ratios, conj_rows=got.conj_rows))
    return ReportFiles(str(out), str(summary), tuple(figures), tuple(str(t) for t in tables),
                       tuple(str(d) for d in data), str(prov_path))
