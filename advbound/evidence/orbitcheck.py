"""Bounds from an S_n-invariant adversary matrix given by orbits, checked in the reduced basis.

For a row family (:mod:`advbound.functions.rowfamily`) an invariant Γ is one value per pair orbit.
This module computes, without a solver and without a |D|×|D| matrix:

* :func:`orbit_lower_bound`: ``‖Γ‖ ≥ δᵀΓδ/δᵀδ`` for an invariant test vector ``δ`` (exact orbit
  sums), and ``‖Γ∘Δ_(n,p)‖`` as the largest generalised eigenvalue of ``(B_{λ,p}, G_λ)`` over the
  blocks of the representative set (:mod:`advbound.functions.rowbasis`).  The norms are exact only
  if the representative set is complete; :func:`basis_checks` tests what can be tested: the
  dimension count ``Σ_λ f^λ · (block size) = |D|`` and positive definite Gram matrices.
* :func:`orbit_upper_bound`: a weak-duality bound on ADV± from any matrices ``Z ⪰ 0``, one per
  cone of the reduced program.  It holds for *any* vectors behind the blocks, so it does not rely
  on completeness.  The coefficients of the program are derived here from the blocks, separately
  from the program's own assembly in :mod:`advbound.programs.rowsym`.

Arithmetic is float64 (LAPACK eigenvalues); nothing here is rigorous in the sense of
:mod:`advbound.evidence.rigorous`.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

__all__ = ["cone_keys", "sides", "orbit_lower_bound", "orbit_upper_bound", "pair_costs", "basis_checks",
           "OrbitReport", "verify_orbit_certificate", "expanded_gamma", "DENSE_CHECK_LIMIT"]

#: Largest |D| for which an orbit certificate is also expanded and checked densely.
DENSE_CHECK_LIMIT = 3000


def sides(basis) -> tuple[int, ...]:
    """``(1,)`` for two outputs (Γ∘Δ is bipartite, its spectrum symmetric), else ``(1, −1)``."""
    return (1,) if len(basis.family.labels) == 2 else (1, -1)


def cone_keys(basis) -> list[tuple[int, int, int]]:
    """``(position p, side s, block index)`` of every PSD cone of the reduced program, in order."""
    return [(p, side, bi) for p in range(basis.family.row_length) for side in sides(basis)
            for bi in range(len(basis.blocks))]


def trivial_basis(basis):
    """``basis`` with only the block of the trivial representation (shape ``(n − 1,)``).

    For the positive bound these are the only cones that matter: for W ≥ 0 the Perron vector of each
    ``D^(−1/2) (W∘Δ_(n,p)) D^(−1/2)`` can be taken invariant under the first ``n − 1`` rows
    (Perron–Frobenius, common knowledge), so the trivial block carries its largest eigenvalue.
    """
    n = basis.family.n
    return dataclasses.replace(basis, blocks=tuple(b for b in basis.blocks if tuple(b.shape) == (n - 1,)))


def basis_checks(basis) -> list[tuple[str, bool, str]]:
    """``(name, passed, detail)`` for the dimension count and the Gram matrices of the blocks."""
    from advbound.functions.rowbasis import check_dimensions

    total, size = check_dimensions(basis)
    out = [("dimensions", total == size, f"sum of f^lambda x block size = {total}, |D| = {size}")]
    worst = np.inf
    for blk in basis.blocks:
        g = np.asarray(blk.gram, dtype=float)
        ev = np.linalg.eigvalsh(g) / max(1.0, float(np.abs(g).max()))
        worst = min(worst, float(ev.min()))
    out.append(("gram_definite", worst > 1e-9, f"smallest scaled Gram eigenvalue {worst:.3g}"))
    return out


def orbit_lower_bound(basis, gamma: np.ndarray, rho: np.ndarray) -> dict:
    """The adversary ratio of the invariant Γ with values ``gamma`` per pair orbit.

    ``gamma_lower = δᵀΓδ / δᵀδ`` with ``δ = √ρ`` (``ρ`` one non-negative number per content), a
    lower bound on ``‖Γ‖`` for any ``ρ``; ``position_norms[p] = ‖Γ∘Δ_(n,p)‖`` from the blocks;
    ``lower = gamma_lower / max_p (norms_p / c_p)``.
    """
    import scipy.linalg as sla

    fam = basis.family
    gamma = np.asarray(gamma, dtype=float)
    rho = np.asarray(rho, dtype=float)
    cx, cz = basis.end_contents()
    num = float(np.sum(2.0 * basis.pair_counts * gamma * np.sqrt(rho[cx] * rho[cz])))
    den = float(basis.input_counts @ rho)
    gl = num / den if den > 0 else 0.0
    norms = np.zeros(fam.row_length)
    for p in range(fam.row_length):
        for blk in basis.blocks:
            B = basis.block_matrix(blk, p, gamma)
            if not B.any():
                continue
            ev = sla.eigh(B, blk.gram, eigvals_only=True)
            norms[p] = max(norms[p], float(np.max(np.abs(ev))))
    worst = float(np.max(norms / np.asarray(fam.costs)))
    return {"gamma_lower": gl, "position_norms": norms.tolist(), "lower": gl / worst if worst > 0 else 0.0}


def pair_costs(basis) -> np.ndarray:
    """``c_k``: the cheapest position at which the two inputs of pair orbit ``k`` differ."""
    fam = basis.family
    out = np.empty(basis.n_weights)
    for k, key in enumerate(basis.pair_keys):
        out[k] = min(fam.costs[p] for a, b in key if a != b for p in range(fam.row_length) if fam.differ(p, a, b))
    return out


def _gradient(basis, duals) -> tuple[np.ndarray | None, float]:
    """``(g, clipped)``: ``g = ∇ Σ ⟨Z⁺, c_p G_λ(ρ) − s B_{λ,p}(w)⟩`` over ``(w, ρ)``, ``Z⁺`` the PSD part."""
    fam, K = basis.family, basis.n_weights
    g = np.zeros(K + len(fam.contents))
    clipped = 0.0
    keys = cone_keys(basis)
    if len(duals) != len(keys):
        return None, 0.0
    for (p, side, bi), Z in zip(keys, duals):
        blk = basis.blocks[bi]
        Z = np.asarray(Z, dtype=float)
        s = len(blk.rows)
        if Z.shape != (s, s) or not np.all(np.isfinite(Z)):
            return None, 0.0
        ev, V = np.linalg.eigh((Z + Z.T) / 2.0)
        clipped = max(clipped, float(-min(ev.min(initial=0.0), 0.0)))
        Zp = (V * np.maximum(ev, 0.0)) @ V.T
        contents = np.array([r[1] for r in blk.rows], dtype=np.int64)
        np.add.at(g, K + contents, fam.costs[p] * np.sum(Zp * blk.gram, axis=1))
        for (u, v), coefs in blk.couplings.items():
            if fam.differ(p, blk.rows[u][0], blk.rows[v][0]):
                for k, coef in coefs.items():
                    g[k] -= side * 2.0 * coef * Zp[u, v]
    return g, clipped


def orbit_upper_bound(basis, bound: str, duals) -> dict:
    """A weak-duality upper bound on the optimum of the reduced program from matrices ``Z ⪰ 0``.

    With ``L(w, ρ) = Σ_k 2 n_k w_k + Σ ⟨Z, c_p G_λ(ρ) − s B_{λ,p}(w)⟩ = Σ_k e_k w_k + Σ_r g_r ρ_r``
    (each ``Z`` first projected onto the PSD cone), every feasible point has objective ``≤ L``.
    An exact dual has ``e = 0``; the residual is paid with ``|w_k| ≤ c_k √(ρ_x ρ_z) ≤ c_k (ρ_x + ρ_z)/2``
    (the 2×2 minor of ``c_p·diag(ρ) ± W∘Δ_p ⪰ 0`` at a position where the pair differs), so with
    ``Σ_r m_r ρ_r = 1``, ``ρ ≥ 0`` the objective is at most ``max_r h_r / m_r``,
    ``h_r = g_r + Σ_k |e_k| c_k ([x_k ∈ r] + [z_k ∈ r]) / 2``.  For the positive bound (``w ≥ 0``)
    only ``e_k > 0`` costs anything.

    Returns
    -------
    dict
        ``upper`` (None when a matrix is missing, misshapen or not finite), ``residual`` (max |e_k|),
        ``clipped`` (largest negative eigenvalue removed) and ``message``.
    """
    g, clipped = _gradient(basis, duals)
    if g is None:
        return {"upper": None, "residual": None, "clipped": None,
                "message": "the dual matrices do not match the cones of the program or are not finite"}
    K = basis.n_weights
    e = 2.0 * basis.pair_counts + g[:K]
    if bound == "positive":
        e = np.maximum(e, 0.0)
    cx, cz = basis.end_contents()
    pay = np.abs(e) * pair_costs(basis) / 2.0
    h = g[K:].copy()
    np.add.at(h, cx, pay)
    np.add.at(h, cz, pay)
    return {"upper": float(np.max(h / basis.input_counts)), "residual": float(np.max(np.abs(e), initial=0.0)),
            "clipped": clipped, "message": "weak duality, PSD-projected dual matrices, float64"}


@dataclasses.dataclass(frozen=True, eq=False)
class OrbitReport:
    """Outcome of :func:`verify_orbit_certificate` (the fields a dense report has, where they apply).

    ``lower`` is the reduced-basis ratio; ``dense_lower`` the ratio of the expanded Γ by
    :func:`advbound.evidence.verify.verify_certificate` when |D| allowed the expansion (else None);
    ``upper`` the weak-duality bound of the stored dual (None without one).
    """

    message: str
    passed: bool
    lower: float
    upper: float | None
    bound: str
    gamma_lower: float
    position_norms: tuple
    checks: tuple
    dense_lower: float | None = None
    binding: tuple = ()
    repair_cost: float | None = None

    def failed_checks(self) -> list[str]:
        return [name for name, ok, _ in self.checks if not ok]


def _gamma_in_basis(basis, cert) -> tuple[np.ndarray | None, str]:
    """The certificate's Γ indexed by the basis's pair orbits, or ``(None, why)``."""
    index = {k: i for i, k in enumerate(basis.pair_keys)}
    g = np.zeros(basis.n_weights)
    for i, key in enumerate(np.asarray(cert.pair_keys).tolist()):
        j = index.get(tuple(tuple(p) for p in key))
        if j is None:
            return None, f"pair orbit {i + 1} does not occur in the blocks of the family"
        g[j] = cert.gamma[i]
    return g, ""


def expanded_gamma(cert):
    """The full function and dense Γ of an orbit certificate (for |D| small enough to hold |D|²)."""
    from advbound.functions.rowbasis import expand_gamma, row_basis

    basis = row_basis(cert.family())
    g, why = _gamma_in_basis(basis, cert)
    if g is None:
        from advbound.errors import CertificateError
        raise CertificateError(f"orbit certificate: {why}")
    return expand_gamma(basis, g)


def verify_orbit_certificate(cert, *, dense_limit: int = DENSE_CHECK_LIMIT, rtol: float = 1e-6,
                             basis=None) -> OrbitReport:
    """Re-check an orbit certificate: acceptance rule, basis, lower bound, dual bound, dense cross-check.

    Checks (each a ``(name, passed, detail)`` in ``checks``): ``dimensions`` and ``gram_definite``
    (:func:`basis_checks`); ``orbits_in_basis``; ``dense_agrees`` when ``|D| <= dense_limit`` (the
    expanded Γ's ratio, computed by :func:`advbound.evidence.verify.verify_certificate`, equals the
    reduced one to ``rtol``); ``dual_matches`` when a dual is stored; ``bounds_ordered``;
    ``claimed_lower`` and ``claimed_upper`` (one-sided: a claim fails only when it promises more than
    was verified).  Raises :class:`~advbound.errors.CertificateError` for a certificate that breaks
    the acceptance rule.  ``basis`` (the :func:`~advbound.functions.rowbasis.row_basis` of the
    certificate's family, when the caller has just built it) saves building it again; a file is
    always checked against a basis built from the file's own family.
    """
    from advbound.evidence.orbitcert import check_orbit_acceptance
    from advbound.functions.rowbasis import expand_gamma, row_basis

    check_orbit_acceptance(cert)
    if cert.query_weights is not None:
        return _verify_weighted(cert, dense_limit, rtol)
    if basis is None:
        basis = row_basis(cert.family())
    checks = list(basis_checks(basis))
    g, why = _gamma_in_basis(basis, cert)
    checks.append(("orbits_in_basis", g is not None, why or "every pair orbit is a block entry"))
    if g is None:
        return _report(cert, checks, 0.0, None, {"gamma_lower": 0.0, "position_norms": []}, None)
    red = orbit_lower_bound(basis, g, cert.rho)
    lower = red["lower"]
    dense_lower = None
    if basis.family.size <= dense_limit:
        dense_lower = _dense_check(cert, expand_gamma(basis, g), lower, rtol, "reduced basis", checks)
    upper = None
    if cert.duals is not None:
        from advbound.functions.rowbasis import BASIS_VERSION
        made = cert.metadata.get("basis", BASIS_VERSION)   # files without the key predate other conventions
        trivial = cert.metadata.get("cones") == "trivial"
        dual = orbit_upper_bound(trivial_basis(basis) if trivial else basis, cert.bound, cert.duals)
        upper = dual["upper"]
        same = made == BASIS_VERSION
        detail = dual["message"] if same else (f"the dual refers to blocks of {made!r}; this checker builds "
                                               f"{BASIS_VERSION!r} (its weak-duality bound still holds)")
        if trivial and cert.bound != "positive":
            same, upper = False, None
            detail = "a dual on the trivial block alone bounds only the positive program"
        checks.append(("dual_matches", upper is not None and same, detail))
    return _report(cert, checks, lower, upper, red, dense_lower)


def _dense_check(cert, expanded, lower: float, rtol: float, how: str, checks: list) -> float:
    """Check the expanded Γ with the dense float verifier; append ``dense_agrees``; return its ratio."""
    from advbound.evidence.certificate import Certificate
    from advbound.evidence.verify import verify_certificate

    f, G = expanded
    rep = verify_certificate(Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs), G,
                                         metadata={"bound": cert.bound}), bound=cert.bound)
    ok = math.isclose(rep.lower, lower, rel_tol=rtol, abs_tol=1e-12) or rep.lower >= lower
    checks.append(("dense_agrees", ok, f"expanded Γ ({f.size} inputs) gives {rep.lower:.10g}, {how} {lower:.10g}"))
    return rep.lower


def _verify_weighted(cert, dense_limit: int, rtol: float) -> OrbitReport:
    """A positive-bound certificate with query weights: quotient norms below, the minimax bound above.

    Γ ≥ 0 (the acceptance rule), so the quotient norms of
    :func:`advbound.evidence.orbitquotient.support_norms` are the norms themselves and no
    representative set is built; up to ``dense_limit`` inputs the expanded Γ is checked densely too.
    """
    from advbound.evidence.minimaxcheck import minimax_upper
    from advbound.evidence.orbitquotient import support_norms

    fam = cert.family()
    red = support_norms(fam, cert.pair_keys, cert.gamma)
    red["position_norms"] = red["position_upper"]
    lower = red["lower"]
    checks = [("quotient_norms", red["exact_norms"], "Perron roots of the quotients over (last letter, content); "
                                                     "exact because Γ >= 0")]
    dense_lower = None
    if fam.size <= dense_limit:
        dense_lower = _dense_check(cert, expanded_gamma(cert), lower, rtol, "quotient norms", checks)
    mm = minimax_upper(fam, cert.query_weights)
    upper = mm["upper"]
    detail = (f"max load {mm['load']:.10g} / proved floor {mm['phi']:.10g} of the smallest pair sum over "
              f"{mm['content_pairs']} content pairs (best assignment {mm['phi_found']:.10g})")
    checks.append(("minimax_witness", upper is not None, detail))
    return _report(cert, checks, lower, upper, red, dense_lower)


def _report(cert, checks, lower, upper, red, dense_lower) -> OrbitReport:
    meta = cert.metadata
    if upper is not None:
        checks.append(("bounds_ordered", upper >= lower * (1 - 1e-9) - 1e-12,
                       f"upper {upper:.10g} >= lower {lower:.10g}"))
    cl, cu = meta.get("claimed_lower"), meta.get("claimed_upper")
    if cl is not None:
        checks.append(("claimed_lower", cl <= lower * (1 + 1e-9) + 1e-12, f"claimed {cl:.10g}, verified {lower:.10g}"))
    if cu is not None:
        ok = upper is not None and cu >= upper * (1 - 1e-9) - 1e-12
        checks.append(("claimed_upper", ok, f"claimed {cu:.10g}, verified {upper if upper is None else f'{upper:.10g}'}"))
    passed = all(ok for _, ok, _ in checks)
    norms = np.asarray(red["position_norms"], dtype=float)
    worst = norms / np.asarray(cert.costs) if norms.size else norms
    binding = tuple(int(j) for j in np.flatnonzero(worst >= worst.max() * (1 - 1e-4))) if norms.size else ()
    failed = [n for n, ok, _ in checks if not ok]
    msg = ("orbit certificate verified in the reduced basis" + (" and densely" if dense_lower is not None else "")
           if passed else f"check(s) {', '.join(failed)} failed")
    return OrbitReport(message=msg, passed=passed, lower=float(lower),
                       upper=upper if passed else None, bound=cert.bound,
                       gamma_lower=float(red["gamma_lower"]), position_norms=tuple(norms.tolist()),
                       checks=tuple(checks), dense_lower=dense_lower, binding=binding)
