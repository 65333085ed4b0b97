"""The exact t-query program, formulated: phase oracle, query spaces, shared variables and linear maps.

This module owns :func:`formulate_exact`, which describes (without solving) the program whose
optimum is the best worst-case success probability of a ``t``-query quantum algorithm for a
partial function (the characterisation of "Quantum query complexity and semi-definite
programming", 2003), and the :class:`ExactProgram` it returns: its symmetry-reduced variables,
PSD blocks, equality rows and success rows as explicit linear maps of one real vector ``φ``.
The solver call and its verification are in :mod:`advbound.programs.exact`; the automorphisms
acting on the program in :mod:`advbound.programs.exact_symmetry`.

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
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any, Sequence

import numpy as np
import scipy.sparse as sp

from advbound.errors import InvalidFunctionError
from advbound.functions.domain import Domain, domain as _domain
from advbound.functions.function import PartialFunction
from advbound.programs.exact_symmetry import _generators, _orbit_labels, _transversal, _usable_actions

__all__ = ["ExactProgram", "formulate_exact", "phase_matrices", "oracle_description"]


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
# Query spaces (facial reduction)
# ---------------------------------------------------------------------------------------------
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
    usable = _usable_actions(fn, gens, branches, q, bases)
    ident = np.arange(d)
    bgens = [(a.branches, a.inputs, 0) for a in usable] + [(conj, ident, 1)]
    branch_rep, branch_elem = _transversal(L, bgens, d)
    ogens = [(a.outputs, a.inputs, 0) for a in usable]
    output_rep, output_elem = _transversal(m, ogens, d)

    variables, n_phi = _shared_variables(bases, t, conj, (branch_rep, branch_elem, bgens),
                                         (output_rep, output_elem, ogens))
    maps = _BlockMaps(variables, bases, t, n_phi, branch_rep, branch_elem, output_rep, output_elem)
    psd = _psd_constraints(variables, n_phi)
    eq = _equalities(maps, dvecs, L, m, d)
    input_class = _orbit_labels(d, [a.inputs for a in usable]) if usable else np.arange(d)
    success = _success_rows(maps, dom, input_class)
    reps = success[1]
    symmetry = {"source": source, "generators_offered": len(gens), "generators_used": len(usable),
                "branch_orbits": int(np.unique(branch_rep).size), "output_orbits": int(np.unique(output_rep).size),
                "input_orbits": int(reps.size)}
    return ExactProgram(dom, t, q, tuple(branches), E, dvecs, tuple(bases), conj, branch_rep, tuple(branch_elem),
                        output_rep, tuple(output_elem), variables, n_phi, tuple(psd), tuple(eq), success,
                        input_class, symmetry, tuple(a.inputs for a in usable))


# ---------------------------------------------------------------------------------------------
# The steps of formulate_exact
# ---------------------------------------------------------------------------------------------
def _orbit_variable(key: tuple, n: int, real: bool, members: np.ndarray, elems, point_gens,
                    V: np.ndarray, offset: int) -> _Var:
    """The variable for one orbit, restricted to the group-invariant subspace.

    The family ``X_l = T_l(X_r)`` (``l`` in the orbit, ``T_l`` through the transversal) is
    invariant iff ``T_{g l}(X) = g(T_l(X))`` for every generator ``g`` and member ``l``; the
    conditions are applied one at a time, shrinking the basis ``N`` of allowed ``X``.
    """
    S = _param(n, real)
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
    return _Var(key, n, real, S, N, offset)


def _shared_variables(bases: list[np.ndarray], t: int, conj: np.ndarray, branch_orbits: tuple,
                      output_orbits: tuple) -> tuple[dict, int]:
    """One variable per (layer, branch orbit) and per output orbit, restricted to invariants.

    ``branch_orbits`` and ``output_orbits`` are ``(rep, elem, generators)`` of the transversals.
    Returns the variables by key (``("g", k, r)`` for layer ``k``, ``("p", r)`` for an output) and
    the number of real decision variables ``n_phi``.
    """
    branch_rep, branch_elem, bgens = branch_orbits
    output_rep, output_elem, ogens = output_orbits
    variables: dict = {}
    offset = 0
    for k in range(1, t + 1):
        n = bases[k - 1].shape[1]
        for r in np.unique(branch_rep):
            members = np.flatnonzero(branch_rep == r)
            key = ("g", k, int(r))
            variables[key] = _orbit_variable(key, n, bool(conj[r] == r), members, branch_elem, bgens,
                                             bases[k - 1], offset)
            offset += variables[key].dim
    for r in np.unique(output_rep):
        members = np.flatnonzero(output_rep == r)
        key = ("p", int(r))
        variables[key] = _orbit_variable(key, bases[t].shape[1], True, members, output_elem, ogens, bases[t],
                                         offset)
        offset += variables[key].dim
    return variables, offset


@dataclasses.dataclass(frozen=True, eq=False)
class _BlockMaps:
    """The blocks of a program as local linear maps of ``φ``, kept per variable (never as dense rows x n_phi)."""

    variables: dict
    bases: list
    queries: int
    n_phi: int
    branch_rep: np.ndarray
    branch_elem: list
    output_rep: np.ndarray
    output_elem: list

    def local(self, key, elem, k):
        """``(offset, local)``: ``vec(conj^c(Q X Qᵀ)) = local @ φ[offset:offset + local.shape[1]]``."""
        var = self.variables[key]
        base = var.S @ var.N
        if elem[1]:
            base = np.conj(base)
        return var.offset, _apply(_q_matrix(self.bases[k], elem), base, var.n)

    def gamma(self, k, l):
        """The map of ``Γ_{k,ℓ}`` (in the coordinates of ``U_{k-1}``)."""
        return self.local(("g", k, int(self.branch_rep[l])), self.branch_elem[l], k - 1)

    def measurement(self, z):
        """The map of ``P_z`` (in the coordinates of ``U_t``)."""
        return self.local(("p", int(self.output_rep[z])), self.output_elem[z], self.queries)

    def assemble(self, blocks: dict, rows) -> sp.csr_matrix:
        """The sparse ``(rows, n_phi)`` matrix of the accumulated column blocks, real part."""
        parts = [_embed_cols(blocks[off].real[rows], off, self.n_phi) for off in sorted(blocks)]
        return sp.vstack(parts).tocsr() if len(parts) == 1 else sum(parts[1:], parts[0]).tocsr()


def _place(target: dict, off, local):
    """Accumulate a column block (the matrices are kept per variable, never as dense rows x n_phi)."""
    if off in target:
        target[off] = target[off] + local
    else:
        target[off] = local.copy()


def _psd_constraints(variables: dict, n_phi: int) -> list:
    """One PSD constraint per shared variable (real embedding for Hermitian ones): ``(key, map, size)``."""
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
    return psd


def _equalities(maps: _BlockMaps, dvecs: np.ndarray, L: int, m: int, d: int) -> list:
    """Per step ``k = 0..t`` the independent rows ``(A, b, k, rows)`` of ``Σ (next layer) = M_k``.

    Step ``k`` is written in the coordinates of ``U_k``; step 0 fixes the trace of the first layer.
    """
    t = maps.queries
    bases = maps.bases
    eq = []
    first: dict = {}
    for off, loc in ([maps.gamma(1, l) for l in range(L)] if t >= 1 else [maps.measurement(z) for z in range(m)]):
        _place(first, off, loc)
    eq.append((maps.assemble(first, np.array([0])), np.array([float(d)]), 0, [(0, 0)]))
    for k in range(1, t + 1):
        Vk, Vp = bases[k], bases[k - 1]
        rk, rp = Vk.shape[1], Vp.shape[1]
        diff: dict = {}
        nxt = [maps.gamma(k + 1, l) for l in range(L)] if k < t else [maps.measurement(z) for z in range(m)]
        for off, loc in nxt:
            _place(diff, off, loc)
        for l in range(L):
            B = Vk.T @ (dvecs[l][:, None] * Vp)
            off, loc = maps.gamma(k, l)
            X = loc.reshape(rp, rp, -1)
            _place(diff, off, -_sandwich(B, X, np.conj(B)).reshape(rk * rk, -1))
        iu = np.triu_indices(rk)
        rows = iu[0] * rk + iu[1]
        A = maps.assemble(diff, rows)
        keep = _independent_rows(A)
        eq.append((A[keep], np.zeros(keep.size), k, [(int(iu[0][i]), int(iu[1][i])) for i in keep]))
    return eq


def _success_rows(maps: _BlockMaps, dom: Domain, input_class: np.ndarray) -> tuple:
    """``(A, reps)``: ``A φ`` = ``P_{f(x)}[x, x]`` at the input-orbit representatives ``reps``."""
    reps = np.unique(input_class, return_index=True)[1]
    Vt = maps.bases[maps.queries]
    out = dom.output_index
    srows = np.zeros((reps.size, maps.n_phi))
    for i, x in enumerate(reps):
        off, loc = maps.measurement(int(out[x]))
        v = Vt[x]
        srows[i, off:off + loc.shape[1]] += (np.kron(v, v) @ loc).real
    return (sp.csr_matrix(_clean(srows)), reps)


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
