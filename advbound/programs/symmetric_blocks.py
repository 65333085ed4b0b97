"""Block-diagonalisation of the LMIs of the symmetric program, and chordal decomposition of sparse blocks.

This module owns the linear algebra :func:`advbound.programs.symmetric_program.formulate_symmetric`
uses to shrink the LMI ``L_j`` of a representative position, which commutes with the
permutation matrices of the stabiliser ``H`` of ``j`` (it lies in the commutant algebra
``C_H``): :func:`block_basis` block-diagonalises ``C_H``, :func:`chordal_cliques` splits a
sparse block along a chordal extension of its pattern, and ``_psd_completion`` turns the
clique multipliers back into a PSD multiplier of the whole block.

The block decomposition
-----------------------
An LMI that lies in the commutant algebra ``C_H`` is block-diagonalised as in "A numerical
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
"""

from __future__ import annotations

import logging

import numpy as np
import scipy.sparse as sp

from advbound.functions.symmetry import Group, orbits_of_inputs

__all__ = ["block_basis", "chordal_cliques"]

log = logging.getLogger("advbound")


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
