"""Exact and verified linear algebra on integer matrices: Rayleigh quotients and positive definiteness.

This module owns the exact Rayleigh quotient of step 3 of the rigorous recipe
(:func:`exact_rayleigh`) and its three positive-definiteness proofs
(:mod:`advbound.evidence.rigorous`, "Positive-definiteness proofs"): exact fraction-free
LDLᵀ (:func:`prove_pd_ldl`, with python-flint when installed), the verified floating-point
Cholesky factorisation with its a-priori rounding-error bound (:func:`prove_pd_cholesky`,
:func:`cholesky_shift`) and the float Cholesky factor whose residual is checked in exact
integer arithmetic (:func:`prove_pd_residual`).  Each returns ``(proved, detail, backend)``.

>>> prove_pd_ldl(np.array([[2, -1], [-1, 2]]), use_flint=False)[0]
True
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np

__all__ = ["exact_rayleigh", "prove_pd_ldl", "prove_pd_cholesky", "prove_pd_residual", "cholesky_shift",
           "flint_available"]

_U = Fraction(1, 2**53)  # unit roundoff of IEEE double, round to nearest


def flint_available() -> bool:
    """True when python-flint can be imported (it speeds up exact LDLᵀ)."""
    try:
        import flint  # noqa: F401
    except ImportError:
        return False
    return True


# ---------------------------------------------------------------------------------------------
# Exact Rayleigh quotient
# ---------------------------------------------------------------------------------------------
def exact_rayleigh(n_int: np.ndarray, v: np.ndarray) -> Fraction:
    """``|vᵀNv| / vᵀv`` exactly (Python integers throughout).

    >>> exact_rayleigh(np.array([[0, 1], [1, 0]]), np.array([1, 1]))
    Fraction(1, 1)
    """
    vo = [int(a) for a in v]
    num = 0
    nv = _exact_matvec(n_int, np.asarray(v, dtype=np.int64))
    for a, b in zip(vo, nv):
        num += a * b
    den = sum(a * a for a in vo)
    return Fraction(abs(num), den) if den else Fraction(0)


def _exact_matvec(n_int: np.ndarray, v: np.ndarray) -> list[int]:
    """``N v`` as Python ints: int64 arithmetic split into 16-bit limbs so no partial sum overflows."""
    size = n_int.shape[0]
    amax = int(np.max(np.abs(n_int), initial=0))
    limb = 16
    if amax * (2**limb) * max(size, 1) < 2**62:
        sign = np.sign(v)
        a = np.abs(v)
        out = [0] * size
        shift = 0
        while a.any():
            part = (a & (2**limb - 1)) * sign
            r = n_int @ part
            out = [o + (int(x) << shift) for o, x in zip(out, r)]
            a = a >> limb
            shift += limb
        return out
    obj = n_int.astype(object)
    return [int(x) for x in obj.dot(v.astype(object))]


# ---------------------------------------------------------------------------------------------
# Positive-definiteness proofs
# ---------------------------------------------------------------------------------------------
def prove_pd_ldl(a_int, use_flint: bool | None = None) -> tuple[bool, str, str]:
    """Decide exactly whether the symmetric integer matrix ``a_int`` is positive definite.

    Fraction-free LDLᵀ (Bareiss): after step ``k`` the pivot equals the leading principal
    minor of order ``k+1``; all pivots positive iff positive definite (Sylvester's criterion).

    Returns
    -------
    (proved, detail, backend)

    >>> prove_pd_ldl(np.array([[2, -1], [-1, 2]]), use_flint=False)[0]
    True
    >>> prove_pd_ldl(np.array([[1, 2], [2, 1]]), use_flint=False)[:2]
    (False, 'leading principal minor 2 is -3')
    """
    a = np.asarray(a_int, dtype=object)
    size = a.shape[0]
    if size == 0:
        return True, "empty matrix", "python"
    if use_flint is None:
        use_flint = flint_available()
    if use_flint:
        import flint
        m = flint.fmpz_mat([[int(x) for x in row] for row in a])
        perm, _, _, upper = m.fflu()
        if all(perm[i, i] == 1 for i in range(size)):
            for k in range(size):
                if not upper[k, k] > 0:
                    return False, f"leading principal minor {k + 1} is {_short(int(upper[k, k]))}", "flint"
            return True, f"all {size} leading principal minors positive", "flint"
        # a permuted row means some pivot was 0 for flint; decide without relying on its choice
    prev = 1
    a = a.copy()
    for k in range(size):
        p = a[k, k]
        if p <= 0:
            return False, f"leading principal minor {k + 1} is {_short(int(p))}", "python"
        if k + 1 < size:
            col = a[k + 1:, k]
            a[k + 1:, k + 1:] = (p * a[k + 1:, k + 1:] - np.outer(col, col)) // prev
        prev = p
    return True, f"all {size} leading principal minors positive", "python"


def _short(x: int) -> str:
    s = str(x)
    return s if len(s) <= 24 else f"{s[:8]}...({len(s)} digits)"


def cholesky_shift(n: int, diag: int) -> float:
    """The shifted diagonal ``d̃`` of :func:`prove_pd_cholesky`: the largest float below ``d - γ/(1-γ)·n·d``.

    ``γ = γ_{n+1} = (n+1)u / (1 - (n+1)u)``, ``u = 2⁻⁵³``, computed exactly; the shift actually
    used is ``α = d - d̃ > γ/(1-γ)·n·d``.

    >>> d = cholesky_shift(100, 2**30); 1.2e-3 < 2**30 - d < 1.21e-3     # ≈ 101·100·2³⁰·2⁻⁵³
    True
    """
    g = (n + 1) * _U / (1 - (n + 1) * _U)
    target = Fraction(diag) - g / (1 - g) * n * diag
    f = float(target)
    if Fraction(f) >= target:
        f = math.nextafter(f, -math.inf)
    return f


_TINY, _HUGE = 2.0**-500, 2.0**500


def prove_pd_cholesky(a_int) -> tuple[bool, str, str]:
    """Prove that ``A`` (symmetric, integer, constant diagonal ``d``) is positive definite by float Cholesky.

    Criterion (the approach of "Verification of positive definiteness", 2006): run the
    Cholesky recurrence in IEEE double on ``Ã = A - αI``, whose diagonal is the float
    ``d̃ = cholesky_shift(n, d)`` (so ``α = d - d̃ > γ/(1-γ)·n·d``, with ``γ = γ_{n+1}``,
    ``u = 2⁻⁵³``); if it completes, ``A`` is positive definite.

    Proof.  The off-diagonal entries are integers below ``2⁵³`` and the diagonal is the
    float ``d̃``, so ``Ã`` is stored exactly.  The
    recurrence below is the standard one (``r_kk = sqrt(a_kk - Σ_{l<k} r_lk²)``,
    ``r_kj = (a_kj - Σ_{l<k} r_lk r_lj) / r_kk``, sums subtracted in the order ``l = 0, 1, ...``):
    right-looking, one BLAS ``dsyr`` rank-1 update ``a_ij <- a_ij - r_ki r_kj`` of the upper
    triangle per step (with or without a fused multiply-add, each update obeys the standard
    rounding model ``fl(a - bc) = (a - bc(1+δ₁))(1+δ₂)``, ``|δ| <= u``, which is all the bound needs).
    If it runs to completion without underflow, the computed factor satisfies
    ``R̂ᵀR̂ = Ã + E`` with ``|E| <= γ_{n+1}|R̂ᵀ||R̂|`` ("Accuracy and Stability of Numerical
    Algorithms", 2nd ed., 2002, Theorem 10.3; theorem number quoted from memory).  By Cauchy–Schwarz
    ``(|R̂ᵀ||R̂|)_ij <= ||r_i|| ||r_j||`` (``r_i`` the i-th column), and
    ``||r_i||² = ã_ii + E_ii <= ã_ii + γ||r_i||²``, so ``||r_i||² <= ã_ii/(1-γ)``.  Hence
    ``||E||₂ <= || |E| ||₂ <= γ/(1-γ)·||ddᵀ||₂ = γ/(1-γ)·tr(Ã) = γ/(1-γ)·n·d̃ < α``.
    So ``A = R̂ᵀR̂ - E + αI ⪰ (α - ||E||₂) I ≻ 0``.  Underflow is excluded by checking that
    every computed ``r`` is 0 or has modulus in ``[2⁻⁵⁰⁰, 2⁵⁰⁰]``: then every product and
    quotient is a normal number, and an addition that yields a subnormal is exact.

    Returns
    -------
    (proved, detail, backend)

    >>> prove_pd_cholesky(np.array([[4, -1], [-1, 4]]))[0]
    True
    >>> prove_pd_cholesky(np.array([[1, 2], [2, 1]]))[0]
    False
    """
    a_int = np.asarray(a_int)
    size = a_int.shape[0]
    if size == 0:
        return True, "empty matrix", "numpy"
    diag = np.diag(a_int)
    d = int(diag[0])
    if not (diag == d).all():
        raise ValueError("prove_pd_cholesky needs a constant diagonal")
    if int(np.max(np.abs(a_int))) >= 2**53:
        return False, "entries too large for exact float64 storage", "numpy"
    dshift = cholesky_shift(size, d)
    alpha = Fraction(d) - Fraction(dshift)
    from scipy.linalg.blas import dsyr

    a = np.asfortranarray(a_int, dtype=np.float64)
    a[np.diag_indices(size)] = dshift
    x = np.zeros(size)
    for k in range(size):
        p = a[k, k]
        if not p > 0.0:
            return False, f"pivot {k + 1} of the shifted matrix is {p:.3g} (shift α = {float(alpha):.3g})", "numpy"
        r = math.sqrt(p)
        row = a[k, k + 1:] / r
        nz = np.abs(row[row != 0.0])
        if r < _TINY or r > _HUGE or (nz.size and (nz.min() < _TINY or nz.max() > _HUGE)):
            return False, f"Cholesky left the safe exponent range at step {k + 1}", "numpy"
        a[k, k + 1:] = row
        x[:] = 0.0
        x[k + 1:] = row
        # upper triangle: a_ij <- a_ij - r_ki r_kj for k < i <= j (entries with x_i = 0 are unchanged exactly)
        a = dsyr(-1.0, x, lower=0, a=a, overwrite_a=1)
    return True, f"float Cholesky of A - α·I completed (α = {float(alpha):.3g}, {size} rows)", "numpy"


def prove_pd_residual(a_int, lam_min_hint: float | None = None) -> tuple[bool, str, str]:
    """Prove that the symmetric integer matrix ``A`` is positive definite by an exactly checked float Cholesky.

    No floating-point error analysis is involved: a float Cholesky factor only *suggests* a
    certificate, which is then checked in exact integer arithmetic.

    1. ``σ = λ/2`` with ``λ`` a float estimate of ``λ_min(A)`` (``lam_min_hint`` or ``eigvalsh``);
       ``R`` = LAPACK Cholesky factor of ``A - σI`` (float).
    2. ``R_int = rint(R·2^t)`` (integers of at most 40 bits), split as ``R_int = 2²⁰·H + L`` with
       ``|H| <= 2²⁰`` and ``0 <= L < 2²⁰``.  ``S = R_intᵀR_int = 2⁴⁰HᵀH + 2²⁰(HᵀL + LᵀH) + LᵀL``:
       each of the three float64 matrix products (``LᵀH = (HᵀL)ᵀ``) has integer operands below ``2²⁰`` and
       ``n <= 2048`` terms, so every partial sum is an integer below ``2⁵¹`` and the
       products are exact (in any summation order, with or without FMA).
    3. ``E = 2^{2t}·A - S`` exactly (int64 with every intermediate checked to stay below
       ``2⁶²`` first, see :func:`_residual_slack_int64`; else Python integers).  ``S`` is a Gram matrix, so
       ``2^{2t}A = S + E ⪰ E``; if ``E`` is strictly diagonally dominant with positive
       diagonal (Gershgorin), ``E ≻ 0`` and hence ``A ≻ 0``.

    Returns
    -------
    (proved, detail, backend)

    >>> prove_pd_residual(np.array([[4, -1], [-1, 4]]))[0], prove_pd_residual(np.array([[1, 2], [2, 1]]))[0]
    (True, False)
    """
    import scipy.linalg

    a_int = np.asarray(a_int, dtype=np.int64)
    size = a_int.shape[0]
    if size == 0:
        return True, "empty matrix", "exact-residual"
    if size > 2048:
        return False, "exact residual check handles at most 2048 rows", "exact-residual"
    if int(np.max(np.abs(a_int))) >= 2**53:
        return False, "entries too large for exact float64 storage", "exact-residual"
    af = a_int.astype(np.float64)
    lam = float(np.linalg.eigvalsh(af)[0]) if lam_min_hint is None else float(lam_min_hint)
    if not lam > 0:
        return False, f"float estimate of the smallest eigenvalue is {lam:.3g}", "exact-residual"
    sigma = lam / 2
    try:
        r = scipy.linalg.cholesky(af - sigma * np.eye(size), lower=False, check_finite=True)
    except np.linalg.LinAlgError:
        return False, "float Cholesky of A - σI failed", "exact-residual"
    top = float(np.max(np.abs(r)))
    t = 40 - math.frexp(top)[1]
    r_int = np.rint(np.ldexp(r, t)).astype(np.int64)
    hi, lo = r_int >> 20, r_int & (2**20 - 1)
    hf, lf = hi.astype(np.float64), lo.astype(np.float64)
    hh, hl, ll = hf.T @ hf, hf.T @ lf, lf.T @ lf
    hh_i, hl_i, ll_i = (np.rint(m).astype(np.int64) for m in (hh, hl, ll))  # exact: integers below 2**51
    y = hl_i + hl_i.T
    slack = _residual_slack_int64(a_int, t, hh_i, y, ll_i)
    if slack is None:  # intermediate values too large for int64: Python integers
        gram = hh_i.astype(object) * 2**40 + y.astype(object) * 2**20 + ll_i.astype(object)
        e = a_int.astype(object) * (2 ** (2 * t)) - gram if t >= 0 else \
            a_int.astype(object) - gram / Fraction(2) ** (-2 * t)
        diag = e.diagonal().copy()
        slack = diag - (np.abs(e).sum(axis=1) - np.abs(diag))
    worst = int(np.argmin(slack))
    if not slack[worst] > 0:
        return False, f"exact residual not diagonally dominant at row {worst + 1}", "exact-residual"
    return True, f"exact residual of a float Cholesky of A - σI is diagonally dominant ({size} rows)", \
        "exact-residual"


def _residual_slack_int64(a_int, t, hh, y, ll):
    """Gershgorin slack ``E_ii - Σ_{k≠i} |E_ik|`` of ``E = 2^{2t}A - 2⁴⁰HH - 2²⁰Y - LL`` in int64.

    Evaluated as ``E = 2²⁰(2²⁰(2^{2t-40}A - HH) - Y) - LL``; every intermediate is checked to stay
    below ``2⁶²`` in modulus before it is formed, so no int64 operation overflows; row sums split
    ``|E|`` into 31-bit halves.  Returns None when a check fails (the caller uses Python integers).
    """
    s2 = 2 * t - 40
    if s2 < 0 or int(np.max(np.abs(a_int))) >= 2 ** (62 - s2):
        return None
    x = a_int * (2**s2) - hh
    if int(np.max(np.abs(x))) >= 2**41:
        return None
    z = x * 2**20 - y
    if int(np.max(np.abs(z))) >= 2**41:
        return None
    e = z * 2**20 - ll
    ab = np.abs(e)
    hi, lo = ab >> 31, ab & (2**31 - 1)
    rows = [int(h) * 2**31 + int(lw) for h, lw in zip(hi.sum(axis=1), lo.sum(axis=1))]
    diag = [int(v) for v in e.diagonal()]
    return np.array([d - (r - abs(d)) for d, r in zip(diag, rows)], dtype=object)
