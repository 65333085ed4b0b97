"""The symmetry-reduced (invariant, block-diagonalised) ADV± / ADV program, solved and verified.

This module owns :func:`solve_symmetric`: build the invariant program
(:func:`advbound.programs.symmetric_program.formulate_symmetric`), hand it to SCS or CLARABEL
as sparse conic data, expand the point and the dual witness to the full domain, and have
:func:`advbound.evidence.verify.verify_certificate` decide the reported bounds.  The
formulation (the reduction, its forms and structure) is described in
:mod:`advbound.programs.symmetric_program`, the block decomposition in
:mod:`advbound.programs.symmetric_blocks`; the public names of both
(:func:`formulate_symmetric`, :class:`SymmetricFormulation`, :class:`LmiBlock`,
:func:`block_basis`, :func:`chordal_cliques`) are importable from here as well.

>>> from advbound.functions.builders import or_function
>>> r = solve_symmetric(or_function(4))
>>> r.status, round(r.lower, 5), round(r.upper, 5)       # ADV±(OR_4) = sqrt(4) = 2
('optimal', 2.0, 2.0)

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
from advbound.errors import AdvboundWarning, SolverError
from advbound.functions.function import PartialFunction
from advbound.functions.symmetry import Group, orbits_of_pairs, stabilizer
from advbound.programs.symmetric_blocks import _psd_completion, block_basis, chordal_cliques
from advbound.programs.symmetric_program import LmiBlock, SymmetricFormulation, formulate_symmetric
from advbound.result import SolveResult, SolverStats

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
        xp, xm = _dual_witness(form, _block_multipliers(form, layout, y, cone, name))
        dual = dict(dual_t=float(y[0]), dual_plus=xp, dual_minus=xm)
    meta = {"description": f.description, "bound": bound, "method": "symmetric",
            "solver": {"name": name, "version": version, "tol": float(tol), "max_iters": max_iters,
                       "status": raw_status, "iterations": iters, "time": float(solve_time)},
            "group_order": int(form.group.order), "reduced_sizes": sizes, "objective": objective}
    cert, rep = _verified_certificate(f, bound, W, rho, meta, dual, repair_tol)
    st, lower, upper, msg = _verdict(st, rep, with_dual, tol)
    log.info("solve_symmetric %s: %s lower=%s upper=%s", f.description or "function", st, lower, upper)
    return SolveResult(message=msg, status=st, lower=lower, upper=upper, objective=objective,
                       certificate=cert, verification=rep, **base)


# ---------------------------------------------------------------------------------------------
# The steps of solve_symmetric
# ---------------------------------------------------------------------------------------------
def _block_multipliers(form: SymmetricFormulation, layout: list, y: np.ndarray, cone: dict,
                       solver: str) -> list[np.ndarray]:
    """The solver's multiplier ``Y_b`` of every block, as a full symmetric matrix.

    ``layout`` is the one :func:`_conic_data` returned; a chordal block's multiplier is completed
    to a PSD matrix from its clique entries.
    """
    off = cone["z"] + cone["l"]
    ys = []
    for blk, lay in zip(form.blocks, layout):
        m = blk.size
        if lay is None:
            k = m * (m + 1) // 2
            ys.append(_smat(y[off:off + k], m, solver))
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
    return ys


def _verified_certificate(f: PartialFunction, bound: str, W: np.ndarray, rho: np.ndarray, meta: dict, dual: dict,
                          repair_tol: float):
    """The certificate of the expanded point and :func:`verify_certificate`'s report on it.

    Γ is extracted from ``(W, ρ)`` at each support threshold and the one with the best verified
    lower bound is kept; the certificate records the verified bounds as its claims.
    """
    from advbound.evidence.verify import extract_gamma, verify_certificate

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
    return cert, rep


def _verdict(st: str, rep, with_dual: bool, tol: float):
    """``(status, lower, upper, message)`` from the solver's status and the verification report."""
    lower, upper = rep.lower, rep.upper
    if not rep.passed:
        st = _status.UNVERIFIED
        upper = None
        msg = f"check(s) {', '.join(rep.failed_checks())} failed: {rep.message}"
    elif not with_dual:
        msg = "solved; lower bound verified (no dual witness built: domain too large or not requested)"
    elif st == _status.OPTIMAL and upper is not None \
            and (upper - lower) / max(abs(upper), 1e-300) > max(1e-3, 1e3 * tol):
        st = _status.INACCURATE
        msg = f"solver claimed optimality but the verified relative gap is {(upper - lower) / upper:.2g}"
    else:
        msg = _status.MESSAGES[st]
    return st, lower, upper, msg
