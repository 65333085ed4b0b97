"""The minimax program of interchangeable rows in one solve: each content pair's assignment by its LP dual.

:mod:`advbound.programs.minimax` asks, for every pair of contents ``(i, j)`` with different
outputs, that the *cheapest* way of matching the rows of an input of content ``i`` with those of an
input of content ``j`` costs at least ``t``: ``min_σ Σ_r C_{a_r, b_σ(r)}(w) ≥ t``, where ``C_ab`` is
the sum of ``√(w[i, a, q] w[j, b, q]) / c_q`` over the positions where letters ``a`` and ``b``
differ.  The cutting planes of that module meet this constraint one worst permutation at a time.

Here it is written out once.  Rows with equal letters are interchangeable, so the permutations are
the integer points of the transportation polytope with margins ``m_i(a)`` (rows of content ``i``
holding ``a``) and ``m_j(b)``; that polytope is integral, so the minimum over permutations equals
the minimum over the polytope, and by LP duality

    ``min_σ Σ_r C_{a_r b_σ(r)} ≥ t``  ⇔  there are ``u_a, v_b`` with
    ``Σ_a m_i(a) u_a + Σ_b m_j(b) v_b ≥ t``  and  ``u_a + v_b ≤ C_ab(w)`` for every letter pair.

``C_ab`` is concave in ``w``, so the whole program stays convex: one pair of potential vectors per
content pair, one linear constraint per letter pair, and one rotated cone per square root.  It is
exact in one CLARABEL solve, with no rounds.

The multipliers of ``u_a + v_b ≤ C_ab`` form, for each content pair, a transport plan ``π`` with
margins ``μ m_i`` and ``μ m_j`` (``μ`` the multiplier of the pair's first constraint).  A
Birkhoff–von Neumann decomposition writes ``π = Σ_k θ_k N_k`` with integer plans ``N_k``; each is a
pair orbit (which letter of ``i`` is matched with which letter of ``j``, how often), and the
``θ_k`` are exactly the cut multipliers the cutting planes would have ended with.  So the result
is a :class:`~advbound.programs.minimax.MinimaxPoint` and is checked the same way: the lower bound
from the adversary matrix of the multipliers, the upper bound from the weights' assignment floor.
"""

from __future__ import annotations

import time
import warnings

import numpy as np
import scipy.sparse as sp
from scipy.optimize import linear_sum_assignment

from advbound.errors import InvalidFunctionError
from advbound.evidence.minimaxcheck import matching_floor, output_ranks
from advbound.functions.sizing import check_memory

__all__ = ["transport_layout", "transport_estimate", "solve_transport", "decompose_plan"]


def transport_layout(fam) -> dict:
    """The program's index arrays, without solving (also what :func:`solve_transport` sizes from).

    Returns a dict: ``layout`` (the weight indices, :class:`advbound.programs.minimax._Layout`);
    ``pairs`` ``(P, 2)`` the content pairs with different outputs; ``pot_pair`` and ``pot_mult`` the
    content pair and the letter multiplicity of each potential ``u_a`` / ``v_b``; ``edge_pair``,
    ``edge_u``, ``edge_v``, ``edge_a``, ``edge_b`` one entry per letter pair (its content pair, its two
    potentials, its two letters); ``roots`` ``(S, 2)`` the two weight indices under each square root;
    ``edge_roots`` the sparse ``(E, S)`` matrix of ``1/c_q`` coefficients of ``C_ab``.
    """
    from advbound.programs.minimax import _Layout

    lay = _Layout(fam)
    ranks = output_ranks(fam)
    held = [np.flatnonzero(lay.mult[c]) for c in range(len(fam.contents))]
    pairs = [(i, j) for i in range(len(fam.contents)) for j in np.flatnonzero(ranks > ranks[i])]
    pot_pair, pot_mult, e_pair, e_u, e_v, e_a, e_b = [], [], [], [], [], [], []
    n_pot = 0
    for p, (i, j) in enumerate(pairs):
        ai, bj = held[i], held[j]
        pu = n_pot + np.arange(ai.size)
        pv = n_pot + ai.size + np.arange(bj.size)
        n_pot += ai.size + bj.size
        pot_pair.append(np.full(ai.size + bj.size, p))
        pot_mult.append(np.concatenate([lay.mult[i, ai], lay.mult[j, bj]]))
        e_pair.append(np.full(ai.size * bj.size, p))
        e_u.append(np.repeat(pu, bj.size))
        e_v.append(np.tile(pv, ai.size))
        e_a.append(np.repeat(ai, bj.size))
        e_b.append(np.tile(bj, ai.size))
    cat = (lambda xs: np.concatenate(xs).astype(np.int64)) if pairs else (lambda xs: np.zeros(0, np.int64))
    e_pair, e_u, e_v, e_a, e_b = map(cat, (e_pair, e_u, e_v, e_a, e_b))
    pairs_arr = np.array(pairs, dtype=np.int64).reshape(-1, 2)
    # square roots: one per (edge, differing position), deduplicated by their two w indices
    ci, cj = pairs_arr[e_pair, 0], pairs_arr[e_pair, 1]
    letters = np.array([list(s) for s in fam.letters])
    D = letters[e_a] != letters[e_b]                                   # (E, L)
    ed, q = np.nonzero(D)
    r_u = lay.index[ci[ed], e_a[ed], q]
    r_v = lay.index[cj[ed], e_b[ed], q]
    r_coef = lay.inv_cost[q]
    key = np.column_stack([r_u, r_v])
    roots, which = np.unique(key, axis=0, return_inverse=True) if key.size else (np.zeros((0, 2), np.int64),
                                                                                 np.zeros(0, np.int64))
    edge_roots = sp.csr_matrix((r_coef, (ed, np.asarray(which).ravel())), shape=(e_pair.size, roots.shape[0]))
    return {"layout": lay, "pairs": pairs_arr, "pot_pair": cat(pot_pair), "pot_mult": cat(pot_mult),
            "edge_pair": e_pair, "edge_u": e_u, "edge_v": e_v, "edge_a": e_a, "edge_b": e_b,
            "roots": roots.astype(np.int64), "edge_roots": edge_roots}


#: Peak memory and CLARABEL time per square root, measured on OR of 10 and 12 rows at T = 20 and 24
#: (128k roots: 0.84 GB, 87 s; 529k roots: 3.0 GB, 446 s; one core).
_BYTES_PER_ROOT, _BASE_BYTES, _SECONDS_PER_ROOT = 5_600, 150 * 2**20, 8.5e-4


def transport_estimate(layout: dict) -> dict:
    """Memory and rough time of :func:`solve_transport` from its layout (for ``check_memory``)."""
    S = int(layout["roots"].shape[0])
    return {"what": f"the one-solve minimax program ({S} square roots, {layout['edge_pair'].size} letter pairs)",
            "solver": "CLARABEL", "memory_bytes": _BASE_BYTES + _BYTES_PER_ROOT * S,
            "seconds": _SECONDS_PER_ROOT * S, "memory_formula": f"{_BYTES_PER_ROOT} bytes per square root",
            "time_formula": f"{_SECONDS_PER_ROOT:g} s per square root"}


def decompose_plan(plan: np.ndarray, left: np.ndarray, right: np.ndarray, rel: float = 1e-10) -> list:
    """Birkhoff–von Neumann: write a transport plan as ``Σ θ_k N_k`` with integer plans ``N_k``.

    ``plan`` ``(A, B)`` has row sums ``μ·left`` and column sums ``μ·right`` (integer margins, both
    summing to ``n``).  Returns ``[(θ, N)]`` with ``Σ θ = μ`` up to entries below ``rel·μ`` (dropped).
    Each step expands the plan to an ``n × n`` doubly stochastic matrix, finds a permutation in its
    support (an assignment maximising the smallest entry is not needed: any support permutation
    zeroes one entry) and subtracts it.
    """
    P = np.maximum(np.asarray(plan, dtype=float), 0.0)
    left, right = np.asarray(left, dtype=np.int64), np.asarray(right, dtype=np.int64)
    mu = P.sum()
    out = []
    if mu <= 0:
        return out
    ra, rb = np.repeat(np.arange(left.size), left), np.repeat(np.arange(right.size), right)
    for _ in range(P.size + 1):
        if P.sum() <= rel * mu:
            break
        X = P[ra][:, rb] / (left[ra][:, None] * right[rb][None, :])
        cost = np.where(X > rel * mu / (left.size * right.size), -np.log(np.maximum(X, 1e-300)), 1e6)
        r, s = linear_sum_assignment(cost)
        if np.any(cost[r, s] >= 1e6):
            break
        N = np.zeros_like(P)
        np.add.at(N, (ra[r], rb[s]), 1.0)
        theta = float(np.min(P[N > 0] / N[N > 0]))
        out.append((theta, N.astype(np.int64)))
        P = np.maximum(P - theta * N, 0.0)
        P[P <= rel * mu * 1e-3] = 0.0
    return out


def _keys_from_plans(fam, lay, pairs, edge_pair, edge_a, edge_b, pi, rel) -> tuple[np.ndarray, np.ndarray]:
    """Decompose every content pair's plan into pair orbits; return ``(keys (K, n, 2), multipliers (K,))``."""
    order = np.argsort(edge_pair, kind="stable")
    starts = np.searchsorted(edge_pair[order], np.arange(pairs.shape[0] + 1))
    found: dict = {}
    for p, (i, j) in enumerate(pairs.tolist()):
        sel = order[starts[p]:starts[p + 1]]
        if sel.size == 0 or pi[sel].sum() <= 0:
            continue
        ai, bj = np.unique(edge_a[sel]), np.unique(edge_b[sel])
        plan = np.zeros((ai.size, bj.size))
        plan[np.searchsorted(ai, edge_a[sel]), np.searchsorted(bj, edge_b[sel])] = pi[sel]
        for theta, N in decompose_plan(plan, lay.mult[i, ai], lay.mult[j, bj], rel):
            ra, rb = np.nonzero(N)
            key = tuple(sorted((int(ai[x]), int(bj[y])) for x, y in zip(ra, rb) for _ in range(int(N[x, y]))))
            found[key] = found.get(key, 0.0) + theta
    keys = np.array(list(found), dtype=np.int64).reshape(len(found), fam.n, 2)
    return keys, np.fromiter(found.values(), dtype=float, count=len(found))


def solve_transport(fam, tol: float = 1e-6, verbose: bool = False):
    """Solve the minimax program of ``fam`` in one convex program (module docstring).

    Returns a :class:`~advbound.programs.minimax.MinimaxPoint` (``rounds = 1``): the weights, the pair
    orbits and multipliers of the decomposed transport plans, ``t`` the program's value and ``phi``
    the weights' least pair sum by assignments.
    """
    import cvxpy as cp

    from advbound.programs.minimax import MinimaxPoint, _clarabel_version

    t0 = time.perf_counter()
    if len(fam.labels) < 2:
        raise InvalidFunctionError("the function is constant on its domain: its adversary bound is 0")
    L = transport_layout(fam)
    check_memory(transport_estimate(L), hint="the one-solve minimax program grows with the square roots it "
                 "needs (one per letter pair and differing position of every content pair)")
    lay, pairs = L["layout"], L["pairs"]
    P, E, S, U = pairs.shape[0], L["edge_pair"].size, L["roots"].shape[0], L["pot_pair"].size
    pair_m = sp.csr_matrix((L["pot_mult"].astype(float), (L["pot_pair"], np.arange(U))), shape=(P, U))
    rows = np.concatenate([np.arange(E), np.arange(E)])
    edge_m = sp.csr_matrix((np.ones(2 * E), (rows, np.concatenate([L["edge_u"], L["edge_v"]]))), shape=(E, U))
    w, s, pot, t = cp.Variable(lay.n_w, nonneg=True), cp.Variable(S, nonneg=True), cp.Variable(U), cp.Variable()
    wu, wv = w[L["roots"][:, 0]], w[L["roots"][:, 1]]
    pair_c = pair_m @ pot >= t
    edge_c = L["edge_roots"] @ s - edge_m @ pot >= 0
    cons = [lay.normalisation() @ w == 1, pair_c, edge_c, cp.SOC(wu + wv, cp.vstack([2 * s, wu - wv]), axis=0)]
    prob = cp.Problem(cp.Maximize(t), cons)
    # a hundredth of tol, as the cutting planes use: with a tenth the checked gap of 8 rows at T = 16 grows
    # from 7e-7 to 9e-6 and the solve is no faster
    opts = dict(tol_gap_abs=tol * 1e-2, tol_gap_rel=tol * 1e-2, tol_feas=tol * 1e-2) if tol else {}
    status, version, iterations = "failed", _clarabel_version(), 0
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            prob.solve(solver="CLARABEL", verbose=verbose, **opts)
        status = str(prob.status)
        iterations = int(getattr(prob.solver_stats, "num_iters", 0) or 0)
    except cp.error.SolverError as err:
        status = f"solver error: {str(err)[:80]}"
    hist = {"round": 1, "status": status, "iterations": iterations, "pairs": P, "letter_pairs": E, "roots": S}
    if w.value is None or t.value is None or edge_c.dual_value is None:
        empty = np.zeros((0, fam.n, 2), dtype=np.int64)
        return MinimaxPoint(weights=lay.weights(np.full(lay.n_w, 0.0)), keys=empty, multipliers=np.zeros(0),
                            t=float("inf"), phi=0.0, status="failed", rounds=1, history=(hist,),
                            seconds=time.perf_counter() - t0, version=version)
    weights = lay.weights(np.asarray(w.value, dtype=float))
    phi = float(matching_floor(fam, weights, floors=False)["value"].min())
    pi = np.maximum(np.asarray(edge_c.dual_value, dtype=float).ravel(), 0.0)
    keys, mu = _keys_from_plans(fam, lay, pairs, L["edge_pair"], L["edge_a"], L["edge_b"], pi, 1e-9)
    tv = float(t.value)
    hist.update(t=tv, phi=phi, cuts=int(keys.shape[0]))
    ok = status == "optimal" and (tv - phi) <= tol * tv
    return MinimaxPoint(weights=weights, keys=keys, multipliers=mu, t=tv, phi=phi,
                        status="optimal" if ok else "inaccurate", rounds=1, history=(hist,),
                        seconds=time.perf_counter() - t0, version=version)
