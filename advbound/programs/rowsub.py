"""Sub-domains of a row family: the input orbits that carry most of the positive bound's weight.

Restricting a partial function to part of its domain never raises its adversary bounds: a Γ of the
restriction, extended by zeros, is a Γ of the whole function with the same ‖Γ‖ and the same
‖Γ∘Δ_j‖ (common knowledge of the field).  So the row-symmetric
program on a *sub-family* (some of the contents, each with its output) gives a verified **lower**
bound on ADV± of the whole family, from a program with far fewer pair orbits and smaller blocks.
Its dual bounds only the restriction, so nothing here gives an upper bound for the whole family.

Which contents to keep: the optimal densities of ADV± and of the positive bound ADV put their mass
on much the same contents, and ADV comes cheaply from its minimax form
(:mod:`advbound.programs.minimax_transport`).  :func:`densest_subfamily` keeps contents in order of
that mass (density per input times orbit size) while the restricted program has at most a given
number of pair orbits.  Measured on OR of position-search rows with at most one row of value 1
(docs/symmetry.md): 6 rows at T = 12, 24 of the 40 contents keep 99.7% of the optimum.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from advbound.errors import InvalidFunctionError
from advbound.evidence.orbitquotient import pair_tables
from advbound.functions.rowfamily import RowFamily

__all__ = ["content_masses", "densest_subfamily", "pair_orbit_count", "restriction_difference"]


def content_masses(fam: RowFamily) -> np.ndarray:
    """The mass of each content in the positive bound's optimal test vector (orbit size times the
    density per input, summing to 1), from the minimax program of ADV."""
    from advbound.programs.minimax import gamma_from_multipliers
    from advbound.programs.minimax_transport import solve_transport

    pt = solve_transport(fam)
    if pt.status == "failed" or pt.keys.shape[0] == 0 or not np.any(pt.multipliers > 0):
        raise InvalidFunctionError(f"the positive bound of {fam.description or 'this family'} gave no "
                                   f"densities ({pt.status}); no sub-domain can be chosen from it")
    _gamma, rho = gamma_from_multipliers(fam, pt.keys, pt.multipliers)
    sizes = np.array([fam.orbit_size(c) for c in fam.contents], dtype=float)
    mass = np.nan_to_num(np.maximum(rho, 0.0)) * sizes
    return mass / mass.sum()


def _multiset(content) -> list:
    out: dict = {}
    for a in content:
        out[a] = out.get(a, 0) + 1
    return sorted(out.items())


def pair_orbit_count(fam: RowFamily, i: int, j: int) -> int:
    """Number of pair orbits between contents ``i`` and ``j`` (0 when their outputs agree)."""
    if fam.outputs[i] == fam.outputs[j]:
        return 0
    return sum(1 for _ in pair_tables(_multiset(fam.contents[i]), _multiset(fam.contents[j])))


def densest_subfamily(fam: RowFamily, max_weights: int, masses: np.ndarray | None = None
                      ) -> tuple[RowFamily, dict]:
    """The sub-family of the contents of largest ``masses`` (default :func:`content_masses`) with at
    most ``max_weights`` pair orbits, and a summary of what was kept.

    Contents are taken in decreasing order of mass; one that would take the count over the budget is
    skipped and the next ones are still tried.  Both outputs must stay (else the bound is 0).
    Returns ``(sub, info)`` with ``info`` = kept and total contents, inputs, pair orbits and the mass
    kept.
    """
    if int(max_weights) < 1:
        raise InvalidFunctionError(f"sub-domain: the budget of pair orbits must be at least 1, got {max_weights}")
    if masses is None:
        masses = content_masses(fam)
    masses = np.asarray(masses, dtype=float)
    if masses.shape != (len(fam.contents),) or not np.all(np.isfinite(masses)):
        raise InvalidFunctionError(f"sub-domain: need one finite mass per content ({len(fam.contents)})")
    kept: list[int] = []
    weights = 0
    for r in np.argsort(-masses, kind="stable").tolist():
        add = sum(pair_orbit_count(fam, r, s) for s in kept)
        if weights + add <= max_weights:
            kept.append(r)
            weights += add
    kept.sort()
    sub = dataclasses.replace(fam, contents=tuple(fam.contents[r] for r in kept),
                              outputs=tuple(fam.outputs[r] for r in kept),
                              description=f"{fam.description}; sub-domain of {len(kept)} of {len(fam.contents)} "
                                          "input orbits")
    if len(set(sub.outputs)) < 2:
        raise InvalidFunctionError(f"sub-domain: {max_weights} pair orbits keep contents of one output only; "
                                   "raise the budget")
    info = {"contents": len(kept), "of_contents": len(fam.contents), "inputs": sub.size, "of_inputs": fam.size,
            "weights": weights, "max_weights": int(max_weights), "mass": float(masses[kept].sum())}
    return sub, info


def restriction_difference(sub: RowFamily, fam: RowFamily) -> str | None:
    """Why ``sub`` is not a restriction of ``fam`` (same letters and costs, every content of ``sub``
    a content of ``fam`` with the same output), or None when it is."""
    if tuple(sub.letters) != tuple(fam.letters):
        return "the row inputs differ"
    if tuple(float(c) for c in sub.costs) != tuple(float(c) for c in fam.costs):
        return "the costs differ"
    outputs = dict(zip(fam.contents, fam.outputs))
    for c, y in zip(sub.contents, sub.outputs):
        if c not in outputs:
            return f"input orbit {c} is not in the family"
        if outputs[c] != y:
            return f"input orbit {c} has output {y!r}, the family {outputs[c]!r}"
    return None
