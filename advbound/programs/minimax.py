"""The positive adversary bound ADV of interchangeable rows, as a minimax program solved by cutting planes.

For a function of ``n`` interchangeable rows (:class:`~advbound.functions.rowfamily.RowFamily`),
the minimax form of ADV (:mod:`advbound.evidence.minimaxcheck`) has one variable per
``(content, letter, position)``: ``w[c, a, q]``, the weight an input of content ``c`` puts on
position ``q`` of each of its rows with letter ``a``.  The program

    maximise ``t``  subject to  ``Σ_{rows} Σ_{q: a_q ≠ b_q} √(w[c_x, a, q] w[c_y, b, q]) / c_q ≥ t``
    for every pair orbit ``(x, y)`` with different outputs, and ``Σ_a mult_c(a) Σ_q w[c, a, q] = 1``,

is convex (a geometric mean is concave), and ADV = 1/t*.  Every square root is a rotated
second-order cone ``s² ≤ w_u w_v``, shared by all the pair orbits that use it.

Cutting planes
--------------
The pair orbits are far too many to list (2.3 million for 12 rows at T = 24), but for given
weights the worst pair orbit of two contents is a minimum-cost assignment of rows, which
:func:`advbound.evidence.minimaxcheck.matching_floor` solves for every content pair.  So the
program starts from the worst pair orbit of every content pair under uniform weights, and
repeats: solve (CLARABEL) → weights and ``t`` → find, for every content pair, its worst pair
orbit under the new weights → add those that violate ``≥ t``.  Each relaxation gives
``t_k ≥ t*`` and the weights of each round give ``φ_k ≤ t*``; it stops when
``(t_k − φ_k) / t_k ≤ tol``.

What is reported
----------------
Neither ``t_k`` nor ``φ_k`` as such.  The *upper* bound is
:func:`~advbound.evidence.minimaxcheck.minimax_upper` of the best weights (a proved floor of φ
by assignment potentials).  The *lower* bound comes from an adversary matrix built from the
multipliers ``μ`` of the cut constraints: ``Γ_xy = (μ_k / N_k) / √(m_x m_y)`` on pair orbit ``k``
(``N_k`` pairs), with ``m_x`` the multiplier mass at ``x``.  Stationarity of the minimax program
makes ``‖Γ∘Δ_i‖ ≤ t`` by the Schur test with weights ``√p`` while ``‖Γ‖ ≥ 1``; the reported
number is the ratio of that Γ computed by quotient norms
(:func:`advbound.evidence.orbitquotient.support_norms`: Perron roots, exact for Γ ≥ 0), which
holds whatever the solver did.
"""

from __future__ import annotations

import dataclasses
import math
import time
import warnings
from collections import Counter

import numpy as np
import scipy.sparse as sp

from advbound.errors import InvalidFunctionError
from advbound.evidence.minimaxcheck import content_multiplicities, matching_floor

__all__ = ["MinimaxPoint", "solve_minimax", "gamma_from_multipliers", "solve_minimax_rows"]


@dataclasses.dataclass(frozen=True, eq=False)
class MinimaxPoint:
    """The outcome of :func:`solve_minimax`.

    ``weights`` the best query weights found ``(R, A, L)``; ``keys`` ``(K, n, 2)`` the pair orbits of
    the cuts and ``multipliers`` their duals in the last relaxation; ``t`` its value; ``phi`` the
    smallest pair sum of ``weights`` (assignment value); ``status`` ``"optimal"`` when the gap closed,
    ``"inaccurate"`` when the rounds ran out, or CLARABEL's status when it failed.
    """

    weights: np.ndarray
    keys: np.ndarray
    multipliers: np.ndarray
    t: float
    phi: float
    status: str
    rounds: int
    history: tuple
    seconds: float
    version: str


class _Layout:
    """Variable indices: one ``w`` per (content, letter it holds, position); one ``s`` per used square root."""

    def __init__(self, fam):
        self.fam = fam
        self.mult = content_multiplicities(fam)
        R, A, L = len(fam.contents), len(fam.letters), fam.row_length
        self.index = -np.ones((R, A, L), dtype=np.int64)
        held = np.argwhere(self.mult > 0)
        self.index[held[:, 0], held[:, 1], :] = np.arange(held.shape[0] * L).reshape(-1, L)
        self.n_w = held.shape[0] * L
        arr = np.array([list(s) for s in fam.letters])
        self.differ = [[np.flatnonzero(arr[a] != arr[b]) for b in range(A)] for a in range(A)]
        self.roots: dict = {}
        self.inv_cost = 1.0 / np.asarray(fam.costs, dtype=float)

    def normalisation(self) -> sp.csr_matrix:
        rows, cols, vals = [], [], []
        R, A, L = self.index.shape
        for c in range(R):
            for a in np.flatnonzero(self.mult[c]):
                rows += [c] * L
                cols += self.index[c, a].tolist()
                vals += [float(self.mult[c, a])] * L
        return sp.csr_matrix((vals, (rows, cols)), shape=(R, self.n_w))

    def cut_row(self, i: int, j: int, key) -> dict:
        """Coefficients of the ``s`` variables in the cut of pair orbit ``key`` (contents ``i``, ``j``)."""
        row: dict = {}
        for (a, b), t in Counter(map(tuple, key)).items():
            for q in self.differ[a][b]:
                u, v = int(self.index[i, a, q]), int(self.index[j, b, q])
                s = self.roots.setdefault((u, v), len(self.roots))
                row[s] = row.get(s, 0.0) + t * self.inv_cost[q]
        return row

    def weights(self, w: np.ndarray) -> np.ndarray:
        out = np.zeros(self.index.shape)
        held = self.index >= 0
        out[held] = np.maximum(w[self.index[held]], 0.0)
        return out


def _clarabel_version() -> str:
    try:
        import clarabel
    except ImportError:   # pragma: no cover - CLARABEL is a core dependency
        return ""
    return str(getattr(clarabel, "__version__", ""))


def _key(fam, i: int, j: int, sigma) -> tuple:
    ci, cj = fam.contents[i], fam.contents[j]
    return tuple(sorted((ci[r], cj[s]) for r, s in enumerate(sigma)))


def _relaxation(lay: _Layout, cuts: list, norm: sp.csr_matrix, tol: float, verbose: bool):
    """Solve the relaxation over ``cuts``; return (status, t, w, multipliers, version)."""
    import cvxpy as cp

    rows = [c[3] for c in cuts]
    S = len(lay.roots)
    r_idx = np.repeat(np.arange(len(rows)), [len(r) for r in rows])
    s_idx = np.fromiter((k for r in rows for k in r), dtype=np.int64, count=int(r_idx.size))
    vals = np.fromiter((v for r in rows for v in r.values()), dtype=float, count=int(r_idx.size))
    M = sp.csr_matrix((vals, (r_idx, s_idx)), shape=(len(rows), S))
    pairs = np.array(list(lay.roots), dtype=np.int64).reshape(S, 2)
    order = np.argsort(np.fromiter(lay.roots.values(), dtype=np.int64, count=S))
    pairs = pairs[order]
    w, s, t = cp.Variable(lay.n_w, nonneg=True), cp.Variable(S, nonneg=True), cp.Variable()
    wu, wv = w[pairs[:, 0]], w[pairs[:, 1]]
    cuts_c = M @ s >= t
    cons = [norm @ w == 1, cuts_c, cp.SOC(wu + wv, cp.vstack([2 * s, wu - wv]), axis=0)]
    prob = cp.Problem(cp.Maximize(t), cons)
    opts = dict(tol_gap_abs=tol * 1e-2, tol_gap_rel=tol * 1e-2, tol_feas=tol * 1e-2) if tol else {}
    try:
        with warnings.catch_warnings():   # an inaccurate relaxation is recorded in the status, not warned about
            warnings.simplefilter("ignore", UserWarning)
            prob.solve(solver="CLARABEL", verbose=verbose, **opts)
    except cp.error.SolverError as err:
        return f"solver error: {str(err)[:80]}", None, None, None, ""
    version = _clarabel_version()
    if w.value is None or t.value is None:
        return str(prob.status), None, None, None, version
    mu = np.maximum(np.asarray(cuts_c.dual_value, dtype=float).ravel(), 0.0)
    return str(prob.status), float(t.value), np.asarray(w.value, dtype=float), mu, version


def solve_minimax(fam, tol: float = 1e-6, max_rounds: int = 60, max_cuts_per_round: int | None = None,
                  verbose: bool = False, progress=None) -> MinimaxPoint:
    """Solve the minimax program of ``fam`` by cutting planes (module docstring).

    ``progress(round, t, phi, cuts)``, when given, is called after every round (the CLI prints it).
    """
    t0 = time.perf_counter()
    if len(fam.labels) < 2:
        raise InvalidFunctionError("the function is constant on its domain: its adversary bound is 0")
    lay = _Layout(fam)
    norm = lay.normalisation()
    mult = lay.mult.astype(float)
    uniform = np.where(lay.index >= 0, 1.0, 0.0)
    uniform /= np.einsum("ca,caq->c", mult, uniform)[:, None, None]
    seen: dict = {}
    cuts: list = []

    def add_cuts(m, threshold):
        order = np.argsort(m["value"])
        added = 0
        for k in order:
            if m["value"][k] >= threshold or (max_cuts_per_round and added >= max_cuts_per_round):
                break
            i, j = (int(v) for v in m["pairs"][k])
            key = _key(fam, i, j, m["assignment"][k])
            if key in seen:
                continue
            seen[key] = len(cuts)
            cuts.append((i, j, key, lay.cut_row(i, j, key)))
            added += 1
        return added

    first = matching_floor(fam, uniform, floors=False)
    add_cuts(first, np.inf)
    best_w, best_phi = uniform, float(first["value"].min())
    history, status, t, mu, version = [], "inaccurate", math.inf, np.zeros(0), ""
    for rnd in range(1, max_rounds + 1):
        st, t_new, w, mu_new, version = _relaxation(lay, cuts, norm, tol, verbose)
        if t_new is None or st not in ("optimal", "optimal_inaccurate"):
            status = "failed" if t_new is None else "inaccurate"
            history.append({"round": rnd, "status": st, "cuts": len(cuts)})
            break
        t, mu = t_new, mu_new
        weights = lay.weights(w)
        m = matching_floor(fam, weights, floors=False)
        phi = float(m["value"].min())
        if phi > best_phi:
            best_w, best_phi = weights, phi
        history.append({"round": rnd, "status": st, "t": t, "phi": phi, "cuts": len(cuts)})
        if progress is not None:
            progress(rnd, t, phi, len(cuts))
        if (t - best_phi) <= tol * t:
            status = "optimal" if st == "optimal" else "inaccurate"
            break
        if add_cuts(m, t * (1 - tol / 2)) == 0:
            status = "inaccurate"
            break
    keys = np.array([c[2] for c in cuts], dtype=np.int64).reshape(len(cuts), fam.n, 2)
    return MinimaxPoint(weights=best_w, keys=keys, multipliers=mu, t=t, phi=best_phi, status=status,
                        rounds=len(history), history=tuple(history), seconds=time.perf_counter() - t0,
                        version=version)


def gamma_from_multipliers(fam, keys: np.ndarray, multipliers: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Γ per pair orbit and the test vector per content from the cut multipliers (module docstring).

    Returns ``(gamma, rho)``: ``gamma[k] = (μ_k / N_k) / √(m_i m_j)`` with ``m_i = M_i / |c_i|`` the
    multiplier mass per input of content ``i``, and ``rho = m`` (so ``δ = √m``).
    """
    n = fam.n
    index = {c: r for r, c in enumerate(fam.contents)}
    sizes = np.array([fam.orbit_size(c) for c in fam.contents], dtype=float)
    mu = np.maximum(np.asarray(multipliers, dtype=float), 0.0)
    ends = np.array([[index[tuple(sorted(a for a, _ in key))], index[tuple(sorted(b for _, b in key))]]
                     for key in np.asarray(keys).tolist()], dtype=np.int64).reshape(-1, 2)
    fact = [math.factorial(i) for i in range(n + 1)]
    N = np.array([fact[n] / math.prod(fact[t] for t in Counter(map(tuple, key)).values())
                  for key in np.asarray(keys).tolist()], dtype=float)
    mass = np.zeros(len(fam.contents))
    np.add.at(mass, ends[:, 0], mu)
    np.add.at(mass, ends[:, 1], mu)
    m = mass / sizes
    with np.errstate(divide="ignore", invalid="ignore"):
        gamma = np.where(mu > 0, (mu / N) / np.sqrt(m[ends[:, 0]] * m[ends[:, 1]]), 0.0)
    return np.nan_to_num(gamma), m


def _refit_if_short(fam, pt: MinimaxPoint, cert, rep, rho: np.ndarray, tol: float, verify):
    """Re-fit Γ by :mod:`advbound.programs.minimax_refit` when the checked lower bound of the
    multipliers' Γ falls short of the checked upper bound by more than ``10·tol``; keep whichever
    certificate the checker proves more for.  Returns ``(cert, rep)``."""
    from advbound.programs.minimax_refit import refit_gamma

    if not rep.passed or rep.upper - rep.lower <= 10 * tol * rep.upper:
        return cert, rep
    again = refit_gamma(fam, pt.keys, pt.weights, rho)
    if again is None:
        return cert, rep
    keep = again > 0
    meta = dict(cert.metadata, minimax=dict(cert.metadata["minimax"], gamma="Schur-test refit"))
    other = dataclasses.replace(cert, pair_keys=pt.keys[keep], gamma=again[keep], metadata=meta)
    rep2 = verify(other)
    return (other, rep2) if rep2.passed and rep2.lower > rep.lower else (cert, rep)


def solve_minimax_rows(f, bound: str = "positive", tol: float = 1e-6, max_iters: int | None = None,
                       verbose: bool = False, dense_check_limit: int | None = None, solver: str | None = None,
                       **options):
    """Solve ADV of ``f`` (interchangeable rows) by the minimax program; return a :class:`~advbound.result.SolveResult`.

    ``f`` is a :class:`PartialFunction` with interchangeable rows or a
    :class:`~advbound.functions.rowfamily.RowFamily`.  The program is solved in one piece by
    :func:`advbound.programs.minimax_transport.solve_transport` (each content pair's assignment by its
    LP dual); only if that returns no point do the cutting planes of :func:`solve_minimax` run, with
    ``max_iters`` capping their rounds (default 60).  The solution becomes an orbit certificate with
    Γ on the pair orbits of the multipliers (re-fitted by :mod:`advbound.programs.minimax_refit` when
    that proves more) and the query weights, and the reported numbers are
    :func:`advbound.evidence.orbitcheck.verify_orbit_certificate`'s, never the solver's.
    """
    from advbound import status as _status
    from advbound.evidence.orbitcert import OrbitCertificate
    from advbound.evidence.orbitcheck import DENSE_CHECK_LIMIT, verify_orbit_certificate
    from advbound.programs.rowsym import row_family_for
    from advbound.result import SolveResult, SolverStats

    if bound != "positive":
        raise InvalidFunctionError("method 'minimax' solves the positive bound only (bound='positive'); "
                                   "use method 'rows' for ADV±")
    fam = row_family_for(f, "minimax", options, solver)
    from advbound.programs.minimax_transport import solve_transport

    pt, program = solve_transport(fam, tol=tol, verbose=verbose), "transport"
    if pt.status == "failed":   # the one-solve program did not return a point: the cutting planes, round by round
        pt, program = solve_minimax(fam, tol=tol, max_rounds=60 if max_iters is None else int(max_iters),
                                    verbose=verbose), "cutting planes"
    iters = pt.history[0].get("iterations", pt.rounds) if program == "transport" and pt.history else pt.rounds
    stats = SolverStats(name="CLARABEL", version=pt.version, time=pt.seconds, iterations=iters,
                        tolerances={"tol": float(tol)}, options={"program": f"minimax ({program})"})
    base = dict(bound=bound, domain_size=fam.size, solver_stats=stats,
                objective=1.0 / pt.t if np.isfinite(pt.t) and pt.t > 0 else None)
    if pt.keys.shape[0] == 0 or not np.any(pt.multipliers > 0):
        return SolveResult(message=f"the minimax program returned no multipliers ({pt.status})",
                           status=_status.FAILED, **base)
    gamma, rho = gamma_from_multipliers(fam, pt.keys, pt.multipliers)
    keep = gamma > 0
    meta = {"description": fam.description, "bound": bound, "method": "minimax",
            "solver": {"name": "CLARABEL", "version": pt.version, "tol": float(tol), "status": pt.status,
                       "iterations": iters, "time": float(pt.seconds)},
            "minimax": {"program": program, "gamma": "multipliers", "rounds": pt.rounds, "cuts": int(pt.keys.shape[0]),
                        "t": pt.t, "phi": pt.phi, "history": list(pt.history)}}
    alphabet = tuple(sorted(set("".join(fam.letters))))
    cert = OrbitCertificate(alphabet=alphabet, letters=tuple(fam.letters),
                            contents=np.array(fam.contents, dtype=np.int64), outputs=tuple(fam.outputs),
                            costs=np.asarray(fam.costs, dtype=float), pair_keys=pt.keys[keep], gamma=gamma[keep],
                            rho=rho if np.any(rho > 0) else np.ones_like(rho),
                            metadata=meta, query_weights=pt.weights)
    limit = DENSE_CHECK_LIMIT if dense_check_limit is None else dense_check_limit
    def verify(c):
        return verify_orbit_certificate(c, dense_limit=limit)

    cert, rep = _refit_if_short(fam, pt, cert, verify(cert), rho, tol, verify)
    cert = dataclasses.replace(cert, metadata=dict(cert.metadata, claimed_lower=rep.lower, claimed_upper=rep.upper))
    if not rep.passed:
        return SolveResult(message=f"check(s) {', '.join(rep.failed_checks())} failed on the orbit certificate",
                           status=_status.UNVERIFIED, certificate=cert, verification=rep, **base)
    rel = (rep.upper - rep.lower) / max(abs(rep.upper), 1e-300)
    # the bounds are checked, so the verified gap decides; the relaxations' own status is in the message
    st = _status.OPTIMAL if rel <= max(1e-4, 1e2 * tol) else _status.INACCURATE
    where = "and densely on the expanded Γ" if rep.dense_lower is not None else f"(|D| = {fam.size}, not expanded)"
    msg = (f"lower bound from quotient norms of Γ {where}; upper bound from the query weights (minimax witness); "
           f"relative gap {rel:.2g}; {program} program {pt.status}, {pt.keys.shape[0]} pair orbits in Γ"
           + (f" after {pt.rounds} rounds" if program == "cutting planes" else ""))
    return SolveResult(message=msg, status=st, lower=rep.lower, upper=rep.upper, certificate=cert,
                       verification=rep, **base)
