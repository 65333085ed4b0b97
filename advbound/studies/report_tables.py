"""The tables and data files of a report: LaTeX (booktabs), Markdown, CSV and JSON, and provenance.

This module owns the number formatting of the tables, :func:`latex_results_table`,
:func:`latex_fit_table`, the exact-point tables (:func:`markdown_exact_table`,
:func:`latex_exact_table`), and the writing of ``table_*.tex``, ``exact.json``, ``data.csv``,
``data.json``, ``fits.json`` and ``provenance.json`` into a report folder.

>>> _tex("a_b & c"), _f(None), _gtex(1.5e-7, 2)
('a\\\\_b \\\\& c', '--', '1.5\\\\times 10^{-7}')
"""

from __future__ import annotations

import csv
import json
import math
import os
from pathlib import Path

from advbound.studies.report_exact import ExactEntry, ExactPoint
from advbound.studies.report_series import Series
from advbound.studies.store import StoredRow

__all__ = ["latex_results_table", "latex_fit_table", "markdown_exact_table", "latex_exact_table"]


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


def latex_results_table(series: list[Series], growth: str = "T", conj=(), ratios=()) -> str:
    """A booktabs ``tabular`` of bound, series, growth value, domain size, lower, upper and gap.

    With conjecture series (``conj``, :func:`advbound.studies.report_series.collect_conjecture`) their rows
    follow, with bound ``conjecture`` and no upper bound, and a last column gives the ratio of each to the
    verified ADV± lower bound of the same instance (``ratios``, :func:`conjecture_ratios`).
    """
    sname = next((x.name for x in [*series, *conj] if x.name), None) or "series"
    extra = bool(conj)
    lines = [r"\begin{tabular}{llrrrrr" + ("r}" if extra else "}"), r"\toprule",
             rf"bound & {_tex(sname)} & ${_tex(growth)}$ & $|D|$ & lower & upper & rel.\ gap"
             + (r" & conj.\,/\,ADV$^\pm$ \\" if extra else r" \\"), r"\midrule"]
    for i, s in enumerate(series):
        if i:
            lines.append(r"\addlinespace")
        for k, (t, lo, up, d) in enumerate(zip(s.T, s.lower, s.upper, s.domain_size)):
            gap = None if up is None else (up - lo) / max(abs(up), 1e-300)
            key = f"max: {s.argmax[k]}" if s.envelope else ('' if s.key is None else s.key)
            lines.append(f"{_tex(s.bound)} & {_tex(key)} & {t:g} & "
                         f"{'--' if d is None else d} & {_f(lo)} & {_f(up)} & "
                         f"{'--' if gap is None else '$' + _gtex(gap, 2) + '$'}" + (" & --" if extra else "")
                         + " \\\\")
    by_label = {r.label: dict(zip(r.T, r.value)) for r in ratios}
    for c in conj:
        lines.append(r"\addlinespace")
        rat = by_label.get(c.label, {})
        for t, lo, d in zip(c.T, c.lower, c.domain_size):
            lines.append(f"conjecture & {_tex('' if c.key is None else c.key)} & {t:g} & "
                         f"{'--' if d is None else d} & {_f(lo)} & -- & -- & {_f(rat.get(t), 4)} \\\\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


def latex_fit_table(fits: dict) -> str:
    """A booktabs ``tabular`` of every fitted model: series, model, parameters ± s.e., AICc, weight."""
    lines = [r"\begin{tabular}{p{3.2cm}lp{5.2cm}rp{1.6cm}}", r"\toprule",
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
            few = cmp.too_few(fr.model)
            lines.append(f"{_tex(label)} & {_tex(fr.model)} & {ps} & {'--' if few else _g(fr.aicc, 4)} & "
                         f"{'too few points' if few else format(cmp.weights.get(fr.model, 0.0), '.3f')} \\\\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"


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


# -- the files ------------------------------------------------------------------------------
def _write_fit_tables(series: list[Series], fits: dict, growth: str, out: Path, conj=(), ratios=()) -> list[Path]:
    """Write ``table_results.tex`` and ``table_fits.tex``; their paths."""
    t1 = out / "table_results.tex"
    t1.write_text(latex_results_table(series, growth, conj, ratios))
    t2 = out / "table_fits.tex"
    t2.write_text(latex_fit_table(fits))
    return [t1, t2]


def _write_exact_files(exact: tuple, exact_rows: list[StoredRow], meta: dict, out: Path) -> tuple[Path, Path]:
    """Write ``table_exact.tex`` and ``exact.json`` of ``exact`` (``(columns, points)``); their paths."""
    t3 = out / "table_exact.tex"
    t3.write_text(latex_exact_table(exact[0], exact[1], meta))
    exact_json = out / "exact.json"
    exact_json.write_text(json.dumps({"columns": exact[0], "points": [p.to_dict() for p in exact[1]],
                                      "rows": [r.to_dict() for r in exact_rows]},
                                     indent=1, sort_keys=True, default=str))
    return t3, exact_json


def _write_data(rows: list[StoredRow], certificate: dict, meta: dict, fits: dict, out: Path
                ) -> tuple[Path, Path, Path]:
    """Write ``data.csv``, ``data.json`` and ``fits.json``; their paths.

    ``certificate`` maps each row's run key to its certificate path as the report shows it (rows without
    one, e.g. conjecture rows, may be missing).  Conjecture rows fill ``gamma_params`` (the constants
    used, JSON) and ``fitted``; the other rows leave them empty.
    """
    data_rows = [dict(r.to_dict(), certificate=certificate.get(r.run_key)) for r in rows]
    csv_path = out / "data.csv"
    cols = ["run_key", "kind", "bound", "params", "status", "lower", "upper", "gap", "domain_size",
            "time_solve", "time_total", "spec_key", "certificate", "error", "created", "gamma_params", "fitted"]
    with open(csv_path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in rows:
            w.writerow([_csv_cell(r, c, certificate) for c in cols])
    json_path = out / "data.json"
    json_path.write_text(json.dumps({"study": portable_meta(meta), "rows": data_rows}, indent=1, sort_keys=True,
                                    default=str))
    fits_path = out / "fits.json"
    fits_path.write_text(json.dumps({k: (v if isinstance(v, str) else v.to_dict()) for k, v in fits.items()},
                                    indent=1, allow_nan=False, default=str))
    return csv_path, json_path, fits_path


def _csv_cell(r: StoredRow, c: str, certificate: dict):
    if c == "params":
        return json.dumps(r.params, sort_keys=True)
    if c == "certificate":
        return certificate.get(r.run_key) or ""
    if c == "gamma_params":
        p = r.values.get("params") if r.kind == "conjecture" else None
        return "" if p is None else json.dumps(p, sort_keys=True)
    if c == "fitted":
        f = r.values.get("fitted") if r.kind == "conjecture" else None
        return "" if f is None else str(bool(f)).lower()
    v = getattr(r, c)
    return "" if v is None else v


def portable_meta(meta: dict) -> dict:
    """The study settings with absolute paths (of the machine that ran the study) cut to their last part.

    >>> portable_meta({"certificates": "/work/runs/a-certificates", "store": "studies/a.sqlite"})
    {'certificates': 'a-certificates', 'store': 'studies/a.sqlite'}
    """
    out = dict(meta)
    for key in ("store", "certificates", "report", "path"):
        v = out.get(key)
        if isinstance(v, str) and os.path.isabs(v):
            out[key] = os.path.basename(os.path.normpath(v))
    return out


def _write_provenance(rows: list[StoredRow], certificate: dict, exact_rows: list[StoredRow] | None, meta: dict,
                      store_path: str, out: Path, generated: str, conj_rows=()) -> Path:
    """Write ``provenance.json`` (``exact_rows`` is ``None`` when the report has no exact points; conjecture
    rows go under ``conjecture_points``); its path."""
    versions = sorted({json.dumps(r.versions, sort_keys=True) for r in rows})
    prov = {
        "generated": generated, "store": os.path.relpath(os.path.abspath(store_path), os.path.abspath(out)),
        "paths": "store: relative to this report's folder; certificate: relative to the store's folder; "
                 "absolute paths in the study settings are cut to their last part",
        "study": portable_meta(meta),
        "solver_settings": sorted({json.dumps(r.solver, sort_keys=True) for r in rows}),
        "versions": [json.loads(v) for v in versions],
        "points": [{"run_key": r.run_key, "spec_key": r.spec_key, "params": r.params, "bound": r.bound,
                    "status": r.status, "certificate": certificate[r.run_key], "created": r.created}
                   for r in rows],
    }
    prov["solver_settings"] = [json.loads(s) for s in prov["solver_settings"]]
    if exact_rows is not None:
        prov["exact_settings"] = [json.loads(x) for x in sorted({json.dumps(r.solver, sort_keys=True)
                                                                 for r in exact_rows})]
        prov["exact_points"] = [{"run_key": r.run_key, "spec_key": r.spec_key, "params": r.params,
                                 "request": r.solver, "status": r.status, "created": r.created,
                                 "versions": r.versions} for r in exact_rows]
    if conj_rows:
        prov["conjecture_points"] = [{"run_key": r.run_key, "spec_key": r.spec_key, "params": r.params,
                                      "settings": r.solver, "status": r.status, "created": r.created,
                                      "versions": r.versions} for r in conj_rows]
    prov_path = out / "provenance.json"
    prov_path.write_text(json.dumps(prov, indent=1, sort_keys=True, default=str))
    return prov_path
