"""The figure of an adversary matrix's orbit structure: Γ between input orbits, and the adversary's weights.

Drawn from :class:`advbound.evidence.orbittable.OrbitTables` (matplotlib, Agg canvas, PNG and PDF):
left, the quotient matrix ``Q`` (Γ summed between input orbits, normalised by their sizes) with the
orbits ordered by output and profile; right, the weight of one input of each orbit.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["draw_orbit_figure"]


def draw_orbit_figure(tables, out: Path, stem: str = "orbits") -> list[str]:
    """Write ``<stem>.png`` and ``<stem>.pdf`` into ``out``; return their paths."""
    from advbound.studies.report_figures import _figure, _save

    order = sorted(range(len(tables.inputs)), key=lambda r: (tables.inputs[r].output, tables.inputs[r].profile))
    labels = [f"{tables.inputs[r].output} | {tables.inputs[r].profile}" for r in order]
    Q = tables.quotient[np.ix_(order, order)]
    fig = _figure(2)
    ax_q, ax_w = fig.subplots(1, 2, squeeze=False)[0]
    lim = float(np.max(np.abs(Q))) or 1.0
    im = ax_q.imshow(Q, cmap="RdBu_r", vmin=-lim, vmax=lim)
    fig.colorbar(im, ax=ax_q, shrink=0.8, label="Σ Γ between orbits / √(sizes)")
    ticks = range(len(order)) if len(order) <= 40 else range(0, len(order), max(1, len(order) // 40))
    ax_q.set_xticks(list(ticks))
    ax_q.set_yticks(list(ticks))
    ax_q.set_xticklabels([labels[i] for i in ticks], rotation=90, fontsize=5)
    ax_q.set_yticklabels([labels[i] for i in ticks], fontsize=5)
    ax_q.set_title("Γ between input orbits (output | profile)", fontsize="medium")
    w = [tables.inputs[r].weight for r in order]
    ax_w.bar(range(len(order)), w, color=["C0" if tables.inputs[r].output == tables.inputs[order[0]].output
                                          else "C1" for r in order])
    ax_w.set_xticks(list(ticks))
    ax_w.set_xticklabels([labels[i] for i in ticks], rotation=90, fontsize=5)
    ax_w.set_ylabel("weight of one input (principal invariant vector)")
    ax_w.set_title(f"adversary's weights (‖Γ‖ on invariant vectors = {tables.norm_invariant:.6g})",
                   fontsize="medium")
    return _save(fig, Path(out), stem)
