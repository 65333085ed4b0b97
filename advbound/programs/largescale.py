"""Verified lower bounds on ADV± where no SDP fits: low-rank adversary matrices with exact norms.

This module owns the large-instance path.  An adversary matrix of the form ``Γ = P Q^T`` on the
0-input x 1-input block (``P`` of shape ``(|D0|, R)``, ``Q`` of shape ``(|D1|, R)``, small ``R``) has

* ``||Γ|| = ||P Q^T||`` and ``||Γ o Δ_j|| = ||sum_a (P o [x_j = a]) (Q o [y_j != a])^T||``, both
  norms of rank ``<= R |Σ|`` products, computed exactly from small Gram matrices
  (:func:`advbound.evidence.iterative.norm_upper_lowrank`) in ``O(|D| R |Σ|)`` per position;

so the ratio ``||Γ|| / max_j ||Γ o Δ_j|| / c_j`` -- a lower bound on ADV±_c whatever produced Γ
("Negative weights make adversaries stronger", 2007, arXiv:quant-ph/0611054) -- is evaluated with
a proven rounding allowance at ``10^5``-``10^7`` inputs without forming Γ.

For the OR of ``n`` position-search rows restricted to ``sum_i k_i = T`` (``k_i`` the 1-based
position of row ``i``'s non-star, rows of length ``T - n + 1``), :func:`position_search_or_arrays`
enumerates the domain directly as arrays, and :func:`large_lower_bound` uses a product-weight,
rank-one Γ: ``Γ[x, y] = prod_i w0(k_i) * prod_i w_{b_i}(k'_i)`` (``x`` a 0-input with positions
``k``, ``y`` a 1-input with positions ``k'`` and row values ``b``), whose weight vectors are
optimised for the verified ratio itself (L-BFGS on log-weights).  Restricting to inputs with at most
``max_ones`` rows of value 1 is a sub-domain, so its bound is still a lower bound for the full one.

>>> r = large_lower_bound(3, 7, max_ones=None, optimise=False)
>>> r.domain_size, r.upper is None, 0 < r.lower <= 2.8582     # exact ADV± at T = 7 is 2.85817...
(120, True, True)
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time

import numpy as np
import scipy
import scipy.optimize

from advbound import status as _status
from advbound.errors import InvalidFunctionError
from advbound.evidence.iterative import norm_upper_lowrank
from advbound.result import SolveResult, SolverStats

__all__ = ["FamilyArrays", "position_search_or_arrays", "arrays_from_function", "lowrank_ratio",
           "product_weights_factors", "large_lower_bound", "family_function"]

log = logging.getLogger("advbound")
_EPS = np.finfo(float).eps

#: symbol codes of the arrays below: 0, 1, * in the alphabet order "01*"
ZERO, ONE, STAR = 0, 1, 2


@dataclasses.dataclass(frozen=True, eq=False)
class FamilyArrays:
    """The domain of an OR of position-search rows as arrays (no strings).

    Attributes
    ----------
    n, T, m : int
        Rows, time budget, row length ``m = T - n + 1``.
    k0 : ndarray (|D0|, n)
        Positions (1-based) of the 0-inputs.
    k1 : ndarray (|D1|, n)
        Positions of the 1-inputs.
    b1 : ndarray (|D1|, n) of int8
        Row values of the 1-inputs (at least one 1 per row of the array).
    """

    n: int
    T: int
    m: int
    k0: np.ndarray
    k1: np.ndarray
    b1: np.ndarray

    @property
    def size(self) -> int:
        return self.k0.shape[0] + self.k1.shape[0]

    @property
    def positions(self) -> int:
        return self.n * self.m

    def symbols(self, side: int) -> np.ndarray:
        """int8 ``(|D_side|, n m)`` symbol codes (0, 1, 2 for 0, 1, *) of one side."""
        k = self.k0 if side == 0 else self.k1
        b = np.zeros_like(k, dtype=np.int8) if side == 0 else self.b1
        s = np.full((k.shape[0], self.n * self.m), STAR, dtype=np.int8)
        rows = np.arange(k.shape[0])
        for i in range(self.n):
            s[rows, i * self.m + k[:, i] - 1] = b[:, i]
        return s


def _compositions(n: int, T: int, m: int) -> np.ndarray:
    """All ``(k_1..k_n)`` with ``1 <= k_i <= m`` and ``sum k_i = T``, in lexicographic order."""
    if n == 1:
        return np.array([[T]]) if 1 <= T <= m else np.zeros((0, 1), dtype=int)
    parts = []
    for k in range(1, min(m, T - (n - 1)) + 1):
        rest = _compositions(n - 1, T - k, m)
        if rest.size:
            parts.append(np.hstack([np.full((rest.shape[0], 1), k), rest]))
    return np.vstack(parts) if parts else np.zeros((0, n), dtype=int)


def position_search_or_arrays(n: int, T: int, max_ones: int | None = None) -> FamilyArrays:
    """Arrays of OR_n of position-search rows of length ``T - n + 1`` restricted to ``sum k_i = T``.

    ``max_ones`` keeps only the 1-inputs with at most that many rows of value 1 (a sub-domain).

    >>> a = position_search_or_arrays(3, 20)
    >>> a.k0.shape[0], a.size          # C(19, 2) profiles, 8 value patterns each
    (171, 1368)
    """
    if n < 1 or T < n:
        raise InvalidFunctionError(f"position_search_or_arrays: need n >= 1 and T >= n, got n={n}, T={T}")
    m = T - n + 1
    comp = _compositions(n, T, m)
    pats = np.array([[(v >> (n - 1 - i)) & 1 for i in range(n)] for v in range(1, 2 ** n)], dtype=np.int8)
    if max_ones is not None:
        if max_ones < 1:
            raise InvalidFunctionError(f"position_search_or_arrays: max_ones={max_ones} must be >= 1")
        pats = pats[pats.sum(axis=1) <= max_ones]
    k1 = np.repeat(comp, len(pats), axis=0)
    b1 = np.tile(pats, (comp.shape[0], 1))
    return FamilyArrays(n, T, m, comp, k1, b1)


def family_function(arr: FamilyArrays):
    """The same domain as a :class:`~advbound.functions.function.PartialFunction` (for moderate sizes)."""
    from advbound.functions.function import PartialFunction

    alphabet = "01*"
    pairs = []
    for side, k in ((0, arr.k0), (1, arr.k1)):
        s = arr.symbols(side)
        for row in s:
            pairs.append(("".join(alphabet[c] for c in row), side))
    names = tuple(f"r{i + 1}p{p + 1}" for i in range(arr.n) for p in range(arr.m))
    groups = tuple(tuple(range(i * arr.m, (i + 1) * arr.m)) for i in range(arr.n))
    return PartialFunction.from_pairs(alphabet, pairs, position_names=names, groups=groups,
                                      description=f"OR_{arr.n} of position-search rows, sum k = {arr.T}")


def lowrank_ratio(s0: np.ndarray, s1: np.ndarray, costs: np.ndarray, p: np.ndarray, q: np.ndarray,
                  positions=None):
    """Certified ``||Γ|| / max_j ||Γ o Δ_j|| / c_j`` for ``Γ = p q^T`` on the 0 x 1 block.

    Parameters
    ----------
    s0, s1 : int arrays ``(|D0|, N)``, ``(|D1|, N)``
        Symbol codes of the 0- and 1-inputs.
    costs : ``(N,)``
    p, q : ``(|D0|, R)``, ``(|D1|, R)``
    positions : iterable of int, optional
        Positions to evaluate (default all).

    Returns
    -------
    (ratio, norm_lower, norms_upper)
        ``norm_lower`` is a lower bound on ``||Γ||`` (the Gram value shrunk by its rounding
        allowance); ``norms_upper[j]`` an upper bound on ``||Γ o Δ_j||``.
    """
    p = np.asarray(p, dtype=float).reshape(s0.shape[0], -1)
    q = np.asarray(q, dtype=float).reshape(s1.shape[0], -1)
    top = norm_upper_lowrank(p, q)
    lo = math.sqrt(max(top.value ** 2 - 2 * top.details["allowance"], 0.0))
    positions = range(s0.shape[1]) if positions is None else positions
    ups = np.zeros(s0.shape[1])
    for j in positions:
        pa, qa = [], []
        for a in np.unique(s0[:, j]):
            sel0 = s0[:, j] == a
            sel1 = s1[:, j] != a
            if sel0.any() and sel1.any():
                pa.append(p * sel0[:, None])
                qa.append(q * sel1[:, None])
        if pa:
            ups[j] = norm_upper_lowrank(np.hstack(pa), np.hstack(qa)).value
    worst = float(np.max(ups / costs))
    return (lo / worst if worst > 0 else 0.0), lo, ups


def product_weights_factors(arr: FamilyArrays, w0: np.ndarray, w1: np.ndarray, wz: np.ndarray | None = None):
    """Rank-one factors ``p[x] = prod_i w0[k_i]``, ``q[y] = prod_i (w1 if b_i else wz)[k'_i]``.

    Weight vectors are indexed by position ``1..m`` (entry 0 unused); ``wz`` (default ``w0``) weighs
    the value-0 rows of 1-inputs.
    """
    wz = w0 if wz is None else wz
    p = np.prod(w0[arr.k0], axis=1)
    q = np.prod(np.where(arr.b1 == 1, w1[arr.k1], wz[arr.k1]), axis=1)
    return p[:, None], q[:, None]


def _family_norms(arr: FamilyArrays, p: np.ndarray, q: np.ndarray):
    """Exact (float) ``||Γ||`` and ``||Γ o Δ_j||`` for rank-one ``Γ = p q^T`` from per-position sums.

    Position ``j = (i, t)``: pairs differ iff ``k_i = t`` (then unless ``k'_i = t`` and ``b_i = 0``) or
    ``k_i != t`` and ``k'_i = t``.  So ``Γ o Δ_j = p_A q_B^T + p_{A'} q_C^T`` with ``A = {k_i = t}``,
    ``A'`` its complement, ``B = not(k'_i = t and b_i = 0)``, ``C = {k'_i = t}``; the two ``p`` parts
    are orthogonal, so the norm is ``sqrt(lambda_max([[a1 qB.qB, sqrt(a1 a2) qB.qC], [.., a2 qC.qC]]))``.
    """
    p = p.ravel()
    q = q.ravel()
    m = arr.m
    pp, qq = float(p @ p), float(q @ q)
    norms = np.zeros(arr.n * m)
    for i in range(arr.n):
        a1 = np.bincount(arr.k0[:, i], weights=p * p, minlength=m + 1)          # sum over k_i = t
        c = np.bincount(arr.k1[:, i], weights=q * q, minlength=m + 1)           # q_C.q_C
        z = np.bincount(arr.k1[:, i], weights=q * q * (arr.b1[:, i] == 0), minlength=m + 1)
        bb = qq - z                                                                 # q_B.q_B
        bc = c - z                                                                  # q_B.q_C (C minus zeros)
        a2 = np.maximum(pp - a1, 0.0)
        # largest eigenvalue of the symmetric 2 x 2 [[g11, g12], [g12, g22]] in closed form
        g11, g22 = a1 * bb, a2 * c
        g12 = np.sqrt(a1 * a2) * bc
        lam = 0.5 * (g11 + g22) + np.sqrt(0.25 * (g11 - g22) ** 2 + g12 ** 2)
        norms[i * m:(i + 1) * m] = np.sqrt(np.maximum(lam[1:], 0.0))
    return math.sqrt(pp * qq), norms


def _fit_weights(arr: FamilyArrays, maxiter: int, time_limit: float):
    """Optimise log-weights (w0, w1, wz) for the smoothed ratio; returns the weight vectors."""
    m = arr.m
    start = time.perf_counter()

    def unpack(z):
        w0 = np.concatenate([[1.0], np.exp(z[:m])])
        w1 = np.concatenate([[1.0], np.exp(z[m:2 * m])])
        wz = np.concatenate([[1.0], np.exp(z[2 * m:])])
        return w0, w1, wz

    def obj(z):
        w0, w1, wz = unpack(z)
        p, q = product_weights_factors(arr, w0, w1, wz)
        top, cn = _family_norms(arr, p, q)
        # smooth max of the constraint norms (log-sum-exp at a sharp temperature)
        lc = np.log(np.maximum(cn, 1e-300))
        mx = float(lc.max())
        soft = mx + math.log(float(np.sum(np.exp(60.0 * (lc - mx))))) / 60.0
        return -(math.log(top) - soft)

    z = np.zeros(3 * m)
    best = (obj(z), z)
    # coarse start: power laws k^-g for w0 and wz, k^-h for w1
    ks = np.log(np.arange(1, m + 1))
    for g in (0.0, 0.25, 0.5):
        for h in (0.0, 0.25, 0.5):
            cand = np.concatenate([-g * ks, -h * ks, -g * ks])
            v = obj(cand)
            if v < best[0]:
                best = (v, cand)
    z = best[1]
    if maxiter > 0:
        def cb(_):
            if time.perf_counter() - start > time_limit:
                raise StopIteration
        try:
            res = scipy.optimize.minimize(obj, z, method="L-BFGS-B", options=dict(maxiter=maxiter),
                                          callback=cb)
            if res.fun < best[0]:
                z = res.x
        except StopIteration:
            pass
    return unpack(z)


def arrays_from_function(f, max_ones: int | None = None) -> FamilyArrays:
    """The :class:`FamilyArrays` of a PartialFunction that is an OR of position-search rows.

    Rows are ``f.groups`` (equal lengths); every input must have exactly one non-star per row and
    output ``1`` iff some row's non-star is ``1``.  ``max_ones`` drops 1-inputs with more rows of value 1.

    Raises
    ------
    InvalidFunctionError
        If ``f`` is not of that form (the message names the first offending input).
    """
    if not f.groups or len({len(g) for g in f.groups}) != 1:
        raise InvalidFunctionError("arrays_from_function: f needs groups (rows) of equal length, "
                                   "as built by compose(or_function(n), position_search_row(m), ...)")
    if set(f.alphabet) != {"0", "1", "*"} or set(f.outputs) - {"0", "1"}:
        raise InvalidFunctionError("arrays_from_function: f must have alphabet {0, 1, *} and outputs 0/1")
    n, m = len(f.groups), len(f.groups[0])
    k = np.zeros((f.size, n), dtype=np.int64)
    b = np.zeros((f.size, n), dtype=np.int8)
    for r, (x, y) in enumerate(zip(f.inputs, f.outputs)):
        for i, g in enumerate(f.groups):
            hits = [t for t, pos in enumerate(g) if x[pos] != "*"]
            if len(hits) != 1:
                raise InvalidFunctionError(f"arrays_from_function: input {x!r} has {len(hits)} non-star symbols "
                                           f"in row {i + 1}; position-search rows have exactly one")
            k[r, i] = hits[0] + 1
            b[r, i] = int(x[g[hits[0]]] == "1")
        if int(b[r].any()) != int(y):
            raise InvalidFunctionError(f"arrays_from_function: input {x!r} has output {y!r}, not the OR of its rows")
    out = b.any(axis=1)
    keep = out & (b.sum(axis=1) <= (max_ones if max_ones is not None else n))
    sums = k.sum(axis=1)
    T = int(sums[0]) if np.all(sums == sums[0]) else -1
    return FamilyArrays(n, T, m, k[~out], k[keep], b[keep])


def large_lower_bound(n, T: int | None = None, max_ones: int | None = 1, optimise: bool = True, maxiter: int = 60,
                      time_limit: float = 300.0, fit_T: int | None = None, weights=None,
                      check_generic: bool | None = None) -> SolveResult:
    """A verified lower bound on ADV± of OR_n of position-search rows restricted to ``sum k_i = T``.

    Parameters
    ----------
    n : int or PartialFunction
        Number of rows, or a function accepted by :func:`arrays_from_function` (then ``T`` is ignored).
    T : int
        Time budget (rows of length ``T - n + 1``).
    max_ones : int or None
        Keep only 1-inputs with at most this many rows of value 1 (default 1; a sub-domain, so the
        bound holds for the full function too).  ``None`` keeps all.
    optimise : bool
        Fit the product weights (else uniform weights, Γ all ones on the block).
    maxiter, time_limit : int, float
        Budget of the weight fit (L-BFGS with finite differences on ``3 m`` log-weights).
    fit_T : int, optional
        Fit the weights on a smaller budget (shapes are interpolated in ``k / m``), then certify at ``T``.
    weights : tuple of three arrays, optional
        Use these ``(w0, w1, wz)`` (indexed by position ``1..m``) instead of fitting.
    check_generic : bool, optional
        Also recompute every norm with the generic :func:`lowrank_ratio` (symbol arrays; default: when
        ``|D| N <= 5e7``) and report the smaller ratio.

    Returns
    -------
    SolveResult
        ``upper`` is None; ``lower`` is the certified ratio; ``message`` says how it was verified.
    """
    start = time.perf_counter()
    if isinstance(n, int):
        if T is None:
            raise InvalidFunctionError("large_lower_bound: T is required when n is a number of rows")
        arr = position_search_or_arrays(n, T, max_ones)
    else:
        arr = arrays_from_function(n, max_ones)
        n, T = arr.n, arr.T
    m = arr.m
    if weights is not None:
        w0, w1, wz = (np.asarray(w, dtype=float) for w in weights)
        if not (len(w0) == len(w1) == len(wz) == m + 1) or min(w0[1:].min(), w1[1:].min(), wz[1:].min()) <= 0:
            raise InvalidFunctionError(f"large_lower_bound: weights must be three positive arrays of length {m + 1}")
    elif optimise:
        if fit_T is not None and fit_T < T:
            small = position_search_or_arrays(n, fit_T, max_ones)
            ws = _fit_weights(small, maxiter, time_limit)
            grid_small = np.arange(1, small.m + 1) / small.m
            grid = np.arange(1, m + 1) / m
            w0, w1, wz = (np.concatenate([[1.0], np.exp(np.interp(grid, grid_small, np.log(w[1:]))) ])
                          for w in ws)
        else:
            w0, w1, wz = _fit_weights(arr, maxiter, time_limit)
    else:
        w0 = w1 = wz = np.ones(m + 1)
    fit_time = time.perf_counter() - start
    p, q = product_weights_factors(arr, w0, w1, wz)
    # certified evaluation: ||Γ|| = ||p|| ||q|| (rank one) shrunk by its rounding allowance; the
    # constraint norms from the 2 x 2 Gram form with a rounding allowance added
    top, cn = _family_norms(arr, p, q)
    allowance = 64 * (arr.size + 4) * _EPS
    lower_top = top * (1 - allowance)
    # every Gram entry is a sum of at most |D| nonnegative terms or a difference of two such sums
    # bounded by ||p||^2 ||q||^2 = top^2, so each is off by at most (|D| + 4) eps top^2 absolutely
    ups = np.sqrt(cn ** 2 + allowance * top ** 2) * (1 + allowance)
    worst = float(np.max(ups))
    lower = lower_top / worst
    how = "rank-one product-weight Γ; ||Γ|| = ||p|| ||q||, ||Γ o Δ_j|| from exact 2 x 2 Gram forms (rounding widened)"
    if check_generic is None:
        check_generic = arr.size * arr.positions <= 5e7
    if check_generic:
        s0, s1 = arr.symbols(0), arr.symbols(1)
        g_ratio, _, _ = lowrank_ratio(s0, s1, np.ones(arr.positions), p, q)
        if g_ratio < lower:
            lower = g_ratio
        how += "; cross-checked by the generic low-rank Gram evaluation"
    elapsed = time.perf_counter() - start
    sub = "all inputs" if max_ones is None else f"1-inputs with <= {max_ones} row(s) of value 1"
    msg = (f"verified lower bound (deterministic, up to stated rounding allowances) on a sub-domain of "
           f"{arr.size} inputs ({sub}); {how}; no upper bound")
    stats = SolverStats(name="largescale-product-weights", version=f"scipy {scipy.__version__}", time=elapsed,
                        iterations=None, tolerances={"rounding_allowance": allowance},
                        options={"n": n, "T": T, "max_ones": max_ones, "optimise": bool(optimise),
                                 "fit_T": fit_T, "fit_time": round(fit_time, 3),
                                 "w0": [float(x) for x in w0[1:]], "w1": [float(x) for x in w1[1:]],
                                 "wz": [float(x) for x in wz[1:]]})
    return SolveResult(message=msg, status=_status.INACCURATE, bound="general", lower=float(lower), upper=None,
                       objective=None, domain_size=arr.size, solver_stats=stats, certificate=None)
