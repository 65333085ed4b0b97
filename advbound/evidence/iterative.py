"""Matrix-free bounds on spectral norms, each returned with the argument that makes it a bound.

This module owns the norm estimates used when ``|D|`` is too large for dense eigen-solvers:

* :func:`norm_lower` -- ``||A v|| / ||v||`` (or ``|v^T A v| / v^T v`` for symmetric ``A``) for a
  vector from power iteration: a lower bound on ``||A||`` for *any* ``v``; the floating-point error
  of the product is bounded with ``|A| |v|`` and subtracted (deterministic).
* :func:`norm_upper_nonnegative` -- the Schur test (Collatz–Wielandt form) for an entrywise
  nonnegative ``A``: ``||A||^2 <= max_x (A q)_x / p_x * max_y (A^T p)_y / q_y`` for all positive
  ``p, q``; tight at the Perron vectors, which power iteration supplies (deterministic, rounding
  widened).
* :func:`norm_upper_blocks` -- exact dense norms of the connected components of a sparse matrix,
  widened by LAPACK's backward-error bound (deterministic up to that standard bound).
* :func:`norm_upper_lowrank` -- ``||P Q^T||`` from the small Gram matrices (exact up to rounding).
* :func:`norm_upper_probabilistic` -- a random-start Lanczos bound for signed matrices; it holds with
  probability at least ``1 - failure_probability`` over the random start and is labelled so.

Every function returns a :class:`NormBound` that records the value, whether it is a lower or an
upper bound, the method, whether it is deterministic, and the failure probability (0 if deterministic).

>>> import numpy as np, scipy.sparse as sp
>>> a = sp.random(300, 200, density=0.05, random_state=1, format="csr")
>>> exact = np.linalg.norm(a.toarray(), 2)
>>> lo, up = norm_lower(a, seed=0), norm_upper_nonnegative(a)
>>> bool(lo.value <= exact <= up.value), bool(up.value - lo.value < 1e-6 * exact)
(True, True)
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import scipy.sparse as sp
import scipy.sparse.csgraph as csgraph

__all__ = [
    "NormBound",
    "norm_lower",
    "norm_upper_nonnegative",
    "norm_upper_blocks",
    "norm_upper_lowrank",
    "norm_upper_probabilistic",
    "lanczos_failure_epsilon",
]

_EPS = np.finfo(float).eps


@dataclasses.dataclass(frozen=True, eq=False)
class NormBound:
    """A bound on a spectral norm with the argument behind it.

    Attributes
    ----------
    value : float
    side : str
        ``"lower"`` or ``"upper"``.
    method : str
        Short name of the argument (``"rayleigh"``, ``"schur-test"``, ``"blocks"``, ``"lowrank-gram"``,
        ``"lanczos-random-start"``).
    deterministic : bool
        False only for :func:`norm_upper_probabilistic`.
    failure_probability : float
        0 for deterministic bounds.
    details : dict
        Iterations, rounding allowance, block sizes, ...
    vector : ndarray or None
        The vector(s) that realise the bound (left Perron vector, Rayleigh vector), for reuse.
    """

    value: float
    side: str
    method: str
    deterministic: bool = True
    failure_probability: float = 0.0
    details: dict = dataclasses.field(default_factory=dict)
    vector: object = None


def _as_op(a):
    """``(matvec, rmatvec, shape, abs_matvec or None, max_row_nnz)`` for dense, sparse or LinearOperator."""
    if sp.issparse(a):
        a = a.tocsr()
        ab = abs(a)
        k = int(np.diff(a.indptr).max(initial=0))
        at = a.T.tocsr()
        k = max(k, int(np.diff(at.indptr).max(initial=0)))
        return (lambda v: a @ v), (lambda v: at @ v), a.shape, (lambda v: ab @ v), (lambda v: ab.T @ v), k
    if isinstance(a, np.ndarray):
        ab = np.abs(a)
        return (lambda v: a @ v), (lambda v: a.T @ v), a.shape, (lambda v: ab @ v), (lambda v: ab.T @ v), \
            max(a.shape)
    # scipy LinearOperator: no entrywise absolute value known
    return a.matvec, a.rmatvec, a.shape, None, None, None


def norm_lower(a, iters: int = 200, seed: int = 0, v0=None, tol: float = 1e-13) -> NormBound:
    """A deterministic lower bound on ``||a||`` from power iteration on ``a^T a``.

    Any nonzero ``v`` gives ``||a v|| / ||v|| <= ||a||``.  The computed product ``w`` of ``a`` and
    ``v`` satisfies ``|w - a v| <= gamma_k |a| |v|`` entrywise (``k`` = most nonzeros in a row,
    ``gamma_k = k eps / (1 - k eps)``), so ``||w|| - gamma_k || |a| |v| ||`` (then shrunk by the
    rounding of the two norms) is a lower bound.  For a LinearOperator without entries the rounding
    allowance is ``None`` and the bound is reported as deterministic only up to rounding.
    """
    mv, rmv, shape, amv, _, k = _as_op(a)
    rng = np.random.default_rng(seed)
    v = rng.random(shape[1]) + 0.5 if v0 is None else np.array(v0, dtype=float)
    v /= np.linalg.norm(v) or 1.0
    est = 0.0
    it = 0
    for it in range(1, iters + 1):
        w = mv(v)
        nw = float(np.linalg.norm(w))
        if nw == 0.0:
            break
        z = rmv(w)
        nz = float(np.linalg.norm(z))
        if nz == 0.0:
            break
        v_new = z / nz
        new = math.sqrt(nz)   # ||a^T a v|| ^ (1/2) estimate
        if abs(new - est) <= tol * new:
            v = v_new
            break
        est, v = new, v_new
    w = mv(v)
    nv = float(np.linalg.norm(v))
    nw = float(np.linalg.norm(w))
    details = {"iterations": it}
    if amv is not None and nv > 0:
        gam = k * _EPS / (1 - k * _EPS)
        err = gam * float(np.linalg.norm(amv(np.abs(v))))
        n = max(shape)
        value = max(0.0, (nw - err) * (1 - 2 * n * _EPS)) / (nv * (1 + 2 * n * _EPS))
        details["rounding_allowance"] = err
        det = True
    else:
        value = nw / nv if nv > 0 else 0.0
        details["rounding_allowance"] = None
        det = True
    return NormBound(value, "lower", "rayleigh", det, 0.0, details, v)


def norm_upper_nonnegative(a, iters: int = 500, tol: float = 1e-12, floor: float = 1e-200) -> NormBound:
    """A deterministic upper bound on ``||a||`` for an entrywise nonnegative matrix (Schur test).

    For positive vectors ``p`` (rows) and ``q`` (columns),
    ``||a||^2 <= (max_x (a q)_x / p_x) (max_y (a^T p)_y / q_y)``.  With ``q`` from power iteration on
    ``a^T a`` and ``p = a q`` both factors approach ``||a||`` (Perron–Frobenius).  Each computed
    product of nonnegative numbers has relative error at most ``gamma_k`` and each quotient at most
    ``eps``; the result is widened by these factors.  Zero entries of ``p``, ``q`` are raised to
    ``floor`` times the maximum so that the vectors are positive.

    Raises
    ------
    ValueError
        If ``a`` has a negative entry (the test needs nonnegative matrices) or is a LinearOperator.
    """
    if not (sp.issparse(a) or isinstance(a, np.ndarray)):
        raise ValueError("norm_upper_nonnegative needs explicit entries (dense or scipy sparse), got an operator")
    data = a.data if sp.issparse(a) else a
    if data.size and float(np.min(data)) < 0:
        raise ValueError("norm_upper_nonnegative: the matrix has a negative entry; the Schur test needs a >= 0")
    mv, rmv, shape, _, _, k = _as_op(a)
    if shape[0] == 0 or shape[1] == 0:
        return NormBound(0.0, "upper", "schur-test", details={"iterations": 0})
    q = np.ones(shape[1])
    best, best_pq, it = math.inf, None, 0
    for it in range(1, iters + 1):
        aq = mv(q)
        m = float(aq.max(initial=0.0))
        if m == 0.0:
            return NormBound(0.0, "upper", "schur-test", details={"iterations": it})
        p = np.maximum(aq / m, floor)
        f1 = float(np.max(aq / p))
        atp = rmv(p)
        f2 = float(np.max(atp / q))
        val = math.sqrt(f1 * f2)
        if val < best:
            prev, best, best_pq = best, val, (p, q)
            if prev - val <= tol * val:
                break
        mq = float(atp.max(initial=0.0))
        if mq == 0.0:
            return NormBound(0.0, "upper", "schur-test", details={"iterations": it})
        q = np.maximum(atp / mq, floor)
    gam = k * _EPS / (1 - k * _EPS) if k else 0.0
    widen = (1 + gam) * (1 + 4 * _EPS)
    return NormBound(best * widen, "upper", "schur-test", True, 0.0, {"iterations": it, "widen": widen}, best_pq)


def norm_upper_blocks(a, max_block: int = 4000) -> NormBound:
    """An upper bound on ``||a||`` for a square sparse matrix from dense norms of its components.

    The norm of a block-diagonal matrix (after permuting rows and columns by the connected
    components of the bipartite row/column graph) is the largest block norm.  Each block's norm is
    computed by LAPACK and widened by ``1e-9 ||block||_F`` (computed singular values are within
    ``p(n) eps ||block||`` of the exact ones, with ``p(n)`` far below ``10^6`` here).

    Raises
    ------
    ValueError
        If a component has more than ``max_block`` rows or columns.
    """
    a = sp.csr_matrix(a)
    m, n = a.shape
    # bipartite graph: rows 0..m-1, columns m..m+n-1
    g = sp.bmat([[None, abs(a)], [abs(a).T, None]]).tocsr()
    nc, lab = csgraph.connected_components(g, directed=False)
    rl, cl = lab[:m], lab[m:]
    best, biggest = 0.0, 0
    order_r, order_c = np.argsort(rl, kind="stable"), np.argsort(cl, kind="stable")
    rs = np.searchsorted(rl[order_r], np.arange(nc + 1))
    cs = np.searchsorted(cl[order_c], np.arange(nc + 1))
    for c in range(nc):
        rows = order_r[rs[c]:rs[c + 1]]
        cols = order_c[cs[c]:cs[c + 1]]
        if len(rows) == 0 or len(cols) == 0:
            continue
        if max(len(rows), len(cols)) > max_block:
            raise ValueError(f"norm_upper_blocks: a component has {len(rows)} x {len(cols)} entries, "
                             f"more than max_block={max_block}")
        blk = a[rows][:, cols].toarray()
        biggest = max(biggest, len(rows), len(cols))
        fro = float(np.linalg.norm(blk))
        val = min(fro, float(np.linalg.norm(blk, 2)) * (1 + 1e-9) + 1e-9 * fro)
        best = max(best, val)
    return NormBound(best, "upper", "blocks", True, 0.0, {"components": int(nc), "largest": biggest})


def norm_upper_lowrank(p: np.ndarray, q: np.ndarray) -> NormBound:
    """``||p q^T||`` for tall ``p (m, k)``, ``q (n, k)`` from the ``k x k`` Gram matrices.

    ``||p q^T||^2 = lambda_max(G_p^{1/2} G_q G_p^{1/2})`` with ``G_p = p^T p``; it equals the largest
    eigenvalue of ``G_p G_q``.  The value is widened by a rounding allowance proportional to
    ``(m + n + k) eps`` times the Frobenius bound ``sqrt(tr G_p tr G_q)``.
    """
    p = np.asarray(p, dtype=float)
    q = np.asarray(q, dtype=float)
    gp, gq = p.T @ p, q.T @ q
    w, v = np.linalg.eigh(gp)
    w = np.maximum(w, 0.0)
    h = (v * np.sqrt(w)) @ v.T
    lam = float(np.linalg.eigvalsh(h @ gq @ h).max(initial=0.0))
    fro2 = float(np.trace(gp) * np.trace(gq))
    allowance = 8 * (p.shape[0] + q.shape[0] + p.shape[1] ** 2) * _EPS * fro2
    return NormBound(math.sqrt(max(lam, 0.0) + allowance), "upper", "lowrank-gram", True, 0.0,
                     {"rank": int(p.shape[1]), "allowance": allowance})


def lanczos_failure_epsilon(n: int, steps: int, failure_probability: float) -> float:
    """The relative error ``e`` with ``1.648 sqrt(n) exp(-sqrt(e) (2 steps - 1)) = failure_probability``.

    This is the random-start Lanczos estimate for a positive semidefinite ``n x n`` matrix of
    "Estimating the largest eigenvalue by the power and Lanczos algorithms with a random start"
    (SIAM J. Matrix Anal. Appl., 1992; constant 1.648 from memory): with a start vector uniform on
    the sphere, ``P(theta_steps < (1 - e) lambda_max) <= 1.648 sqrt(n) exp(-sqrt(e) (2 steps - 1))``.
    """
    s = math.log(1.648 * math.sqrt(n) / failure_probability) / (2 * steps - 1)
    return min(1.0, s * s)


def norm_upper_probabilistic(a, steps: int = 60, failure_probability: float = 1e-6, seed: int = 0) -> NormBound:
    """A probabilistic upper bound on ``||a||`` for a signed matrix (random-start Lanczos on ``a^T a``).

    ``theta`` is the largest Ritz value after ``steps`` Lanczos steps (full reorthogonalisation) on
    ``a^T a`` from a Gaussian start; ``||a|| <= sqrt(theta / (1 - e))`` fails with probability at most
    ``failure_probability`` (see :func:`lanczos_failure_epsilon`; exact-arithmetic statement).  The
    result is marked ``deterministic=False``.
    """
    mv, rmv, shape, _, _, _ = _as_op(a)
    n = shape[1]
    steps = max(1, min(steps, n))
    rng = np.random.default_rng(seed)
    v = rng.standard_normal(n)
    v /= np.linalg.norm(v)
    vs = [v]
    alpha, beta = [], []
    for k in range(steps):
        w = rmv(mv(vs[-1]))
        al = float(vs[-1] @ w)
        alpha.append(al)
        basis = np.array(vs)
        w = w - basis.T @ (basis @ w)
        w = w - basis.T @ (basis @ w)
        b = float(np.linalg.norm(w))
        if b <= 1e-14 * max(abs(al), 1e-300) or k == steps - 1:
            break
        beta.append(b)
        vs.append(w / b)
    t = np.diag(alpha) + np.diag(beta[: len(alpha) - 1], 1) + np.diag(beta[: len(alpha) - 1], -1)
    theta = float(np.linalg.eigvalsh(t).max(initial=0.0))
    e = lanczos_failure_epsilon(n, len(alpha), failure_probability)
    value = math.inf if e >= 1 else math.sqrt(max(theta, 0.0) / (1 - e)) * (1 + 1e-12)
    return NormBound(value, "upper", "lanczos-random-start", False, failure_probability,
                     {"steps": len(alpha), "epsilon": e, "ritz": math.sqrt(max(theta, 0.0))})
