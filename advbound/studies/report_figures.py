"""The figures of a report, drawn with matplotlib (Agg canvas, no pyplot state) as PNG and PDF.

This module owns ``bound_vs_T`` (bound vs growth variable with fitted curves and the
upper-bound band), ``ratios`` (``L/√T`` and ``L/√(T log T)``), ``residuals`` (relative fit
residuals) and ``exact_vs_T`` (exact t-query points next to ADV±).  matplotlib is imported
inside the drawing functions.
"""

from __future__ import annotations

from pathlib import Path

from advbound.studies.report_exact import adversary_factor
from advbound.studies.report_series import _real


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
