"""The figures of a report, drawn with matplotlib (Agg canvas, no pyplot state) as PNG and PDF.

This module owns ``bound_vs_T`` (bound vs growth variable with fitted curves and the
upper-bound band, and the conjecture series when the study has one), ``ratios`` (``L/√T`` and
``L/√(T log T)``), ``residuals`` (relative fit residuals), ``exact_vs_T`` (exact t-query points next
to ADV±) and ``conjecture_ratio`` (conjecture ÷ verified ADV± lower bound).  matplotlib is imported
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
    fig = Figure(figsize=(6.6 * ncols, 4.0), layout="constrained")
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

#: Markers cycled over series, so that series with equal values stay visible on top of each other.
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")


def law_label(model: str, growth: str = "T") -> str:
    """A fitted law as mathematics: ``sqrt_log+offset`` -> ``√(T log T) + d``.

    >>> law_label("sqrt_log"), law_label("power+offset", "n")
    ('√(T log T)', 'c·n^a + d')
    """
    base, _, off = model.partition("+")
    text = {"sqrt": f"√{growth}", "sqrt_log": f"√({growth} log {growth})", "power": f"c·{growth}^a",
            "power_log": f"c·{growth}^a·log {growth}"}.get(base, base)
    return text + (" + d" if off else "")


def _plain_log_ticks(ax, xs) -> None:
    """Log axes labelled with plain numbers: the growth values on x, plain decimals on y."""
    from matplotlib.ticker import FormatStrFormatter, NullFormatter
    if xs:
        ax.set_xticks(xs)
        ax.set_xticklabels([f"{v:g}" for v in xs])
        ax.xaxis.set_minor_formatter(NullFormatter())
    ax.yaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax.yaxis.set_minor_formatter(FormatStrFormatter("%g"))


def _legend_outside(ax) -> None:
    """The legend to the right of the axes, never over the data."""
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize="x-small", loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)


#: Marker of the conjecture series (distinct from every marker of :data:`_MARKERS`).
_CONJ_MARKER = "x"


def _plot_conjecture(ax, conj, series, bound) -> None:
    """The conjecture series in the panel of ``bound``: crosses joined by dotted lines, each in the colour
    of the optimum's series with the same series value."""
    import numpy as np
    keys = [x.key for x in series if x.bound == bound and not x.envelope]
    for j, c in enumerate(conj):
        i = keys.index(c.key) if c.key in keys else len(keys) + j
        ax.plot(np.array(c.T), np.array(c.lower), _CONJ_MARKER + ":", color=f"C{i % 10}", markersize=8,
                linewidth=1, label=c.label)


def _plot_bounds(series, fits, growth, out, conj=()) -> list[str]:
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
            label = (f"envelope: max over {s.envelope}" if s.envelope else
                     "lower" if s.key is None else f"lower, {s.name or 'series'}={s.key}")
            ax.plot(T, lo, "*" if s.envelope else _MARKERS[i % len(_MARKERS)], color=color,
                    markersize=10 if s.envelope else 6, fillstyle="full" if s.envelope else "none", label=label)
            ax.fill_between(T, lo, np.where(np.isnan(up), lo, up), color=color, alpha=0.25, linewidth=0)
            ax.plot(T, up, "_", color=color, markersize=10)
            cmp = fits.get(s.label)
            if cmp is not None and not isinstance(cmp, str):
                grid = np.linspace(T.min(), T.max(), 200)
                top = cmp.best.model if cmp.best is not None else None
                models = list(dict.fromkeys([m for m in (top, "sqrt", "sqrt_log") if m]))
                for model in models:
                    ls = "-" if model == top else (":" if model == "sqrt" else "--")
                    fr = cmp.fit(model)
                    if fr is not None and fr.success:
                        best = " (best)" if model == top else ""
                        ax.plot(grid, evaluate(model, fr.params, grid), ls, color=color, linewidth=1,
                                label=f"{law_label(model, growth)} fit{best}")
        if bound == "general" and conj:
            _plot_conjecture(ax, conj, series, bound)
        ax.set_xscale("log")
        ax.set_yscale("log")
        _plain_log_ticks(ax, sorted({v for x in [*series, *(conj if bound == "general" else ())]
                                     if x.bound == bound for v in x.T}))
        ax.set_xlabel(f"{growth} (log scale)")
        ax.set_ylabel(f"verified bound on {_BOUND_TITLE.get(bound, bound)} (log scale)")
        gap = f" (widest {max(gaps):.1g})" if gaps else " (no upper bounds)"
        ax.set_title(f"{_BOUND_TITLE.get(bound, bound)}: lower points, upper band{gap}", fontsize="medium")
        _legend_outside(ax)
    return _save(fig, out, "bound_vs_T")


def _plot_ratios(series, growth, out) -> list[str]:
    import numpy as np
    fig = _figure(2)
    axes = fig.subplots(1, 2, squeeze=False)[0]
    for i, s in enumerate(series):
        T = np.array(s.T)
        lo = np.array(s.lower)
        ok = T > 1
        mk = ("*" if s.envelope else _MARKERS[i % len(_MARKERS)]) + ("-" if s.bound == "general" else "--")
        lab = s.label
        axes[0].plot(T, lo / np.sqrt(T), mk, color=f"C{i % 10}", fillstyle="none", label=lab)
        axes[1].plot(T[ok], lo[ok] / np.sqrt(T[ok] * np.log(T[ok])), mk, color=f"C{i % 10}", fillstyle="none",
                     label=lab)
    axes[0].set_title(f"L / √{growth}")
    axes[1].set_title(f"L / √({growth} log {growth})")
    axes[0].set_ylabel(f"L / √{growth}")
    axes[1].set_ylabel(f"L / √({growth} log {growth})")
    for ax in axes:
        ax.set_xlabel(growth)
        _legend_outside(ax)
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
        top = cmp.best.model if cmp.best is not None else None
        for model in dict.fromkeys([m for m in ("sqrt", "sqrt_log", top) if m]):
            fr = cmp.fit(model)
            if fr is None or not fr.success:
                continue
            rel = np.array(fr.residuals) / np.array(fr.y)
            best = " (best)" if model == top else ""
            ax.plot(fr.T, rel, markers.get(model, "^") + ("-" if best else ":"), color=f"C{si % 10}",
                    linewidth=0.8, label=f"{label}: {law_label(model, growth)}{best}")
            i += 1
    ax.axhline(0, color="k", linewidth=0.6)
    ax.set_xlabel(growth)
    ax.set_ylabel("relative residual (L - fit) / L")
    ax.set_title("fit residuals")
    if i:
        _legend_outside(ax)
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
        _legend_outside(ax)
    return _save(fig, out, "exact_vs_T")


def _plot_conjecture_ratio(ratios, series, growth, out) -> list[str]:
    """``conjecture_ratio``: the conjecture's certified bound ÷ the verified ADV± lower bound, per series."""
    import numpy as np
    from matplotlib.ticker import MaxNLocator
    fig = _figure(1)
    ax = fig.subplots()
    keys = [x.key for x in series if x.bound == "general" and not x.envelope]
    for j, r in enumerate(ratios):
        i = keys.index(r.conjecture.key) if r.conjecture.key in keys else len(keys) + j
        ax.plot(np.array(r.T), np.array(r.value), _MARKERS[i % len(_MARKERS)] + "-", color=f"C{i % 10}",
                fillstyle="none", label=r.label)
    ax.axhline(1.0, color="0.4", linewidth=0.8, linestyle="--", label="ratio 1 (conjecture = optimum)")
    lo = min([min(r.value) for r in ratios] + [1.0])
    hi = max([max(r.value) for r in ratios] + [1.0])
    ax.set_ylim(max(0.0, lo - 0.1 * (hi - lo) - 0.02), hi + 0.05)
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_xlabel(growth)
    ax.set_ylabel("conjecture ÷ verified ADV± lower bound")
    ax.set_title("conjectured Γ ÷ optimum (the optimum's verified lower bound)", fontsize="medium")
    ax.grid(True, axis="y", linewidth=0.4, alpha=0.5)
    ax.legend(fontsize="x-small", loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=2, frameon=False)
    return _save(fig, out, "conjecture_ratio")
