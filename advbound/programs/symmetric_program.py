"""The symmetry-reduced (invariant, block-diagonalised) ADV± / ADV program, formulated.

This module owns :func:`formulate_symmetric`: the invariant program of a partial function
under its automorphism group, as sparse conic data (a :class:`SymmetricFormulation`, whose PSD
blocks are :class:`LmiBlock` records).  It is solved, and its point verified on the full domain, by
:func:`advbound.programs.symmetric.solve_symmetric`; the block decomposition it relies on is
in :mod:`advbound.programs.symmetric_blocks`.

The reduction
-------------
Let ``G`` be the automorphism group (:func:`advbound.functions.symmetry.automorphism_group`).
If ``(W, ρ)`` is feasible (optimal), so is every ``(P_g W P_gᵀ, P_g ρ)``, and by
convexity so is their average.  So we may restrict to invariant points:

* ``W`` is constant on the orbits of ``G`` on unordered pairs ``{x, y}`` with
  ``f(x) ≠ f(y)`` (one variable ``w_k`` per orbit; ``W∘F = 0`` by construction);
* ``ρ`` is constant on the orbits of inputs (one variable ``p_r`` per orbit).

For invariant ``(W, ρ)`` the LMI of position ``g(j)`` is the LMI of ``j``
conjugated by ``P_g``, so one representative per position orbit is kept.  The
LMI ``L_j = c_j diag(ρ) ∓ W∘Δ_j`` of a representative commutes with the
permutation matrices of the stabiliser ``H`` of ``j``, i.e. lies in the
commutant algebra ``C_H``.  It is block-diagonalised as in "A numerical
algorithm for block-diagonal decomposition of matrix *-algebras" (2009), by
:func:`advbound.programs.symmetric_blocks.block_basis` (its module docstring gives the
steps and checks).

Forms: two output values (``"bipartite"``) keep only the upper LMI
``c_j diag(ρ) - W∘Δ_j ⪰ 0`` (the lower one is conjugate by ``diag(I, -I)``);
three or more values (``"full"``) keep both sides, block-diagonalised by the same
``Q``; the positive bound adds ``w >= 0`` and keeps only the upper side.

Structure.  The LMI data are assembled sparsely: the coefficient matrix of a block
is ``(Q⊗Q)ᵀ P_j`` with ``P_j`` the sparse incidence of the entries of ``L_j``; no
``|D|²``-sized dense expression is formed.  For a position-search row, ``W∘Δ_j``
only touches rows and columns of the inputs whose non-star sits at ``j`` (an arrow
matrix), so ``P_j`` and the block data are correspondingly sparse.  With
``chordal=True`` each sparse block is further split along a chordal extension of its
pattern (:func:`advbound.programs.symmetric_blocks.chordal_cliques`): for the arrow, every input ``z`` whose non-star is
elsewhere only meets the inputs of the other output class that have their non-star at
``j``, so it lands in a small clique, and the largest cone shrinks (e.g. 40 instead of
152 for OR of 3 rows at ``T = 10``).  CLARABEL applies a similar decomposition itself.
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np
import scipy.sparse as sp

from advbound.functions.domain import Domain, domain
from advbound.errors import InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.functions.symmetry import (Group, automorphism_group, orbits_of_inputs, orbits_of_pairs, position_orbits,
                                         stabilizer)
from advbound.programs.symmetric_blocks import _maybe_chordal, block_basis

__all__ = ["SymmetricFormulation", "LmiBlock", "formulate_symmetric"]

log = logging.getLogger("advbound")


@dataclasses.dataclass(frozen=True, eq=False)
class LmiBlock:
    """One PSD block ``B(v) ⪰ 0`` of the reduced program.

    Attributes
    ----------
    position : int
        The representative position whose LMI this block comes from.
    side : int
        ``+1`` for ``c_j diag(ρ) - W∘Δ_j``, ``-1`` for ``c_j diag(ρ) + W∘Δ_j``.
    basis : scipy.sparse.csc_matrix, shape (|D|, m)
        ``Q_b``: the block is ``Q_bᵀ L_j Q_b``.
    multiplicity : int
        How many (rotated) copies of the block the LMI contains.
    coefficients : scipy.sparse.csr_matrix, shape (m*m, n_variables)
        Row ``u*m + v`` gives entry ``(u, v)`` of the block as a linear form in the variables.
    cliques : tuple of ndarray or None
        When set, ``B(v) ⪰ 0`` is imposed through a chordal decomposition with these cliques
        (see :func:`chordal_cliques`) instead of one cone of size ``m``.
    """

    position: int
    side: int
    basis: sp.csc_matrix
    multiplicity: int
    coefficients: sp.csr_matrix
    cliques: tuple | None = None

    @property
    def size(self) -> int:
        return self.basis.shape[1]


@dataclasses.dataclass(frozen=True, eq=False)
class SymmetricFormulation:
    """The invariant program of a function, as sparse data.

    Variables ``v = (w_0..w_{K-1}, p_0..p_{R-1})``: one weight per orbit of unordered
    differing-output pairs, one density per input orbit.  Maximise ``Σ_k pair_counts[k] w_k``
    subject to ``Σ_r input_counts[r] p_r = 1``, ``p >= 0`` (``w >= 0`` for the positive bound)
    and every block ``B(v) ⪰ 0``.
    """

    function: PartialFunction
    domain: Domain
    group: Group
    bound: str
    form: str
    input_orbit: np.ndarray
    pair_orbit: np.ndarray
    pair_counts: np.ndarray
    input_counts: np.ndarray
    position_orbit: np.ndarray
    representatives: tuple
    blocks: tuple
    build_time: float = 0.0

    @property
    def n_weights(self) -> int:
        return int(self.pair_counts.size)

    @property
    def n_densities(self) -> int:
        return int(self.input_counts.size)

    def sizes(self) -> dict:
        """Sizes of the reduced program next to the dense one (Python ints)."""
        d = self.domain
        live = [j for j in range(d.n) if (d.symbols[:, j] != d.symbols[0, j]).any()]
        sides = 2 if any(b.side == -1 for b in self.blocks) else 1
        return {
            "form": self.form,
            "group_order": int(self.group.order),
            "weights": self.n_weights,
            "densities": self.n_densities,
            "representatives": len(self.representatives),
            "block_sizes": [b.size for b in self.blocks],
            "chordal_blocks": sum(b.cliques is not None for b in self.blocks),
            "largest_cone": max([max(c.size for c in b.cliques) if b.cliques else b.size for b in self.blocks],
                                default=0),
            "dense_lmis": sides * len(live),
            "dense_lmi_size": int(d.size),
        }

    def expand(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Full-domain ``(W, ρ)`` of a variable vector."""
        K = self.n_weights
        w = np.concatenate([np.asarray(v[:K], dtype=float), [0.0]])
        W = w[self.pair_orbit]  # pair_orbit is -1 off the variable pairs -> the appended 0
        rho = np.asarray(v[K:K + self.n_densities], dtype=float)[self.input_orbit]
        return W, rho


def _lmi_incidence(dom: Domain, j: int, side: int, pair_orbit, input_orbit, K: int, R: int, cost: float):
    """Sparse ``(|D|², K + R)`` matrix: entry ``(x*n + y, var)`` is the coefficient of ``var`` in ``L_j[x, y]``."""
    n = dom.size
    colj = np.asarray(dom.symbols[:, j])
    # pairs that differ at j and carry a weight variable
    xs, ys = np.nonzero((colj[:, None] != colj[None, :]) & (pair_orbit >= 0))
    rows = np.concatenate([xs * n + ys, np.arange(n) * (n + 1)])
    cols = np.concatenate([pair_orbit[xs, ys], K + input_orbit])
    vals = np.concatenate([np.full(xs.size, -float(side)), np.full(n, float(cost))])
    return sp.csc_matrix((vals, (rows, cols)), shape=(n * n, K + R))


def formulate_symmetric(f: PartialFunction, bound: str = "general", group: Group | None = None,
                        seed: int = 0, chordal: bool = False) -> SymmetricFormulation:
    """Build the invariant, block-diagonalised program of ``f``.

    Parameters
    ----------
    f : PartialFunction
    bound : {"general", "positive"}
    group : Group, optional
        Default :func:`~advbound.functions.symmetry.automorphism_group` of ``f``.  Any subgroup of the
        symmetries is valid (a smaller group reduces less).
    seed : int
        Seed of the random elements used by the block decomposition.
    chordal : bool
        Also decompose sparse blocks into cliques (:func:`chordal_cliques`) where that is at
        least twice cheaper.  Exact; the block's dual is recovered by a PSD completion of the
        clique multipliers.

    Examples
    --------
    >>> from advbound.functions.builders import or_function
    >>> form = formulate_symmetric(or_function(3))
    >>> s = form.sizes(); s["group_order"], s["weights"], s["densities"], s["representatives"]
    (6, 3, 4, 1)
    """
    t0 = time.perf_counter()
    from advbound.programs.solve import check_solvable

    check_solvable(f, bound)
    dom = domain(f)
    G = automorphism_group(f) if group is None else group
    g = G.function
    if g is not f and (g.inputs != f.inputs or g.outputs != f.outputs or tuple(g.costs) != tuple(f.costs)):
        raise InvalidFunctionError("the group given belongs to a different function (inputs, outputs or costs differ)")
    rng = np.random.default_rng(seed)
    out = np.asarray(dom.output_index)
    diff = out[:, None] != out[None, :]
    pair_orbit = orbits_of_pairs(G, symmetric=True, mask=diff)
    K = int(pair_orbit.max()) + 1
    pair_counts = np.bincount(pair_orbit[diff], minlength=K).astype(float)
    input_orbit = orbits_of_inputs(G)
    R = int(input_orbit.max()) + 1
    input_counts = np.bincount(input_orbit, minlength=R).astype(float)
    pos_orbit = position_orbits(G)
    form = "bipartite" if len(f.labels) == 2 else "full"
    # the lower LMI is implied for two outputs (conjugation by diag(I, -I)) and for W >= 0
    sides = (1,) if (form == "bipartite" or bound == "positive") else (1, -1)
    reps = []
    blocks = []
    for o in range(int(pos_orbit.max()) + 1):
        j = int(np.flatnonzero(pos_orbit == o)[0])
        if not (dom.symbols[:, j] != dom.symbols[0, j]).any():
            continue  # dead position: c_j diag(ρ) ⪰ 0 is implied by ρ >= 0
        reps.append(j)
        H = stabilizer(G, j)
        inc = {s: _lmi_incidence(dom, j, s, pair_orbit, input_orbit, K, R, f.costs[j]) for s in sides}
        n = dom.size

        def sample(rg, inc=inc, n=n):
            pts = []
            for _ in range(2):
                v = rg.standard_normal(K + R)
                for s in sides:
                    pts.append(sp.csr_matrix((inc[s] @ v).reshape(n, n)))
            return pts

        basis = block_basis(H, sample, rng)
        for Q, mult in basis:
            kq = sp.kron(Q, Q, format="csc")  # (n², m²), column u*m + v
            for s in sides:
                coef = (kq.T @ inc[s]).tocsr()
                coef.eliminate_zeros()
                cl = _maybe_chordal(coef, Q.shape[1]) if chordal else None
                blocks.append(LmiBlock(j, s, Q, mult, coef, cl))
    build = time.perf_counter() - t0
    log.info("symmetric formulation: group order %d, %d weights, %d densities, blocks %s (%.2fs)",
             G.order, K, R, [b.size for b in blocks], build)
    return SymmetricFormulation(f, dom, G, bound, form, input_orbit, pair_orbit, pair_counts, input_counts,
                                pos_orbit, tuple(reps), tuple(blocks), build)
