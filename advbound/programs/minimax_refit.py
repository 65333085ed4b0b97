"""A second adversary matrix from the minimax weights: the best Γ on given pair orbits that a Schur test certifies.

The minimax program (:mod:`advbound.programs.minimax`, :mod:`advbound.programs.minimax_transport`)
gives query weights ``w`` and multipliers ``μ``; ``Γ = μ/(N √(m m))`` is optimal when the
multipliers are exact.  When the weights put (nearly) nothing on a position where active pairs
differ, that construction rests on stationarity where the gradient blows up, and a slightly wrong
multiplier shows as one position whose ``‖Γ∘Δ_(n,p)‖`` exceeds the others (OR of 11 rows at T = 20:
0.1632 at position 1 against 0.1585 everywhere else, a lower bound 3% short).

Here the weights fix the test vectors instead, and Γ is re-fitted by one linear program over the
same pair orbits:

    maximise ``δᵀΓδ`` (``δ = √m``, ``Σ δ² = 1``)  subject to  ``(Γ∘Δ_(n,p)) σ_p ≤ c_p σ_p`` for every
    position ``p``, ``Γ ≥ 0``,

with ``σ_p(x) = δ_x √(w[x, last letter, p]) + ε`` constant on the orbits (last letter, content): the
vector that stationarity of the minimax program makes a Perron vector of the optimal ``Γ∘Δ_(n,p)``.  For a
non-negative matrix, ``A σ ≤ c σ`` with ``σ > 0`` proves ``‖A‖ ≤ c`` (the Collatz–Wielandt bound,
common knowledge), and both sides are sums over the quotient of orbits, so the program is linear in
the values of Γ on the pair orbits and never lists an input.  HiGHS solves it by its interior-point
method (with crossover): on OR of 12 rows at T = 22 (26,529 pair orbits) that took 8.3 s against
47 s for the dual simplex, and the checked lower bound of its Γ was 6.766703 against 6.766733.
The refit keeps the multipliers' mass per input (δ) and the weights, and replaces only how the mass
is spread over the pair orbits; with a wrong δ it does no better than the multipliers.  The LP
optimum is a lower bound on ADV by itself; the solve still reports only what
:mod:`advbound.evidence.orbitquotient` computes for the Γ it returns (exact Perron roots), so an
error here can only weaken the bound, not falsify it.
"""

from __future__ import annotations

import math
from collections import Counter

import numpy as np
import scipy.sparse as sp
from scipy.optimize import linprog

from advbound.evidence.orbitquotient import last_letter_orbits

__all__ = ["refit_gamma"]


def refit_gamma(fam, keys: np.ndarray, weights: np.ndarray, rho: np.ndarray, floor: float = 1e-6):
    """The Schur-test LP of the module docstring; returns ``gamma`` per key, or None when HiGHS fails.

    ``keys`` ``(K, n, 2)`` pair orbits, ``weights`` ``(R, A, L)`` the query weights, ``rho`` ``(R,)``
    the multiplier mass per input of each content (``δ² = ρ``); ``floor`` (relative to the largest
    ``√w``) keeps every test vector positive.
    """
    n, L = fam.n, fam.row_length
    keys = np.asarray(keys, dtype=np.int64)
    K = keys.shape[0]
    if K == 0:
        return None
    index = {c: r for r, c in enumerate(fam.contents)}
    sizes, orbit, osize = last_letter_orbits(fam)
    d = np.sqrt(np.maximum(np.asarray(rho, dtype=float), 0.0))
    norm = float(sizes @ (d * d))
    if norm <= 0:
        return None
    d = d / math.sqrt(norm)
    root = np.sqrt(np.maximum(np.asarray(weights, dtype=float), 0.0)) * d[:, None, None]
    eps = floor * float(root.max()) if root.size else floor
    sigma = np.empty((L, len(orbit)))
    for (a, r), u in orbit.items():
        sigma[:, u] = root[r, a, :] + eps
    fact = [math.factorial(i) for i in range(n + 1)]
    letters = np.array([list(s) for s in fam.letters])
    obj = np.zeros(K)
    rows, cols, vals = [], [], []
    for k, key in enumerate(keys.tolist()):
        i, j = index[tuple(sorted(a for a, _ in key))], index[tuple(sorted(b for _, b in key))]
        cells = Counter(tuple(p) for p in key)
        N = fact[n] / math.prod(fact[t] for t in cells.values())
        obj[k] = 2.0 * N * d[i] * d[j]
        for (a, b), t in cells.items():
            ps = np.flatnonzero(letters[a] != letters[b])
            if ps.size == 0:
                continue
            u, v = orbit[(a, i)], orbit[(b, j)]
            c = N * t / n
            rows += (ps * len(orbit) + u).tolist() + (ps * len(orbit) + v).tolist()
            cols += [k] * (2 * ps.size)
            vals += (c * sigma[ps, v]).tolist() + (c * sigma[ps, u]).tolist()
    A = sp.csr_matrix((vals, (rows, cols)), shape=(L * len(orbit), K))
    costs = np.asarray(fam.costs, dtype=float)
    b = (costs[:, None] * osize[None, :] * sigma).ravel()
    used = np.flatnonzero(np.diff(A.indptr) > 0)
    res = linprog(-obj, A_ub=A[used], b_ub=b[used], bounds=(0, None), method="highs-ipm")
    if res.status != 0 or res.x is None:
        return None
    return np.maximum(np.asarray(res.x, dtype=float), 0.0)
