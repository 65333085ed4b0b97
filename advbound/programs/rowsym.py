"""The row-symmetric program: ADV± of g∘(h, …, h) reduced by the row permutations S_n, never |D|×|D|.

A function whose inputs are ``n`` rows of ``L`` symbols, whose domain is closed under
permuting rows and whose output is unchanged by it (a symmetric outer ``g`` of identical
rows, restricted by a budget on the multiset of row times or by ``max_ones``) has an optimal
adversary matrix invariant under S_n.  This module solves the invariant program with one
variable per S_n-orbit of differing-output pairs and one density per input orbit, and with
every positive-semidefinite constraint block-diagonalised exactly by representation theory.

Words and contents
------------------
A row input is a *letter*; an input is a word ``w = (w_1, …, w_n)`` of letters.  Its S_n-orbit
is its *content* (multiset of letters) and the orbit of a pair ``(x, z)`` is the multiset of
letter pairs ``{(x_i, z_i)}``.  The objective ``Σ W[x, z]`` and ``Σ ρ_x = 1`` are linear in the
orbit variables.

Which constraints remain
------------------------
Position ``(r, p)`` (row ``r``, symbol ``p``) is moved to ``(n, p)`` by a row permutation, so
with an invariant solution only the ``L`` constraints of the last row remain, each invariant
under S_{n−1} (the permutations of the first ``n − 1`` rows).  Whether ``x`` and ``z`` differ at
``(n, p)`` depends only on their last letters ``a``, ``b``: ``Δ_(n,p)[x, z] = [a_p ≠ b_p]``.

Block diagonalisation (representative sets)
-------------------------------------------
Write ``x = (x', a)``.  The span of the words ``x'`` of one content ``c'`` is the permutation
module ``M^μ`` of S_{n−1} (``μ`` the letter multiplicities), which contains the irreducible
``S^λ`` with multiplicity the Kostka number ``K_{λμ}`` (Young's rule).  For every partition
``λ`` of ``n − 1`` and every semistandard tableau ``τ`` of shape ``λ`` and content ``c'`` let
``u_τ = b_λ a_λ w_τ``, with ``w_τ`` the word read off ``τ`` (box ``k`` in row-major order is
coordinate ``k``), ``a_λ`` the sum over the permutations inside rows of ``λ`` and ``b_λ`` the
signed sum inside columns.  ``u_τ`` is the image of one fixed polytabloid under the
semistandard homomorphism of ``τ``, so the ``u_τ`` (over all letters ``a``, contents ``c'`` and
tableaux ``τ``) are a representative set: for every S_{n−1}-invariant symmetric ``M``,
``M ⪰ 0`` iff every matrix ``B_λ = [u_τᵀ M u_σ]`` is positive semidefinite, and the
eigenvalues of ``M`` are the generalised eigenvalues of ``(B_λ, G_λ)`` with the Gram matrix
``G_λ = [u_τᵀ u_σ]`` ("Invariant semidefinite programs", 2012, arXiv:1007.2905, §2;
"Semidefinite bounds for nonbinary codes based on quadruples", 2017, arXiv:1602.02531,
§2–3, for representative sets of S_n on words).  Because ``a`` and ``b`` are self-adjoint,
``b² = |C_λ| b`` and ``M`` commutes with both,

    ``u_τᵀ M u_σ = |C_λ| · w_τᵀ M (a b a) w_σ``,

so each entry needs one sparse vector ``(a b a) w_σ`` and one row of ``M`` (looked up by pair
orbit), never a |D|×|D| matrix; the factor ``|C_λ| > 0`` is dropped.  The blocks of ``λ`` have
``Σ K_{λ, μ(c')}`` rows and ``Σ_λ f^λ · (block size) = |D|`` (``f^λ`` standard tableaux),
which :func:`check_dimensions` tests.

What is verified, and how
-------------------------
:func:`reduced_lower_bound` computes ``‖Γ‖ ≥ δᵀΓδ/δᵀδ`` with the invariant vector
``δ = √ρ`` (exact orbit sums) and ``‖Γ∘Δ_(n,p)‖`` as the largest generalised eigenvalue in
absolute value over the blocks (float LAPACK).  :func:`expand_gamma` writes the full Γ where
|D| allows, so :func:`advbound.evidence.verify.verify_certificate` re-checks the bound independently of
this module; :mod:`advbound.programs.solve` does that below ``DENSE_CHECK_LIMIT`` inputs.
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np
import scipy.sparse as sp

from advbound.errors import InvalidFunctionError, SolverError
from advbound.evidence.orbitcheck import (DENSE_CHECK_LIMIT, cone_keys, sides, trivial_basis,
                                         verify_orbit_certificate)
from advbound.functions.rowbasis import BASIS_VERSION, RowBasis, row_basis
from advbound.functions.rowfamily import RowFamily, family_of

__all__ = ["RowProgram", "ReducedPoint", "formulate_rows", "lmi_rows", "solve_reduced", "gamma_on_orbits", "solve_rows",
           "RETRIES", "RETRY_GAP", "RESCALES", "RESCALE_FLOOR", "GUESS", "GUESS_WEIGHTS", "rescaling",
           "positive_densities", "rows_estimate", "DENSE_CHECK_LIMIT"]

log = logging.getLogger("advbound")



# ---------------------------------------------------------------------------------------------
# The reduced program
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class RowProgram:
    """The S_n-reduced program of a :class:`RowFamily`, on the blocks of its :class:`RowBasis`.

    Variables ``(w_0 … w_{K−1}, ρ_0 … ρ_{R−1})``: one weight per orbit of differing-output pairs
    (``pair_keys[k]`` lists its letter pairs, first entry from the smaller output label), one density
    per content.  Maximise ``Σ_k 2·pair_counts[k]·w_k`` subject to ``Σ_r input_counts[r]·ρ_r = 1``,
    ``ρ ≥ 0`` (and ``w ≥ 0`` for the positive bound) and, for every row position ``p``, every block
    ``λ`` and side ``s`` (only ``+1`` for two outputs): ``c_p·G_λ(ρ) − s·B_{λ,p}(w) ⪰ 0``.
    """

    basis: RowBasis
    bound: str

    family = property(lambda self: self.basis.family)
    blocks = property(lambda self: self.basis.blocks)
    pair_keys = property(lambda self: self.basis.pair_keys)
    pair_counts = property(lambda self: self.basis.pair_counts)
    input_counts = property(lambda self: self.basis.input_counts)
    build_time = property(lambda self: self.basis.build_time)
    n_weights = property(lambda self: self.basis.n_weights)

    @property
    def sides(self) -> tuple[int, ...]:
        return sides(self.basis)

    def cone_keys(self) -> list[tuple[int, int, int]]:
        """``(position p, side s, block index)`` of every PSD cone, in the solver's order."""
        return cone_keys(self.basis)

    def sizes(self) -> dict:
        """Sizes of the reduced program (Python ints)."""
        return {"inputs": int(self.family.size), "orbits": len(self.family.contents),
                "weights": self.n_weights, "block_sizes": [len(b.rows) for b in self.blocks],
                "shapes": [list(b.shape) for b in self.blocks], "positions": self.family.row_length,
                "cones": len(self.blocks) * self.family.row_length * len(self.sides)}

    def block_matrix(self, blk, p: int, weights: np.ndarray) -> np.ndarray:
        """``B_{λ,p}``: the block of ``W∘Δ_(n,p)`` for the pair-orbit values ``weights``."""
        return self.basis.block_matrix(blk, p, weights)


#: Below this many pair-orbit weights (a small program) CLARABEL runs on one thread: on OR of 3 rows
#: at T = 7 (276 weights) one thread took 0.33 s against 0.43 s for two, at 5 rows, T = 10 (983)
#: 6.1 s against 7.3 s; at 3 rows, T = 11 (2,400) two threads were faster (39 s against 43 s).
#: Small programs also stop CLARABEL's iterative refinement at 1e-10 instead of 1e-13: 0.31 s
#: against 0.36 s at 3 rows, T = 7, the same objective to 1e-9 there and at 3 rows, T = 6 and 9,
#: 4 rows, T = 8 and 5 rows, T = 10.
SMALL_PROGRAM_WEIGHTS = 2000


#: The other ways :func:`solve_rows` tries when CLARABEL stops short of "solved" on the reduced
#: program and no rescaled re-solve (:data:`RESCALES`) is due (each changes only the solver's path,
#: see :func:`solve_reduced`).  The best checked lower bound (a Γ) and the best checked upper bound
#: (a set of dual matrices) may come from different attempts: each is valid on its own.  Where
#: CLARABEL ends on these programs depends on the variable order, the threads and the clique
#: merging; on OR of 7 position-search rows at T = 12 (at most one row of value 1) the default and
#: the first retry ended with "NumericalError", the parent-child merge "almost solved" at checked
#: bounds [4.51196, 4.67740], and a re-solve rescaled to that point "solved" (docs/symmetry.md).
RETRIES = ({"orbit_totals": True, "threads": 1}, {"merge": "parent_child"},
           {"orbit_totals": True, "merge": "parent_child"})

#: The retries run only when the first solve is not "solved" and its checked relative gap exceeds this.
RETRY_GAP = 1e-4

#: At most this many re-solves rescaled to the best point so far (:func:`rescaling`) come before
#: :data:`RETRIES`; the retries stop once the best checked pieces are within :data:`RETRY_GAP`.
RESCALES = 2


#: CLARABEL's peak memory and time on the reduced program per unit of Σ s³ over its cones (s a cone's
#: size), the largest ratios measured on OR of position-search rows, at most one row of value 1, one
#: core: 4 rows, T = 12 (Σ s³ = 2.4e8) about 7 GB and 669 s, 5 rows (3.6e8) about 7 GB and 1,231 s,
#: 8 rows, T = 14 (2.6e8) 3.6 GB and 458 s, 9 rows (3.6e7) 0.4 GB and 24 s; 7 rows, T = 14 (1.3e9)
#: passed 20.8 GB within a minute and was killed for lack of memory.
_BYTES_PER_CUBE, _BASE_BYTES, _SECONDS_PER_CUBE = 29.0, 150 * 2**20, 3.4e-6


def rows_estimate(prog: RowProgram) -> dict:
    """Rough memory and time of :func:`solve_reduced` on ``prog`` (for ``check_memory``)."""
    sizes = [len(prog.blocks[bi].rows) for _p, _s, bi in prog.cone_keys()]
    cube = float(sum(s ** 3 for s in sizes))
    return {"what": f"the row-symmetric program ({prog.n_weights} pair orbits, {len(sizes)} cones, largest "
                    f"{max(sizes)})", "solver": "CLARABEL",
            "memory_bytes": int(_BASE_BYTES + _BYTES_PER_CUBE * cube), "seconds": _SECONDS_PER_CUBE * cube,
            "memory_formula": f"{_BYTES_PER_CUBE:g} bytes per unit of the sum of cubed cone sizes",
            "time_formula": f"{_SECONDS_PER_CUBE:g} s per unit of the sum of cubed cone sizes"}


def formulate_rows(fam: RowFamily, bound: str = "general") -> RowProgram:
    """Build the reduced program of ``fam`` (see the module docstring)."""
    if bound not in ("general", "positive"):
        raise InvalidFunctionError(f"bound {bound!r} is unknown; use 'general' or 'positive'")
    prog = RowProgram(row_basis(fam), bound)
    log.info("row-symmetric program: %s", prog.sizes())
    return prog


def lmi_rows(prog: RowProgram, blk, p: int, side: int, nv: int) -> sp.csr_matrix:
    """Sparse ``(s², nv)`` coefficients of ``c_p·G(ρ) − side·B_p(w)``, entry ``(u, v)`` at row ``u·s + v``."""
    fam, K = prog.family, prog.n_weights
    s = len(blk.rows)
    r, c, v = [], [], []
    us, vs = np.nonzero(blk.gram)
    for u, w in zip(us, vs):
        r.append(u * s + w)
        c.append(K + blk.rows[u][1])
        v.append(fam.costs[p] * blk.gram[u, w])
    for (u, w), coefs in blk.couplings.items():
        if not fam.differ(p, blk.rows[u][0], blk.rows[w][0]):
            continue
        for k, coef in coefs.items():
            r += [u * s + w, w * s + u]
            c += [k, k]
            v += [-side * coef, -side * coef]
    return sp.csr_matrix((v, (r, c)), shape=(s * s, nv))


@dataclasses.dataclass(frozen=True, eq=False)
class ReducedPoint:
    """A solver point of a :class:`RowProgram`.

    Attributes
    ----------
    x : ndarray
        Primal variables ``(w, ρ)``.
    duals : list of ndarray
        One symmetric matrix per PSD cone, in the order of :meth:`RowProgram.cone_keys`.
    status : str
        The solver's status mapped to advbound's words (see :mod:`advbound.status`).
    raw_status, iterations, seconds, version
        As the solver reported them.
    """

    x: np.ndarray
    duals: list
    status: str
    raw_status: str
    iterations: int
    seconds: float
    version: str


def _unpack_triangle(z: np.ndarray, s: int) -> np.ndarray:
    """The symmetric ``s×s`` matrix of a scaled upper triangle packed by columns (off-diagonals ×√2)."""
    lo_r, lo_c = np.tril_indices(s)
    Z = np.zeros((s, s))
    vals = np.where(lo_r == lo_c, z, z / np.sqrt(2.0))
    Z[lo_c, lo_r] = vals
    Z[lo_r, lo_c] = vals
    return Z


def solve_reduced(prog: RowProgram, tol: float = 1e-8, max_iters: int | None = None,
                  verbose: bool = False, orbit_totals: bool = False, merge: str | None = None,
                  threads: int | None = None, reference: np.ndarray | None = None) -> ReducedPoint:
    """Solve the reduced program with CLARABEL (primal and the dual matrices of its PSD cones).

    ``orbit_totals`` lets the solver work on ``n_k·w_k`` and ``m_r·ρ_r`` (the total weight of an
    orbit, the total density of a content) instead of ``w_k`` and ``ρ_r``; ``merge`` sets CLARABEL's
    clique merge method of the chordal decomposition and ``threads`` its number of threads (default:
    one below :data:`SMALL_PROGRAM_WEIGHTS` weights, else CLARABEL's choice).  ``reference``, a point
    ``(w, ρ)`` of an earlier solve, rescales the program to it (:func:`rescaling`).  These change only
    the path the solver takes, never the program; :data:`RETRIES` says when they help.
    """
    try:
        import clarabel
    except ImportError:
        raise SolverError("solver CLARABEL is not installed; pip install clarabel") from None
    from advbound.status import CLARABEL_STATUS_MAP

    K, R = prog.n_weights, len(prog.family.contents)
    nv = K + R
    c = np.zeros(nv)
    c[:K] = -2.0 * prog.pair_counts
    rows = [sp.csr_matrix((prog.input_counts, (np.zeros(R, int), K + np.arange(R))), shape=(1, nv))]
    nonneg = np.arange(K, nv) if prog.bound == "general" else np.arange(nv)
    rows.append(sp.csr_matrix((-np.ones(nonneg.size), (np.arange(nonneg.size), nonneg)), shape=(nonneg.size, nv)))
    sizes = []
    scale_x, cone_scales = rescaling(prog, reference) if reference is not None else (np.ones(nv), None)
    for i, (p, side, bi) in enumerate(prog.cone_keys()):
        blk = prog.blocks[bi]
        s = len(blk.rows)
        lo_r, lo_c = np.tril_indices(s)            # Clarabel packs the upper triangle by columns
        idx = lo_c * s + lo_r
        scale = np.where(lo_r == lo_c, 1.0, np.sqrt(2.0))
        if cone_scales is not None:
            scale = scale * cone_scales[i][lo_r] * cone_scales[i][lo_c]
        rows.append(-sp.diags(scale) @ lmi_rows(prog, blk, p, side, nv)[idx])
        sizes.append(s)
    if orbit_totals:
        scale_x = scale_x / np.concatenate([prog.pair_counts, prog.input_counts])
    A = sp.csc_matrix(sp.vstack(rows, format="csc") @ sp.diags(scale_x))
    b = np.zeros(A.shape[0])
    b[0] = 1.0
    st = clarabel.DefaultSettings()
    st.verbose = bool(verbose)
    if K < SMALL_PROGRAM_WEIGHTS:       # see the constant for the measurements
        st.max_threads = 1
        st.iterative_refinement_reltol = st.iterative_refinement_abstol = 1e-10   # 1e-13 by default
    st.tol_gap_abs = st.tol_gap_rel = st.tol_feas = float(tol)
    if max_iters is not None:
        st.max_iter = int(max_iters)
    if merge is not None:
        st.chordal_decomposition_merge_method = str(merge)
    if threads is not None:
        st.max_threads = int(threads)
    cones = [clarabel.ZeroConeT(1), clarabel.NonnegativeConeT(nonneg.size)]
    cones += [clarabel.PSDTriangleConeT(s) for s in sizes]
    t0 = time.perf_counter()
    try:
        sol = clarabel.DefaultSolver(sp.csc_matrix((nv, nv)), c * scale_x, A, b, cones, st).solve()
    except Exception as err:
        raise SolverError(f"CLARABEL failed on the row-symmetric program: {err}") from None
    z = np.asarray(sol.z, dtype=float)
    duals, at = [], 1 + nonneg.size
    for i, s in enumerate(sizes):
        m = s * (s + 1) // 2
        Z = _unpack_triangle(z[at:at + m], s) if z.size >= at + m else np.zeros((s, s))
        if cone_scales is not None:                # the cone holds D·S·D, so ⟨Z', D·S·D⟩ = ⟨D·Z'·D, S⟩
            Z = cone_scales[i][:, None] * Z * cone_scales[i][None, :]
        duals.append(Z)
        at += m
    raw = str(sol.status)
    return ReducedPoint(scale_x * np.asarray(sol.x), duals, CLARABEL_STATUS_MAP.get(raw, "solver_error"), raw,
                        int(sol.iterations), time.perf_counter() - t0, str(clarabel.__version__))


#: Densities below this fraction of the largest are raised to it before :func:`rescaling` uses them.
RESCALE_FLOOR = 1e-3


def rescaling(prog: RowProgram, reference: np.ndarray) -> tuple[np.ndarray, list]:
    """Scales that make the reduced program look like its own solution ``reference = (w, ρ)`` of order one.

    Returns ``(scale_x, cone_scales)``: the solver works on ``y = x / scale_x`` with ``ρ_r = ρ̂_r y_r``
    and ``w_k = √(ρ̂_x ρ̂_z) y_k`` (so ``y_k`` is of the size of Γ), and the cone of ``(p, s, λ)`` holds
    ``D·(c_p·G_λ(ρ) − s·B_{λ,p}(w))·D`` with ``D = diag(c_p·G_λ(ρ̂))^(−1/2)``, a congruence by a positive
    diagonal matrix, which keeps the cone's sparsity and its feasible set.  ``ρ̂`` is the reference's
    density with entries below :data:`RESCALE_FLOOR` times the largest raised to that level.  Without it
    the solver's absolute feasibility tolerance (10⁻⁸) is large against the blocks' rows of inputs with
    density 10⁻⁷, and the checked ratio loses what the solver claims; at 7 rows, T = 12 (at most one
    row of value 1) a re-solve rescaled to an "almost solved" point of checked gap 4.6·10⁻² ended
    "solved" at 2.7·10⁻⁶ (docs/symmetry.md).
    """
    K = prog.n_weights
    rho = np.maximum(np.asarray(reference, dtype=float)[K:], 0.0)
    if not np.all(np.isfinite(rho)) or rho.max() <= 0:
        raise SolverError("cannot rescale the row-symmetric program to a point without positive densities")
    rho = np.maximum(rho, RESCALE_FLOOR * rho.max())
    cx, cz = prog.basis.end_contents()
    scale_x = np.concatenate([np.sqrt(rho[cx] * rho[cz]), rho])
    cone_scales = []
    for p, _side, bi in prog.cone_keys():
        blk = prog.blocks[bi]
        diag = np.array([prog.family.costs[p] * blk.gram[u, u] * rho[blk.rows[u][1]] for u in range(len(blk.rows))])
        cone_scales.append(1.0 / np.sqrt(np.where(diag > 0, diag, 1.0)))
    return scale_x, cone_scales


def gamma_on_orbits(prog: RowProgram, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(Γ per pair orbit, ρ per content)`` from a solver point: ``Γ = w / √(ρ_x ρ_z)`` (0 where ρ = 0)."""
    K = prog.n_weights
    w = np.asarray(x[:K], dtype=float)
    rho = np.maximum(np.asarray(x[K:], dtype=float), 0.0)
    cx, cz = prog.basis.end_contents()
    d = np.sqrt(rho[cx] * rho[cz])
    g = np.divide(w, d, out=np.zeros(K), where=d > 0)
    if prog.bound == "positive":
        g = np.maximum(g, 0.0)
    return g, rho


def solve_rows(f, bound: str = "general", tol: float = 1e-8, max_iters: int | None = None,
               verbose: bool = False, dense_check_limit: int = DENSE_CHECK_LIMIT, solver: str | None = None,
               retry: bool = True, refine: bool = True, first: str | None = None, allow_large: bool = False,
               subdomain: int | None = None, **options):
    """Solve ADV± (or ADV) of ``f`` on the row-symmetric program; return a :class:`~advbound.result.SolveResult`.

    ``f`` is a :class:`PartialFunction` with interchangeable rows (see :func:`family_of`) or a
    :class:`RowFamily`.  The solution becomes an orbit certificate
    (:class:`~advbound.evidence.orbitcert.OrbitCertificate`: Γ per pair orbit, the test vector and the
    dual matrices), and the reported numbers are those of
    :func:`advbound.evidence.orbitcheck.verify_orbit_certificate`: ``lower`` the reduced-basis ratio
    (checked against the expanded Γ on the full domain up to ``dense_check_limit`` inputs) and
    ``upper`` the weak-duality bound of the dual matrices, never the solver's objective.  When the
    first solve is not "optimal", its checked relative gap exceeds :data:`RETRY_GAP` and ``retry`` is
    true, the program is solved again rescaled to its best point so far (:func:`rescaling`, at most
    :data:`RESCALES` times) and then with the settings of :data:`RETRIES`, until the best pieces are
    within :data:`RETRY_GAP`; the certificate takes the Γ with the best checked lower bound and the
    dual matrices with the best checked upper bound (``metadata["attempts"]`` lists every attempt).
    ``first = "positive bound"`` (:data:`GUESS`) rescales the first solve as well, to the densities of
    :func:`positive_densities` (when that program gives a point), ``"default"`` does not, and ``None``
    picks the first for ADV± programs of at least :data:`GUESS_WEIGHTS` pair orbits and the second
    otherwise (see :data:`GUESS` for the measurements).  If the gap between those still
    exceeds :data:`RETRY_GAP` and ``refine`` is true (general bound only), the chosen point is moved by
    :func:`advbound.programs.rowsym_refine.refine_lower` and its Γ is kept when its checked lower bound
    is better (``metadata["refined"]``).  Before any solve, :func:`rows_estimate` is checked against the
    memory available (:func:`advbound.functions.sizing.check_memory`; ``allow_large`` only logs it).

    ``subdomain = K`` solves on the contents of :func:`advbound.programs.rowsub.densest_subfamily` with
    at most ``K`` pair orbits instead: ``lower`` is then a verified lower bound on ADV± of the whole
    family, ``upper`` is None (the dual bounds only the restriction), the status is at best
    "inaccurate", the certificate is that of the restriction and ``metadata["subdomain"]`` says what
    was kept.
    """
    from advbound import status as _status
    from advbound.functions.sizing import check_memory
    from advbound.result import SolveResult, SolverStats

    if first not in (None, "default", GUESS):
        raise InvalidFunctionError(f"first {first!r} is unknown; use 'default' or {GUESS!r}")
    fam = row_family_for(f, "rows", options, solver)
    whole, kept = fam, None
    if subdomain is not None:
        from advbound.programs.rowsub import densest_subfamily

        fam, kept = densest_subfamily(whole, subdomain)
        if kept["contents"] == kept["of_contents"]:       # the budget holds the whole family: no restriction
            fam, kept = whole, None
    prog = formulate_rows(fam, bound)
    # The positive bound needs only the trivial block (orbitcheck.trivial_basis); verification uses them all.
    solved = RowProgram(trivial_basis(prog.basis), bound) if bound == "positive" else prog
    check_memory(rows_estimate(solved), allow_large=allow_large,
                 hint="its memory grows like the cube of the block sizes (docs/symmetry.md)")
    if first is None:
        first = GUESS if bound == "general" and prog.n_weights >= GUESS_WEIGHTS else "default"
    kw0 = {"rescaled_from": GUESS} if first == GUESS else {}
    settings = _solver_settings(kw0, [], solved)
    if settings is None:                           # the positive bound gave no densities: start unrescaled
        kw0, settings = {}, {}
    attempts = [(kw0, solve_reduced(solved, tol=tol, max_iters=max_iters, verbose=verbose, **settings))]
    pt, duals, refined, record = attempts[0][1], attempts[0][1].duals, None, []
    gamma, rho = gamma_on_orbits(prog, pt.x) if pt.x.size and np.all(np.isfinite(pt.x)) else (None, None)
    if pt.status != "optimal" and (retry or refine):       # screen the bounds only where they may be poor
        screened = [_screen(prog, solved, *attempts[0])]
        if retry and _gap(screened[0][0]) > RETRY_GAP:
            for kw in _retries(screened, guessed=first == GUESS):
                settings = _solver_settings(kw, attempts, solved)
                if settings is None:
                    continue
                attempts.append((kw, solve_reduced(solved, tol=tol, max_iters=max_iters, verbose=verbose,
                                                   **settings)))
                screened.append(_screen(prog, solved, *attempts[-1]))
        pt, gamma, rho, duals = _best_pieces(screened, attempts[0][1])
        record = [entry for entry, *_ in screened]
    if refine and bound == "general" and gamma is not None and record and _pieces_gap(record) > RETRY_GAP:
        from advbound.programs.rowsym_refine import refine_lower

        refined = refine_lower(prog, pt.x)
        if refined.lower > refined.lower_before:
            gamma, rho = gamma_on_orbits(prog, refined.x)
    st = _status.from_cvxpy(pt.status)
    stats = SolverStats(name="CLARABEL", version=pt.version, time=sum(a.seconds for _, a in attempts),
                        iterations=sum(a.iterations for _, a in attempts),
                        tolerances={"tol": float(tol)}, options={"program": "rows", "attempts": len(attempts)})
    K = prog.n_weights
    finite = gamma is not None
    objective = float(2.0 * prog.pair_counts @ pt.x[:K]) if finite else None
    base = dict(bound=bound, domain_size=whole.size, solver_stats=stats, objective=objective)
    if st not in _status.SUCCESS or not finite:
        st = st if st not in _status.SUCCESS else _status.FAILED
        tried = "; ".join(f"{_describe(kw)}: {a.raw_status!r}" for kw, a in attempts)
        return SolveResult(message=f"CLARABEL found no point of the row-symmetric program ({tried})", status=st,
                           **base)
    meta = {"description": fam.description, "bound": bound, "method": "rows",
            "solver": {"name": "CLARABEL", "version": pt.version, "tol": float(tol), "status": pt.raw_status,
                       "iterations": pt.iterations, "time": float(pt.seconds)},
            "reduced": dict(solved.sizes(), build_time=prog.build_time), "basis": BASIS_VERSION}
    if kw0:
        meta["first"] = _describe(kw0)
    if len(attempts) > 1:
        meta["attempts"] = record
    if refined is not None:
        meta["refined"] = {"lower_before": refined.lower_before, "lower": refined.lower, "rounds": refined.rounds,
                           "cuts": refined.cuts, "time": refined.seconds}
    if solved is not prog:
        meta["cones"] = "trivial"
    if kept is not None:
        meta["subdomain"] = dict(kept, of=whole.description)
    cert = orbit_certificate(prog, gamma, rho, duals, meta)
    rep = verify_orbit_certificate(cert, dense_limit=dense_check_limit, basis=prog.basis)
    cert = dataclasses.replace(cert, metadata=dict(meta, claimed_lower=rep.lower, claimed_upper=rep.upper))
    if not rep.passed:
        return SolveResult(message=f"check(s) {', '.join(rep.failed_checks())} failed on the orbit certificate",
                           status=_status.UNVERIFIED, certificate=cert, verification=rep, **base)
    where = ("verified on the expanded Γ (full domain) and in the reduced basis" if rep.dense_lower is not None
             else f"from the reduced blocks (|D| = {fam.size} > {dense_check_limit}, not expanded)")
    dual = {"upper": rep.upper, "message": "weak duality, PSD-projected dual matrices, float64"
            if rep.upper is not None else "no dual matrices"}
    st, msg, upper = _rows_verdict(st, rep.lower, dual, tol)
    if kept is not None:
        where = where.replace("(full domain)", "(every input of the sub-domain)")
        st, upper = _status.INACCURATE, None
        msg = (f"a lower bound on the whole family from a sub-domain of {kept['contents']} of "
               f"{kept['of_contents']} input orbits ({kept['inputs']} of {kept['of_inputs']} inputs); the dual "
               f"bounds only the restriction ({msg})")
    return SolveResult(message=f"lower bound {where}; {msg}", status=st, lower=rep.lower, upper=upper,
                       certificate=cert, verification=rep, **base)


def _retries(screened: list, guessed: bool = False):
    """The settings of the retries, one at a time, for as long as the best pieces exceed :data:`RETRY_GAP`.

    ``screened`` grows as the caller goes.  Whenever the attempt with the best checked lower bound has
    not been a reference yet, the next retry is a re-solve rescaled to it (setting ``rescaled_from``,
    its index; at most :data:`RESCALES` in all); while no attempt has a point, once, a re-solve
    rescaled to the positive bound's densities (``rescaled_from`` :data:`GUESS`); otherwise the next
    setting of :data:`RETRIES` (``guessed``: those densities were asked for already, for the first solve).
    """
    used, queue = set(), list(RETRIES)
    while _pieces_gap([entry for entry, *_ in screened]) > RETRY_GAP:
        points = [i for i, (_entry, gamma, *_rest) in enumerate(screened) if gamma is not None]
        best = max(points, key=lambda i: screened[i][0]["lower"], default=None)
        if best is not None and best not in used and len(used) < RESCALES:
            used.add(best)
            yield {"rescaled_from": best}
        elif best is None and not guessed:
            guessed = True
            yield {"rescaled_from": GUESS}
        elif queue:
            yield queue.pop(0)
        else:
            return


#: The ``rescaled_from`` setting of a solve rescaled to the densities of the positive bound's minimax
#: solution (:func:`positive_densities`): the first solve of large ADV± programs (``first`` of
#: :func:`solve_rows`), and the retry when no attempt has given a point yet.  Measured on OR of
#: position-search rows, at most one row of value 1, one core, against an unrescaled first solve
#: (followed by a rescaled re-solve where it stopped short): 4 rows, T = 12: "solved" in 692 s at gap
#: 3.6e-6 (unrescaled: "almost solved" at 2.6e-5, 761 s); 5 rows: 1,182 s at 2.7e-6 (2,170 s at
#: 1.6e-5); 6 rows: 232 s (417 s); 7 rows: 12 s (43 s); 8 rows, T = 14: 458 s, where four unrescaled
#: settings all ended without a point.
GUESS = "positive bound"

#: ADV± programs with at least this many pair orbits start rescaled to :data:`GUESS` (``first=None``):
#: every measured one gained.  Below it the measurements are mixed, and a rescaled start costs dual
#: accuracy where the unrescaled solve ends "solved": 4 rows, T = 10 (1,307 pair orbits) took 52.8 s
#: at relative gap 3.0e-6 against 43.7 s at 1.2e-7; 3 rows, T = 12 (1,525) 63.4 s at 3.9e-5 against
#: 39.1 s at 6.3e-7; only 7 rows, T = 12 (1,398) gained (12 s against 43 s).
GUESS_WEIGHTS = 2000


def positive_densities(prog: RowProgram) -> np.ndarray | None:
    """A reference point ``(0, ρ)`` for :func:`rescaling`: ``ρ`` from the minimax program of the positive
    bound of the same family (:mod:`advbound.programs.minimax_transport`, usually far cheaper than the
    reduced program), or ``None`` when that program gives no point.

    Only the densities matter to the rescaling.  At 8 rows, T = 14 (at most one row of value 1), where
    four settings of the reduced program ended without a point, a solve rescaled to these densities
    ended "solved"; at 6 rows, T = 12 it did in one solve of 232 s (docs/symmetry.md).
    """
    from advbound.errors import AdvboundError
    from advbound.programs.minimax import gamma_from_multipliers
    from advbound.programs.minimax_transport import solve_transport

    try:
        pt = solve_transport(prog.family)
    except AdvboundError as err:
        log.info("no densities from the positive bound: %s", err)
        return None
    if pt.status == "failed" or pt.keys.shape[0] == 0 or not np.any(pt.multipliers > 0):
        return None
    _gamma, rho = gamma_from_multipliers(prog.family, pt.keys, pt.multipliers)
    if not np.all(np.isfinite(rho)) or rho.max() <= 0:
        return None
    return np.concatenate([np.zeros(prog.n_weights), rho])


def _solver_settings(kw: dict, attempts: list, prog: RowProgram) -> dict | None:
    """The keyword arguments of :func:`solve_reduced` for the retry ``kw`` (None: nothing to solve)."""
    if kw.get("rescaled_from") == GUESS:
        guess = positive_densities(prog)
        return None if guess is None else {"reference": guess}
    if "rescaled_from" in kw:
        return {"reference": attempts[kw["rescaled_from"]][1].x}
    return kw


def _gap(entry: dict) -> float:
    """The relative gap of one attempt's checked bounds (infinite without both)."""
    lo, up = entry.get("lower"), entry.get("upper")
    if lo is None or up is None or not np.isfinite(up) or up <= 0:
        return float("inf")
    return (up - lo) / up


def _pieces_gap(record: list) -> float:
    """The relative gap between the best checked lower and the best checked upper bound of the attempts."""
    lows = [e["lower"] for e in record if e.get("lower") is not None]
    ups = [e["upper"] for e in record if e.get("upper") is not None and np.isfinite(e["upper"])]
    return _gap({"lower": max(lows, default=None), "upper": min(ups, default=None)})


def _describe(kw: dict) -> str:
    return ", ".join(f"{k}={v}" for k, v in kw.items()) or "default"


def _screen(prog: RowProgram, solved: RowProgram, kw: dict, pt: ReducedPoint) -> tuple:
    """``(entry, gamma, rho, point)`` of one attempt: ``entry`` its settings, status and checked bounds
    (float64 screening; the certificate built from the chosen pieces is verified in full afterwards).
    ``gamma`` is None when the attempt has no finite point.
    """
    from advbound import status as _status
    from advbound.evidence.orbitcheck import orbit_lower_bound, orbit_upper_bound

    entry = {"settings": _describe(kw), "status": pt.raw_status, "time": float(pt.seconds)}
    if _status.from_cvxpy(pt.status) not in _status.SUCCESS or not pt.x.size or not np.all(np.isfinite(pt.x)):
        return entry, None, None, pt
    gamma, rho = gamma_on_orbits(prog, pt.x)
    up = orbit_upper_bound(solved.basis, prog.bound, pt.duals)["upper"]
    entry.update(lower=float(orbit_lower_bound(prog.basis, gamma, rho)["lower"]),
                 upper=None if up is None or not np.isfinite(up) else float(up))
    return entry, gamma, rho, pt


def _best_pieces(screened: list, first: ReducedPoint):
    """``(point, gamma, rho, duals)``: the Γ of the best checked lower bound over the screened attempts
    and the dual matrices of the best checked upper bound.  ``point`` is the attempt of the chosen Γ,
    or ``first`` when no attempt has a finite point (then ``gamma`` is None).
    """
    with_point = [s for s in screened if s[1] is not None]
    if not with_point:
        return first, None, None, None
    entry, gamma, rho, pt = max(with_point, key=lambda s: s[0]["lower"])
    with_upper = [s for s in with_point if s[0]["upper"] is not None]
    duals = min(with_upper, key=lambda s: s[0]["upper"])[3].duals if with_upper else pt.duals
    return pt, gamma, rho, duals


def row_family_for(f, method: str, options: dict, solver) -> RowFamily:
    """The row family of ``f`` for a program of interchangeable rows on CLARABEL, or a one-line refusal."""
    if options:
        raise InvalidFunctionError(f"method {method!r} takes no solver options; got {', '.join(sorted(options))}")
    if solver is not None and str(solver).upper() != "CLARABEL":
        raise InvalidFunctionError(f"method {method!r} runs on CLARABEL only; got solver {solver!r}")
    fam = f if isinstance(f, RowFamily) else family_of(f)
    if fam is None:
        raise InvalidFunctionError(f"method {method!r} needs interchangeable rows: f.groups must be equal blocks "
                                   "with equal costs, the domain closed under permuting them and the output "
                                   "unchanged by it")
    return fam


def orbit_certificate(prog: RowProgram, gamma, rho, duals, metadata: dict):
    """The :class:`~advbound.evidence.orbitcert.OrbitCertificate` of a reduced solution."""
    from advbound.evidence.orbitcert import certificate_from_basis

    return certificate_from_basis(prog.basis, gamma, rho, duals, metadata)


def _rows_verdict(st: str, lower: float, dual: dict, tol: float) -> tuple[str, str, float | None]:
    """Status, message and upper bound of a row-symmetric solve whose lower bound verified."""
    from advbound import status as _status

    upper = dual["upper"]
    if upper is None or not np.isfinite(upper):
        return _status.UNVERIFIED, f"no upper bound: {dual['message']}", None
    if upper < lower * (1 - 1e-9) - 1e-12:
        return (_status.UNVERIFIED, f"the dual bound {upper:.10g} is below the verified lower bound "
                f"{lower:.10g}: the reduced program is inconsistent", None)
    rel = (upper - lower) / max(abs(upper), 1e-300)
    msg = f"upper bound from the reduced dual ({dual['message']}); relative gap {rel:.2g}"
    if st == _status.OPTIMAL and rel > max(1e-3, 1e3 * tol):
        return _status.INACCURATE, msg + ": solver claimed optimality", upper
    return st, msg, upper
