"""A factored first-order solver for ADV± of two-output functions, with verified bounds on both sides.

This module owns :func:`solve_factored`, a low-rank (factorised, ``X_j = U_j U_j^T``) treatment of the dual
program of :mod:`advbound.programs.sdp` (see ``formulations.md``)::

    minimise t  s.t.  sum_j c_j X_j[x, x] <= t,   sum_{j: x_j != y_j} X_j[x, y] = 1  (f(x) != f(y)),
                      X_j = U_j U_j^T.

It is solved by an augmented Lagrangian method whose inner problems go to a numpy L-BFGS (that
machinery, with :class:`FactoredState`, is in :mod:`advbound.programs.factored_lagrangian`).  Only the
0-input x 1-input block of each ``X_j`` and its diagonal enter.  For each position ``j`` and each
0-input symbol ``a``, the pairs ``{x_j = a} x {y_j != a}`` form one rectangular block, which is
evaluated from its short side.  No ``|D| x |D|`` matrix per position is ever formed.

Both reported numbers are verified independently of the optimiser:

* **lower**: the multipliers of the equality constraints give ``W`` and those of the diagonal
  constraints give ``rho``; ``Gamma = W / (delta delta^T)`` with ``delta = sqrt(rho)`` and the
  reported lower bound is ``||Gamma|| / max_j ||Gamma o Delta_j|| / c_j`` recomputed from Γ
  (:func:`advbound.quantities.adversary_ratio` on the full matrix up to ``dense_check`` inputs,
  the same norms from the bipartite block beyond);
* **upper**: the factors are repaired so that every equality holds.  The residual of each pair is
  split evenly over the positions where the pair differs, and each position's correction ``B_j``
  is made PSD-safe by adding an upper bound on ``||B_j||`` to every diagonal entry: LAPACK's
  largest singular value widened by its backward-error bound, capped by ``||B_j||_F``, plus a
  rounding allowance for the pair sums.  The two sides are then rescaled optimally, and the dual
  objective of the repaired point is the reported upper bound.  When the witness is small enough
  to store, :func:`advbound.evidence.verify.verify_certificate` re-checks it.

>>> from advbound.functions.function import PartialFunction
>>> import itertools
>>> f = PartialFunction.from_pairs("01", [("".join(b), int("1" in b)) for b in itertools.product("01", repeat=4)])
>>> r = solve_factored(f, tol=1e-6)
>>> r.status, round(r.lower, 5), round(r.upper, 5)     # ADV±(OR_4) = sqrt(4) = 2 (common knowledge)
('optimal', 2.0, 2.0)
"""

from __future__ import annotations

import copy
import dataclasses
import logging
import math
import time

import numpy as np
import scipy

from advbound import quantities as _q
from advbound import status as _status
from advbound.evidence.certificate import Certificate
from advbound.functions.domain import Domain, domain
from advbound.errors import InvalidFunctionError
from advbound.programs.factored_lagrangian import FactoredState, _diag_sums, _gamma_from, _Pairs
from advbound.result import SolveResult, SolverStats

__all__ = ["solve_factored", "FactoredState", "repair_factors", "block_ratio"]

log = logging.getLogger("advbound")

_DEFAULTS = dict(
    max_rank=32,            # largest factor width tried
    rounds=60,              # augmented-Lagrangian rounds at most
    inner_iter=500,         # L-BFGS iterations per round
    sigma=100.0,            # initial penalty (relative to t over the number of constraints)
    sigma_growth=2.0,       # penalty growth when the violation does not halve in a round
    sigma_max=1e9,
    dense_check=2000,       # verify with quantities.adversary_ratio on the full Γ up to this |D|
    store_dual="auto",      # dual witness stored when N |D|^2 <= dual_limit, or True/False
    dual_limit=2e7,
    symmetrize=True,        # average Γ over f.symmetries (closure) before verifying, when given
    precondition=True,      # diagonal scaling of the factor entries by their number of constraints
    inner_gtol=0.0,         # if > 0: inner solves stop at this relative gradient, tightened 10x per round
    polish=False,           # extra high-penalty inner solve per round, for the upper bound only
    sigma_reset=1e-5,       # back to the initial penalty once the violation is below this (0: never)
)


def block_ratio(block: np.ndarray, pairs: _Pairs) -> tuple[float, np.ndarray]:
    """``(||B||, [||B o M_j||])`` for a bipartite block ``B`` (the norms of the symmetric Γ)."""
    norm = float(np.linalg.norm(block, 2)) if block.size else 0.0
    cn = np.array([float(np.linalg.norm(np.where(pairs.mask(j), block, 0.0), 2)) for j in range(pairs.N)])
    return norm, cn


def _norm_upper(b: np.ndarray) -> float:
    """An upper bound on ``||b||``: LAPACK's largest singular value widened by its backward-error bound."""
    if not b.any():
        return 0.0
    fro = float(np.linalg.norm(b))
    sv = float(np.linalg.norm(b, 2))
    # computed singular values are within p(n) eps ||b|| of the exact ones (p(n) << 1e7 here)
    return min(fro * (1 + 1e-12), sv * (1 + 1e-9) + 1e-9 * fro)


def repair_factors(pairs: _Pairs, u0, u1):
    """Repair the factored dual point exactly; return ``(t, a0, a1, share, shift)``.

    The residual ``R = 1 - S`` of each pair is split evenly over its differing positions,
    ``B_j = (R / count) o M_j``.  ``[[d_j I, B_j], [B_j^T, d_j I]]`` is PSD when ``d_j >= ||B_j||``, so
    ``X_j = U_j U_j^T + [[0, B_j], [B_j^T, 0]] + d_j I`` is a feasible dual point (``d_j`` also absorbs a
    bound on the rounding error of ``S``).  ``a0``/``a1`` are the largest weighted diagonal sums over
    the 0-/1-inputs; rescaling the 0-side by ``s`` and the 1-side by ``1/s`` keeps feasibility and
    gives ``t = sqrt(a0 a1)``.
    """
    s = pairs.sums(u0, u1)
    share = (1.0 - s) / np.maximum(pairs.count, 1)
    d = np.array([_norm_upper(np.where(pairs.mask(j), share, 0.0)) for j in range(pairs.N)])
    # rounding: each computed sum is off by at most ~ (r + 2) eps sum_j |u0||u1| per term
    r = u0.shape[2]
    absum = pairs.sums(np.abs(u0), np.abs(u1))
    d = d + (r + 4) * np.finfo(float).eps * float(np.max(absum, initial=0.0)) * math.sqrt(pairs.n0 * pairs.n1)
    c = pairs.costs
    a0 = float(np.max(_diag_sums(u0, c) + float(c @ d)))
    a1 = float(np.max(_diag_sums(u1, c) + float(c @ d)))
    # each diagonal sum adds N r squares: relative rounding below (N r + 8) eps
    widen = 1 + (pairs.N * r + 16) * np.finfo(float).eps
    return float(math.sqrt(a0 * a1) * widen), a0, a1, share, d


def _symmetrise_block(block, perms, i0, i1, size):
    """The 0 x 1 block of Γ averaged over the input permutations ``perms`` (a group)."""
    full = np.zeros((size, size))
    full[np.ix_(i0, i1)] = block
    full[np.ix_(i1, i0)] = block.T
    avg = np.zeros_like(full)
    for p in perms:
        avg[np.ix_(p, p)] += full
    avg /= len(perms)
    return avg[np.ix_(i0, i1)]


def _group_perms(f, dom):
    """Input permutations of the group generated by ``f.symmetries`` (closure, at most 5040 elements)."""
    if not f.symmetries:
        return []
    idx = f._index()
    gens = []
    for a in f.symmetries:
        try:
            gens.append(np.array([idx[a.apply(x, f.alphabet)] for x in f.inputs]))
        except KeyError:
            return []
    ident = np.arange(f.size)
    seen = {ident.tobytes(): ident}
    frontier = [ident]
    while frontier and len(seen) <= 5040:
        nxt = []
        for p in frontier:
            for g in gens:
                q = g[p]
                k = q.tobytes()
                if k not in seen:
                    seen[k] = q
                    nxt.append(q)
        frontier = nxt
    if len(seen) > 5040:
        return []
    return list(seen.values())


def solve_factored(f, bound="general", tol=1e-4, time_limit=600.0, rank=None, seed=0, verbose=False,
                   **options) -> SolveResult:
    """Exact ADV±_c(f) of a two-output partial function by a factored augmented-Lagrangian method.

    Parameters
    ----------
    f : PartialFunction
        Exactly two output values; costs are taken from ``f.costs``.
    bound : {"general"}
        Only ADV± is implemented; ``"positive"`` raises.
    tol : float
        Target relative gap ``(upper - lower) / upper`` between the *verified* bounds.
    time_limit : float
        Wall-clock budget in seconds (optimisation stops at the first check past it).
    rank : int, optional
        Initial factor width (default ``min(4, max_rank)``); it grows when the verified lower bound
        shows that the current rank cannot reach the optimum.
    seed : int
        Seed of the random initial factors.
    verbose : bool
        Log every round at INFO level on the ``advbound`` logger.
    **options
        ``max_rank`` (32), ``rounds`` (60), ``inner_iter`` (500), ``sigma`` (100), ``sigma_growth`` (2),
        ``sigma_max`` (1e9), ``sigma_reset`` (1e-5: back to the initial penalty once the largest pair
        violation is below it, to refine the multipliers; 0 never), ``dense_check`` (2000: largest
        ``|D|`` verified with the dense full-matrix definition), ``store_dual`` ("auto", True, False),
        ``dual_limit`` (2e7 entries), ``symmetrize`` (True), ``precondition`` (True), ``inner_gtol``
        (0), ``polish`` (False).

    Returns
    -------
    SolveResult
        ``status`` is "optimal" when the verified relative gap is at most ``tol``, "inaccurate" when
        only a wider verified gap was reached.  ``certificate`` holds the full Γ (dense) and, when
        ``N |D|^2 <= dual_limit`` (or ``store_dual=True``), the repaired dual witness.

    Raises
    ------
    InvalidFunctionError
        For a function with fewer or more than two outputs, ``bound="positive"``, or an unknown option.
    """
    opt = _checked_options(f, bound, options)
    start = time.perf_counter()
    rng = np.random.default_rng(seed)
    prob = _factored_problem(f, opt)
    r0 = int(rank) if rank is not None else min(4, int(opt["max_rank"]))
    if r0 < 1:
        raise InvalidFunctionError(f"solve_factored: rank={rank!r} must be a positive integer")
    st = FactoredState(prob.pairs, r0, rng)
    best = _optimise(prob, st, rng, opt, tol, start, time_limit, verbose)
    elapsed_opt = time.perf_counter() - start

    # -- final verification from the certificate data alone -----------------------------------------
    full, lower, how_lo = _verified_lower(prob, best.lo_block, opt)
    upper, dual_t, dual_plus = _verified_upper(prob, best, opt)
    status, msg = _verdict(lower, upper, tol)
    msg += f"; lower bound from {how_lo}; upper bound from the repaired factored dual"
    elapsed = time.perf_counter() - start
    cert = Certificate(
        alphabet=tuple(f.alphabet), inputs=tuple(f.inputs), outputs=tuple(f.outputs),
        costs=np.asarray(f.costs, dtype=float), gamma=full, dual_t=dual_t, dual_plus=dual_plus,
        metadata={"description": f.description, "bound": bound, "solver": "factored-alm",
                  "rank": int(st.rank), "seed": int(seed), "claimed_lower": float(lower),
                  "claimed_upper": None if upper is None else float(upper)})
    stats = SolverStats(name="factored-alm", version=f"scipy {scipy.__version__}", time=elapsed,
                        iterations=best.iters, tolerances={"tol": float(tol)},
                        options={"rank": int(st.rank), "rounds": best.rounds, "seed": int(seed),
                                 "optimise_time": round(elapsed_opt, 3)})
    report = None
    if dual_plus is not None and status in _status.SUCCESS:
        status, msg, report = _recheck(cert, status, msg)
    return SolveResult(message=msg, status=status, bound=bound, lower=lower, upper=upper, objective=float(st.t),
                       domain_size=prob.domain.size, solver_stats=stats, certificate=cert, verification=report)


# ---------------------------------------------------------------------------------------------
# The steps of solve_factored
# ---------------------------------------------------------------------------------------------
def _checked_options(f, bound, options: dict) -> dict:
    """The options merged with the defaults, after rejecting unknown options, bounds and functions."""
    unknown = sorted(set(options) - set(_DEFAULTS))
    if unknown:
        raise InvalidFunctionError(f"solve_factored: unknown option(s) {', '.join(unknown)}; "
                                   f"known: {', '.join(sorted(_DEFAULTS))}")
    opt = dict(_DEFAULTS, **options)
    if bound != "general":
        raise InvalidFunctionError(f"solve_factored: bound={bound!r} is not implemented; the factored solver "
                                   "handles the general bound ADV± (bound='general') only")
    if not f.is_boolean:
        raise InvalidFunctionError(f"solve_factored: f has {len(f.labels)} output value(s); the factored solver "
                                   "handles exactly two (use the dense solver otherwise)")
    return opt


@dataclasses.dataclass(frozen=True, eq=False)
class _Problem:
    """The data of one factored solve: the domain split by output, the live positions and their pairs."""

    domain: Domain
    i0: np.ndarray       # inputs with output 0, in domain order
    i1: np.ndarray       # inputs with output 1
    live: np.ndarray     # positions where not every input has the same symbol
    costs: np.ndarray    # costs of the live positions
    pairs: _Pairs
    perms: list          # input permutations of the symmetry group (empty: no averaging)


def _factored_problem(f, opt: dict) -> _Problem:
    """Split the domain of ``f`` by output and build the pair structure over the live positions."""
    dom = domain(f)
    i0, i1 = dom.part(0), dom.part(1)
    s0, s1 = dom.symbols[i0], dom.symbols[i1]
    live = np.array([j for j in range(dom.n)
                     if not (np.all(s0[:, j] == s0[0, j]) and np.all(s1[:, j] == s0[0, j]))], dtype=int)
    costs = dom.costs[live]
    pairs = _Pairs(s0[:, live], s1[:, live], costs)
    perms = _group_perms(f, dom) if opt["symmetrize"] else []
    return _Problem(dom, i0, i1, live, costs, pairs, perms)


def _block_lower(block: np.ndarray, pairs: _Pairs, costs: np.ndarray) -> float:
    """``||Γ|| / max_j ||Γ o Δ_j|| / c_j`` of the symmetric Γ with bipartite block ``block`` (0 if undefined)."""
    nb, cn = block_ratio(block, pairs)
    worst = float(np.max(cn / costs)) if cn.size else 0.0
    return nb / worst if worst > 0 else 0.0


@dataclasses.dataclass
class _Best:
    """The best verified candidates met by the optimiser, and its counters."""

    lo: float = 0.0
    lo_block: np.ndarray | None = None
    up: float = math.inf
    up_state: tuple | None = None
    iters: int = 0
    rounds: int = 0


def _better_lower(prob: _Problem, st: FactoredState, lo: float, block: np.ndarray, avg):
    """Try the running average of the multipliers and the symmetrised block; keep the best lower bound.

    Returns ``(lo, block, avg)`` with ``avg`` the updated running average (since the last rank change).
    """
    pairs, costs = prob.pairs, prob.costs
    # a running average of the multipliers (since the last rank change) often certifies more
    if avg is None:
        avg = [st.lam.copy(), st.mu0.copy(), st.mu1.copy(), 1]
    else:
        k_ = avg[3] + 1
        avg = [avg[0] + (st.lam - avg[0]) / k_, avg[1] + (st.mu0 - avg[1]) / k_,
               avg[2] + (st.mu1 - avg[2]) / k_, k_]
        ablock = _gamma_from(avg[0], avg[1], avg[2])
        alo = _block_lower(ablock, pairs, costs)
        if alo > lo:
            lo, block = alo, ablock
    if prob.perms:
        sblock = _symmetrise_block(block, prob.perms, prob.i0, prob.i1, prob.domain.size)
        slo = _block_lower(sblock, pairs, costs)
        if slo > lo:
            lo, block = slo, sblock
    return lo, block, avg


def _optimise(prob: _Problem, st: FactoredState, rng, opt: dict, tol: float, start: float, time_limit: float,
              verbose: bool) -> _Best:
    """The augmented-Lagrangian rounds: inner solves, multiplier steps, penalty updates and rank escapes."""
    deadline = start + time_limit
    pairs = prob.pairs
    p_count = pairs.n0 * pairs.n1
    # penalties scaled to the problem: an all-pairs violation eps costs ~ sigma * eps^2 relative to t
    scale_e = 1.0 / p_count
    scale_i = 1.0 / (pairs.n0 + pairs.n1)
    sig = float(opt["sigma"])
    best = _Best()
    prev_viol = math.inf
    lo_stall = 0
    avg = None
    hold = 0
    for rnd in range(int(opt["rounds"])):
        best.rounds = rnd + 1
        t_est = max(st.t, 1e-6)
        se, si = sig * scale_e * t_est, sig * scale_i / t_est
        gt = max(float(opt["inner_gtol"]) * 0.1 ** rnd, 1e-10) if opt["inner_gtol"] else 1e-12
        best.iters += st.inner(se, si, int(opt["inner_iter"]), precondition=bool(opt["precondition"]), gtol=gt,
                               deadline=deadline)
        ve, vi = st.update(se, si)
        block = st.gamma_block()
        lo = _block_lower(block, pairs, prob.costs)
        lo, block, avg = _better_lower(prob, st, lo, block, avg)
        up = repair_factors(pairs, st.u0, st.u1)[0]
        if opt["polish"] and (up - lo) / up > tol:
            # a feasibility polish for the upper bound only: same multipliers, 100x the penalty
            pol = copy.copy(st)
            best.iters += pol.inner(100 * se, si, max(1, int(opt["inner_iter"]) // 2),
                                    precondition=bool(opt["precondition"]), deadline=deadline)
            pup = repair_factors(pairs, pol.u0, pol.u1)[0]
            if pup < up and pup < best.up:
                best.up, best.up_state = pup, (pol.u0.copy(), pol.u1.copy())
        if lo > best.lo:
            best.lo, best.lo_block = lo, block.copy()
            lo_stall = 0
        else:
            lo_stall += 1
        if up < best.up:
            best.up, best.up_state = up, (st.u0.copy(), st.u1.copy())
        gap = (best.up - best.lo) / best.up
        if verbose:
            log.info("factored round %d: rank %d, sigma %.3g, t %.8g, viol %.2e/%.2e, lower %.8g, upper %.8g, "
                     "gap %.2e", rnd + 1, st.rank, sig, st.t, ve, vi, lo, up, gap)
        if gap <= tol or time.perf_counter() - start > time_limit:
            break
        if opt["sigma_reset"] and ve < float(opt["sigma_reset"]) and (best.up - best.lo) / best.up > tol \
                and sig > float(opt["sigma"]):
            # the dual side has converged but the multipliers lag: well-conditioned inner problems at
            # the initial penalty refine the multipliers (their error scales with sigma x inner residual)
            sig = float(opt["sigma"])
            hold = 3
        elif hold > 0:
            hold -= 1
        elif max(ve, vi * t_est) > 0.5 * prev_viol:
            sig = min(sig * float(opt["sigma_growth"]), float(opt["sigma_max"]))
        prev_viol = max(ve, vi * t_est)
        # rank escape: the multipliers certify optimality exactly when lo == t; grow when the
        # lower bound stalls well below the upper one
        if lo_stall >= 3 and st.rank < int(opt["max_rank"]) and (up - lo) / up > 10 * tol:
            st.escape(block, rng, extra=min(max(1, st.rank // 2), int(opt["max_rank"]) - st.rank))
            lo_stall = 0
            avg = None
            prev_viol = math.inf
    return best


def _verified_lower(prob: _Problem, block, opt: dict) -> tuple[np.ndarray, float, str]:
    """The full Γ of the best block, its lower bound recomputed from Γ alone, and how it was computed."""
    dom, i0, i1 = prob.domain, prob.i0, prob.i1
    full = np.zeros((dom.size, dom.size))
    if block is not None:
        full[np.ix_(i0, i1)] = block
        full[np.ix_(i1, i0)] = block.T
    if dom.size <= int(opt["dense_check"]):
        lower = float(_q.adversary_ratio(full, dom.symbols, dom.costs))
        how_lo = "dense eigvalsh of the full Γ (quantities.adversary_ratio)"
    else:
        lower = _block_lower(full[np.ix_(i0, i1)], prob.pairs, prob.costs)
        how_lo = "dense SVD of the bipartite block of Γ (equal to the norms of the symmetric Γ)"
    return full, lower, how_lo


def _verified_upper(prob: _Problem, best: _Best, opt: dict):
    """``(upper, dual_t, dual_plus)`` from the repaired best factors; the witness only when it may be stored."""
    upper, dual_t, dual_plus = None, None, None
    if best.up_state is not None and math.isfinite(best.up):
        dom = prob.domain
        u0, u1 = best.up_state
        upper, a0, a1, share, dshift = repair_factors(prob.pairs, u0, u1)
        want = opt["store_dual"]
        if want is True or (want == "auto" and dom.n * dom.size ** 2 <= float(opt["dual_limit"])):
            dual_t, dual_plus = upper, _dual_witness(dom, prob.live, prob.i0, prob.i1, prob.pairs, u0, u1, share,
                                                     dshift, a0, a1)
    return upper, dual_t, dual_plus


def _verdict(lower: float, upper: float | None, tol: float) -> tuple[str, str]:
    """Status word and message for the verified bounds."""
    gap = None if upper is None else (upper - lower) / upper
    if upper is not None and gap <= tol:
        status = _status.OPTIMAL
        msg = f"verified relative gap {gap:.2e} <= tol {tol:g}"
    elif upper is not None or lower > 0:
        status = _status.INACCURATE
        msg = (f"time or round limit reached with verified relative gap {gap:.2e} > tol {tol:g}"
               if gap is not None else "no verified upper bound")
    else:
        status = _status.FAILED
        msg = "no usable point"
    return status, msg


def _recheck(cert: Certificate, status: str, msg: str):
    """Re-check a stored witness with the dense verifier: ``(status, msg, report)``."""
    report = None
    # the witness is small enough to be stored, so it can also be checked by the dense verifier
    try:
        from advbound.evidence.verify import verify_certificate
    except ImportError:
        verify_certificate = None
    if verify_certificate is not None:
        report = verify_certificate(cert)
        if not report.passed:
            status = _status.UNVERIFIED
            msg = f"independent verification failed: {report.message}; " + msg
        else:
            msg += "; stored witness re-checked by advbound.evidence.verify"
    return status, msg, report


def _dual_witness(dom, live, i0, i1, pairs, u0, u1, share, dshift, a0, a1):
    """Dense stacks ``X_j`` of shape ``(N, |D|, |D|)`` of the repaired, rescaled dual point."""
    s = (a1 / a0) ** 0.25 if a0 > 0 and a1 > 0 else 1.0
    size = dom.size
    x = np.zeros((dom.n, size, size))
    idx = np.concatenate([i0, i1])
    for k, j in enumerate(live):
        v = np.concatenate([s * u0[k], u1[k] / s], axis=0)
        xj = v @ v.T
        b = np.where(pairs.mask(k), share, 0.0)
        xj[: pairs.n0, pairs.n0:] += b
        xj[pairs.n0:, : pairs.n0] += b.T
        xj[np.arange(pairs.n0), np.arange(pairs.n0)] += dshift[k] * s * s
        xj[np.arange(pairs.n0, size), np.arange(pairs.n0, size)] += dshift[k] / (s * s)
        x[j][np.ix_(idx, idx)] = xj
    return x
