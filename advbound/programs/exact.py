"""The exact t-query optimum: the Barnum–Saks–Szegedy semidefinite program, solved and verified.

This module owns the program whose optimum is the best worst-case success
probability of a ``t``-query quantum algorithm for a partial function (the
characterisation of "Quantum query complexity and semi-definite programming",
2003), its symmetry-reduced form, the solver call, an independent numpy check
of the returned point, and the plain :class:`ExactResult`.

Typical call::

    from advbound.programs.exact import exact_success, least_queries
    r = exact_success(f, queries=2, solver="CLARABEL")
    r.success_probability, r.upper_bound, r.status

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 0)])  # PARITY_2
>>> r = exact_success(f, queries=1)
>>> r.status, round(r.success_probability, 4), round(r.upper_bound, 4)
('optimal', 1.0, 1.0)

The oracle
----------
A symbol is identified with its index ``s`` in the function's alphabet
(``alphabet[s]``), ``q = len(alphabet)``.  The oracle is the phase oracle over
``Z_q``: ``O_x |j, b> = ω^{b·s(x_j)} |j, b>`` with ``ω = e^{2πi/q}``, which is
conjugate (by a Fourier transform of the ``b`` register) to the modular-addition
oracle ``|j, a> -> |j, a + s(x_j) mod q>``.  ``b = 0`` does nothing, for every
``j``: the program has one no-query branch instead of ``N`` identical ones.
For ``q = 2`` this is the standard oracle ``(-1)^{b·x_j}``.  For ``q = 3`` every
relabelling of the symbols is affine over ``Z_3``, so the value does not depend
on the order of the alphabet; for ``q >= 4`` it may (relabellings that are not
affine change the oracle), and the result refers to the alphabet order given.

The program
-----------
With Gram matrices indexed by the domain (canonical order) and
``E_{j,b}[x, y] = ω^{b(s(y_j) - s(x_j))}``::

    M_0 = J,    M_{k-1} = Σ_ℓ Γ_{k,ℓ},    M_k = Σ_ℓ E_ℓ ∘ Γ_{k,ℓ}   (k = 1..t),
    M_t = Σ_z P_z,    Γ_{k,ℓ} ⪰ 0 (Hermitian),  P_z ⪰ 0,
    maximise s  subject to  P_{f(x)}[x, x] >= s  for every x.

``ℓ`` runs over the no-query branch and the pairs ``(j, b)``, ``b = 1..q-1``,
for positions ``j`` where not all inputs agree (a query to a constant position
is a no-query).  Exact reductions, each keeping the optimum (see docs/exact.md):

* complex conjugation maps ``Γ_{k,(j,b)}`` to ``Γ_{k,(j,-b)}``; the program keeps
  ``Γ_{k,(j,-b)} = conj Γ_{k,(j,b)}``, so every ``M_k`` and ``P_z`` is real and for
  ``q = 2`` everything is real.  A Hermitian block ``A + iB`` enters as its real
  embedding ``[[A, -B], [B, A]] ⪰ 0`` (size ``2n``);
* facial reduction: ``M_k`` lives on ``U_k``, the span of the characters of at most
  ``k`` positions, so ``Γ_{k+1,ℓ} = V_k X V_kᵀ`` with ``V_k`` an orthonormal basis
  (without it no point is strictly feasible and solvers lose accuracy);
* automorphisms (position permutations with per-position relabellings that are
  affine over ``Z_q``, and output relabellings): with ``use_symmetry=True``
  branches in one orbit share one group-invariant variable and one PSD constraint;
* only an independent set of equality rows is kept.

Verification
------------
:func:`verify_point` re-checks the returned matrices with numpy only.  Negative
eigenvalues are clipped, and the mismatch ``R_k = M_k - Σ_ℓ Γ_{k+1,ℓ}`` between
consecutive layers is turned into an explicit algorithm: the states realising
``M_k`` are rotated onto those realising the next layer by the best unitary
(orthogonal Procrustes), and the distances ``δ_k(x)`` add up to ``e_x``.  That
algorithm succeeds on ``x`` with probability at least
``(sqrt(P_{f(x)}[x, x]) - e_x)^2``; the minimum over ``x`` is
``success_probability``, achievable whatever the solver's accuracy.
``upper_bound`` comes from the solver's Lagrange multipliers, repaired to be
exactly dual feasible (``Y_{k-1} ⪰ Y_k ∘ conj E_ℓ``, ``Y_t ⪰ diag(μ on f^{-1}(z))``)
by adding ``α_k Π_k + λ_k I`` (``Π_k`` projects onto the complement of ``U_k``);
it bounds every ``t``-query algorithm.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time
import warnings
from typing import Any, Sequence

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from advbound import status as _status
from advbound.functions.domain import Domain, domain as _domain
from advbound.errors import InvalidFunctionError, SolverError
from advbound.functions.function import Automorphism, PartialFunction
from advbound.result import SolverStats

__all__ = [
    "ExactProgram",
    "ExactResult",
    "PointCheck",
    "formulate_exact",
    "solve_exact",
    "exact_success",
    "least_queries",
    "verify_point",
    "verify_dual",
    "phase_matrices",
    "oracle_description",
    "SUPPORTED_SOLVERS",
]

log = logging.getLogger("advbound")

SUPPORTED_SOLVERS = ("CLARABEL", "SCS")


def oracle_description(q: int) -> str:
    """One line naming the oracle the exact program refers to.

    >>> oracle_description(2)
    'phase oracle (-1)^(b*x_j), b in {0,1}; b = 0 is the no-query branch'
    """
    if q == 2:
        return "phase oracle (-1)^(b*x_j), b in {0,1}; b = 0 is the no-query branch"
    return (f"phase oracle w^(b*s(x_j)), w = exp(2*pi*i/{q}), b in Z_{q}, s = symbol index in the alphabet; "
            "b = 0 is the no-query branch (equivalent to |j,a> -> |j,a+s(x_j) mod q>)")


# ---------------------------------------------------------------------------------------------
# Phase matrices and branches
# ---------------------------------------------------------------------------------------------
def _branches(dom: Domain, q: int) -> list[tuple[int, int]]:
    """``[(-1, 0)]`` (no query) followed by ``(j, b)`` for live positions ``j`` and ``b = 1..q-1``."""
    out = [(-1, 0)]
    for j in dom.live_positions():
        out.extend((int(j), b) for b in range(1, q))
    return out


def phase_matrices(symbols: np.ndarray, q: int, branches: Sequence[tuple[int, int]]) -> np.ndarray:
    """``E[ℓ, x, y] = ω^{b(s(y_j) - s(x_j))}`` for each branch ``ℓ = (j, b)`` (``j = -1``: all ones).

    >>> E = phase_matrices(np.array([[0], [1]]), 2, [(-1, 0), (0, 1)])
    >>> E.real.astype(int).tolist()
    [[[1, 1], [1, 1]], [[1, -1], [-1, 1]]]
    """
    symbols = np.asarray(symbols, dtype=np.int64)
    d = symbols.shape[0]
    E = np.ones((len(branches), d, d), dtype=complex)
    for k, (j, b) in enumerate(branches):
        if j < 0 or b == 0:
            continue
        s = symbols[:, j]
        diff = (b * (s[None, :] - s[:, None])) % q
        E[k] = np.exp(2j * np.pi * diff / q)
    if q == 2:
        E = E.real.astype(complex)  # exact ±1
    return E


# ---------------------------------------------------------------------------------------------
# Symmetry: generators acting on inputs, branches and outputs
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class _Action:
    inputs: np.ndarray    # perm of range(d)
    branches: np.ndarray  # perm of range(L)
    outputs: np.ndarray   # perm of range(m)


def _affine(perm: Sequence[int], q: int, symbols: Sequence[int] | None = None) -> tuple[int, int] | None:
    """``(a, c)``, ``a`` a unit mod ``q``, with ``perm[s] = a*s + c mod q`` for every ``s`` in ``symbols``.

    ``symbols`` (default all) are the symbols that occur; the others never enter a phase.

    >>> _affine((2, 0, 1), 3), _affine((1, 0, 2, 3), 4), _affine((1, 0, 2, 3), 4, symbols=(0, 1))
    ((1, 2), None, (3, 1))
    """
    symbols = tuple(range(q)) if symbols is None else tuple(int(s) for s in symbols)
    s0 = symbols[0]
    for a in range(1, max(q, 2)):
        if math.gcd(a, q) != 1:
            continue
        c = (int(perm[s0]) - a * s0) % q
        if all((a * s + c) % q == int(perm[s]) % q for s in symbols):
            return a, c
    return None


def _action_of(f: PartialFunction, a: Automorphism, branches: list[tuple[int, int]], q: int) -> _Action | None:
    """The action of ``a`` on the program's index sets, or ``None`` (logged) when it cannot be used."""
    index = f._index()
    try:
        perm = np.array([index[a.apply(x, f.alphabet)] for x in f.inputs], dtype=np.int64)
    except (KeyError, IndexError, ValueError):
        log.warning("exact: an automorphism does not map the domain onto itself; ignored")
        return None
    if len(set(perm.tolist())) != f.size:
        log.warning("exact: an automorphism is not injective on the domain; ignored")
        return None
    labels = f.labels
    m = len(labels)
    outs = np.arange(m) if a.outputs is None else np.array(a.outputs, dtype=np.int64)
    li = {lab: i for i, lab in enumerate(labels)}
    for i, x in enumerate(f.inputs):
        if outs[li[f.outputs[i]]] != li[f.outputs[perm[i]]]:
            log.warning("exact: an automorphism does not respect the outputs; ignored")
            return None
    bindex = {br: k for k, br in enumerate(branches)}
    order = {ch: i for i, ch in enumerate(f.alphabet)}
    occurring = [sorted({order[x[j]] for x in f.inputs}) for j in range(f.n)]
    bperm = np.zeros(len(branches), dtype=np.int64)
    for k, (j, b) in enumerate(branches):
        if j < 0:
            bperm[k] = 0
            continue
        tau = tuple(range(q)) if a.relabel is None else a.relabel[j]
        aff = _affine(tau, q, occurring[j])
        if aff is None:
            log.info("exact: an automorphism relabels position %d non-affinely over Z_%d; not used", j + 1, q)
            return None
        ainv = pow(aff[0], -1, q)
        target = (int(a.positions[j]), (ainv * b) % q)
        if target not in bindex:
            return None
        bperm[k] = bindex[target]
    return _Action(perm, bperm, outs)


def _generators(f: PartialFunction, use_symmetry: bool, group=None) -> tuple[list[Automorphism], str]:
    """Automorphism generators to use and a word saying where they came from."""
    if not use_symmetry:
        return [], "off"
    if group is None:
        from advbound.functions import symmetry as _sym

        try:
            group = _sym.automorphism_group(f)
        except Exception as err:  # a failure there must not stop the exact program
            log.warning("exact: automorphism search failed (%s); using the builder's symmetries", err)
            group = None
    if group is not None:
        for attr in ("generators", "elements", "automorphisms"):
            gens = getattr(group, attr, None)
            if gens is not None:
                gens = [g for g in gens if isinstance(g, Automorphism)]
                if gens:
                    return gens, "automorphism_group"
        if isinstance(group, (list, tuple)) and all(isinstance(g, Automorphism) for g in group):
            return list(group), "given"
    return list(f.symmetries), "builder"


# ---------------------------------------------------------------------------------------------
# Orbits and transversals
# ---------------------------------------------------------------------------------------------
def _transversal(n: int, gens: list[tuple[np.ndarray, np.ndarray, int]], d: int):
    """Orbit representatives of ``0..n-1`` and, per point, a group element carrying its representative to it.

    ``gens`` holds ``(point_perm, input_perm, conj)``; an element is ``(input_perm, conj)``.
    """
    rep = np.full(n, -1, dtype=np.int64)
    elem: list = [None] * n
    ident = np.arange(d)
    for p in range(n):
        if rep[p] >= 0:
            continue
        rep[p] = p
        elem[p] = (ident, 0)
        queue = [p]
        while queue:
            u = queue.pop()
            for pp, ip, c in gens:
                v = int(pp[u])
                if rep[v] < 0:
                    rep[v] = p
                    elem[v] = (ip[elem[u][0]], elem[u][1] ^ c)
                    queue.append(v)
    return rep, elem


def _orbit_labels(n: int, perms: list[np.ndarray]) -> np.ndarray:
    """Orbit label of each of ``0..n-1`` under the group generated by ``perms``."""
    g = sp.coo_matrix((np.ones(n * len(perms)), (np.tile(np.arange(n), len(perms)), np.concatenate(perms))),
                      shape=(n, n))
    return connected_components(g, directed=True, connection="weak")[1]


def _face_bases(dvecs: np.ndarray, t: int, d: int) -> list[np.ndarray]:
    """Real orthonormal bases ``V_0..V_t`` of the spaces holding the ranges of ``M_0..M_t``.

    ``U_0 = span{1}`` and ``U_k = span{D_ℓ v : v in U_{k-1}}`` (``D_ℓ = diag(dvecs[ℓ])``): the Gram
    matrix after ``k`` queries is supported on ``U_k`` (the span of the characters of at most ``k``
    positions), and every block of layer ``k+1`` lies below it.  ``U_k`` is closed under complex
    conjugation, so a real basis exists.
    """
    bases = [np.ones((d, 1)) / math.sqrt(d)]
    for _ in range(t):
        prev = bases[-1]
        cand = np.hstack([dv[:, None] * prev for dv in dvecs])
        stack = np.hstack([cand.real, cand.imag])
        U, S, _ = np.linalg.svd(stack, full_matrices=False)
        rank = int(np.sum(S > 1e-9 * S[0]))
        bases.append(U[:, :rank])
    return bases


# ---------------------------------------------------------------------------------------------
# The program
# ---------------------------------------------------------------------------------------------
def _param(n: int, real: bool) -> np.ndarray:
    """Complex ``(n*n, p)`` matrix: row-major ``vec(X)`` of a real symmetric or Hermitian ``X`` from ``p`` reals."""
    iu = np.triu_indices(n)
    cols = []
    for i, j in zip(*iu):
        v = np.zeros(n * n, dtype=complex)
        v[i * n + j] = v[j * n + i] = 1.0
        cols.append(v)
    if not real:
        for i, j in zip(*np.triu_indices(n, 1)):
            v = np.zeros(n * n, dtype=complex)
            v[i * n + j], v[j * n + i] = 1j, -1j
            cols.append(v)
    return np.array(cols).T.reshape(n * n, -1)


def _null_space(K: np.ndarray, p: int) -> np.ndarray:
    if K.shape[0] == 0:
        return np.eye(p)
    if K.shape[0] < p:
        K = np.vstack([K, np.zeros((p - K.shape[0], p))])
    _, S, Vh = np.linalg.svd(K, full_matrices=False)
    rank = int(np.sum(S > 1e-9 * max(1.0, float(S[0]))))
    return Vh[rank:].T.copy()


@dataclasses.dataclass(frozen=True, eq=False)
class _Var:
    """One shared block variable: ``vec(X) = S @ N @ φ[offset:offset + N.shape[1]]``."""

    key: tuple
    n: int
    real: bool
    S: np.ndarray
    N: np.ndarray
    offset: int

    @property
    def dim(self) -> int:
        return int(self.N.shape[1])


@dataclasses.dataclass(frozen=True, eq=False)
class ExactProgram:
    """The reduced exact ``t``-query program of one function, as explicit linear maps of one real vector ``φ``.

    Every block of layer ``k`` is ``Γ_{k,ℓ} = V_{k-1} X_{k,ℓ} V_{k-1}ᵀ`` and every measurement block
    ``P_z = V_t X_z V_tᵀ``, with ``V_k`` a real orthonormal basis of the space ``U_k`` holding the range
    of ``M_k`` (facial reduction: exact, and it keeps interior-point solvers accurate).  One variable
    ``X_{k,r}`` per orbit of branches under the automorphisms and complex conjugation, with
    ``X_{k,gr} = conj^c(Q_g X_{k,r} Q_gᵀ)``, ``Q_g = V_{k-1}ᵀ Π_g V_{k-1}``, and ``X_{k,r}`` restricted to
    the invariant subspace (so the shared point is group-invariant).  Equalities are reduced to an
    independent set of rows.

    Attributes
    ----------
    domain : Domain
    queries : int
    q : int
        Alphabet size (the oracle is over ``Z_q``).
    branches : tuple of (int, int)
        ``(-1, 0)`` is the no-query branch; ``(j, b)`` a query to position ``j`` with phase ``b``.
    E : ndarray, complex, shape (L, |D|, |D|)
    bases : tuple of ndarray
        ``V_0 .. V_t``.
    n_phi : int
        Number of real decision variables (besides ``s``).
    psd : tuple of (key, map, size)
        Real PSD constraints ``reshape(map @ φ, (size, size)) ⪰ 0`` (Hermitian blocks in real embedding).
    eq : tuple of (A, b, step, rows)
        Per step ``k = 0..t``: independent rows ``A φ = b``; ``rows`` are the triangle entries ``(i, j)`` kept.
    success : (A, reps)
        ``A φ`` = ``P_{f(x)}[x, x]`` for the input-orbit representatives ``reps``.
    symmetry : dict
    """

    domain: Domain
    queries: int
    q: int
    branches: tuple
    E: np.ndarray
    dvecs: np.ndarray
    bases: tuple
    conj: np.ndarray
    branch_rep: np.ndarray
    branch_elem: tuple
    output_rep: np.ndarray
    output_elem: tuple
    variables: dict
    n_phi: int
    psd: tuple
    eq: tuple
    success: tuple
    input_class: np.ndarray
    symmetry: dict
    input_generators: tuple = ()

    @property
    def ranks(self) -> list[int]:
        """``dim U_k`` for ``k = 0..t``."""
        return [int(v.shape[1]) for v in self.bases]

    @property
    def sizes(self) -> dict:
        """Program size: PSD blocks (count, sizes, entries), real variables, equality rows, ``dim U_k``."""
        blocks = [n for _, _, n in self.psd]
        return {"psd_blocks": len(blocks), "psd_sizes": sorted(set(blocks)), "variables": int(self.n_phi),
                "psd_entries": int(sum(b * b for b in blocks)),
                "equalities": int(sum(a.shape[0] for a, _, _, _ in self.eq)),
                "branches": len(self.branches), "face_dims": self.ranks}

    def problem(self):
        """The cvxpy problem; returns a :class:`_Handles`."""
        import cvxpy as cp

        phi = cp.Variable(self.n_phi, name="phi")
        s = cp.Variable(name="s")
        cons, eqs = [], []
        for A, b, _, _ in self.eq:
            con = A @ phi == b
            eqs.append(con)
            cons.append(con)
        A, _ = self.success
        succ = A @ phi >= s
        cons.append(succ)
        for _, M, n in self.psd:
            cons.append(cp.reshape(M @ phi, (n, n), order="C") >> 0)
        return _Handles(cp.Problem(cp.Maximize(s), cons), phi, s, tuple(eqs), succ)

    def block_value(self, key: tuple, elem, phi: np.ndarray, k: int | None) -> np.ndarray:
        """``conj^c(Q X_r Qᵀ)`` for the variable ``key`` and group element ``elem``, from ``φ``."""
        var = self.variables[key]
        x = (var.S @ (var.N @ phi[var.offset:var.offset + var.dim])).reshape(var.n, var.n)
        Q = _q_matrix(self.bases[k], elem)
        x = x if Q is None else Q @ x @ Q.T
        return np.conj(x) if elem[1] else x

    def unpack(self, phi: np.ndarray) -> dict:
        """Full matrices: ``c`` (L,), ``gammas`` [(L,d,d) per layer 2..t], ``P`` (m,d,d)."""
        phi = np.asarray(phi, dtype=float)
        t = self.queries
        d = self.domain.size
        L = len(self.branches)
        m = len(self.domain.labels)

        def g(k, l):
            return self.block_value(("g", k, int(self.branch_rep[l])), self.branch_elem[l], phi, k - 1)

        c = np.array([g(1, l).real.item() / d for l in range(L)]) if t >= 1 else np.zeros(0)
        gammas = []
        for k in range(2, t + 1):
            V = self.bases[k - 1]
            gammas.append(np.array([V @ g(k, l) @ V.T for l in range(L)]))
        V = self.bases[t]
        P = np.array([V @ self.block_value(("p", int(self.output_rep[z])), self.output_elem[z], phi, t).real @ V.T
                      for z in range(m)])
        return {"c": c, "gammas": gammas, "P": P}


def _q_matrix(V: np.ndarray, elem) -> np.ndarray | None:
    perm = elem[0]
    if np.array_equal(perm, np.arange(perm.size)):
        return None
    return V.T @ V[np.argsort(perm)]


@dataclasses.dataclass(frozen=True, eq=False)
class _Handles:
    problem: Any
    phi: Any
    s: Any
    eqs: tuple
    succ: Any


def _independent_rows(A: sp.spmatrix) -> np.ndarray:
    """Indices of rows of ``A`` spanning its row space: pivoted QR of the small Gram matrix ``A Aᵀ``."""
    if A.shape[0] == 0:
        return np.zeros(0, dtype=np.int64)
    import scipy.linalg as sla
    G = (A @ A.T).toarray() if sp.issparse(A) else A @ A.T
    _, R, piv = sla.qr(G, mode="economic", pivoting=True)
    diag = np.abs(np.diag(R))
    rank = int(np.sum(diag > 1e-12 * max(1e-300, diag[0] if diag.size else 0.0)))
    return np.sort(piv[:rank])


def _embed_cols(local: np.ndarray, offset: int, total: int) -> sp.csr_matrix:
    """Sparse ``(rows, total)`` matrix holding ``local`` in columns ``offset..`` (tiny entries dropped)."""
    local = _clean(local)
    r, c = np.nonzero(local)
    return sp.csr_matrix((local[r, c], (r, c + offset)), shape=(local.shape[0], total))


def formulate_exact(f: PartialFunction | Domain, queries: int, use_symmetry: bool = True,
                    group=None) -> ExactProgram:
    """Describe the exact ``queries``-query program of ``f`` (no solver is called).

    Parameters
    ----------
    f : PartialFunction or Domain
    queries : int
        Number of queries ``t >= 0``.
    use_symmetry : bool
        Share variables along orbits of automorphisms (from :mod:`advbound.functions.symmetry` when
        present, else the builder's ``f.symmetries``).  Complex conjugation is always used.
    group : optional
        Automorphisms to use instead (a list of :class:`Automorphism` or an object with ``generators``).

    >>> from advbound.functions.function import PartialFunction
    >>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 1)])
    >>> p = formulate_exact(f, 2, use_symmetry=False)
    >>> p.sizes["psd_blocks"], p.ranks      # 3 branches in 2 layers, 2 outputs; dim U_k = 1, 3, 4
    (8, [1, 3, 4])
    """
    if isinstance(queries, bool) or not isinstance(queries, (int, np.integer)) or queries < 0:
        raise InvalidFunctionError(f"queries must be a non-negative integer, got {queries!r}")
    t = int(queries)
    dom = f if isinstance(f, Domain) else _domain(f)
    fn = dom.function
    q = len(fn.alphabet)
    d = dom.size
    m = len(dom.labels)
    branches = _branches(dom, q)
    L = len(branches)
    E = phase_matrices(dom.symbols, q, branches)
    dvecs = np.array([_dvec(dom.symbols, q, br) for br in branches])
    bindex = {br: k for k, br in enumerate(branches)}
    conj = np.array([bindex[(j, (-b) % q)] if j >= 0 else 0 for j, b in branches], dtype=np.int64)
    bases = _face_bases(dvecs, t, d)

    gens, source = _generators(fn, use_symmetry, group)
    actions = [a for a in (_action_of(fn, g, branches, q) for g in gens) if a is not None]
    usable = []
    for a in actions:  # every face must be invariant (it is for a true automorphism; check anyway)
        inv = np.argsort(a.inputs)
        if all(np.abs(V[inv] - V @ (V.T @ V[inv])).max() < 1e-8 for V in bases):
            usable.append(a)
        else:
            log.warning("exact: an automorphism does not preserve the query spaces; not used")
    ident = np.arange(d)
    bgens = [(a.branches, a.inputs, 0) for a in usable] + [(conj, ident, 1)]
    branch_rep, branch_elem = _transversal(L, bgens, d)
    ogens = [(a.outputs, a.inputs, 0) for a in usable]
    output_rep, output_elem = _transversal(m, ogens, d)

    # -- variables: one per (layer, branch orbit) and per output orbit, restricted to invariants
    variables: dict = {}
    offset = 0

    def make_var(key, n, real, rep, members, elems, point_gens, k):
        """Add the variable for one orbit, restricted to the group-invariant subspace.

        The family ``X_l = T_l(X_r)`` (``l`` in the orbit, ``T_l`` through the transversal) is
        invariant iff ``T_{g l}(X) = g(T_l(X))`` for every generator ``g`` and member ``l``; the
        conditions are applied one at a time, shrinking the basis ``N`` of allowed ``X``.
        """
        nonlocal offset
        S = _param(n, real)
        V = bases[k]
        N = np.eye(S.shape[1])
        for pp, ip, c in point_gens:
            gq = _q_matrix(V, (ip, c))
            for l in members:
                if N.shape[1] == 0:
                    break
                SN = S @ N
                xl = _apply(_q_matrix(V, elems[l]), np.conj(SN) if elems[l][1] else SN, n)
                lhs = _apply(gq, np.conj(xl) if c else xl, n)
                et = elems[int(pp[l])]
                rhs = _apply(_q_matrix(V, et), np.conj(SN) if et[1] else SN, n)
                diff = lhs - rhs
                if np.abs(diff).max(initial=0.0) < 1e-12:
                    continue
                N = N @ _null_space(np.vstack([diff.real, diff.imag]), N.shape[1])
        variables[key] = _Var(key, n, real, S, N, offset)
        offset += N.shape[1]

    for k in range(1, t + 1):
        n = bases[k - 1].shape[1]
        for r in np.unique(branch_rep):
            members = np.flatnonzero(branch_rep == r)
            make_var(("g", k, int(r)), n, bool(conj[r] == r), int(r), members, branch_elem, bgens, k - 1)
    for r in np.unique(output_rep):
        members = np.flatnonzero(output_rep == r)
        make_var(("p", int(r)), bases[t].shape[1], True, int(r), members, output_elem, ogens, t)
    n_phi = offset

    def block_local(key, elem, k):
        """``(offset, local)``: ``vec(conj^c(Q X Qᵀ)) = local @ φ[offset:offset + local.shape[1]]``."""
        var = variables[key]
        base = var.S @ var.N
        if elem[1]:
            base = np.conj(base)
        return var.offset, _apply(_q_matrix(bases[k], elem), base, var.n)

    def g_local(k, l):
        return block_local(("g", k, int(branch_rep[l])), branch_elem[l], k - 1)

    def p_local(z):
        return block_local(("p", int(output_rep[z])), output_elem[z], t)

    def place(target: dict, off, local):
        """Accumulate a column block (the matrices are kept per variable, never as dense rows x n_phi)."""
        if off in target:
            target[off] = target[off] + local
        else:
            target[off] = local.copy()

    def assemble(blocks: dict, rows) -> sp.csr_matrix:
        parts = [_embed_cols(blocks[off].real[rows], off, n_phi) for off in sorted(blocks)]
        return sp.vstack(parts).tocsr() if len(parts) == 1 else sum(parts[1:], parts[0]).tocsr()

    # -- PSD constraints: one per shared variable (real embedding for Hermitian ones)
    psd = []
    for key, var in variables.items():
        loc = var.S @ var.N
        n = var.n
        if var.real:
            psd.append((key, _embed_cols(loc.real, var.offset, n_phi), n))
        else:
            re = loc.real.reshape(n, n, -1)
            im = loc.imag.reshape(n, n, -1)
            Z = np.zeros((2 * n, 2 * n, loc.shape[1]))
            Z[:n, :n] = re
            Z[n:, n:] = re
            Z[:n, n:] = -im
            Z[n:, :n] = im
            psd.append((key, _embed_cols(Z.reshape(4 * n * n, -1), var.offset, n_phi), 2 * n))

    # -- equalities: step k says  Σ (next layer) = M_k, in the coordinates of U_k
    eq = []
    first: dict = {}
    for off, loc in ([g_local(1, l) for l in range(L)] if t >= 1 else [p_local(z) for z in range(m)]):
        place(first, off, loc)
    eq.append((assemble(first, np.array([0])), np.array([float(d)]), 0, [(0, 0)]))
    for k in range(1, t + 1):
        Vk, Vp = bases[k], bases[k - 1]
        rk, rp = Vk.shape[1], Vp.shape[1]
        diff: dict = {}
        for off, loc in ([g_local(k + 1, l) for l in range(L)] if k < t else [p_local(z) for z in range(m)]):
            place(diff, off, loc)
        for l in range(L):
            B = Vk.T @ (dvecs[l][:, None] * Vp)
            off, loc = g_local(k, l)
            X = loc.reshape(rp, rp, -1)
            place(diff, off, -_sandwich(B, X, np.conj(B)).reshape(rk * rk, -1))
        iu = np.triu_indices(rk)
        rows = iu[0] * rk + iu[1]
        A = assemble(diff, rows)
        keep = _independent_rows(A)
        eq.append((A[keep], np.zeros(keep.size), k, [(int(iu[0][i]), int(iu[1][i])) for i in keep]))

    # -- success rows at the input-orbit representatives
    input_class = _orbit_labels(d, [a.inputs for a in usable]) if usable else np.arange(d)
    reps = np.unique(input_class, return_index=True)[1]
    Vt = bases[t]
    out = dom.output_index
    srows = np.zeros((reps.size, n_phi))
    for i, x in enumerate(reps):
        off, loc = p_local(int(out[x]))
        v = Vt[x]
        srows[i, off:off + loc.shape[1]] += (np.kron(v, v) @ loc).real
    success = (sp.csr_matrix(_clean(srows)), reps)
    symmetry = {"source": source, "generators_offered": len(gens), "generators_used": len(usable),
                "branch_orbits": int(np.unique(branch_rep).size), "output_orbits": int(np.unique(output_rep).size),
                "input_orbits": int(reps.size)}
    return ExactProgram(dom, t, q, tuple(branches), E, dvecs, tuple(bases), conj, branch_rep, tuple(branch_elem),
                        output_rep, tuple(output_elem), variables, n_phi, tuple(psd), tuple(eq), success,
                        input_class, symmetry, tuple(a.inputs for a in usable))


def _apply(Q: np.ndarray | None, M: np.ndarray, n: int) -> np.ndarray:
    """Columns ``vec(X)`` of ``M`` (row-major ``n x n``) mapped to ``vec(Q X Qᵀ)``; ``Q = None`` is the identity."""
    if Q is None:
        return M
    return _sandwich(Q, M.reshape(n, n, -1), Q).reshape(n * n, -1)


def _sandwich(A: np.ndarray, X: np.ndarray, B: np.ndarray) -> np.ndarray:
    """``A X[:, :, p] Bᵀ`` for every ``p`` (X has shape ``(a, b, p)``); two batched products."""
    Xp = np.moveaxis(X, 2, 0)
    return np.moveaxis(A @ Xp @ B.T, 0, 2)


def _clean(A: np.ndarray) -> np.ndarray:
    A = np.array(A, dtype=float)
    A[np.abs(A) < 1e-13] = 0.0
    return A


def _dvec(symbols: np.ndarray, q: int, branch: tuple[int, int]) -> np.ndarray:
    j, b = branch
    if j < 0 or b == 0:
        return np.ones(symbols.shape[0], dtype=complex)
    v = np.exp(-2j * np.pi * ((b * symbols[:, j].astype(np.int64)) % q) / q)
    return v.real.astype(complex) if q == 2 else v

# ---------------------------------------------------------------------------------------------
# Verification (numpy only)
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True)
class PointCheck:
    """What the independent check of a returned point found.

    Attributes
    ----------
    success_probability : float
        Achievable worst-case success probability of the algorithm built from the
        (clipped) point: ``min_x (sqrt(P_{f(x)}[x,x]) - e_x)_+^2``.
    raw_success : float
        ``min_x P_{f(x)}[x,x]`` of the returned point, before any correction.
    psd_violation : float
        Largest negative eigenvalue magnitude clipped from any block (and negative weight).
    equality_residual : float
        Largest entry of ``|M_k - Σ_ℓ Γ_{k+1,ℓ}|`` over the steps, after clipping.
    drift : float
        ``max_x e_x``: the accumulated distance between the built algorithm's states and the point's.
    """

    success_probability: float
    raw_success: float
    psd_violation: float
    equality_residual: float
    drift: float


def _psd_part(A: np.ndarray) -> tuple[np.ndarray, float]:
    A = (A + A.conj().T) / 2
    w, V = np.linalg.eigh(A)
    neg = float(max(0.0, -w[0])) if w.size else 0.0
    return (V * np.clip(w, 0, None)) @ V.conj().T, neg


def _sqrt_psd(A: np.ndarray) -> np.ndarray:
    w, V = np.linalg.eigh((A + A.conj().T) / 2)
    return (V * np.sqrt(np.clip(w, 0, None))) @ V.conj().T


def _drift(M: np.ndarray, N: np.ndarray) -> np.ndarray:
    """Per-input distance ``||U a_x - b_x||`` with ``a, b`` realising ``M, N`` and ``U`` the best unitary."""
    A, B = _sqrt_psd(M), _sqrt_psd(N)
    W, _, Vh = np.linalg.svd(A @ B.conj().T)
    U = Vh.conj().T @ W.conj().T
    return np.linalg.norm(U @ A - B, axis=0)


def verify_point(E: np.ndarray, output_index: np.ndarray, c: np.ndarray, gammas: Sequence[np.ndarray],
                 P: np.ndarray) -> PointCheck:
    """Check a point of the exact program with numpy alone and bound what it achieves.

    Parameters
    ----------
    E : ndarray (L, d, d)
        Phase matrices of the branches (branch 0: no query).
    output_index : ndarray (d,)
    c : ndarray (L,)
        Layer-1 weights (``Γ_{1,ℓ} = c_ℓ J``); empty when ``t = 0`` (then ``P_z = p_z J``).
    gammas : list of ndarray (L, d, d)
        Blocks of layers ``2..t``.
    P : ndarray (m, d, d)
        Measurement blocks.
    """
    output_index = np.asarray(output_index)
    d = output_index.size
    L = E.shape[0]
    e = np.zeros(d)
    neg = 0.0
    resid = 0.0
    P = np.asarray(P)
    if c.size == 0:  # t = 0: P_z = p_z J
        p = np.array([P[z, 0, 0].real for z in range(P.shape[0])])
        neg = max(neg, float(max(0.0, -p.min())))
        p = np.clip(p, 0, None)
        resid = abs(float(p.sum()) - 1.0)
        p = p / p.sum() if p.sum() > 0 else np.full(p.size, 1.0 / p.size)
        Pc = p[:, None, None] * np.ones((p.size, d, d))
    else:
        neg = max(neg, float(max(0.0, -np.min(c))))
        cc = np.clip(np.asarray(c, dtype=float), 0, None)
        resid = abs(float(cc.sum()) - 1.0)
        cc = cc / cc.sum() if cc.sum() > 0 else np.eye(1, L).ravel()
        M = np.tensordot(cc, E, axes=1)          # after query 1
        for G in gammas:
            blocks = []
            for l in range(L):
                b, ng = _psd_part(G[l])
                neg = max(neg, ng)
                blocks.append(b)
            N = sum(blocks)
            resid = max(resid, float(np.abs(N - M).max()))
            e += _drift(M, N)
            M = sum(E[l] * blocks[l] for l in range(L))
        Pc = []
        for z in range(P.shape[0]):
            b, ng = _psd_part(P[z])
            neg = max(neg, ng)
            Pc.append(b)
        Pc = np.array(Pc)
        N = Pc.sum(axis=0)
        resid = max(resid, float(np.abs(N - M).max()))
        e += _drift(M, N)
    diag = np.array([Pc[output_index[x], x, x].real for x in range(d)])
    raw = float(diag.min())
    achieved = np.clip(np.sqrt(np.clip(diag, 0, None)) - e, 0, None) ** 2
    return PointCheck(float(min(1.0, achieved.min())), raw, neg, resid, float(e.max()))


def verify_dual(E: np.ndarray, output_index: np.ndarray, Y: Sequence[np.ndarray], mu: np.ndarray,
                n_outputs: int, complements: Sequence[np.ndarray] | None = None) -> float:
    """An upper bound on every ``t``-query algorithm's worst-case success, from any multipliers.

    ``Y[k-1]`` (real symmetric ``d x d``) is the multiplier of step ``k``
    (``M_k = Σ_ℓ Γ_{k+1,ℓ}``, the last step being ``M_t = Σ_z P_z``), ``k = 1..t``;
    ``mu`` weighs the inputs.  Dual feasibility is
    ``Y_t ⪰ diag(mu on f^{-1}(z))`` for every ``z`` and ``Y_{k-1} ⪰ Y_k ∘ conj E_ℓ`` for
    every branch, and then every algorithm succeeds on the worst input with
    probability at most ``max_ℓ Σ_{x,y} Re(E_ℓ ∘ Y_1)``.  The point is made exactly
    feasible, last step first, by adding ``α_k Π_k + λ_k I`` to ``Y_k``, where
    ``Π_k`` (``complements[k-1]``) is the projector onto the complement of the
    space ``U_k`` holding ``M_k`` (it does not change the bound when ``E_ℓ``
    lives on ``U_1``; ``α_k`` is picked from a few trial values) and ``λ_k`` the
    smallest shift that makes every constraint hold.  With ``t = 0`` the bound is
    ``max_z mu(f^{-1}(z))``.
    """
    output_index = np.asarray(output_index)
    mu = np.clip(np.asarray(mu, dtype=float), 0, None)
    mu = mu / mu.sum() if mu.sum() > 0 else np.full(mu.size, 1.0 / mu.size)
    if not Y:
        return float(max(mu[output_index == z].sum() for z in range(n_outputs)))
    d = output_index.size
    eye = np.eye(d)
    Y0 = [np.array((y + y.T) / 2, dtype=float) for y in Y]
    comps = list(complements) if complements is not None else [np.zeros((d, d))] * len(Y0)
    scale0 = 1.0 + max(float(np.abs(y).max()) for y in Y0)
    eps = np.finfo(float).eps

    def shift(needs, base):
        """Smallest λ (plus a rounding margin) with ``base + λ I ⪰ n`` for every ``n`` in ``needs``."""
        lam = 0.0
        for n in needs:
            H = n - base
            H = (H + H.conj().T) / 2
            lam = max(lam, float(np.linalg.eigvalsh(H)[-1]) + 10 * d * eps * float(np.linalg.norm(H)))
        return max(lam, 0.0)

    diag_needs = [np.diag(np.where(output_index == z, mu, 0.0)) for z in range(n_outputs)]
    best = math.inf
    for A in (0.0,) + tuple(10.0 ** (e / 2) for e in range(-2, 16)):
        # α_k grows backwards (α_{k-1} >= α_k is needed on the complements); any choice is valid
        alpha = A * scale0
        Ys = list(Y0)
        base = Ys[-1] + alpha * comps[-1]
        Ys[-1] = base + shift(diag_needs, base) * eye
        for k in range(len(Ys) - 1, 0, -1):
            alpha = 2 * alpha + A * scale0
            base = Ys[k - 1] + alpha * comps[k - 1]
            Ys[k - 1] = base + shift([Ys[k] * E[l].conj() for l in range(E.shape[0])], base) * eye
        ub = max(float(np.real(np.sum(E[l] * Ys[0]))) + 10 * d * d * eps * float(np.abs(Ys[0]).max())
                 for l in range(E.shape[0]))
        best = min(best, ub)
    return float(best)


# ---------------------------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class ExactResult:
    """The best worst-case success probability of ``queries``-query algorithms, verified.

    Attributes
    ----------
    message : str
        What happened, in one sentence (first in the repr).
    status : str
        A word from :mod:`advbound.status`.  ``unverified`` when the verified
        interval ``[success_probability, upper_bound]`` is wider than ``verify_tol``.
    queries : int
        ``t``.  For :func:`least_queries`: the least ``t`` found to reach the target (or the last tried).
    success_probability : float or None
        Achieved by an explicit algorithm built from the returned point (see
        :func:`verify_point`); never more than the true optimum.
    upper_bound : float or None
        Verified upper bound on the optimum (repaired Lagrange multipliers), or ``None``.
    objective : float or None
        The solver's claimed optimum (not a verified number).
    target_error : float or None
        The ``ε`` asked of :func:`least_queries`.
    reached : bool or None
        :func:`least_queries` only: whether ``success_probability >= 1 - ε - decision_tol``.
    domain_size, alphabet_size : int
    oracle : str
        The oracle the value refers to (:func:`oracle_description`).
    residuals : dict
        ``psd_violation``, ``equality_residual``, ``drift``, ``raw_success`` (see :class:`PointCheck`).
    program : dict
        Program sizes and symmetry use.
    solver_stats : SolverStats
    history : tuple of dict
        :func:`least_queries`: one summary per ``t`` tried.
    """

    message: str
    status: str
    queries: int
    success_probability: float | None = None
    upper_bound: float | None = None
    objective: float | None = None
    target_error: float | None = None
    reached: bool | None = None
    domain_size: int = 0
    alphabet_size: int = 0
    oracle: str = ""
    residuals: dict = dataclasses.field(default_factory=dict)
    program: dict = dataclasses.field(default_factory=dict)
    solver_stats: SolverStats = dataclasses.field(default_factory=SolverStats)
    history: tuple = ()

    @property
    def success(self) -> bool:
        """True when the status allows the verified numbers to be reported."""
        return self.status in _status.SUCCESS

    @property
    def error(self) -> float | None:
        """``1 - success_probability`` (the verified achievable error)."""
        return None if self.success_probability is None else 1.0 - self.success_probability

    def to_dict(self) -> dict:
        """Python scalars, lists and dicts only (JSON-ready)."""
        def num(v):
            return None if v is None or (isinstance(v, float) and math.isnan(v)) else float(v)
        st = self.solver_stats
        return {
            "kind": "exact",
            "message": self.message,
            "status": self.status,
            "success": self.success,
            "queries": int(self.queries),
            "success_probability": num(self.success_probability),
            "error": num(self.error),
            "upper_bound": num(self.upper_bound),
            "objective": num(self.objective),
            "target_error": num(self.target_error),
            "reached": None if self.reached is None else bool(self.reached),
            "domain_size": int(self.domain_size),
            "alphabet_size": int(self.alphabet_size),
            "oracle": self.oracle,
            "residuals": {k: num(v) for k, v in self.residuals.items()},
            "program": _plain(self.program),
            "solver": {"name": st.name, "version": st.version, "time": float(st.time),
                       "iterations": None if st.iterations is None else int(st.iterations),
                       "tolerances": _plain(st.tolerances), "options": _plain(st.options)},
            "history": [_plain(h) for h in self.history],
        }


def _plain(v):
    if isinstance(v, dict):
        return {str(k): _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_plain(x) for x in v]
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return None if math.isnan(v) else float(v)
    return v if v is None or isinstance(v, str) else str(v)


# ---------------------------------------------------------------------------------------------
# Solving
# ---------------------------------------------------------------------------------------------
def _solver_kwargs(name: str, tol: float, max_iters: int | None, options: dict) -> dict:
    kw = {}
    if name == "SCS":
        kw.update(eps_abs=tol, eps_rel=tol, max_iters=100_000 if max_iters is None else int(max_iters))
    else:
        kw.update(tol_gap_abs=tol, tol_gap_rel=tol, tol_feas=tol)
        if max_iters is not None:
            kw["max_iter"] = int(max_iters)
    kw.update(options)
    return kw


def _version(name: str) -> str:
    try:
        mod = __import__(name.lower())
        return str(getattr(mod, "__version__", ""))
    except ImportError:  # pragma: no cover
        return ""


def solve_exact(program: ExactProgram, solver: str = "CLARABEL", tol: float = 1e-8, verify_tol: float = 1e-4,
                max_iters: int | None = None, verbose: bool = False, **options) -> ExactResult:
    """Solve a described program, verify the point with numpy, and return an :class:`ExactResult`.

    Parameters
    ----------
    program : ExactProgram
    solver : {"CLARABEL", "SCS"}
        Case-insensitive.  CLARABEL (interior point) is the accurate choice for these small programs.
    tol : float
        CLARABEL ``tol_gap_abs``/``tol_gap_rel``/``tol_feas``, or SCS ``eps_abs``/``eps_rel``.
    verify_tol : float
        Largest accepted width of ``[success_probability, upper_bound]``; wider makes the status ``unverified``.
    max_iters : int, optional
    verbose : bool
        Let the solver print its progress.
    **options
        Passed to the solver unchanged.

    Raises
    ------
    SolverError
        When the solver is unknown or not installed.
    """
    import cvxpy as cp

    name = str(solver).upper()
    if name not in SUPPORTED_SOLVERS:
        raise SolverError(f"solver {solver!r} is not supported; use one of {', '.join(SUPPORTED_SOLVERS)}")
    if name not in cp.installed_solvers():
        raise SolverError(f"solver {name} is not installed")
    dom = program.domain
    d = dom.size
    m = len(dom.labels)
    t0 = time.perf_counter()
    # CLARABEL sometimes stops with a numerical error on programs with many optimal points; it is
    # then retried without chordal decomposition and with more regularisation (user options win).
    attempts = [dict(options)]
    if name == "CLARABEL":
        attempts += [{"chordal_decomposition_enable": False, **options},
                     {"chordal_decomposition_enable": False, "static_regularization_constant": 1e-7, **options}]
    used = dict(options)
    for opts in attempts:
        handles = program.problem()
        prob = handles.problem
        raw_status, msg, iters = None, "", None
        kwargs = _solver_kwargs(name, float(tol), max_iters, opts)
        try:
            with warnings.catch_warnings():  # an inaccurate solve is reported as a status, not a warning
                warnings.simplefilter("ignore", UserWarning)
                prob.solve(solver=name, verbose=verbose, **kwargs)
            raw_status = prob.status
            iters = prob.solver_stats.num_iters if prob.solver_stats is not None else None
        except cp.error.SolverError as err:
            raw_status, msg = "solver_error", f"{name} failed: {str(err).splitlines()[0] if str(err) else 'no detail'}"
        used = opts
        if raw_status in ("optimal", "optimal_inaccurate") and handles.phi.value is not None:
            break
        log.info("exact: %s returned %s with options %s", name, raw_status, opts)
    elapsed = time.perf_counter() - t0
    stats = SolverStats(name=name, version=_version(name), time=elapsed, iterations=iters,
                        tolerances={"tol": float(tol), "verify_tol": float(verify_tol)},
                        options={k: v for k, v in used.items()})
    status = _status.from_cvxpy(raw_status)
    common = dict(queries=program.queries, domain_size=d, alphabet_size=program.q,
                  oracle=oracle_description(program.q), solver_stats=stats,
                  program={**program.sizes, "symmetry": dict(program.symmetry)})
    if handles.s.value is None or handles.phi.value is None:
        return ExactResult(message=msg or f"{name} returned status {raw_status!r} without a point",
                           status=_status.FAILED if status in _status.SUCCESS else status, **common)
    objective = float(handles.s.value)
    point = program.unpack(handles.phi.value)
    check = verify_point(program.E, dom.output_index, point["c"], point["gammas"], point["P"])
    upper = _upper_from_multipliers(program, handles, d, m)
    residuals = {"psd_violation": check.psd_violation, "equality_residual": check.equality_residual,
                 "drift": check.drift, "raw_success": check.raw_success}
    lower = check.success_probability
    if status in _status.SUCCESS:
        width = (upper - lower) if upper is not None else math.inf
        if width > verify_tol:
            status = _status.UNVERIFIED
            msg = (f"verified interval [{lower:.6g}, {_fmt(upper)}] is wider than {verify_tol:g} "
                   f"(solver objective {objective:.6g}); tighten tol or try another solver")
        else:
            msg = (f"best {program.queries}-query worst-case success probability in [{lower:.8g}, {upper:.8g}] "
                   f"(solver objective {objective:.8g})")
    else:
        msg = msg or (f"{name} returned status {raw_status!r}; achievable success {lower:.6g} "
                      f"(solver objective {objective:.6g})")
    return ExactResult(message=msg, status=status, success_probability=lower, upper_bound=upper,
                       objective=objective, residuals=residuals, **common)


def _fmt(v):
    return "none" if v is None else f"{v:.6g}"


def _upper_from_multipliers(program: ExactProgram, handles: "_Handles", d: int, m: int) -> float | None:
    """Verified upper bound from the solver's multipliers (both sign conventions tried; both are valid)."""
    if handles.succ.dual_value is None or any(c.dual_value is None for c in handles.eqs):
        return None
    lam = np.asarray(handles.succ.dual_value, dtype=float).ravel()
    ic = program.input_class
    reps = program.success[1]
    per = np.zeros(int(ic.max()) + 1)
    per[ic[reps]] = lam
    mu = per[ic] / np.bincount(ic)[ic]
    # The multipliers of the shared-variable program satisfy the full dual constraints only after
    # averaging over the group (Reynolds average of the summed orbit conditions; see docs/exact.md).
    gens = program.input_generators
    pc = _orbit_labels(d * d, [(g[:, None] * d + g[None, :]).ravel() for g in gens]) if gens else None
    comps = [np.eye(d) - V @ V.T for V in program.bases[1:]]
    best = None
    for sign in (1.0, -1.0):
        Y = []
        for con, (_, _, k, rows) in zip(handles.eqs[1:], program.eq[1:]):
            V = program.bases[k]
            r = V.shape[1]
            nu = sign * np.asarray(con.dual_value, dtype=float).ravel()
            Z = np.zeros((r, r))
            for (i, j), v in zip(rows, nu):
                Z[i, j] += v / 2
                Z[j, i] += v / 2       # an off-diagonal row stands for both (i, j) and (j, i)
            Yk = V @ Z @ V.T
            if pc is not None:
                Yk = (np.bincount(pc, weights=Yk.ravel()) / np.bincount(pc))[pc].reshape(d, d)
            Y.append(Yk)
        try:
            ub = verify_dual(program.E, program.domain.output_index, Y, mu, m, comps)
        except np.linalg.LinAlgError:
            continue
        best = ub if best is None else min(best, ub)
        if not Y:
            break
    return None if best is None else float(min(best, 1.0))


def exact_success(f: PartialFunction, queries: int, solver: str = "CLARABEL", tol: float = 1e-8,
                  use_symmetry: bool = True, verify_tol: float = 1e-4, **options) -> ExactResult:
    """Best worst-case success probability of a ``queries``-query algorithm for ``f``.

    Parameters
    ----------
    f : PartialFunction
    queries : int
    solver : {"CLARABEL", "SCS"}
    tol : float
        Solver tolerance.
    use_symmetry : bool
        Shrink the program with automorphisms (the value is the same either way).
    verify_tol : float
        See :func:`solve_exact`.
    **options
        ``max_iters``, ``verbose``, ``group`` (automorphisms to use) or solver options.

    Returns
    -------
    ExactResult
        ``success_probability`` is achieved by an explicit algorithm;
        ``upper_bound`` bounds every algorithm.

    Examples
    --------
    One query to OR on two bits (the optimum is 9/10, see docs/exact.md):

    >>> from advbound.functions.function import PartialFunction
    >>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 1)])
    >>> round(exact_success(f, 1).success_probability, 4)
    0.9
    """
    group = options.pop("group", None)
    program = formulate_exact(f, queries, use_symmetry=use_symmetry, group=group)
    return solve_exact(program, solver=solver, tol=tol, verify_tol=verify_tol, **options)


def least_queries(f: PartialFunction, error: float, max_queries: int | None = None, decision_tol: float = 1e-4,
                  start: int = 0, **kw) -> ExactResult:
    """The least ``t`` whose optimal worst-case success reaches ``1 - error``.

    ``t`` is declared sufficient when the *verified achievable* success is at
    least ``1 - error - decision_tol``: a numerical decision (``error = 0``, exact
    computation, can only be decided up to ``decision_tol``).  Smaller ``t`` were
    rejected because their verified value fell short; their ``upper_bound`` (when
    below ``1 - error - decision_tol``) certifies the rejection, and the message
    says when it does not.

    Parameters
    ----------
    f : PartialFunction
    error : float
        ``0 <= error < 1``.
    max_queries : int, optional
        Default: the number of live positions (that many queries compute ``f`` exactly).
    decision_tol : float
    start : int
        First ``t`` tried (default 0).
    **kw
        Passed to :func:`exact_success`.
    """
    if not (isinstance(error, (int, float)) and 0 <= error < 1):
        raise InvalidFunctionError(f"error must be in [0, 1), got {error!r}")
    live = int(_domain(f).live_positions().size)
    if max_queries is None:
        max_queries = live
    if max_queries < start:
        raise InvalidFunctionError(f"max_queries {max_queries} is below the first query count tried ({start})")
    target = 1.0 - float(error) - float(decision_tol)
    history = []
    uncertified = []
    res = None
    total_time = 0.0
    for t in range(int(start), int(max_queries) + 1):
        res = exact_success(f, t, **kw)
        total_time += res.solver_stats.time
        ok = res.success_probability is not None and res.success_probability >= target
        history.append({"queries": t, "status": res.status, "success_probability": res.success_probability,
                        "upper_bound": res.upper_bound, "objective": res.objective, "reached": ok,
                        "time": res.solver_stats.time})
        if ok:
            note = ""
            if uncertified:
                note = (f"; fewer queries ({', '.join(map(str, uncertified))}) were rejected by the solver only "
                        "(verified upper bound not below the target)")
            msg = (f"{t} queries reach success {res.success_probability:.8g} >= 1 - {error:g} "
                   f"(decision tolerance {decision_tol:g}){note}")
            return dataclasses.replace(res, message=msg, target_error=float(error), reached=True,
                                       history=tuple(history),
                                       solver_stats=dataclasses.replace(res.solver_stats, time=total_time))
        if res.upper_bound is None or res.upper_bound >= target:
            uncertified.append(t)
    msg = f"no query count up to {max_queries} reached success 1 - {error:g} (decision tolerance {decision_tol:g})"
    return dataclasses.replace(res, message=msg, target_error=float(error), reached=False, history=tuple(history),
                               status=res.status if res.status not in _status.SUCCESS else _status.INACCURATE,
                               solver_stats=dataclasses.replace(res.solver_stats, time=total_time))
