"""Query weights: the minimax witness of an upper bound on the positive adversary bound ADV, checked by orbits.

The positive adversary bound of a function with costs ``c`` is also a *minimax* quantity,

    ``ADV_c(f) = min_p max_{f(x) ≠ f(y)} 1 / Σ_{i: x_i ≠ y_i} √(p_x(i) p_y(i)) / c_i``,

over one probability distribution ``p_x`` on the query positions per input ("All quantum adversary
methods are equivalent", 2006, arXiv:quant-ph/0409116, Theorem 2, the minimax bound).  Only the
easy half is used here, and it is proved in three lines, so the bound does not rest on that
theorem: for non-negative weights ``p`` let ``S_x = Σ_i p_x(i)`` and
``φ = min_{f(x)≠f(y)} Σ_{i: x_i≠y_i} √(p_x(i) p_y(i)) / c_i``.  For a feasible Γ ≥ 0
(``‖Γ∘Δ_i‖ ≤ c_i``) with Perron vector δ ≥ 0, ``‖δ‖ = 1``, and ``v_i(x) = √(p_x(i) / c_i)``:

    ``φ ‖Γ‖ = φ Σ Γ_xy δ_x δ_y ≤ Σ_i (δ∘v_i)ᵀ (Γ∘Δ_i) (δ∘v_i) ≤ Σ_i c_i ‖δ∘v_i‖² = Σ_x δ_x² S_x ≤ max_x S_x``,

so ``ADV_c(f) ≤ max_x S_x / φ`` (the rank-one dual ``X_i = v_i v_iᵀ / φ`` of the positive program).

Query weights of a row family
-----------------------------
For a function of interchangeable rows (:class:`~advbound.functions.rowfamily.RowFamily`) the
weights may be taken invariant: ``p_x(r, q)`` depends only on the content ``c`` of ``x`` and the
letter ``a`` of row ``r``, so the witness is one array ``weights[c, a, q]`` (zero where the letter
``a`` does not occur in ``c``).  Then ``S_c = Σ_a mult_c(a) Σ_q weights[c, a, q]``, and for two
contents the smallest sum over the pairs they form is a *minimum-cost assignment* of the rows of
``x`` to the rows of ``y`` with cost ``C(a, b) = Σ_{q: a_q ≠ b_q} √(w[c_x, a, q] w[c_y, b, q]) / c_q``.

How ``φ`` is bounded from below
-------------------------------
For each pair of contents with different outputs, any potentials ``u, v`` with
``u_r + v_s ≤ C_rs`` give ``Σ_r u_r + Σ_s v_s ≤`` every assignment's cost (LP duality, weak half;
common knowledge).  :func:`matching_floor` finds the optimal assignment
(:func:`scipy.optimize.linear_sum_assignment`), turns it into potentials by shortest paths, sets
``u_r = min_s (C_rs − v_s)`` so that feasibility holds by construction, and subtracts a rounding
allowance.  The bound is valid whatever the assignment routine returned; a poor assignment only
makes it weaker (the report gives the assignment values as well, so a gap would show).

All arithmetic is float64.  Work is linear in the number of content pairs (each an ``n × n``
assignment), never in ``|D|`` or in the number of pair orbits.
"""

from __future__ import annotations

import numpy as np

__all__ = ["content_multiplicities", "check_weights", "pair_cost_matrices", "matching_floor",
           "minimax_upper", "output_ranks"]

#: Content pairs per batch of cost matrices (bounds the memory of one batch).
_BATCH_ENTRIES = 4_000_000


def content_multiplicities(fam) -> np.ndarray:
    """``mult[c, a]``: how many rows of content ``c`` hold letter ``a``."""
    R, A = len(fam.contents), len(fam.letters)
    mult = np.zeros((R, A), dtype=np.int64)
    for c, content in enumerate(fam.contents):
        np.add.at(mult[c], np.asarray(content, dtype=np.int64), 1)
    return mult


def output_ranks(fam) -> np.ndarray:
    """The rank of each content's output among the sorted labels."""
    rank = {y: i for i, y in enumerate(fam.labels)}
    return np.array([rank[y] for y in fam.outputs], dtype=np.int64)


def check_weights(fam, weights, fail) -> np.ndarray:
    """Return ``weights`` as float64 ``(R, A, L)`` or raise ``fail(msg)`` naming the first defect.

    The rule: shape ``(contents, letters, row length)``, finite, ``>= 0``, zero for every letter a
    content does not hold, and a positive total for every content.
    """
    w = np.asarray(weights)
    shape = (len(fam.contents), len(fam.letters), fam.row_length)
    if w.shape != shape or w.dtype.kind not in "fiu":
        raise fail(f"query_weights must be a {shape} array of numbers (content, letter, position), "
                   f"got shape {w.shape} and dtype {w.dtype}")
    w = w.astype(np.float64)
    bad = np.argwhere(~np.isfinite(w) | (w < 0))
    if bad.size:
        c, a, q = (int(v) for v in bad[0])
        raise fail(f"query_weights of content {c + 1}, letter {a + 1}, position {q + 1} is {w[c, a, q]!r} "
                   f"(weights are finite and >= 0)")
    mult = content_multiplicities(fam)
    stray = np.argwhere((mult[:, :, None] == 0) & (w != 0))
    if stray.size:
        c, a, q = (int(v) for v in stray[0])
        raise fail(f"query_weights of content {c + 1} is {w[c, a, q]!r} at letter {a + 1}, position {q + 1}, "
                   f"but that content holds no row with letter {a + 1} (such entries must be 0)")
    totals = np.einsum("ca,caq->c", mult.astype(float), w)
    empty = np.flatnonzero(~(totals > 0))
    if empty.size:
        raise fail(f"query_weights of content {int(empty[0]) + 1} are all 0 (every input needs a distribution "
                   f"over its positions)")
    return w


def _differ(fam) -> np.ndarray:
    """``D[a, b, q]``: do letters ``a`` and ``b`` differ at position ``q``?"""
    arr = np.array([list(s) for s in fam.letters])
    return arr[:, None, :] != arr[None, :, :]


def pair_cost_matrices(fam, weights, i: int, js: np.ndarray, differ=None) -> np.ndarray:
    """``C[k, r, s]``: the cost of matching row ``r`` of content ``i`` with row ``s`` of content ``js[k]``."""
    D = _differ(fam) if differ is None else differ
    ci = np.asarray(fam.contents[i], dtype=np.int64)
    cj = np.asarray([fam.contents[j] for j in js], dtype=np.int64).reshape(len(js), -1)
    pi = weights[i, ci, :]                                   # (n, L)
    pj = weights[np.asarray(js)[:, None], cj, :]             # (J, n, L)
    root = np.sqrt(pi[None, :, None, :] * pj[:, None, :, :])
    mask = D[ci[None, :, None], cj[:, None, :], :]           # (J, n, n, L)
    return np.einsum("krsq,q->krs", root * mask, 1.0 / np.asarray(fam.costs, dtype=float))


def _assign(C: np.ndarray) -> np.ndarray:
    """Optimal assignment (column of each row) of every matrix in the batch."""
    from scipy.optimize import linear_sum_assignment

    out = np.empty(C.shape[:2], dtype=np.int64)
    for k in range(C.shape[0]):
        out[k] = linear_sum_assignment(C[k])[1]
    return out


def _potential_floor(C: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """A lower bound on the assignment cost of each ``C[k]`` from potentials built around ``sigma[k]``.

    With ``r(s)`` the row matched to column ``s``, the conditions ``u_r + v_s ≤ C_rs`` with equality
    on the matching reduce to ``v_s − v_s' ≤ C[r(s'), s] − C[r(s'), s']``: shortest paths from a
    source joined to every column (Floyd–Warshall, batched).  Then ``u_r = min_s (C_rs − v_s)``
    makes the potentials feasible whatever ``v`` is, and ``Σu + Σv`` is a lower bound.
    """
    B, n, _ = C.shape
    ar = np.arange(n)
    rinv = np.empty_like(sigma)
    rinv[np.arange(B)[:, None], sigma] = ar[None, :]
    Cr = np.take_along_axis(C, rinv[:, :, None], axis=1)         # Cr[k, s', :] = C[k, r(s'), :]
    D = Cr - Cr[:, ar, ar][:, :, None]
    D[:, ar, ar] = np.minimum(D[:, ar, ar], 0.0)
    for k in range(n):
        np.minimum(D, D[:, :, k:k + 1] + D[:, k:k + 1, :], out=D)
    v = D.min(axis=1)
    u = (C - v[:, None, :]).min(axis=2)
    scale = np.abs(C).max(axis=(1, 2)) + np.abs(v).max(axis=1)
    return u.sum(axis=1) + v.sum(axis=1) - 8.0 * n * np.finfo(float).eps * scale


def matching_floor(fam, weights, floors: bool = True) -> dict:
    """For every pair of contents with different outputs: the assignment and a proved floor of its cost.

    Returns ``pairs`` ``(P, 2)`` content indices (smaller output rank first), ``value`` the cost of the
    assignment found, ``floor`` the potential bound (``floor <= `` the least cost of any pair of
    inputs with those contents), and ``assignment`` ``(P, n)`` (row ``r`` of the first content is
    matched to row ``assignment[k, r]`` of the second, both in sorted-content order).  With
    ``floors=False`` (a solver looking for cuts) ``floor`` is not computed and is empty.
    """
    ranks = output_ranks(fam)
    n = fam.n
    D = _differ(fam)
    per = max(1, _BATCH_ENTRIES // max(1, n * n * fam.row_length))
    pairs, values, bounds, assigns = [], [], [], []
    for i in range(len(fam.contents)):
        js = np.flatnonzero(ranks > ranks[i])
        for start in range(0, js.size, per):
            chunk = js[start:start + per]
            C = pair_cost_matrices(fam, weights, i, chunk, D)
            sigma = _assign(C)
            values.append(np.take_along_axis(C, sigma[:, :, None], axis=2)[:, :, 0].sum(axis=1))
            if floors:
                bounds.append(_potential_floor(C, sigma))
            assigns.append(sigma)
            pairs.append(np.column_stack([np.full(chunk.size, i), chunk]))
    if not pairs:
        empty = np.zeros(0)
        return {"pairs": np.zeros((0, 2), dtype=np.int64), "value": empty, "floor": empty,
                "assignment": np.zeros((0, n), dtype=np.int64)}
    return {"pairs": np.concatenate(pairs), "value": np.concatenate(values),
            "floor": np.concatenate(bounds) if floors else np.zeros(0),
            "assignment": np.concatenate(assigns)}


def minimax_upper(fam, weights) -> dict:
    """The upper bound ``max_c S_c / φ`` on ADV of ``fam`` from invariant query weights (module docstring).

    ``weights`` must pass :func:`check_weights`.  Returns ``upper``, ``phi`` (the proved floor of
    the smallest pair sum), ``phi_found`` (the smallest assignment value: ``phi <= phi_found``, and
    a difference beyond rounding means the potentials were poor), ``load`` (``max_c S_c``),
    ``worst_pair`` (the content pair of ``phi``, 0-based) and ``content_pairs``.
    """
    w = np.asarray(weights, dtype=np.float64)
    mult = content_multiplicities(fam).astype(float)
    load = float(np.einsum("ca,caq->c", mult, w).max())
    m = matching_floor(fam, w)
    if m["floor"].size == 0:
        return {"upper": None, "phi": 0.0, "phi_found": 0.0, "load": load, "worst_pair": None, "content_pairs": 0}
    k = int(np.argmin(m["floor"]))
    phi = float(m["floor"][k])
    return {"upper": load / phi if phi > 0 else None, "phi": phi, "phi_found": float(m["value"].min()),
            "load": load, "worst_pair": tuple(int(v) for v in m["pairs"][k]), "content_pairs": int(m["floor"].size)}
