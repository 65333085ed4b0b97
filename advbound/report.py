"""Reports of a study, built from its result store only (never solves).

This module owns turning stored rows into series (:func:`collect_series`), fitting
them (:func:`fit_series`, through :func:`advbound.fit.compare_models`) and
writing the report directory (:func:`write_report`): ``summary.md``; figures in
PNG and PDF (bound vs growth variable with fitted curves and the upper-bound
band, the ratios ``L/√T`` and ``L/√(T log T)``, fit residuals); LaTeX tables
(booktabs); the data as CSV and JSON; and provenance.  matplotlib is imported
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
import os
from pathlib import Path
from typing import Any

from .errors import AdvboundError
from .store import Store, StoredRow

__all__ = ["Series", "ReportFiles", "open_store", "collect_series", "fit_series", "write_report",
           "latex_results_table", "latex_fit_table"]

_KIND = "adversary"


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

    ``store`` overrides the path taken from a study file.  The store is opened read-only.
    """
    source = os.fspath(source)
    if store is not None:
        return Store(store, readonly=True)
    if source.endswith(".toml"):
        from .study import load_study
        return Store(load_study(source).store, readonly=True)
    return Store(source, readonly=True)


def _latest(rows: list[StoredRow]) -> list[StoredRow]:
    best: dict = {}
    for r in rows:  # rows come oldest first; later rows win
        best[(r.spec_key, r.bound)] = r
    return list(best.values())


def collect_series(store: Store, meta: dict | None = None) -> list[Series]:
    """Group the successful adversary rows into :class:`Series` by bound and series value.

    When several stored rows describe the same instance and bound (other solver settings or
    versions), the most recent one is used.
    """
    meta = meta if meta is not None else (store.get_meta("study") or {})
    growth = meta.get("growth") or "T"
    skey = meta.get("series")
    groups: dict = {}
    for r in _latest(store.rows(kind=_KIND, successful_only=True)):
        if r.lower is None or growth not in r.params:
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


def fit_series(series: list[Series], meta: dict | None = None, *, bootstrap: int | None = None,
               seed: int | None = None) -> dict:
    """Fit each series' verified lower bounds; returns ``{label: Comparison or reason-string}``.

    A series with fewer than 3 points, or with a growth value <= 1, gets a string saying why
    it was not fitted.
    """
    from .fit import compare_models
    meta = meta or {}
    laws = tuple(meta.get("laws") or ("sqrt", "sqrt_log", "power"))
    offsets = tuple(bool(o) for o in (meta.get("offsets") or (False, True)))
    bootstrap = int(meta.get("bootstrap", 200) if bootstrap is None else bootstrap)
    seed = int(meta.get("seed", 0) if seed is None else seed)
    out = {}
    for s in series:
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

    from .fit import evaluate
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
        meta = st.get_meta("study") or {}
        rows = st.rows(kind=_KIND)
        series = collect_series(st, meta)
        store_path = st.path
    if not rows:
        raise AdvboundError(f"{store_path}: the store holds no adversary results yet; run the study first")
    name = meta.get("name") or Path(store_path).stem
    out = Path(out if out is not None else (meta.get("report") or f"reports/{name}"))
    out.mkdir(parents=True, exist_ok=True)
    growth = meta.get("growth") or "T"
    fits = fit_series(series, meta, bootstrap=bootstrap, seed=seed)

    figures = (_plot_bounds(series, fits, growth, out) + _plot_ratios(series, growth, out)
               + _plot_residuals(fits, growth, out))
    t1 = out / "table_results.tex"
    t1.write_text(latex_results_table(series, growth))
    t2 = out / "table_fits.tex"
    t2.write_text(latex_fit_table(fits))

    data_rows = [r.to_dict() for r in rows]
    csv_path = out / "data.csv"
    cols = ["run_key", "kind", "bound", "params", "status", "lower", "upper", "gap", "domain_size",
            "time_solve", "time_total", "spec_key", "certificate", "error", "created"]
    with open(csv_path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in rows:
            w.writerow([json.dumps(r.params, sort_keys=True) if c == "params" else
                        ("" if getattr(r, c) is None else getattr(r, c)) for c in cols])
    json_path = out / "data.json"
    json_path.write_text(json.dumps({"study": meta, "rows": data_rows}, indent=1, sort_keys=True, default=str))
    fits_path = out / "fits.json"
    fits_path.write_text(json.dumps({k: (v if isinstance(v, str) else v.to_dict()) for k, v in fits.items()},
                                    indent=1, allow_nan=False, default=str))

    generated = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    versions = sorted({json.dumps(r.versions, sort_keys=True) for r in rows})
    prov = {
        "generated": generated, "store": os.path.abspath(store_path), "study": meta,
        "solver_settings": sorted({json.dumps(r.solver, sort_keys=True) for r in rows}),
        "versions": [json.loads(v) for v in versions],
        "points": [{"run_key": r.run_key, "spec_key": r.spec_key, "params": r.params, "bound": r.bound,
                    "status": r.status, "certificate": r.certificate, "created": r.created} for r in rows],
    }
    prov["solver_settings"] = [json.loads(s) for s in prov["solver_settings"]]
    prov_path = out / "provenance.json"
    prov_path.write_text(json.dumps(prov, indent=1, sort_keys=True, default=str))

    summary = out / "summary.md"
    summary.write_text(_summary(meta, name, rows, series, fits, growth, generated, store_path, figures,
                                [t1, t2], [csv_path, json_path, fits_path], prov_path, out))
    return ReportFiles(str(out), str(summary), tuple(figures), (str(t1), str(t2)),
                       (str(csv_path), str(json_path), str(fits_path)), str(prov_path))


def _summary(meta, name, rows, series, fits, growth, generated, store_path, figures, tables, data, prov,
             out) -> str:
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
    bad = [r for r in rows if r.failed]
    w(f"{len(rows)} stored points: {len(ok)} with verified bounds, {len(bad)} failed or unverified.\n\n")
    if bad:
        w("Failed or unverified points (their numbers are not used):\n\n")
        for r in bad:
            w(f"* `{json.dumps(r.params, sort_keys=True)}` {r.bound}: {r.status} — {r.error or r.message}\n")
        w("\n")
    for s in series:
        w(f"### {s.label}\n\n| {growth} | domain size | lower | upper | gap |\n|---:|---:|---:|---:|---:|\n")
        for t, lo, up, d in zip(s.T, s.lower, s.upper, s.domain_size):
            gap = None if up is None else up - lo
            w(f"| {t:g} | {d} | {_f(lo)} | {_f(up)} | {_g(gap, 2)} |\n")
        w("\n")
    w(_PROVES + "\n")
    w("## Growth-law fits (verified lower bounds)\n\n")
    w("Least squares with relative weights; parameters ± standard errors from the Jacobian; "
      "bracketed intervals are seeded residual-bootstrap 95% intervals. Ranked by the information "
      "criterion named below; Akaike weights.\n\n")
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
