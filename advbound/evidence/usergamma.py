"""A researcher's own adversary matrix: read it, evaluate its bound, improve it locally.

This module owns the report of what a user-supplied Γ proves and a local improvement;
turning Γ (a Python callable ``Γ(x, y)`` or an entries file) into a matrix over a
function's canonical input order is :mod:`advbound.evidence.gammainput`'s job, and its
readers are importable from here too.  For *any* real symmetric Γ that
vanishes on pairs with equal outputs, ``||Γ|| / max_j ||Γ∘Δ_j|| / c_j`` is a lower bound
on ADV±_c(f) (common knowledge: "Negative weights make adversaries stronger", 2007,
arXiv:quant-ph/0611054); the input is symmetrised and zeroed on equal-output pairs
first, and the report says how much that changed.  Typical call::

    g = gamma_from_callable(f, load_callable("mygamma.py:gamma"))
    rep = evaluate_gamma(f, g)          # rep.ratio, rep.binding, rep.zeroed_entries, ...

Sizes: up to :data:`DENSE_LIMIT` inputs the norms come from dense LAPACK
eigensolvers (accurate to floating-point rounding).  Above it Γ is kept sparse and

* ``||Γ||`` is bounded *below* by a Rayleigh quotient (any vector gives a lower bound),
  with the rounding allowance of :func:`advbound.evidence.iterative.norm_lower`;
* each ``||Γ∘Δ_j||`` is bounded *above* by the smaller of the Schur test on ``|Γ∘Δ_j|``
  (``||M|| <= || |M| ||``; :func:`advbound.evidence.iterative.norm_upper_nonnegative`, tight for
  non-negative Γ, possibly loose with negative entries) and dense norms of its connected
  components (:func:`advbound.evidence.iterative.norm_upper_blocks`, when they are small enough);
* so ``certified_ratio = lower / max_j (upper_j / c_j)`` is a lower bound on ADV±_c, while
  ``ratio`` uses ``scipy.sparse.linalg.eigsh`` *estimates* of every norm and is labelled an
  estimate.  Without :mod:`advbound.evidence.iterative` a scipy fallback does the same (Lanczos vector's
  Rayleigh quotient; Schur test with the Perron vector of ``|M|`` floored at ``1e-12·max``;
  both widened by a relative ``1e-10`` against rounding).

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1)])
>>> rep = evaluate_gamma(f, np.array([[0, 1, 1], [1, 0, 0], [1, 0, 0]]))
>>> round(rep.ratio, 12), rep.binding                 # √2 for OR_2 on weight <= 1
(1.414213562373, (0, 1))
"""

from __future__ import annotations

import dataclasses
import logging
import math

import numpy as np
import scipy.sparse as sp

from advbound import quantities as q
from advbound.evidence.gammainput import (DENSE_LIMIT, GammaError, check_params, gamma_from_callable, gamma_from_entries,
                                          load_callable)

__all__ = [
    "GammaError",
    "GammaReport",
    "ImproveResult",
    "load_callable",
    "check_params",
    "gamma_from_callable",
    "gamma_from_entries",
    "evaluate_gamma",
    "improve_gamma",
    "DENSE_LIMIT",
]

log = logging.getLogger("advbound")

_ROUND = 1e-10
#: ``max |Γ| x |D|`` above this would overflow sums of squares; the bound is unchanged by scaling Γ.
MAGNITUDE_LIMIT = 1e150


@dataclasses.dataclass(frozen=True)
class GammaReport:
    """What a user-supplied Γ proves (after symmetrising and zeroing equal-output pairs).

    Attributes
    ----------
    message : str
        One sentence with the bound and how it was computed.
    ratio : float
        ``||Γ|| / max_j ||Γ∘Δ_j||/c_j`` (an estimate when ``method == "sparse"``).
    certified_ratio : float or None
        A lower bound on ADV±_c computed with certified one-sided bounds (sparse path);
        equal to ``ratio`` on the dense path.
    norm : float
        ``||Γ||``.
    constraint_norms : tuple of float
        ``||Γ∘Δ_j||`` per position.
    constraint_upper : tuple of float
        Certified upper bounds on ``||Γ∘Δ_j||`` (the norms themselves on the dense path).
    costs : tuple of float
    binding : tuple of int
        Positions with ``||Γ∘Δ_j||/c_j`` within ``binding_rtol`` (relative) of the maximum.
    binding_names : tuple of str
    was_symmetric : bool
    asymmetry : float
        ``max |Γ - Γᵀ|`` of the input.
    zeroed_entries : int
        Non-zero input entries on equal-output pairs (set to 0).
    zeroed_max : float
        Their largest modulus.
    zeroed_mass : float
        Their Frobenius norm.
    size, n : int
    method : str
        ``"dense"`` or ``"sparse"``.
    bound_methods : tuple of str
        How each bound was obtained (sparse path: the ``||Γ||`` lower bound, then one per position).
    """

    message: str
    ratio: float
    certified_ratio: float | None
    norm: float
    constraint_norms: tuple
    constraint_upper: tuple
    costs: tuple
    binding: tuple
    binding_names: tuple
    was_symmetric: bool
    asymmetry: float
    zeroed_entries: int
    zeroed_max: float
    zeroed_mass: float
    size: int
    n: int
    method: str
    bound_methods: tuple = ()

    def to_dict(self) -> dict:
        """Python scalars only (JSON-ready)."""
        d = dataclasses.asdict(self)
        for k in ("constraint_norms", "constraint_upper", "costs"):
            d[k] = [float(v) for v in d[k]]
        d["binding"] = [int(v) for v in self.binding]
        d["binding_names"] = list(self.binding_names)
        d["bound_methods"] = list(self.bound_methods)
        return d


@dataclasses.dataclass(frozen=True, eq=False)
class ImproveResult:
    """Outcome of :func:`improve_gamma`: the original and the improved ratio and matrix."""

    original_ratio: float
    improved_ratio: float
    gamma: np.ndarray
    iterations: int
    accepted_steps: int
    report: GammaReport


# ---------------------------------------------------------------------------------------------
# Evaluating Γ
# ---------------------------------------------------------------------------------------------
def _arrays(f):
    order = {s: i for i, s in enumerate(f.alphabet)}
    sym = np.array([[order[ch] for ch in x] for x in f.inputs], dtype=np.int16).reshape(len(f.inputs), f.n)
    labels = {lab: i for i, lab in enumerate(f.labels)}
    out = np.array([labels[y] for y in f.outputs], dtype=np.int64)
    return sym, out, np.asarray(f.costs, dtype=float)


def _prepare(f, gamma):
    """Symmetrised, zeroed Γ and the facts about what changed."""
    sym, out, costs = _arrays(f)
    size = len(f.inputs)
    if sp.issparse(gamma):
        g = gamma.tocsr().astype(float)
        if g.shape != (size, size):
            raise GammaError(f"Γ has shape {g.shape}, expected {(size, size)} for |D| = {size}")
        d = (g - g.T).tocoo()
        asym = float(np.max(np.abs(d.data), initial=0.0))
        c = g.tocoo()
        eq = out[c.row] == out[c.col]
        vals = c.data[eq & (c.data != 0)]
    else:
        g = np.asarray(gamma, dtype=float)
        if g.shape != (size, size):
            raise GammaError(f"Γ has shape {g.shape}, expected {(size, size)} for |D| = {size}")
        if not np.isfinite(g).all():
            raise GammaError("Γ has NaN or infinite entries")
        asym = float(np.max(np.abs(g - g.T), initial=0.0))
        eqm = out[:, None] == out[None, :]
        vals = g[eqm & (g != 0)]
    _check_magnitude(f, g)
    g0 = q.zero_equal_outputs(g, out)
    if sp.issparse(g0):
        g0.eliminate_zeros()
    facts = dict(asymmetry=asym, was_symmetric=asym == 0.0, zeroed_entries=int(vals.size),
                 zeroed_max=float(np.max(np.abs(vals), initial=0.0)), zeroed_mass=float(np.sqrt(np.sum(vals**2))))
    return g0, sym, out, costs, facts


def _check_magnitude(f, g) -> None:
    """Refuse entries so large that norms or sums of squares would overflow (naming the largest one)."""
    size = max(len(f.inputs), 1)
    limit = MAGNITUDE_LIMIT / size
    if sp.issparse(g):
        c = g.tocoo()
        if not c.nnz:
            return
        k = int(np.argmax(np.abs(c.data)))
        i, j, val = int(c.row[k]), int(c.col[k]), float(c.data[k])
    else:
        if not g.size:
            return
        i, j = (int(t) for t in np.unravel_index(int(np.argmax(np.abs(g))), g.shape))
        val = float(g[i, j])
    if abs(val) > limit:
        x, y = f.inputs[i], f.inputs[j]
        raise GammaError(f"Γ({x!r}, {y!r}) = {val:.3g}: with |D| = {size} entries above {limit:.3g} in modulus make "
                         f"the norms overflow; divide Γ by a constant (the bound does not change)")


def evaluate_gamma(f, gamma, *, binding_rtol: float = 1e-9, dense_limit: int = DENSE_LIMIT) -> GammaReport:
    """Report the adversary bound a user-supplied Γ proves for ``f``.

    Parameters
    ----------
    f : PartialFunction
    gamma : ndarray or scipy sparse matrix, shape (|D|, |D|)
        In ``f``'s canonical input order; symmetrised (averaged with its transpose) and zeroed
        on equal-output pairs before anything is computed.
    binding_rtol : float
        A position binds when its ``||Γ∘Δ_j||/c_j`` is within this (relative) of the maximum.
    dense_limit : int
        Largest ``|D|`` handled with dense eigensolvers.
    """
    g0, sym, out, costs, facts = _prepare(f, gamma)
    size, n = len(f.inputs), f.n
    if size <= dense_limit:
        dense = g0.toarray() if sp.issparse(g0) else g0
        norm = q.spectral_norm(dense)
        norms = q.constraint_norms(dense, sym)
        upper = norms
        method = "dense"
        bound_methods = ("dense LAPACK",)
    else:
        gs = g0 if sp.issparse(g0) else sp.csr_matrix(g0)
        norm, norms, upper, bound_methods = _sparse_norms(gs, sym)
        method = "sparse"
    vals = [norm, *np.asarray(norms, dtype=float), *np.asarray(upper, dtype=float)]
    if not all(math.isfinite(float(v)) for v in vals):  # pragma: no cover - excluded by _check_magnitude
        raise GammaError("the norms of Γ are not finite numbers; divide Γ by a constant (the bound does not change)")
    ratios = norms / costs
    worst = float(ratios.max(initial=0.0))
    ratio = norm / worst if worst > 0 else 0.0
    if method == "dense":
        certified = ratio
    else:
        wu = float((upper / costs).max(initial=0.0))
        certified = norm / wu if wu > 0 else 0.0
    binding = tuple(int(j) for j in np.flatnonzero(ratios >= worst * (1 - binding_rtol))) if worst > 0 else ()
    names = tuple(f.position_names[j] for j in binding)
    if method == "dense":
        msg = (f"ratio {ratio:.10g} = ||Γ|| / max_j ||Γ∘Δ_j||/c_j: a lower bound on ADV±_c (dense eigensolvers, "
               f"floating point)")
    else:
        msg = (f"certified lower bound {certified:.10g} on ADV±_c (Rayleigh quotient / Schur-test bounds); "
               f"estimated ratio {ratio:.10g} (Lanczos estimates)")
    return GammaReport(message=msg, ratio=float(ratio), certified_ratio=float(certified), norm=float(norm),
                       constraint_norms=tuple(float(v) for v in norms),
                       constraint_upper=tuple(float(v) for v in upper), costs=tuple(float(c) for c in costs),
                       binding=binding, binding_names=names, size=size, n=n, method=method,
                       bound_methods=bound_methods, **facts)


def _sparse_norms(g, sym):
    """(lower bound on ||Γ||, eigsh estimates of ||Γ∘Δ_j||, certified upper bounds, methods used).

    Uses :mod:`advbound.evidence.iterative` when it is installed (deterministic Rayleigh lower bound with
    a rounding allowance; the smaller of the component-wise dense norm and the Schur test on
    ``|M|``), else the scipy fallback described in the module docstring.
    """
    from scipy.sparse.linalg import eigsh

    try:
        from advbound.evidence import iterative as it
    except ImportError:  # pragma: no cover - the module ships with advbound
        it = None
    size = g.shape[0]
    v0 = np.ones(size) / math.sqrt(size)
    npos = sym.shape[1]
    if g.nnz == 0:
        return 0.0, np.zeros(npos), np.zeros(npos), ("zero",) * (npos + 1)
    if it is not None:
        lo = it.norm_lower(g)
        norm, methods = lo.value, [f"norm: {lo.method}"]
    else:
        _, x = eigsh(g, k=1, which="LM", v0=v0)
        x = x[:, 0]
        norm = abs(float(x @ (g @ x))) / float(x @ x) * (1 - _ROUND)
        methods = ["norm: rayleigh (scipy)"]
    est, upper = [], []
    for j in range(npos):
        m = q.masked(g, sym, j)
        if m.nnz == 0:
            est.append(0.0); upper.append(0.0); methods.append("zero")
            continue
        w = eigsh(m, k=1, which="LM", v0=v0, return_eigenvectors=False)
        est.append(float(abs(w[0])))
        a = abs(m)
        if it is not None:
            cands = [it.norm_upper_nonnegative(a)]
            try:
                cands.append(it.norm_upper_blocks(m))
            except ValueError:
                pass
            b = min(cands, key=lambda c: c.value)
            upper.append(b.value); methods.append(b.method)
        else:
            _, p = eigsh(a, k=1, which="LA", v0=v0)
            p = np.abs(p[:, 0])
            p = np.maximum(p, 1e-12 * p.max())
            upper.append(float(np.max((a @ p) / p)) * (1 + _ROUND)); methods.append("schur-test (scipy)")
    return norm, np.array(est), np.array(upper), tuple(methods)


# ---------------------------------------------------------------------------------------------
# Improving Γ
# ---------------------------------------------------------------------------------------------
def improve_gamma(f, gamma, *, iterations: int = 100, step: float = 0.05, sharpness: float = 200.0,
                  dense_limit: int = 1500) -> ImproveResult:
    """Projected gradient ascent of ``log ratio`` on the support of Γ (dense inputs only).

    The objective is ``log|λ| - softmax_j log(||Γ∘Δ_j||/c_j)`` (log-sum-exp with
    ``sharpness``), ``λ`` the eigenvalue of largest modulus; its gradient uses the top
    eigenvectors (``d|λ| = σ uuᵀ``, ``d||M_j|| = σ_j (w_jw_jᵀ)∘Δ_j``), restricted to the
    non-zero pattern of the (symmetrised, zeroed) input and symmetrised.  A step of
    relative size ``step`` (in Frobenius norm) is accepted when the exact ratio grows,
    otherwise the step is halved.  The best matrix seen is returned, so the improved
    ratio is never below the original.
    """
    g0, sym, out, costs, _ = _prepare(f, gamma)
    size = len(f.inputs)
    if size > dense_limit:
        raise GammaError(f"--improve handles at most {dense_limit} inputs, got {size}")
    g = g0.toarray() if sp.issparse(g0) else np.array(g0)
    mask = g != 0
    masks = [sym[:, j][:, None] != sym[:, j][None, :] for j in range(sym.shape[1])]

    def ratio_of(m):
        nj = np.array([q.spectral_norm(np.where(mk, m, 0.0)) for mk in masks])
        w = float((nj / costs).max(initial=0.0))
        return (q.spectral_norm(m) / w if w > 0 else 0.0), nj

    def top(m):
        w, u = np.linalg.eigh(m)
        k = -1 if abs(w[-1]) >= abs(w[0]) else 0
        return w[k], u[:, k]

    best, _ = ratio_of(g)
    original = best
    accepted = 0
    it = 0
    for it in range(1, iterations + 1):
        if step < 1e-8 or not mask.any():
            break
        lam, u = top(g)
        grad = np.sign(lam) * np.outer(u, u) / abs(lam)
        parts = []
        for j, mk in enumerate(masks):
            mj = np.where(mk, g, 0.0)
            if not mj.any():
                parts.append((-np.inf, None))
                continue
            lj, wj = top(mj)
            parts.append((math.log(abs(lj) / costs[j]), (lj, wj, mk)))
        logs = np.array([p[0] for p in parts])
        wts = np.exp(sharpness * (logs - logs.max()))
        wts /= wts.sum()
        for wt, (_, data) in zip(wts, parts):
            if data is None or wt < 1e-12:
                continue
            lj, wj, mk = data
            grad -= wt * np.sign(lj) * np.where(mk, np.outer(wj, wj), 0.0) / abs(lj)
        grad = np.where(mask, (grad + grad.T) / 2, 0.0)
        gn = np.linalg.norm(grad)
        if gn == 0:
            break
        cand = g + step * np.linalg.norm(g) / gn * grad
        r, _ = ratio_of(cand)
        if r > best:
            g, best = cand, r
            accepted += 1
            step *= 1.2
        else:
            step /= 2
    rep = evaluate_gamma(f, g)
    log.info("improve_gamma: %.10g -> %.10g in %d iterations", original, rep.ratio, it)
    return ImproveResult(original_ratio=float(original), improved_ratio=float(rep.ratio), gamma=g,
                         iterations=it, accepted_steps=accepted, report=rep)

