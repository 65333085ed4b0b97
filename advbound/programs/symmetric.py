"""The symmetry-reduced (invariant, block-diagonalised) ADV± / ADV program.

This module owns :func:`formulate_symmetric` (the invariant program of a
partial function under its automorphism group, as sparse conic data) and
:func:`solve_symmetric` (solve it, expand the point and the dual witness to the
full domain, and have :func:`advbound.evidence.verify.verify_certificate` decide the
reported bounds).

>>> from advbound.functions.builders import or_function
>>> r = solve_symmetric(or_function(4))
>>> r.status, round(r.lower, 5), round(r.upper, 5)       # ADV±(OR_4) = sqrt(4) = 2
('optimal', 2.0, 2.0)

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
algorithm for block-diagonal decomposition of matrix *-algebras" (2009):

1. take a random symmetric element ``X = Σ a_s (P_{h_s} + P_{h_s}ᵀ)`` of the group
   algebra of ``H`` (which is the commutant of ``C_H``); its eigenspaces are
   ``C_H``-invariant, so ``Qᵀ L_j Q`` is block diagonal for ``Q`` = the eigenvectors
   grouped by eigenvalue.  ``X`` is block diagonal over the ``H``-orbits of inputs, so
   the eigenvectors are computed orbit by orbit and ``Q`` stays sparse;
2. refine: two eigenspaces of the same dimension that carry equivalent copies of
   one irreducible representation are coupled by a random (non-symmetric) element
   ``Z`` of the group algebra; ``Q_aᵀ Z Q_b = σ·R`` with ``R`` orthogonal, and after
   rotating by ``R`` the two blocks of every LMI coincide.  The copy is dropped (it
   imposes the same PSD constraint) only after that equality has been checked on
   random points of the LMI's span (a polynomial identity; a failed check keeps both).

Every decomposition is checked on a random point (off-diagonal blocks vanish);
any remaining mistake could only weaken the solver's point, never a reported
number, since the bounds are verified on the full domain.

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
pattern (:func:`chordal_cliques`): for the arrow, every input ``z`` whose non-star is
elsewhere only meets the inputs of the other output class that have their non-star at
``j``, so it lands in a small clique, and the largest cone shrinks (e.g. 40 instead of
152 for OR of 3 rows at ``T = 10``).  CLARABEL applies a similar decomposition itself.

The dual witness
----------------
The solver's multipliers ``Y_b ⪰ 0`` of the reduced blocks give
``X̃_j = avg_H(Σ_b Q_b Y_b Q_bᵀ)`` (averaging over ``H`` = averaging over the
``H``-orbits of pairs), which pairs with ``L_j`` as ``Y_b`` pairs with the blocks, and
``X_{g(j)} = P_g X̃_j P_gᵀ / |orbit of j|`` for the other positions of the orbit.  This
family is ``G``-invariant, so the reduced stationarity conditions (summed over orbits)
become the pointwise conditions of the full dual.
"""

from __future__ import annotations

import dataclasses
import logging
import time
import warnings

import numpy as np
import scipy.sparse as sp

from advbound import status as _status
from advbound.evidence.certificate import Certificate
from advbound.functions.domain import Domain, domain
from advbound.errors import AdvboundWarning, InvalidFunctionError, SolverError
from advbound.functions.function import PartialFunction
from advbound.result import SolveResult, SolverStats
from advbound.functions.symmetry import Group, automorphism_group, orbits_of_inputs, orbits_of_pairs, position_orbits, stabilizer

__all__ = ["SymmetricFormulation", "LmiBlock", "formulate_symmetric", "solve_symmetric", "block_basis",
           "chordal_cliques", "WITNESS_LIMIT"]

log = logging.getLogger("advbound")

_SCS_OPTIONS = frozenset({
    "normalize", "scale", "adaptive_scale", "rho_x", "eps_abs", "eps_rel", "eps_infeas", "alpha",
    "time_limit_secs", "acceleration_lookback", "acceleration_interval", "use_indirect", "max_iters",
    "write_data_filename", "log_csv_filename",
})
#: Largest ``N·|D|²`` for which the full-domain dual witness is built by default.
WITNESS_LIMIT = 2 * 10 ** 7


# ---------------------------------------------------------------------------------------------
# Block-diagonalisation of the commutant of a stabiliser
# ---------------------------------------------------------------------------------------------
def _perm_matrix(perm: np.ndarray) -> sp.csr_matrix:
    """``P`` with ``P e_i = e_{perm[i]}``."""
    n = perm.size
    return sp.csr_matrix((np.ones(n), (perm, np.arange(n))), shape=(n, n))


def _group_algebra_element(H: Group, rng: np.random.Generator, symmetric: bool, count: int = 8) -> sp.csr_matrix:
    n = H.function.size
    elems = list(H.elements) + [H.random_element(rng) for _ in range(count)]
    x = sp.csr_matrix((n, n))
    for e in elems:
        p = _perm_matrix(e.inputs)
        a = rng.standard_normal()
        x = x + a * (p + p.T if symmetric else p)
    return x.tocsr()


def block_basis(H: Group, sample, rng: np.random.Generator | None = None, check: bool = True):
    """Orthonormal bases of the blocks of the commutant of ``H`` (with multiplicities).

    Parameters
    ----------
    H : Group
        The symmetry group; its action on inputs is used.
    sample : callable
        ``sample(rng)`` returns a list of sparse ``|D| x |D|`` matrices: random points of the
        linear span that must be block-diagonalised (all ``H``-invariant).  Used for checks.
    rng : numpy Generator, optional
    check : bool
        Check that off-diagonal blocks vanish on a sample.

    Returns
    -------
    list of (scipy.sparse.csc_matrix, int)
        ``(Q_b, d_b)``: ``Q_bᵀ L Q_b`` is the block, which occurs ``d_b`` times (up to rotation)
        in ``Qᵀ L Q``; the columns of all ``Q_b`` and their dropped copies form an orthonormal basis.
    """
    rng = np.random.default_rng(0) if rng is None else rng
    n = H.function.size
    if H.order == 1 or not H.elements:
        return [(sp.identity(n, format="csc"), 1)]
    X = _group_algebra_element(H, rng, symmetric=True)
    orb = orbits_of_inputs(H)
    vals, rows, cols, data = [], [], [], []
    col = 0
    for r in range(int(orb.max()) + 1):
        idx = np.flatnonzero(orb == r)
        xo = X[idx][:, idx].toarray()
        w, v = np.linalg.eigh(xo)
        v[np.abs(v) < 1e-14] = 0.0
        for k in range(idx.size):
            nz = np.flatnonzero(v[:, k])
            rows.append(idx[nz])
            cols.append(np.full(nz.size, col))
            data.append(v[nz, k])
            vals.append(w[k])
            col += 1
    vals = np.array(vals)
    V = sp.csc_matrix((np.concatenate(data), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    order = np.argsort(vals, kind="stable")
    scale = max(1.0, float(np.abs(vals).max()))
    gaps = np.diff(vals[order]) > 1e-7 * scale
    cluster = np.concatenate([[0], np.cumsum(gaps)])
    blocks = [V[:, order[cluster == c]] for c in range(int(cluster[-1]) + 1)]
    if check:
        pts = sample(rng)
        full = sp.hstack(blocks).tocsc()
        sizes = np.cumsum([0] + [b.shape[1] for b in blocks])
        for L in pts:
            T = (full.T @ L @ full).toarray()
            mask = np.ones_like(T, dtype=bool)
            for a in range(len(blocks)):
                mask[sizes[a]:sizes[a + 1], sizes[a]:sizes[a + 1]] = False
            off = float(np.abs(T[mask]).max(initial=0.0))
            if off > 1e-8 * max(1.0, float(np.abs(T).max(initial=0.0))):
                log.warning("block decomposition check failed (off-diagonal %.3g); using one block", off)
                return [(sp.identity(n, format="csc"), 1)]
    return _merge_copies(H, blocks, sample, rng)


def _merge_copies(H, blocks, sample, rng):
    """Drop blocks that repeat an earlier one up to an orthogonal change of basis (checked)."""
    Z = _group_algebra_element(H, rng, symmetric=False)
    pts = sample(rng)
    kept: list[list] = []  # [Q, multiplicity, [block of each sample point]]
    for Qb in blocks:
        m = Qb.shape[1]
        merged = False
        for entry in kept:
            Qa = entry[0]
            if Qa.shape[1] != m:
                continue
            M = (Qa.T @ Z @ Qb).toarray()
            if not np.abs(M).max(initial=0.0) > 1e-8:
                continue
            u, s, vt = np.linalg.svd(M)
            if s[-1] < (1 - 1e-6) * s[0]:
                continue
            Qr = Qb @ (vt.T @ u.T)  # now Qaᵀ Z Qr = σ I
            same = True
            for L, Ba in zip(pts, entry[2]):
                Bb = Qr.T @ (L @ Qr)
                if np.abs(Ba - Bb).max(initial=0.0) > 1e-8 * max(1.0, np.abs(Ba).max(initial=0.0)):
                    same = False
                    break
            if same:
                entry[1] += 1
                merged = True
                break
        if not merged:
            kept.append([Qb, 1, [(Qb.T @ L @ Qb).toarray() for L in pts]])
    return [(sp.csc_matrix(Q), int(d)) for Q, d, _ in kept]


# ---------------------------------------------------------------------------------------------
# Chordal decomposition of sparse blocks
# ---------------------------------------------------------------------------------------------
def chordal_cliques(pattern: np.ndarray) -> list[np.ndarray]:
    """Cliques of a chordal extension of a sparsity pattern, by greedy elimination.

    Vertices are eliminated by smallest current degree ``d`` (each elimination makes its
    remaining neighbours a clique, the usual elimination game, whose filled graph is chordal)
    while ``(d + 1)^3 < 3 r^2`` with ``r`` the number of vertices left: a cone of size ``d + 1``
    is cheaper than the share it removes from the remaining clique.  The remaining vertices form
    the last clique.  The cliques cover every maximal clique of the filled graph, so a matrix
    ``B`` with this pattern is PSD iff ``B = Σ_c E_cᵀ Z_c E_c`` with every ``Z_c ⪰ 0``
    ("Positive semidefinite matrices with a given sparsity pattern", 1988).

    >>> arrow = np.zeros((5, 5), bool); arrow[0, 1:] = arrow[1:, 0] = True     # a star
    >>> [c.tolist() for c in chordal_cliques(arrow)]
    [[1, 0], [2, 0], [3, 0], [0, 4]]
    """
    adj = np.array(pattern, dtype=bool)
    adj = adj | adj.T
    m = adj.shape[0]
    np.fill_diagonal(adj, False)
    alive = np.ones(m, dtype=bool)
    deg = adj.sum(axis=1).astype(np.int64)
    cliques = []
    r = m
    while r > 1:
        d_alive = np.where(alive, deg, np.iinfo(np.int64).max)
        v = int(np.argmin(d_alive))
        d = int(deg[v])
        if (d + 1) ** 3 >= 3 * r * r or d + 1 >= r:
            break
        nb = np.flatnonzero(adj[v] & alive)
        cliques.append(np.concatenate([[v], nb]))
        adj[np.ix_(nb, nb)] = True
        adj[nb, nb] = False
        alive[v] = False
        adj[v, :] = False
        adj[:, v] = False
        deg[nb] = (adj[nb] & alive).sum(axis=1)
        r -= 1
    rest = np.flatnonzero(alive)
    if rest.size:
        cliques.append(rest)
    return cliques


def _maybe_chordal(coef: sp.csr_matrix, m: int, min_size: int = 48, gain: float = 2.0):
    """Cliques for a block when the decomposition is at least ``gain`` times cheaper, else None."""
    if m < min_size:
        return None
    nz = np.flatnonzero(np.diff(coef.indptr))
    pattern = np.zeros(m * m, dtype=bool)
    pattern[nz] = True
    pattern = pattern.reshape(m, m)
    cl = chordal_cliques(pattern)
    cost = sum(float(c.size) ** 3 for c in cl)
    return tuple(cl) if gain * cost < float(m) ** 3 else None


def _psd_completion(Y: np.ndarray, cliques) -> np.ndarray:
    """Complete ``Y`` (known on the clique entries) to a PSD matrix when every ``Y[c, c] ⪰ 0``.

    The cliques come from :func:`chordal_cliques`: each but the last is ``[v] + N(v)`` with ``N(v)``
    among later vertices.  Adding the vertices back in reverse elimination order, the unknown
    entries of row ``v`` are ``Y[v, N] Y[N, N]^+ M[N, U]`` (``U`` the vertices placed so far),
    the maximum-determinant choice, which keeps the growing matrix PSD ("Positive definite
    completions of partial Hermitian matrices", 1984).
    """
    m = Y.shape[0]
    M = np.zeros((m, m))
    done = np.zeros(m, dtype=bool)
    rest = cliques[-1]
    M[np.ix_(rest, rest)] = Y[np.ix_(rest, rest)]
    done[rest] = True
    for cq in reversed(cliques[:-1]):
        v, nb = int(cq[0]), cq[1:]
        U = np.flatnonzero(done)
        if nb.size:
            coef = np.linalg.lstsq(M[np.ix_(nb, nb)], Y[v, nb], rcond=1e-12)[0]
            row = coef @ M[np.ix_(nb, U)]
            row[np.searchsorted(U, nb)] = Y[v, nb]
            M[v, U] = row
            M[U, v] = row
        M[v, v] = Y[v, v]
        done[v] = True
    return M


# ---------------------------------------------------------------------------------------------
# The invariant program
# ---------------------------------------------------------------------------------------------
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


# ---------------------------------------------------------------------------------------------
# Conic data and solvers
# ---------------------------------------------------------------------------------------------
def _svec_rows(m: int, solver: str = "SCS"):
    """Entry indices ``u*m + v`` of a block in the solver's packed order, and their scales.

    SCS packs the lower triangle column by column, Clarabel the upper triangle column by
    column; both scale off-diagonal entries by ``sqrt(2)``.
    """
    if solver == "SCS":
        r, cc = np.triu_indices(m)  # r <= cc, by r then cc: entry (cc, r) of the lower triangle
    else:
        r, cc = np.tril_indices(m)  # r >= cc, by r then cc: entry (cc, r) of the upper triangle
    u, v = cc, r
    return u * m + v, np.where(u == v, 1.0, np.sqrt(2.0)), u, v


def _conic_data(form: SymmetricFormulation, solver: str = "SCS"):
    """Conic data ``min cᵀv  s.t.  A v + s = b,  s ∈ {0}^z × R_+^l × S_+ × ...`` (packed for ``solver``).

    A chordal block ``B(v) = Σ_c E_cᵀ Z_c E_c`` adds the packed ``Z_c`` as extra variables, one
    equality per entry covered by a clique, and one cone per clique.
    """
    K, R = form.n_weights, form.n_densities
    nv = K + R
    extra = []  # per chordal block: list of (clique, offset of its packed Z_c)
    for blk in form.blocks:
        if blk.cliques is None:
            continue
        lst = []
        for cq in blk.cliques:
            lst.append((cq, nv))
            nv += cq.size * (cq.size + 1) // 2
        extra.append(lst)
    c = np.zeros(nv)
    c[:K] = -form.pair_counts
    zero_rows = [sp.csr_matrix((np.concatenate([np.zeros(K), form.input_counts]), (np.zeros(K + R, int),
                               np.arange(K + R))), shape=(1, nv))]
    zero_b = [np.ones(1)]
    nonneg = np.arange(K, K + R) if form.bound == "general" else np.arange(K + R)
    nn_rows = sp.csr_matrix((-np.ones(nonneg.size), (np.arange(nonneg.size), nonneg)), shape=(nonneg.size, nv))
    psd_rows, psd = [], []
    layout = []  # per block: None, or (first zero row, entry keys) of a chordal block
    zrow = 1
    k_extra = 0
    for blk in form.blocks:
        m = blk.size
        coef = blk.coefficients
        if coef.shape[1] < nv:
            coef = sp.hstack([coef, sp.csr_matrix((coef.shape[0], nv - coef.shape[1]))], format="csr")
        if blk.cliques is None:
            idx, scale, _, _ = _svec_rows(m, solver)
            psd_rows.append(-sp.diags(scale) @ coef[idx])
            psd.append(m)
            layout.append(None)
            continue
        # entries (u >= v) covered by the cliques, and which packed Z_c entries feed them
        ent_r, ent_c, ent_v = [], [], []
        for cq, off in extra[k_extra]:
            q = cq.size
            idx, scale, u, v = _svec_rows(q, solver)
            gu, gv = cq[u], cq[v]
            lo, hi = np.maximum(gu, gv), np.minimum(gu, gv)
            ent_r.append(lo * m + hi)
            ent_c.append(off + np.arange(idx.size))
            ent_v.append(1.0 / scale)
            psd_rows.append(sp.csr_matrix((-np.ones(idx.size), (np.arange(idx.size), off + np.arange(idx.size))),
                                          shape=(idx.size, nv)))
            psd.append(q)
        k_extra += 1
        ent_r = np.concatenate(ent_r)
        keys, inv = np.unique(ent_r, return_inverse=True)
        # row: B(v)[u, v] - Σ_c Z_c[u, v] = 0
        zsum = sp.csr_matrix((-np.concatenate(ent_v), (inv, np.concatenate(ent_c))), shape=(keys.size, nv))
        zero_rows.append(coef[keys] + zsum)
        zero_b.append(np.zeros(keys.size))
        layout.append((zrow, keys))
        zrow += keys.size
    A = sp.vstack(zero_rows + [nn_rows] + psd_rows, format="csc")
    b = np.concatenate(zero_b + [np.zeros(nonneg.size)] + [np.zeros(r.shape[0]) for r in psd_rows])
    nz = sum(r.shape[0] for r in zero_rows)
    return A, b, c, {"z": int(nz), "l": int(nonneg.size), "s": psd}, layout


def _smat(y: np.ndarray, m: int, solver: str = "SCS") -> np.ndarray:
    _, scale, u, v = _svec_rows(m, solver)
    Y = np.zeros((m, m))
    Y[u, v] = y / scale
    Y[v, u] = y / scale
    return Y


def _unknown(key, solver):
    warnings.warn(f"option {key!r} is not a known {solver} option; ignored", AdvboundWarning, stacklevel=5)


_SCS_STATUS = _status.SCS_STATUS_MAP
_CLARABEL_STATUS = _status.CLARABEL_STATUS_MAP


def _solve_scs(A, b, c, cone, tol, max_iters, verbose, options):
    import scs

    # the reduced data are already well scaled (0/±1 coefficients, costs, orbit sizes); SCS's own
    # equilibration roughly triples the iteration count on them (OR of 3 rows, T = 6 and 7)
    kwargs = dict(eps_abs=tol, eps_rel=tol, max_iters=int(max_iters), verbose=bool(verbose), normalize=False)
    for key, val in options.items():
        if key not in _SCS_OPTIONS:
            _unknown(key, "SCS")
            continue
        kwargs[key] = val
    t0 = time.perf_counter()
    try:
        sol = scs.SCS(dict(A=A, b=b, c=c), cone, **kwargs).solve()
    except Exception as err:  # SCS raises ValueError/RuntimeError on bad data
        raise SolverError(f"SCS failed on the symmetric program: {err}") from None
    info = sol["info"]
    raw = str(info["status"])
    word = _SCS_STATUS.get(raw.split(" ")[0], "solver_error")
    return (sol["x"], sol["y"], word, raw, int(info["iter"]), time.perf_counter() - t0,
            str(scs.__version__), {k: v for k, v in kwargs.items() if k in options})


def _solve_clarabel(A, b, c, cone, tol, max_iters, verbose, options):
    try:
        import clarabel
    except ImportError:
        raise SolverError("solver CLARABEL is not installed; pip install clarabel, or use SCS") from None
    st = clarabel.DefaultSettings()
    st.verbose = bool(verbose)
    st.tol_gap_abs = st.tol_gap_rel = st.tol_feas = float(tol)
    if max_iters is not None:
        st.max_iter = int(max_iters)
    shown = {}
    for key, val in options.items():
        if key.startswith("_") or not hasattr(st, key):
            _unknown(key, "CLARABEL")
            continue
        setattr(st, key, val)
        shown[key] = val
    cones = [clarabel.ZeroConeT(cone["z"])]
    if cone["l"]:
        cones.append(clarabel.NonnegativeConeT(cone["l"]))
    cones += [clarabel.PSDTriangleConeT(m) for m in cone["s"]]
    t0 = time.perf_counter()
    try:
        P = sp.csc_matrix((A.shape[1], A.shape[1]))
        sol = clarabel.DefaultSolver(P, c, A, b, cones, st).solve()
    except Exception as err:
        raise SolverError(f"CLARABEL failed on the symmetric program: {err}") from None
    raw = str(sol.status)
    word = _CLARABEL_STATUS.get(raw, "solver_error")
    return (np.asarray(sol.x), np.asarray(sol.z), word, raw, int(sol.iterations), time.perf_counter() - t0,
            str(clarabel.__version__), shown)


def _dual_witness(form: SymmetricFormulation, y_blocks: list[np.ndarray]):
    """Full-domain ``(X⁺, X⁻)`` stacks from the blocks' multipliers (see the module docstring)."""
    dom = form.domain
    n, N = dom.size, dom.n
    xp = np.zeros((N, n, n))
    xm = np.zeros((N, n, n)) if any(b.side == -1 for b in form.blocks) else None
    G = form.group
    for j in form.representatives:
        H = stabilizer(G, j)
        hp = orbits_of_pairs(H).reshape(-1)
        cnt = np.bincount(hp)
        trans = _transversal(G, j)
        size = len(trans)
        for side, stack in ((1, xp), (-1, xm)):
            if stack is None:
                continue
            Xt = np.zeros((n, n))
            for blk, Y in zip(form.blocks, y_blocks):
                if blk.position == j and blk.side == side:
                    Q = blk.basis
                    Xt += Q @ (Q @ Y).T
            Xt = (np.bincount(hp, weights=Xt.reshape(-1)) / cnt)[hp].reshape(n, n)
            for j2, g in trans.items():
                gi = g.inputs
                M = np.empty((n, n))
                M[np.ix_(gi, gi)] = Xt
                stack[j2] = M / size
    return xp, xm


def _transversal(G: Group, j: int) -> dict:
    """``{j': g}`` with ``g`` mapping position ``j`` to ``j'``, for the orbit of ``j``."""
    trans = {j: G.identity()}
    frontier = [j]
    while frontier:
        nxt = []
        for k in frontier:
            for s in G.elements:
                k2 = int(s.positions[k])
                if k2 not in trans:
                    trans[k2] = s.compose(trans[k])
                    nxt.append(k2)
        frontier = nxt
    return trans


_SUPPORT_THRESHOLDS = (1e-12, 1e-9, 1e-6)


def solve_symmetric(f: PartialFunction, bound: str = "general", solver: str = "SCS", tol: float = 1e-7,
                    max_iters: int | None = None, verbose: bool = False, with_dual: bool = True,
                    group: Group | None = None, repair_tol: float = 1e-2, seed: int = 0,
                    witness_limit: int | None = WITNESS_LIMIT, chordal: bool = False,
                    **options) -> SolveResult:
    """Solve the invariant program of ``f`` and return bounds verified on the full domain.

    Parameters
    ----------
    f : PartialFunction
        Costs ``f.costs`` give the cost-weighted bound.
    bound : {"general", "positive"}
    solver : {"SCS", "CLARABEL"}
        The reduced program is handed to the solver directly as sparse conic data (no cvxpy).
        CLARABEL (interior point) is usually much faster on reduced programs, whose blocks are small.
    tol : float
        SCS ``eps_abs``/``eps_rel``; CLARABEL ``tol_gap_abs``/``tol_gap_rel``/``tol_feas``.
    max_iters : int, optional
        Iteration limit (SCS default 100000; CLARABEL its own default).  SCS runs with
        ``normalize=False`` unless given otherwise (fewer iterations on these data).
    verbose : bool
        Let the solver print its progress.
    with_dual : bool
        Build and verify the full-domain dual witness (``N·|D|²`` numbers) and report ``upper``;
        skipped when ``N·|D|²`` exceeds ``witness_limit``.
    group : Group, optional
        Symmetries to use (default: the full automorphism group).
    repair_tol : float
        Passed to :func:`~advbound.evidence.verify.verify_certificate`.
    seed : int
        Seed of the block decomposition.
    witness_limit : int or None
        Largest ``N·|D|²`` for which the dual witness is built (``None``: no limit).
    chordal : bool
        Decompose sparse blocks into cliques (see :func:`formulate_symmetric`).
    **options
        Further solver settings; unknown names emit :class:`~advbound.errors.AdvboundWarning`.

    Returns
    -------
    SolveResult
        ``lower`` and ``upper`` are :func:`~advbound.evidence.verify.verify_certificate`'s numbers for the
        expanded certificate (``upper`` is ``None`` without a dual witness); ``objective`` is
        the solver's claim.  ``solver_stats.options`` records the reduced sizes.

    Raises
    ------
    InvalidFunctionError
        For a constant function or an unknown bound.
    SolverError
        For an unsupported solver or an SCS crash.
    """
    from advbound.evidence.verify import extract_gamma, verify_certificate

    name = str(solver).upper()
    if name not in ("SCS", "CLARABEL"):
        raise SolverError(f"solver {solver!r} is not supported by the symmetric method; use 'SCS' or 'CLARABEL'")
    if max_iters is None and name == "SCS":
        max_iters = 100_000
    t0 = time.perf_counter()
    form = formulate_symmetric(f, bound, group=group, seed=seed, chordal=chordal)
    A, b, c, cone, layout = _conic_data(form, name)
    run = _solve_scs if name == "SCS" else _solve_clarabel
    x, y, word, raw_status, iters, solve_time, version, shown = run(A, b, c, cone, float(tol), max_iters,
                                                                    verbose, options)
    st = _status.from_cvxpy(word)
    sizes = form.sizes()
    tols = {"tol": float(tol)}
    if max_iters is not None:
        tols["max_iters"] = int(max_iters)
    stats = SolverStats(name=name, version=version, time=time.perf_counter() - t0, iterations=iters,
                        tolerances=tols,
                        options=dict(shown, method="symmetric", build_time=round(form.build_time, 4),
                                     solve_time=round(solve_time, 4), **{k: v for k, v in sizes.items()
                                                                         if k != "block_sizes"}))
    base = dict(bound=bound, domain_size=f.size, solver_stats=stats)
    if x is None or not np.isfinite(x).all() or st not in _status.SUCCESS:
        st = st if st not in _status.SUCCESS else _status.FAILED
        return SolveResult(message=f"{name} returned status {raw_status!r} on the symmetric program: "
                                   f"{_status.MESSAGES[st]}", status=st, **base)
    objective = float(-c @ x)
    W, rho = form.expand(x)
    dom = form.domain
    n, N = dom.size, dom.n
    with_dual = bool(with_dual) and (witness_limit is None or N * n * n <= witness_limit)
    dual = {}
    if with_dual:
        off = cone["z"] + cone["l"]
        ys = []
        for blk, lay in zip(form.blocks, layout):
            m = blk.size
            if lay is None:
                k = m * (m + 1) // 2
                ys.append(_smat(y[off:off + k], m, name))
                off += k
                continue
            # multipliers of the entry equalities B[u,v] - Σ_c Z_c[u,v] = 0 give the block's dual on
            # the clique entries (Y[c, c] ⪰ 0 for every clique); complete it to a PSD matrix
            start, keys = lay
            ye = y[start:start + keys.size]
            u, v = np.divmod(keys, m)
            Y = np.zeros((m, m))
            val = np.where(u == v, -ye, -ye / 2.0)
            Y[u, v] = val
            Y[v, u] = val
            ys.append(_psd_completion(Y, blk.cliques))
            off += sum(cq.size * (cq.size + 1) // 2 for cq in blk.cliques)
        xp, xm = _dual_witness(form, ys)
        dual = dict(dual_t=float(y[0]), dual_plus=xp, dual_minus=xm)
    meta = {"description": f.description, "bound": bound, "method": "symmetric",
            "solver": {"name": name, "version": version, "tol": float(tol), "max_iters": max_iters,
                       "status": raw_status, "iterations": iters, "time": float(solve_time)},
            "group_order": int(form.group.order), "reduced_sizes": sizes, "objective": objective}
    best = None
    for thr in _SUPPORT_THRESHOLDS:
        gamma = extract_gamma(W, rho, threshold=thr)
        cert = Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs), gamma, metadata=meta)
        rep = verify_certificate(cert, bound=bound, repair_tol=repair_tol)
        if best is None or rep.lower > best[1].lower:
            best = (gamma, rep)
    cert = Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs), best[0], metadata=meta, **dual)
    rep = verify_certificate(cert, bound=bound, repair_tol=repair_tol)
    cert = dataclasses.replace(cert, metadata=dict(meta, claimed_lower=rep.lower, claimed_upper=rep.upper))
    lower, upper = rep.lower, rep.upper
    if not rep.passed:
        st = _status.UNVERIFIED
        upper = None
        msg = f"check(s) {', '.join(rep.failed_checks())} failed: {rep.message}"
    elif not with_dual:
        msg = "solved; lower bound verified (no dual witness built: domain too large or not requested)"
    elif st == _status.OPTIMAL and upper is not None and (upper - lower) / max(abs(upper), 1e-300) > max(1e-3, 1e3 * tol):
        st = _status.INACCURATE
        msg = f"solver claimed optimality but the verified relative gap is {(upper - lower) / upper:.2g}"
    else:
        msg = _status.MESSAGES[st]
    log.info("solve_symmetric %s: %s lower=%s upper=%s", f.description or "function", st, lower, upper)
    return SolveResult(message=msg, status=st, lower=lower, upper=upper, objective=objective,
                       certificate=cert, verification=rep, **base)
