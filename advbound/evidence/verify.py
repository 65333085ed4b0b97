"""Independent checking of certificates: the numbers advbound reports as bounds come from here.

This module imports numpy, scipy and :mod:`advbound.quantities` only (never
cvxpy, never :mod:`advbound.programs.sdp`), so a certificate file can be checked without
any solver.  :func:`verify_certificate` returns a :class:`VerificationReport`
whose ``lower`` and ``upper`` are the bounds advbound reports;
:func:`extract_gamma` turns a primal point ``(W, ρ)`` into the adversary matrix.

>>> import numpy as np
>>> from advbound.evidence.certificate import Certificate
>>> g = np.zeros((4, 4)); g[0, 1:] = g[1:, 0] = [1.0, 1.0, 0.0]      # OR_2, inputs 00 01 10 11
>>> cert = Certificate(("0", "1"), ("00", "01", "10", "11"), ("0", "1", "1", "1"), np.ones(2), g)
>>> rep = verify_certificate(cert)
>>> round(rep.lower, 12), rep.upper is None, rep.passed
(1.414213562373, True, True)

Acceptance
----------
Before anything is computed the certificate must satisfy the acceptance rule
(:func:`advbound.evidence.certificate.check_acceptance`, stated in ``docs/evidence.md``):
distinct inputs of one length over the alphabet, one output per input, finite
positive costs, a finite Γ of the right shape, a well-formed dual witness and
metadata.  Otherwise :class:`~advbound.errors.CertificateError` is raised, for a
file (:func:`advbound.evidence.certificate.load_certificate`) and for an object built in
memory alike.  A file must moreover hold Γ exactly symmetric and exactly zero on
equal-output pairs; an in-memory Γ (solver output) is checked after
:func:`advbound.evidence.certificate.cleaned`, and its residue is reported by the
checks ``symmetric`` and ``equal_outputs`` below.

Lower bound
-----------
Γ is symmetrised, its entries on equal-output pairs are set to zero (how much
was zeroed is recorded, and a large amount fails the check ``equal_outputs``;
for a certificate read from a file there is nothing to zero),
and for the positive bound its negative entries are clipped to zero.  Then
``lower = ||Γ|| / max_j ||Γ∘Δ_j|| / c_j`` (:func:`advbound.quantities.adversary_ratio`),
a lower bound on ADV±_c (on ADV_c for entrywise non-negative Γ) whatever
produced Γ.  A ``claimed_lower`` in the metadata fails the check of that name when
it exceeds the recomputed bound by more than ``lower_rtol`` (relative); a claim
below it is conservative and passes.  Likewise ``claimed_upper`` fails only when it
is below the repaired upper bound.

Upper bound and its repair
--------------------------
The dual witness ``(t, X_j⁺, X_j⁻)`` is feasible when every ``X_j^±`` is PSD and
``S[x,y] = Σ_{j: x_j≠y_j} (X_j⁺ - X_j⁻)[x,y]`` equals 1 (is at least 1 for the
positive bound) on every pair with ``f(x) ≠ f(y)``; its value is then
``max_x Σ_j c_j (X_j⁺ + X_j⁻)[x,x]``, an upper bound by weak duality.  Solver
output is only approximately feasible, so it is repaired:

1. every ``X_j^±`` is symmetrised;
2. the residual ``R[x,y] = 1 - S[x,y]`` (positive bound: ``max(0, 1 - S[x,y])``)
   of each differing-output pair is added to ``X_j⁺[x,y]`` and ``X_j⁺[y,x]`` for one
   position ``j`` where ``x`` and ``y`` differ (the cheapest such position), so
   the pair constraints hold up to floating-point rounding of the sums (checked
   below ``1e-9``);
3. each matrix ``A`` is shifted by ``s·I`` with ``s = max(0, m - λ_min(A))``, where
   ``λ_min`` comes from LAPACK's symmetric eigensolver and the margin
   ``m = 8·|D|·eps·max|λ(A)|`` covers its backward error (Weyl's inequality), so
   ``A + s·I ⪰ 0``;
4. the repaired value ``t'`` is recomputed with :func:`advbound.quantities.dual_objective`.

``t'`` is the reported upper bound when the repair cost ``t' - t_raw`` (with
``t_raw`` the diagonal objective before repair) is at most ``repair_tol·t'``;
otherwise the witness was too far from feasible, the check ``dual_repair`` fails
and no upper bound is reported.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from advbound import quantities as q
from advbound.evidence.certificate import BOUNDS, check_acceptance, cleaned
from advbound.errors import CertificateError

__all__ = ["VerificationReport", "verify_certificate", "extract_gamma", "function_difference"]

_EPS = np.finfo(float).eps


@dataclasses.dataclass(frozen=True)
class VerificationReport:
    """Outcome of :func:`verify_certificate`.

    Attributes
    ----------
    message : str
        One sentence: what passed, or which check failed.
    passed : bool
        True when every check passed.
    lower : float
        ``||Γ|| / max_j ||Γ∘Δ_j|| / c_j`` after zeroing equal-output entries.
    upper : float or None
        Repaired dual objective; ``None`` when there is no witness or it failed a check.
    bound : str
        ``"general"`` or ``"positive"``.
    gamma_norm : float
        ``||Γ||`` after zeroing.
    position_norms : tuple of float
        ``||Γ∘Δ_j||`` per position.
    binding : tuple of int
        Positions whose ``||Γ∘Δ_j|| / c_j`` is within ``1e-4`` (relative) of the maximum.
    equal_output_mass : float
        Largest ``|Γ[x,y]|`` with ``f(x) = f(y)`` before zeroing.
    zeroed_entries : int
        Number of non-zero equal-output entries that were zeroed.
    asymmetry : float
        ``max |Γ - Γᵀ|`` before symmetrising.
    negative_mass : float
        Largest negative entry (as a positive number) clipped for the positive bound (0 otherwise).
    dual_t : float or None
        The witness's claimed ``t``.
    dual_raw_objective : float or None
        ``max_x Σ_j c_j (X_j⁺+X_j⁻)[x,x]`` of the symmetrised witness before repair.
    dual_equality_residual : float or None
        Largest violation of the pair constraints before repair.
    dual_residual_after : float or None
        The same after repair (floating-point rounding only).
    dual_min_eigenvalues : tuple of float
        Smallest eigenvalue of each ``X_j⁺`` (then each ``X_j⁻``), before repair.
    repair_cost : float or None
        ``upper - dual_raw_objective``.
    tolerances : dict
    checks : tuple of (name, ok, detail)
    """

    message: str
    passed: bool
    lower: float
    upper: float | None
    bound: str
    gamma_norm: float
    position_norms: tuple
    binding: tuple
    equal_output_mass: float
    zeroed_entries: int
    asymmetry: float
    negative_mass: float
    dual_t: float | None
    dual_raw_objective: float | None
    dual_equality_residual: float | None
    dual_residual_after: float | None
    dual_min_eigenvalues: tuple
    repair_cost: float | None
    tolerances: dict
    checks: tuple

    def failed_checks(self) -> list[str]:
        """Names of the checks that failed."""
        return [name for name, ok, _ in self.checks if not ok]

    def to_dict(self) -> dict:
        """Python scalars only (JSON-ready)."""
        d = dataclasses.asdict(self)
        d["checks"] = [[n, bool(ok), det] for n, ok, det in self.checks]
        d["position_norms"] = [float(v) for v in self.position_norms]
        d["binding"] = [int(v) for v in self.binding]
        d["dual_min_eigenvalues"] = [float(v) for v in self.dual_min_eigenvalues]
        return d


def extract_gamma(weights: np.ndarray, rho: np.ndarray, threshold: float = 1e-12) -> np.ndarray:
    """Adversary matrix ``Γ = W / (δδᵀ)`` on the support of ``δ = sqrt(ρ)`` (zero elsewhere).

    Parameters
    ----------
    weights : ndarray, shape (|D|, |D|)
        ``W`` from the primal program.
    rho : ndarray, shape (|D|,)
        ``ρ`` from the primal program (tiny negative solver noise is treated as 0).
    threshold : float
        Inputs with ``ρ_x <= threshold·max ρ`` are outside the support.

    >>> extract_gamma(np.array([[0., .25], [.25, 0.]]), np.array([.25, .25])).tolist()
    [[0.0, 1.0], [1.0, 0.0]]
    """
    w = np.asarray(weights, dtype=float)
    r = np.clip(np.asarray(rho, dtype=float), 0.0, None)
    top = float(r.max(initial=0.0))
    keep = r > threshold * top if top > 0 else np.zeros(r.shape, bool)
    d = np.zeros_like(r)
    d[keep] = 1.0 / np.sqrt(r[keep])
    g = w * d[:, None] * d[None, :]
    return (g + g.T) * 0.5


def _sym(a: np.ndarray) -> np.ndarray:
    return (a + np.swapaxes(a, -1, -2)) * 0.5


def _psd_shift(a: np.ndarray) -> tuple[float, float]:
    """(smallest eigenvalue, shift making ``a + shift·I`` PSD despite eigensolver error)."""
    if not a.any():
        return 0.0, 0.0
    w = np.linalg.eigvalsh(a)
    margin = 8.0 * a.shape[0] * _EPS * max(abs(w[0]), abs(w[-1]))
    return float(w[0]), float(max(0.0, margin - w[0]))


def verify_certificate(cert, bound: str | None = None, tol: float = 1e-6, repair_tol: float = 1e-2,
                       lower_rtol: float = 1e-6) -> VerificationReport:
    """Recompute the lower bound from Γ and check (and repair) the dual witness of ``cert``.

    Parameters
    ----------
    cert : Certificate
    bound : {"general", "positive"}, optional
        Default: ``cert.metadata["bound"]``, else ``"general"``.
    tol : float
        Relative tolerance (relative to ``max|Γ|``) for the residue of an in-memory Γ on
        equal-output pairs and its asymmetry, and for ``lower <= upper``.
    repair_tol : float
        Largest acceptable repair cost relative to the repaired ``t``.
    lower_rtol : float
        How far (relative) a ``claimed_lower`` in ``cert.metadata`` may exceed the recomputed
        lower bound, and a ``claimed_upper`` fall below the repaired upper bound.

    Returns
    -------
    VerificationReport

    Raises
    ------
    CertificateError
        When ``cert`` (with Γ cleaned, see the module docstring) breaks the acceptance rule,
        or ``bound`` is neither ``"general"`` nor ``"positive"``.
    """
    check_acceptance(cleaned(cert), "certificate")
    meta = dict(cert.metadata)
    bound = bound or meta.get("bound", "general")
    if bound not in BOUNDS:
        raise CertificateError(f"bound must be 'general' or 'positive', got {bound!r}")
    sym = cert.symbols
    out = cert.output_index
    costs = np.asarray(cert.costs, dtype=float)
    n = len(cert.inputs)
    checks = []
    negative_tol = max(1e-3, tol)

    # ---- lower bound ------------------------------------------------------------------
    g = cert.gamma.toarray() if sp.issparse(cert.gamma) else np.array(cert.gamma, dtype=float)
    checks.append(("gamma_finite", True, "Γ has only finite entries"))   # the acceptance rule refuses others
    asym = float(np.max(np.abs(g - g.T), initial=0.0))
    scale = float(np.max(np.abs(g), initial=0.0))
    ok = asym <= tol * max(scale, 1e-300)
    checks.append(("symmetric", ok, f"max |Γ - Γᵀ| = {asym:.3g} (symmetrised; max |Γ| {scale:.3g})"))
    eq_mass = q.equal_output_mass(g, out)
    zeroed = int(np.count_nonzero(np.where(out[:, None] == out[None, :], g, 0.0)))
    ok = eq_mass <= tol * max(scale, 1e-300)
    checks.append(("equal_outputs", ok, f"max |Γ| on equal-output pairs {eq_mass:.3g} "
                   f"({zeroed} entries zeroed; max |Γ| {scale:.3g})"))
    g0 = q.zero_equal_outputs(g, out)
    neg = 0.0
    if bound == "positive":
        neg = float(max(0.0, -g0.min(initial=0.0)))
        ok = neg <= negative_tol * max(scale, 1e-300)
        checks.append(("nonnegative", ok, f"most negative Γ entry {-neg:.3g} clipped to 0 for the positive bound"))
        g0 = np.clip(g0, 0.0, None)
    norms = q.constraint_norms(g0, sym)
    gnorm = q.spectral_norm(g0)
    ratios = norms / costs
    worst = float(ratios.max(initial=0.0))
    lower = gnorm / worst if worst > 0 else 0.0
    binding = tuple(int(j) for j in np.flatnonzero(ratios >= worst * (1 - 1e-4))) if worst > 0 else ()
    checks.append(("lower_positive", lower > 0, f"lower bound {lower:.10g} from ||Γ|| = {gnorm:.6g}, "
                   f"max_j ||Γ∘Δ_j||/c_j = {worst:.6g}"))
    if "claimed_lower" in meta and meta["claimed_lower"] is not None:
        c = float(meta["claimed_lower"])
        ok = c <= lower + lower_rtol * max(abs(c), abs(lower), 1e-300)
        checks.append(("claimed_lower", ok, f"recomputed lower {lower:.10g} vs claimed {c:.10g}"
                       + ("" if ok else " (the claim exceeds what Γ proves)")))

    # ---- upper bound ------------------------------------------------------------------
    upper = t_raw = resid = resid_after = repair = None
    mins: list[float] = []
    dual_t = None if cert.dual_t is None else float(cert.dual_t)
    if cert.dual_plus is not None:
        upper, t_raw, resid, resid_after, repair, mins = _check_dual(
            cert, bound, sym, out, costs, n, repair_tol, checks)
        if upper is not None:
            ok = lower <= upper * (1 + tol) + tol
            checks.append(("bounds_ordered", ok, f"lower {lower:.10g} <= upper {upper:.10g}"))
            if not ok:
                upper = None
        if "claimed_upper" in meta and meta["claimed_upper"] is not None and upper is not None:
            c = float(meta["claimed_upper"])
            ok = c >= upper - lower_rtol * max(abs(c), abs(upper), 1e-300)
            checks.append(("claimed_upper", ok, f"repaired upper {upper:.10g} vs claimed {c:.10g}"
                           + ("" if ok else " (the claim is below what the witness proves)")))

    passed = all(ok for _, ok, _ in checks)
    if passed:
        message = f"verified lower bound {lower:.8g}" + (
            f" and upper bound {upper:.8g}" if upper is not None else " (no dual witness to check)")
    else:
        bad = [(nm, det) for nm, ok, det in checks if not ok]
        message = "verification failed: " + "; ".join(f"{nm} ({det})" for nm, det in bad)
    tolerances = {"tol": tol, "repair_tol": repair_tol, "lower_rtol": lower_rtol, "negative_tol": negative_tol,
                  "binding_rtol": 1e-4}
    return VerificationReport(
        message=message, passed=passed, lower=float(lower), upper=None if upper is None else float(upper),
        bound=bound, gamma_norm=float(gnorm), position_norms=tuple(float(v) for v in norms), binding=binding,
        equal_output_mass=float(eq_mass), zeroed_entries=zeroed, asymmetry=asym, negative_mass=neg,
        dual_t=dual_t, dual_raw_objective=t_raw, dual_equality_residual=resid, dual_residual_after=resid_after,
        dual_min_eigenvalues=tuple(mins), repair_cost=repair, tolerances=tolerances, checks=tuple(checks))


def _check_dual(cert, bound, sym, out, costs, n, repair_tol, checks):
    N = len(costs)
    xp = np.array(cert.dual_plus, dtype=float)
    xm = None if cert.dual_minus is None else np.array(cert.dual_minus, dtype=float)
    shape_ok = xp.shape == (N, n, n) and (xm is None or xm.shape == (N, n, n))
    finite = shape_ok and bool(np.isfinite(xp).all()) and (xm is None or bool(np.isfinite(xm).all()))
    checks.append(("dual_shape", finite, f"witness stacks of shape {xp.shape}"
                   + ("" if xm is None else f" and {xm.shape}") + f", expected {(N, n, n)} with finite entries"))
    if not finite:
        return None, None, None, None, None, []
    xp = _sym(xp)
    xm = None if xm is None else _sym(xm)
    t_raw = q.dual_objective(xp, xm, costs)
    diff = out[:, None] != out[None, :]
    s = q.dual_pair_sums(xp, xm, sym)
    if bound == "positive":
        r = np.where(diff, np.clip(1.0 - s, 0.0, None), 0.0)
        resid = float(r.max(initial=0.0))
    else:
        r = np.where(diff, 1.0 - s, 0.0)
        resid = float(np.abs(r).max(initial=0.0))
    mins = [float(np.linalg.eigvalsh(a)[0]) if a.any() else 0.0 for a in xp]
    if xm is not None:
        mins += [float(np.linalg.eigvalsh(a)[0]) if a.any() else 0.0 for a in xm]
    # step 2: put each pair's residual on its cheapest differing position
    unassigned = diff.copy()
    for j in np.argsort(costs, kind="stable"):
        d = q.delta_mask(sym, j) & unassigned
        if d.any():
            xp[j] = xp[j] + np.where(d, r, 0.0)
            unassigned &= ~d
    # step 3: diagonal shifts restoring PSD-ness
    eye = np.eye(n)
    for stack in (xp, xm):
        if stack is None:
            continue
        for j in range(N):
            _, shift = _psd_shift(stack[j])
            if shift > 0:
                stack[j] = stack[j] + shift * eye
    s2 = q.dual_pair_sums(xp, xm, sym)
    if bound == "positive":
        after = float(np.where(diff, np.clip(1.0 - s2, 0.0, None), 0.0).max(initial=0.0))
    else:
        after = float(np.abs(np.where(diff, 1.0 - s2, 0.0)).max(initial=0.0))
    ok = after <= 1e-9
    checks.append(("dual_equality", ok, f"pair-constraint residual {resid:.3g} before repair, {after:.3g} after"))
    t_rep = q.dual_objective(xp, xm, costs)
    cost = t_rep - t_raw
    ok_cost = ok and cost <= repair_tol * max(abs(t_rep), 1e-300)
    checks.append(("dual_repair", ok_cost, f"repair raised t from {t_raw:.10g} to {t_rep:.10g} "
                   f"(cost {cost:.3g}, limit {repair_tol:g} relative); smallest eigenvalue before repair "
                   f"{min(mins) if mins else 0.0:.3g}"))
    upper = t_rep if ok_cost else None
    return upper, float(t_raw), resid, after, float(cost), mins


def function_difference(cert, f, restriction: bool = False) -> str | None:
    """The first difference between the function of ``cert`` and the function ``f``, or None.

    With ``restriction`` the certificate may leave out inputs of ``f``: its function need only be
    ``f`` restricted to part of the domain (its lower bound then holds for ``f`` as well).

    Both are compared as maps from inputs to outputs with per-position costs: the same
    number of positions and the same cost at each (exactly, as floats), the same set of
    inputs, the same output label for each input and the same set of alphabet symbols.  The
    order of inputs and of the alphabet does not matter.  ``f`` is anything with
    ``alphabet``, ``inputs``, ``outputs`` and ``costs`` (a :class:`~advbound.functions.function.PartialFunction`
    or a :class:`~advbound.evidence.certificate.Certificate`).

    >>> from advbound.evidence.certificate import Certificate
    >>> c = Certificate(("0", "1"), ("0", "1"), ("0", "1"), np.ones(1), np.zeros((2, 2)))
    >>> function_difference(c, Certificate(("1", "0"), ("1", "0"), ("1", "0"), [1.0], None)) is None
    True
    >>> function_difference(c, Certificate(("0", "1"), ("0", "1"), ("1", "0"), [1.0], None))
    "input '0' has output '0' in the certificate but '1' in the instance"
    """
    cc = [float(v) for v in np.asarray(cert.costs, dtype=float)]
    fc = [float(v) for v in np.asarray(f.costs, dtype=float)]
    if len(cc) != len(fc):
        return f"the certificate has {len(cc)} positions, the instance {len(fc)}"
    for j, (a, b) in enumerate(zip(cc, fc)):
        if a != b:
            return f"cost of position {j + 1} is {a!r} in the certificate but {b!r} in the instance"
    mine = dict(zip(cert.inputs, cert.outputs))
    theirs = dict(zip(f.inputs, f.outputs))
    for x, y in theirs.items():
        if x not in mine:
            if restriction:
                continue
            return f"input {x!r} of the instance is missing from the certificate"
        if mine[x] != y:
            return f"input {x!r} has output {mine[x]!r} in the certificate but {y!r} in the instance"
    for x in mine:
        if x not in theirs:
            return f"input {x!r} of the certificate is not in the instance's domain"
    if set(cert.alphabet) != set(f.alphabet):
        return (f"the certificate's alphabet {''.join(cert.alphabet)!r} has other symbols than the instance's "
                f"{''.join(f.alphabet)!r}")
    return None
