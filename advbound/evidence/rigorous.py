"""Rigorous (exact-arithmetic) verification of a certificate's lower bound.

This module owns the *rigorous recipe*: from a :class:`~advbound.evidence.certificate.Certificate`
alone it produces a rational number ``L`` together with a proof that
``L <= ADV±_c(f)`` in which every step is exact rational arithmetic, except
optionally positive-definiteness proofs by a floating-point Cholesky factorisation
with a rigorous a-priori rounding-error bound.  It imports numpy, the standard
library ``fractions`` and, when installed, ``python-flint`` (used only to speed up
exact fraction-free LDLᵀ).  Typical call::

    rep = verify_rigorous(load_certificate("or4.npz"))
    rep.verified, rep.lower_exact          # True, Fraction(2, 1) (up to the safety scaling)

The recipe (``tools/recheck_certificate.py`` implements the same steps independently
and must produce the same rational):

0. The certificate satisfies the acceptance rule (:func:`advbound.evidence.certificate.check_acceptance`);
   otherwise :class:`~advbound.errors.CertificateError` is raised and nothing is certified.
1. ``G = (Γ + Γᵀ)/2`` in float64; entries with ``f(x) = f(y)`` set to 0 (for a
   certificate of the positive bound, negative entries are also set to 0).  For a file these
   are no-ops (the rule requires them already); an in-memory Γ is repaired this way and its
   residue reported by the checks ``equal_outputs``, ``symmetric`` and ``nonnegative``.
2. Denominator ``Q``: the given integer, or ``2**max(0, B - e)`` where
   ``max|G| < 2**e`` (``math.frexp``) and ``B = 28`` bits; ``N = rint(Q·G)`` as int64, and
   ``Γ_q = N / Q`` is the rational adversary matrix that is actually certified.  It is
   exactly symmetric and exactly zero on equal-output pairs, so it is a valid
   adversary matrix whatever the float certificate was.
3. ``u`` = eigenvector (``numpy.linalg.eigh`` of the float64 array ``N / Q``) of the
   eigenvalue of largest modulus (the largest one on ties); ``v = rint(u·2**26/max|u|)``
   (int64).  ``R = |vᵀNv| / (Q·vᵀv)`` exactly; ``R <= ||Γ_q||`` (Rayleigh quotient).
4. ``n_j = max |eigvalsh(N/Q ∘ Δ_j)|`` (float64); ``y = (1 + s)·max_j n_j / c_j`` with the
   safety scaling ``s`` (default ``1e-6``); ``K = ceil(y·2**P)/2**P`` with ``P = 30 - e``,
   ``y = m·2**e`` (``math.frexp``), i.e. ``y`` rounded up to 30 significant bits.
5. ``T = 2**max(0, 28 - b)`` with ``b`` the bit length of ``max|N|`` (``T = 1`` for the automatic
   ``Q``; it refines the grid of the bounds when a small ``Q`` is given).  For each position ``j``:
   ``m_j = ceil(Q·T·K·c_j)`` with ``c_j = Fraction(cost_j)`` exactly; prove
   ``m_j·I - T·N∘Δ_j ≻ 0`` (and ``m_j·I + T·N∘Δ_j ≻ 0`` unless ``f`` has two output
   values, where the second follows from the first: ``N∘Δ_j`` is then bipartite, and
   ``S(mI - M)S = mI + M`` for ``S = diag(±1)`` by output).  Hence
   ``||Γ_q∘Δ_j|| < m_j/(Q·T)``.
6. ``L = R / max_j (m_j / (Q·T·c_j))``.  Then ``Γ_q / max_j(...)`` is feasible for ADV±_c
   with norm at least ``L`` (common knowledge: "Negative weights make adversaries
   stronger", 2007, arXiv:quant-ph/0611054, for the ratio bound).

Positive-definiteness proofs
----------------------------
``"ldl"``: exact fraction-free LDLᵀ (Bareiss elimination) of the integer matrix; the
pivots are the leading principal minors and the matrix is positive definite iff all
are positive (Sylvester's criterion); ``D_k = p_k / p_{k-1}`` is the rational LDLᵀ.  For
two-output functions the matrix ``[[mI, -G], [-Gᵀ, mI]]`` (inputs grouped by output) is
first reduced exactly to its Schur complement ``m²I - GᵀG`` (or ``m²I - GGᵀ``, the
smaller): positive definite iff the original is (``m > 0``).  python-flint's
``fmpz_mat.fflu`` is used when installed (its result is used only when it did not
permute rows; otherwise the pure-Python elimination decides).

``"cholesky"``: verified floating-point Cholesky, the approach of "Verification of
positive definiteness", 2006 (BIT Numerical Mathematics).  See :func:`prove_pd_cholesky`
for the constant and its proof.  ``"auto"`` uses ``"ldl"`` when the matrix to factor
has at most 120 rows, else ``"cholesky"``.

``"residual"``: a float Cholesky factor of ``A - σI`` rounded to integers, whose residual is
computed exactly and shown diagonally dominant (:func:`prove_pd_residual`): exact integer
arithmetic throughout, fast at large sizes, no rounding-error analysis needed.

>>> import numpy as np
>>> from advbound.evidence.certificate import Certificate
>>> g = np.zeros((5, 5)); g[0, 1:] = g[1:, 0] = 1.0     # OR_4 on weight <= 1: ||Γ|| = 2
>>> c = Certificate(("0", "1"), ("0000", "0001", "0010", "0100", "1000"), ("0",) + ("1",) * 4,
...                 np.ones(4), g)
>>> rep = verify_rigorous(c)
>>> rep.verified, rep.lower <= 2.0, abs(rep.lower - 2.0) < 1e-5
(True, True, True)
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time
from fractions import Fraction

import numpy as np
import scipy.sparse as sp

from advbound.evidence.certificate import BOUNDS, check_acceptance, cleaned
from advbound.evidence.exactlinalg import (cholesky_shift, exact_rayleigh, flint_available, prove_pd_cholesky,
                                           prove_pd_ldl, prove_pd_residual)
from advbound.errors import CertificateError

__all__ = [
    "PositionProof",
    "RigorousReport",
    "verify_rigorous",
    "rational_gamma",
    "principal_vector",
    "exact_rayleigh",
    "prove_pd_ldl",
    "prove_pd_cholesky",
    "prove_pd_residual",
    "cholesky_shift",
    "floor_float",
    "floor_decimal",
    "flint_available",
    "DEFAULT_BITS",
    "VECTOR_BITS",
    "K_BITS",
    "DEFAULT_SAFETY",
    "LDL_AUTO_LIMIT",
    "MAX_DENSE",
]

log = logging.getLogger("advbound")

#: Bits of ``Q·max|G|`` when the denominator is chosen automatically.
DEFAULT_BITS = 28
#: Bits of the rational eigenvector.
VECTOR_BITS = 26
#: Significant bits of the common scale ``K``.
K_BITS = 30
#: Default safety scaling ``s``: the constraint bounds proved are ``(1 + s)`` times the float norms.
DEFAULT_SAFETY = 1e-6
#: ``method="auto"`` uses exact LDLᵀ up to this many rows (after the Schur reduction).
LDL_AUTO_LIMIT = 120
#: Largest certificate (inputs) handled; everything is dense.
MAX_DENSE = 4000


@dataclasses.dataclass(frozen=True)
class PositionProof:
    """The proof that ``||Γ_q∘Δ_j|| <= bound`` for one position.

    Attributes
    ----------
    position : int
        0-based position ``j``.
    cost : Fraction
        The cost ``c_j`` (the float from the file, exactly).
    float_norm : float
        ``||Γ_q∘Δ_j||`` in floating point (step 4).
    bound : Fraction
        ``m_j / Q``, proved to exceed ``||Γ_q∘Δ_j||``.
    method : str
        ``"ldl"``, ``"cholesky"`` or ``"zero"`` (``Γ_q∘Δ_j = 0``).
    proved : bool
    detail : str
        How the proof ended (e.g. the failing pivot).
    seconds : float
    """

    position: int
    cost: Fraction
    float_norm: float
    bound: Fraction
    method: str
    proved: bool
    detail: str
    seconds: float


@dataclasses.dataclass(frozen=True, eq=False)
class RigorousReport:
    """Outcome of :func:`verify_rigorous`.

    Attributes
    ----------
    message : str
        One sentence: the certified bound, or what failed.
    verified : bool
        True when every positive-definiteness proof succeeded and the certificate's
        float matrix matched what was certified (equal-output mass and asymmetry within
        ``tol`` of ``max|Γ|``, claimed lower bound not above the exact one by more than
        ``claim_rtol``).
    lower_exact : Fraction or None
        The certified rational lower bound ``L`` on ADV±_c (on ADV_c for a positive certificate).
    lower : float or None
        ``L`` rounded down to a float (never above ``L``).
    rayleigh : Fraction
        ``R = |vᵀΓ_qv| / vᵀv``.
    scale : Fraction
        ``K`` of step 4; ``proved_scale = max_j bound_j / c_j <= K`` is the divisor used.
    proved_scale : Fraction
    denominator : int
        ``Q``.
    safety : float
        ``s``.
    method : str
        ``"ldl"``, ``"cholesky"``, ``"residual"`` or ``"mixed"``.
    backend : str
        ``"flint"`` or ``"python"`` (for LDLᵀ) or ``"numpy"``.
    positions : tuple of PositionProof
    bound : str
        ``"general"`` or ``"positive"``.
    float_norm : float
        ``||Γ_q||`` in floating point.
    float_lower : float
        The float ratio of ``Γ_q`` (step 4's norms).
    equal_output_mass : float
        Largest ``|Γ[x,y]|`` with ``f(x) = f(y)`` in the file (zeroed before certifying).
    asymmetry : float
        ``max|Γ - Γᵀ|`` in the file.
    negative_mass : float
        Largest negative entry clipped (positive certificates only).
    claimed_lower : float or None
        ``metadata["claimed_lower"]``.
    size, n : int
    seconds : float
    checks : tuple of (name, ok, detail)
    """

    message: str
    verified: bool
    lower_exact: Fraction | None
    lower: float | None
    rayleigh: Fraction
    scale: Fraction
    proved_scale: Fraction
    denominator: int
    safety: float
    method: str
    backend: str
    positions: tuple
    bound: str
    float_norm: float
    float_lower: float
    equal_output_mass: float
    asymmetry: float
    negative_mass: float
    claimed_lower: float | None
    size: int
    n: int
    seconds: float
    checks: tuple

    def to_dict(self) -> dict:
        """Python scalars only; rationals as ``"p/q"`` strings."""
        return {
            "message": self.message, "verified": self.verified,
            "lower": self.lower, "lower_exact": _frac_str(self.lower_exact),
            "rayleigh_exact": _frac_str(self.rayleigh), "scale_exact": _frac_str(self.scale),
            "proved_scale_exact": _frac_str(self.proved_scale), "denominator": int(self.denominator),
            "safety": float(self.safety), "method": self.method, "backend": self.backend, "bound": self.bound,
            "float_norm": float(self.float_norm), "float_lower": float(self.float_lower),
            "equal_output_mass": float(self.equal_output_mass), "asymmetry": float(self.asymmetry),
            "negative_mass": float(self.negative_mass), "claimed_lower": self.claimed_lower,
            "size": int(self.size), "n": int(self.n), "seconds": float(self.seconds),
            "positions": [{"position": p.position, "cost": _frac_str(p.cost), "float_norm": p.float_norm,
                           "bound_exact": _frac_str(p.bound), "method": p.method, "proved": p.proved,
                           "detail": p.detail, "seconds": p.seconds} for p in self.positions],
            "checks": [[nm, bool(ok), det] for nm, ok, det in self.checks],
        }


def _frac_str(x: Fraction | None) -> str | None:
    return None if x is None else f"{x.numerator}/{x.denominator}"


# ---------------------------------------------------------------------------------------------
# Steps 1-3: the rational matrix and vector
# ---------------------------------------------------------------------------------------------
def rational_gamma(gamma, output_index, denominator: int | None = None, positive: bool = False,
                   bits: int = DEFAULT_BITS) -> tuple[np.ndarray, int]:
    """Steps 1-2: integer matrix ``N`` and denominator ``Q`` with ``Γ_q = N / Q``.

    >>> rational_gamma(np.array([[0., .3], [.3, 0.]]), np.array([0, 1]), denominator=10)[0].tolist()
    [[0, 3], [3, 0]]
    """
    g = gamma.toarray() if sp.issparse(gamma) else np.array(gamma, dtype=np.float64)
    if not np.isfinite(g).all():
        raise CertificateError("gamma has NaN or infinite entries")
    o = np.asarray(output_index)
    g = (g + g.T) / 2.0
    g[o[:, None] == o[None, :]] = 0.0
    if positive:
        g[g < 0] = 0.0
    top = float(np.max(np.abs(g), initial=0.0))
    if denominator is None:
        e = math.frexp(top)[1] if top > 0 else 0
        q = 2 ** max(0, bits - e)
    else:
        q = int(denominator)
        if q < 1:
            raise CertificateError(f"denominator must be a positive integer, got {denominator!r}")
    if top * q >= 2.0**52:
        raise CertificateError(f"denominator {q} makes entries too large (max|Γ|·Q >= 2^52)")
    n_int = np.rint(g * q).astype(np.int64)
    return n_int, q


def principal_vector(n_int: np.ndarray, q: int, bits: int = VECTOR_BITS) -> np.ndarray:
    """Step 3: integer approximation of the eigenvector of ``N/Q`` for the eigenvalue of largest modulus."""
    size = n_int.shape[0]
    if size == 0 or not n_int.any():
        return np.ones(size, dtype=np.int64)
    w, u = np.linalg.eigh(n_int / q)
    k = size - 1 if abs(w[-1]) >= abs(w[0]) else 0
    vec = u[:, k]
    return np.rint(vec * (2.0**bits / np.max(np.abs(vec)))).astype(np.int64)


# ---------------------------------------------------------------------------------------------
# Rounding helpers
# ---------------------------------------------------------------------------------------------
def floor_float(x: Fraction) -> float:
    """Largest float not above ``x`` (for display and JSON).

    >>> floor_float(Fraction(1, 3)) <= Fraction(1, 3)
    True
    """
    f = float(x)
    if Fraction(f) > x:
        f = math.nextafter(f, -math.inf)
    return f


def floor_decimal(x: Fraction, digits: int = 6) -> str:
    """``x`` rounded *down* to ``digits`` decimals, as a string.

    >>> floor_decimal(Fraction(2, 3), 4), floor_decimal(Fraction(-2, 3), 2)
    ('0.6666', '-0.67')
    """
    scaled = math.floor(x * 10**digits)
    sign = "-" if scaled < 0 else ""
    s = str(abs(scaled)).rjust(digits + 1, "0")
    return f"{sign}{s[:-digits]}.{s[-digits:]}" if digits else f"{sign}{s}"


def _scale_up(y: float, bits: int = K_BITS) -> Fraction:
    """``y > 0`` rounded up to ``bits`` significant bits, as an exact dyadic rational (step 4)."""
    e = math.frexp(y)[1]
    p = bits - e
    return Fraction(math.ceil(math.ldexp(y, p))) / Fraction(2) ** p


# ---------------------------------------------------------------------------------------------
# The whole recipe
# ---------------------------------------------------------------------------------------------
def verify_rigorous(cert, *, denominator: int | None = None, safety: float = DEFAULT_SAFETY,
                    method: str = "auto", bound: str | None = None, tol: float = 1e-6,
                    claim_rtol: float = 1e-6, use_flint: bool | None = None) -> RigorousReport:
    """Certify a rational lower bound on ADV±_c from ``cert`` alone (steps 1-6 of the module docstring).

    Parameters
    ----------
    cert : Certificate
    denominator : int, optional
        ``Q``; default chosen so that ``Q·max|Γ| ≈ 2**28`` (a power of two).
    safety : float
        Safety scaling ``s > 0``: the constraint norms are bounded by about ``(1 + s)`` times
        their float values.
    method : {"auto", "ldl", "cholesky", "residual"}
        How positive definiteness is proved (see the module docstring).
    bound : {"general", "positive"}, optional
        Default ``cert.metadata["bound"]`` or ``"general"``; ``"positive"`` clips negative entries.
    tol : float
        Largest acceptable equal-output mass and asymmetry in the file, relative to ``max|Γ|``.
    claim_rtol : float
        The claimed lower bound in the metadata may exceed ``(1 + s)`` times the exact one by this
        much (relative).
    use_flint : bool, optional
        Use python-flint for exact LDLᵀ (default: when installed).

    Returns
    -------
    RigorousReport

    Raises
    ------
    CertificateError
        When ``cert`` (Γ cleaned by :func:`advbound.evidence.certificate.cleaned`) breaks the acceptance
        rule of :func:`advbound.evidence.certificate.check_acceptance`; a file read by
        :func:`advbound.evidence.certificate.load_certificate` has been held to it exactly already.
    """
    t0 = time.perf_counter()
    if method not in ("auto", "ldl", "cholesky", "residual"):
        raise ValueError(f"method must be 'auto', 'ldl', 'cholesky' or 'residual', got {method!r}")
    if not safety > 0:
        raise ValueError(f"safety must be positive, got {safety!r}")
    check_acceptance(cleaned(cert), "certificate")
    meta = dict(cert.metadata)
    bound = bound or meta.get("bound", "general")
    if bound not in BOUNDS:
        raise CertificateError(f"bound must be 'general' or 'positive', got {bound!r}")
    size, n = len(cert.inputs), len(cert.costs)
    if size > MAX_DENSE:
        raise CertificateError(f"rigorous verification handles at most {MAX_DENSE} inputs, got {size}")
    out = cert.output_index
    sym = cert.symbols
    two_outputs = len(set(cert.outputs)) == 2
    g_file = cert.gamma.toarray() if sp.issparse(cert.gamma) else np.asarray(cert.gamma, dtype=np.float64)
    checks, eq_mass, asym, neg = _file_checks(g_file, out, bound, tol)

    n_int, q = rational_gamma(g_file, out, denominator, positive=(bound == "positive"))
    gq = n_int / q
    v = principal_vector(n_int, q)
    rq = exact_rayleigh(n_int, v) / q
    fnorm = _max_abs_eig(gq)
    costs = [Fraction(float(c)) for c in cert.costs]
    masks = [sym[:, j][:, None] != sym[:, j][None, :] for j in range(n)]
    norms = [_max_abs_eig(np.where(mk, gq, 0.0)) for mk in masks]

    ratios = [nj / float(c) for nj, c in zip(norms, costs)]
    worst = max(ratios, default=0.0)
    if worst == 0.0 or rq == 0:
        dt = time.perf_counter() - t0
        msg = "the rounded adversary matrix is zero: the certified lower bound is 0"
        checks.append(("nonzero", False, msg))
        return RigorousReport(msg, False, Fraction(0), 0.0, rq, Fraction(0), Fraction(0), q, safety, method,
                              "none", (), bound, fnorm, 0.0, eq_mass, asym, neg, meta.get("claimed_lower"),
                              size, n, dt, tuple(checks))
    k_scale = _scale_up(worst * (1.0 + safety))
    parts = (np.flatnonzero(out == 0), np.flatnonzero(out == 1)) if two_outputs else None
    proofs, backends = _prove_positions(n_int, q, k_scale, costs, masks, norms, parts, method, use_flint)
    all_proved = all(p.proved for p in proofs)
    bad = [p.position for p in proofs if not p.proved]
    checks.append(("constraints", all_proved, "every c_j'·I ± Γ_q∘Δ_j proved positive definite" if all_proved
                   else f"positive definiteness not proved at position(s) {', '.join(str(b + 1) for b in bad)}"))
    proved_scale = max(p.bound / p.cost for p in proofs)
    lower_exact = rq / proved_scale if all_proved else None
    lower = floor_float(lower_exact) if lower_exact is not None else None
    float_lower = fnorm / worst
    claimed = meta.get("claimed_lower")
    if claimed is not None and lower_exact is not None:
        # the exact bound sits about a factor (1 + s) below the float ratio by construction
        ok = Fraction(float(claimed)) <= lower_exact * (1 + Fraction(safety)) * (1 + Fraction(claim_rtol))
        checks.append(("claimed_lower", ok, f"claimed {float(claimed):.10g} vs exact {lower:.10g}"))
    verified, used_method, dt, msg = _verdict(checks, proofs, lower, lower_exact, t0)
    log.info("rigorous: %s", msg)
    return RigorousReport(msg, verified, lower_exact, lower, rq, k_scale, proved_scale, q, safety, used_method,
                          "+".join(sorted(backends)) or "none", tuple(proofs), bound, fnorm, float_lower, eq_mass,
                          asym, neg, None if claimed is None else float(claimed), size, n, dt, tuple(checks))


def _verdict(checks, proofs, lower, lower_exact, t0) -> tuple[bool, str, float, str]:
    """``(verified, method, seconds, message)`` once every check is in (``t0``: the start time)."""
    verified = all(ok for _, ok, _ in checks)
    methods = {p.method for p in proofs if p.method != "zero"}
    used_method = methods.pop() if len(methods) == 1 else ("mixed" if methods else "zero")
    dt = time.perf_counter() - t0
    if verified:
        msg = (f"rigorously verified lower bound {lower:.10g} (exact {_frac_str(lower_exact)}) "
               f"by {used_method} in {dt:.2f} s")
    else:
        msg = "rigorous verification failed: " + "; ".join(f"{nm} ({det})" for nm, ok, det in checks if not ok)
    return verified, used_method, dt, msg


def _file_checks(g_file: np.ndarray, out: np.ndarray, bound: str, tol: float) -> tuple[list, float, float, float]:
    """Step 1's residue in the file: the checks ``equal_outputs``, ``symmetric`` (and ``nonnegative``).

    Returns ``(checks, equal_output_mass, asymmetry, negative_mass)``; each mass is measured
    against ``tol`` times ``max|Γ|`` of the file.
    """
    scale_file = float(np.max(np.abs(g_file), initial=0.0)) if np.isfinite(g_file).all() else math.inf
    asym = float(np.max(np.abs(g_file - g_file.T), initial=0.0))
    eq = out[:, None] == out[None, :]
    eq_mass = float(np.max(np.abs(np.where(eq, g_file, 0.0)), initial=0.0))
    gs = np.where(eq, 0.0, (g_file + g_file.T) / 2.0)
    neg = float(max(0.0, -gs.min(initial=0.0))) if bound == "positive" else 0.0
    checks = []
    ok = eq_mass <= tol * max(scale_file, 1e-300)
    checks.append(("equal_outputs", ok, f"max |Γ| on equal-output pairs {eq_mass:.3g} (zeroed; max |Γ| "
                                        f"{scale_file:.3g})"))
    ok = asym <= tol * max(scale_file, 1e-300)
    checks.append(("symmetric", ok, f"max |Γ - Γᵀ| = {asym:.3g} (symmetrised)"))
    if bound == "positive":
        ok = neg <= max(1e-3, tol) * max(scale_file, 1e-300)
        checks.append(("nonnegative", ok, f"most negative entry {-neg:.3g} clipped to 0"))
    return checks, eq_mass, asym, neg


def _prove_positions(n_int, q, k_scale, costs, masks, norms, parts, method, use_flint) -> tuple[list, set]:
    """Step 5 at every position: ``m_j`` and the proof of ``m_j·I ∓ T·N∘Δ_j ≻ 0``.

    Returns ``(proofs, backends)``: one :class:`PositionProof` per position and the backends used.
    """
    # extra power of two so that the bounds m_j / (Q·T) have a fine grid whatever Q is
    fine = 2 ** max(0, K_BITS - 2 - int(np.max(np.abs(n_int))).bit_length())
    proofs = []
    backends = set()
    for j in range(len(costs)):
        tj = time.perf_counter()
        m_j = math.ceil(q * fine * k_scale * costs[j])
        nj = np.where(masks[j], n_int, 0) * fine
        if not nj.any():
            proved = m_j > 0
            proofs.append(PositionProof(j, costs[j], norms[j], Fraction(m_j, q * fine), "zero", proved,
                                        "Γ_q∘Δ_j = 0", time.perf_counter() - tj))
            continue
        proved, detail, used = _prove_position(nj, m_j, parts, method, use_flint)
        backends.add(used[1])
        proofs.append(PositionProof(j, costs[j], norms[j], Fraction(m_j, q * fine), used[0], proved, detail,
                                    time.perf_counter() - tj))
    return proofs, backends


def _max_abs_eig(m: np.ndarray) -> float:
    """``max |eigvalsh(m)|`` (0 for an empty matrix): the float norm used in steps 3-4."""
    if m.size == 0:
        return 0.0
    w = np.linalg.eigvalsh(m)
    return float(max(abs(w[0]), abs(w[-1])))


def _prove_position(nj, m_j, parts, method, use_flint):
    """Prove ``m_j I ∓ N_j ≻ 0``; returns ``(proved, detail, (method, backend))``."""
    if m_j <= 0:
        return False, f"bound numerator m_j = {m_j} is not positive", ("none", "none")
    if parts is not None:
        p0, p1 = parts
        rows = min(len(p0), len(p1))
        use = method if method != "auto" else ("ldl" if rows <= LDL_AUTO_LIMIT else "cholesky")
        if use == "ldl":
            g = nj[np.ix_(p0, p1)].astype(object)
            gram = g.T.dot(g) if len(p1) <= len(p0) else g.dot(g.T)
            schur = -gram
            schur[np.diag_indices(schur.shape[0])] += m_j * m_j
            ok, detail, be = prove_pd_ldl(schur, use_flint)
            return ok, f"Schur complement m²I - GᵀG ({schur.shape[0]} rows): {detail}", ("ldl", be)
        a = -nj
        a[np.diag_indices(a.shape[0])] = m_j
        ok, detail, be = prove_pd_residual(a) if use == "residual" else prove_pd_cholesky(a)
        return ok, detail, (use, be)
    size = nj.shape[0]
    use = method if method != "auto" else ("ldl" if size <= LDL_AUTO_LIMIT else "cholesky")
    details, be = [], "none"
    for sign in (-1, 1):
        a = sign * nj
        a[np.diag_indices(size)] = m_j
        if use == "ldl":
            ok, detail, be = prove_pd_ldl(a, use_flint)
        elif use == "residual":
            ok, detail, be = prove_pd_residual(a)
        else:
            ok, detail, be = prove_pd_cholesky(a)
        details.append(f"{'mI - M' if sign < 0 else 'mI + M'}: {detail}")
        if not ok:
            return False, "; ".join(details), (use, be)
    return True, "; ".join(details), (use, be)
