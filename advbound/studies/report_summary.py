"""The summary text of a report (``summary.md``): what was computed, what the numbers mean, the fits.

This module owns :func:`_summary`, which writes the Markdown of ``summary.md`` from what
:func:`advbound.studies.report.write_report` read and wrote, and the fixed paragraphs on what
the lower and upper bounds and the exact points prove, and the section on a conjectured Γ
(:func:`_conjecture_section`: its bounds, the ratio to the optimum and how that ratio moves).

>>> _trend((4.0, 5.0, 6.0), (0.94, 0.91, 0.88), "T")
'over T = 4..6 the ratio falls from 0.9400 to 0.8800'
"""

from __future__ import annotations

import io
import json
import os

from advbound.studies.fit import CAVEAT
from advbound.studies.report_series import FIT_MAX_GAP
from advbound.studies.report_tables import _f, _g, markdown_exact_table

__all__ = ["SUMMARY_LIST_LIMIT"]

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


#: At most this many entries per list of invalid or left-out rows in ``summary.md``.
SUMMARY_LIST_LIMIT = 20


def _listing(w, items) -> None:
    for line in items[:SUMMARY_LIST_LIMIT]:
        w(f"* {line}\n")
    if len(items) > SUMMARY_LIST_LIMIT:
        w(f"* ... and {len(items) - SUMMARY_LIST_LIMIT} more\n")
    w("\n")


def _relative_gap(lo, up):
    """``(upper − lower) / upper``, the figure studies target (None without an upper bound)."""
    return None if up is None else (up - lo) / max(abs(up), 1e-300)


def _default_tol(method) -> str:
    """The tolerance a study without ``tol`` ran with, in words."""
    return {"factored": "1e-4 (target relative gap)", "rows": "1e-8",
            "auto": "the method's default (1e-8 for the rows program, 1e-7 dense, 1e-4 factored)"}.get(method, "1e-7")


def _envelope_section(w, s, growth) -> None:
    """The envelope series: the best value of its parameter at each growth value, and where it is unsure."""
    p = s.envelope
    w(f"### {s.label}\n\nAt each {growth}, the largest verified lower bound over the computed values of `{p}`, "
      f"and the `{p}` that gives it. The upper column is the largest upper bound over those values: it bounds "
      f"the maximum over the computed range only.\n\n"
      f"| {growth} | best {p} | domain size | lower | upper | relative gap |\n|---:|---:|---:|---:|---:|---:|\n")
    for t, n, lo, up, d, edge in zip(s.T, s.argmax, s.lower, s.upper, s.domain_size, s.at_edge):
        gap = _relative_gap(lo, up)
        w(f"| {t:g} | {n}{' (edge)' if edge else ''} | {d} | {_f(lo)} | {_f(up)} | {_g(gap, 2)} |\n")
    edges = [f"{t:g}" for t, e in zip(s.T, s.at_edge) if e]
    if edges:
        w(f"\n(edge): the best `{p}` is the smallest or largest one computed at {growth} = {', '.join(edges)}, so "
          f"the envelope there may be larger than shown; extend the grid of `{p}`.\n")
    w("\n")


#: First and last ratio closer than this are reported as "stays at".
TREND_TOL = 5e-4


def _span(T) -> str:
    """``4..7`` for consecutive integers, else the values listed."""
    ints = all(float(t).is_integer() for t in T)
    if ints and len(T) > 2 and list(T) == [T[0] + k for k in range(len(T))]:
        return f"{T[0]:g}..{T[-1]:g}"
    return ", ".join(f"{t:g}" for t in T)


def _trend(T, r, growth) -> str:
    """One plain sentence on how the ratio moves from the first to the last growth value."""
    if len(T) == 1:
        return f"at {growth} = {T[0]:g} (one point) the ratio is {r[0]:.4f}"
    first, last = r[0], r[-1]
    head = f"over {growth} = {_span(T)} the ratio"
    if abs(last - first) < TREND_TOL:
        text = f"{head} stays at {first:.4f} (first and last differ by less than {TREND_TOL:g})"
    else:
        text = f"{head} {'falls' if last < first else 'rises'} from {first:.4f} to {last:.4f}"
    steps = [b - a for a, b in zip(r, r[1:])]
    if any(x > TREND_TOL for x in steps) and any(x < -TREND_TOL for x in steps):
        text += f", not monotonically (range {min(r):.4f} to {max(r):.4f})"
    return text


def _conjecture_section(w, meta, growth, conj, ratios, conj_rows) -> None:
    """``## Conjectured Γ``: what was evaluated, one table per series, the ratio and its trend."""
    from advbound.studies.report_series import conjecture_title
    cj = meta.get("conjecture") or {}
    w(f"## Conjectured Γ: {conjecture_title(meta)}\n\n")
    fit = cj.get("fit", "none")
    consts = ", ".join(f"{k} = {v:g}" for k, v in (cj.get("params") or {}).items()) or "none"
    how = {"none": f"evaluated at the given constants ({consts})",
           "each": f"its constants fitted at every grid point (start {consts}; {cj.get('fit_method')}, "
                   f"{cj.get('starts')} starts, at most {cj.get('max_evals')} evaluations, "
                   f"seed {cj.get('seed')})",
           "once": f"its constants fitted once per series, at the smallest {growth} (start {consts}; "
                   f"{cj.get('fit_method')}, {cj.get('starts')} starts, at most {cj.get('max_evals')} evaluations, "
                   f"seed {cj.get('seed')}), and reused at the larger {growth}"}.get(fit, fit)
    digest = (cj.get("sha256") or "")[:12]
    w(f"The callable `{cj.get('callable')}`" + (f" (file sha256 {digest}…)" if digest else "")
      + f" gives Γ(x, y, **constants), {how}. At each grid point the value is the certified ratio "
      "‖Γ‖ / max_j ‖Γ∘Δ_j‖/c_j after symmetrising Γ and zeroing it on equal-output pairs, from dense "
      "eigensolvers (floating point; functions above the dense limit of `advbound gamma` are skipped). "
      "Like the optimum's lower value it is a lower bound on ADV± of that function; fitted constants "
      "are re-evaluated, not the optimiser's number.\n\n")
    for c in conj:
        w(f"### {c.label}\n\n| {growth} | domain size | conjecture | constants | fitted at |\n"
          "|---:|---:|---:|---|---|\n")
        for t, lo, d, r in zip(c.T, c.lower, c.domain_size, c.rows):
            ps = ", ".join(f"{k} = {v:.6g}" for k, v in (r.values.get("params") or {}).items()) or "--"
            at = r.values.get("fitted_at")
            at = " ".join(f"{k}={v}" for k, v in at.items()) if isinstance(at, dict) else "--"
            w(f"| {t:g} | {d} | {_f(lo)} | {ps} | {at} |\n")
        w("\n")
    w("### Ratio to the optimum\n\n")
    if ratios:
        w("Conjecture ÷ optimum, the optimum being the **verified lower bound** on ADV± of the same instance "
          "(the `lower` column above); since that is at most ADV±, the ratio shown is at least "
          "conjecture ÷ ADV±, and equal to it up to the optimum's relative gap. Figure `conjecture_ratio.png`.\n\n")
        for r in ratios:
            where = r.conjecture.label.split("), ", 1)[1] if "), " in r.conjecture.label else "all points"
            w(f"* {where}: {_trend(r.T, r.value, growth)}; range {min(r.value):.4f} to {max(r.value):.4f}.\n")
        w(f"\nThese describe the computed range of {growth} only.\n\n")
    else:
        w("No ratio: no grid point has both a conjecture value and a verified ADV± (`general`) lower bound.\n\n")
    others = [r for r in conj_rows if not r.success and not r.invalid]
    if others:
        w("Conjecture points without a value:\n\n")
        _listing(w, [f"`{json.dumps(r.params, sort_keys=True)}`: {r.status} — {r.error or r.message}"
                     for r in others])


def _summary(meta, name, rows, series, fits, growth, generated, store_path, figures, tables, data, prov,
             out, exact=None, invalid=(), left_out=(), certs=(), conj=(), ratios=(), conj_rows=()) -> str:
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
      f"method {settings.get('method', '?')}, solver {settings.get('solver') or 'the one the method picks'}, "
      f"tol {settings.get('tol') or _default_tol(settings.get('method'))}, "
      f"{'no iteration limit' if settings.get('max_iters') is None else 'max_iters ' + str(settings['max_iters'])}. "
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
        if s.envelope:
            _envelope_section(w, s, growth)
            continue
        w(f"### {s.label}\n\n| {growth} | domain size | lower | upper | relative gap |\n"
          f"|---:|---:|---:|---:|---:|\n")
        for t, lo, up, d in zip(s.T, s.lower, s.upper, s.domain_size):
            gap = _relative_gap(lo, up)
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
    if meta.get("conjecture") or conj_rows:
        _conjecture_section(w, meta, growth, conj, ratios, conj_rows)
    w("## Growth-law fits (verified lower bounds)\n\n")
    w("Least squares with relative weights; parameters ± standard errors from the Jacobian; "
      "bracketed intervals are seeded residual-bootstrap 95% intervals. Ranked by the information "
      "criterion named below; Akaike weights. Points whose verified relative gap exceeds "
      f"{FIT_MAX_GAP:g} stay in the tables above but are left out of the fits. A law that leaves fewer than "
      "2 degrees of freedom (points minus parameters) is fitted but not ranked. " + CAVEAT + "\n\n")
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
            if cmp.too_few(fr.model):
                w(f"| {fr.model} | {ps} | -- | -- | too few points for this law |\n")
            else:
                w(f"| {fr.model} | {ps} | {_g(crit, 4)} | {_g(fr.bic, 4)} | {cmp.weights.get(fr.model, 0):.3f} |\n")
        w(f"\n{cmp.verdict.replace(' ' + CAVEAT, '')}\n\n")
    w("## Files\n\n")
    for p in [*figures, *tables, *data, prov]:
        w(f"* `{os.path.relpath(p, out)}`\n")
    w("\nProvenance (versions, solver settings, instance hashes, certificate paths) is in "
      "`provenance.json`.\n")
    return b.getvalue()
