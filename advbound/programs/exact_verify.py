"""Independent numpy checks of the exact t-query program: a returned point and a set of multipliers.

This module owns :func:`verify_point` (the achievable worst-case success probability of the
explicit algorithm built from a returned, possibly slightly infeasible, point, and the residuals
found on the way, as a :class:`PointCheck`) and :func:`verify_dual` (an upper bound on every
``t``-query algorithm from any multipliers, after repairing them to exact dual feasibility).
Neither needs a solver; :func:`advbound.programs.exact.solve_exact` calls both on the solver's
answer (the module docstring of :mod:`advbound.programs.exact` describes the two numbers).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Sequence

import numpy as np

__all__ = ["PointCheck", "verify_point", "verify_dual"]


@dataclasses.dataclass(frozen=True)
class PointCheck:
    """What the independent check of a returned point found.

    Attributes
    ----------
    success_probability : float
        Achievable worst-case success probability of the algorithm built from the
        (clipped) point: ``min_x (sqrt(P_{f(x)}[x,x]) - e_x)_+^2``.
    raw_success : float
        ``min_x P_{f(x)}[x,x]`` of the returned point, before any correction.
    psd_violation : float
        Largest negative eigenvalue magnitude clipped from any block (and negative weight).
    equality_residual : float
        Largest entry of ``|M_k - Σ_ℓ Γ_{k+1,ℓ}|`` over the steps, after clipping.
    drift : float
        ``max_x e_x``: the accumulated distance between the built algorithm's states and the point's.
    """

    success_probability: float
    raw_success: float
    psd_violation: float
    equality_residual: float
    drift: float


def _psd_part(A: np.ndarray) -> tuple[np.ndarray, float]:
    A = (A + A.conj().T) / 2
    w, V = np.linalg.eigh(A)
    neg = float(max(0.0, -w[0])) if w.size else 0.0
    return (V * np.clip(w, 0, None)) @ V.conj().T, neg


def _sqrt_psd(A: np.ndarray) -> np.ndarray:
    w, V = np.linalg.eigh((A + A.conj().T) / 2)
    return (V * np.sqrt(np.clip(w, 0, None))) @ V.conj().T


def _drift(M: np.ndarray, N: np.ndarray) -> np.ndarray:
    """Per-input distance ``||U a_x - b_x||`` with ``a, b`` realising ``M, N`` and ``U`` the best unitary."""
    A, B = _sqrt_psd(M), _sqrt_psd(N)
    W, _, Vh = np.linalg.svd(A @ B.conj().T)
    U = Vh.conj().T @ W.conj().T
    return np.linalg.norm(U @ A - B, axis=0)


def verify_point(E: np.ndarray, output_index: np.ndarray, c: np.ndarray, gammas: Sequence[np.ndarray],
                 P: np.ndarray) -> PointCheck:
    """Check a point of the exact program with numpy alone and bound what it achieves.

    Parameters
    ----------
    E : ndarray (L, d, d)
        Phase matrices of the branches (branch 0: no query).
    output_index : ndarray (d,)
    c : ndarray (L,)
        Layer-1 weights (``Γ_{1,ℓ} = c_ℓ J``); empty when ``t = 0`` (then ``P_z = p_z J``).
    gammas : list of ndarray (L, d, d)
        Blocks of layers ``2..t``.
    P : ndarray (m, d, d)
        Measurement blocks.
    """
    output_index = np.asarray(output_index)
    d = output_index.size
    L = E.shape[0]
    e = np.zeros(d)
    neg = 0.0
    resid = 0.0
    P = np.asarray(P)
    if c.size == 0:  # t = 0: P_z = p_z J
        p = np.array([P[z, 0, 0].real for z in range(P.shape[0])])
        neg = max(neg, float(max(0.0, -p.min())))
        p = np.clip(p, 0, None)
        resid = abs(float(p.sum()) - 1.0)
        p = p / p.sum() if p.sum() > 0 else np.full(p.size, 1.0 / p.size)
        Pc = p[:, None, None] * np.ones((p.size, d, d))
    else:
        neg = max(neg, float(max(0.0, -np.min(c))))
        cc = np.clip(np.asarray(c, dtype=float), 0, None)
        resid = abs(float(cc.sum()) - 1.0)
        cc = cc / cc.sum() if cc.sum() > 0 else np.eye(1, L).ravel()
        M = np.tensordot(cc, E, axes=1)          # after query 1
        for G in gammas:
            blocks = []
            for l in range(L):
                b, ng = _psd_part(G[l])
                neg = max(neg, ng)
                blocks.append(b)
            N = sum(blocks)
            resid = max(resid, float(np.abs(N - M).max()))
            e += _drift(M, N)
            M = sum(E[l] * blocks[l] for l in range(L))
        Pc = []
        for z in range(P.shape[0]):
            b, ng = _psd_part(P[z])
            neg = max(neg, ng)
            Pc.append(b)
        Pc = np.array(Pc)
        N = Pc.sum(axis=0)
        resid = max(resid, float(np.abs(N - M).max()))
        e += _drift(M, N)
    diag = np.array([Pc[output_index[x], x, x].real for x in range(d)])
    raw = float(diag.min())
    achieved = np.clip(np.sqrt(np.clip(diag, 0, None)) - e, 0, None) ** 2
    return PointCheck(float(min(1.0, achieved.min())), raw, neg, resid, float(e.max()))


def verify_dual(E: np.ndarray, output_index: np.ndarray, Y: Sequence[np.ndarray], mu: np.ndarray,
                n_outputs: int, complements: Sequence[np.ndarray] | None = None) -> float:
    """An upper bound on every ``t``-query algorithm's worst-case success, from any multipliers.

    ``Y[k-1]`` (real symmetric ``d x d``) is the multiplier of step ``k``
    (``M_k = Σ_ℓ Γ_{k+1,ℓ}``, the last step being ``M_t = Σ_z P_z``), ``k = 1..t``;
    ``mu`` weighs the inputs.  Dual feasibility is
    ``Y_t ⪰ diag(mu on f^{-1}(z))`` for every ``z`` and ``Y_{k-1} ⪰ Y_k ∘ conj E_ℓ`` for
    every branch, and then every algorithm succeeds on the worst input with
    probability at most ``max_ℓ Σ_{x,y} Re(E_ℓ ∘ Y_1)``.  The point is made exactly
    feasible, last step first, by adding ``α_k Π_k + λ_k I`` to ``Y_k``, where
    ``Π_k`` (``complements[k-1]``) is the projector onto the complement of the
    space ``U_k`` holding ``M_k`` (it does not change the bound when ``E_ℓ``
    lives on ``U_1``; ``α_k`` is picked from a few trial values) and ``λ_k`` the
    smallest shift that makes every constraint hold.  With ``t = 0`` the bound is
    ``max_z mu(f^{-1}(z))``.
    """
    output_index = np.asarray(output_index)
    mu = np.clip(np.asarray(mu, dtype=float), 0, None)
    mu = mu / mu.sum() if mu.sum() > 0 else np.full(mu.size, 1.0 / mu.size)
    if not Y:
        return float(max(mu[output_index == z].sum() for z in range(n_outputs)))
    d = output_index.size
    eye = np.eye(d)
    Y0 = [np.array((y + y.T) / 2, dtype=float) for y in Y]
    comps = list(complements) if complements is not None else [np.zeros((d, d))] * len(Y0)
    scale0 = 1.0 + max(float(np.abs(y).max()) for y in Y0)
    eps = np.finfo(float).eps

    def shift(needs, base):
        """Smallest λ (plus a rounding margin) with ``base + λ I ⪰ n`` for every ``n`` in ``needs``."""
        lam = 0.0
        for n in needs:
            H = n - base
            H = (H + H.conj().T) / 2
            lam = max(lam, float(np.linalg.eigvalsh(H)[-1]) + 10 * d * eps * float(np.linalg.norm(H)))
        return max(lam, 0.0)

    diag_needs = [np.diag(np.where(output_index == z, mu, 0.0)) for z in range(n_outputs)]
    best = math.inf
    for A in (0.0,) + tuple(10.0 ** (e / 2) for e in range(-2, 16)):
        # α_k grows backwards (α_{k-1} >= α_k is needed on the complements); any choice is valid
        alpha = A * scale0
        Ys = list(Y0)
        base = Ys[-1] + alpha * comps[-1]
        Ys[-1] = base + shift(diag_needs, base) * eye
        for k in range(len(Ys) - 1, 0, -1):
            alpha = 2 * alpha + A * scale0
            base = Ys[k - 1] + alpha * comps[k - 1]
            Ys[k - 1] = base + shift([Ys[k] * E[l].conj() for l in range(E.shape[0])], base) * eye
        ub = max(float(np.real(np.sum(E[l] * Ys[0]))) + 10 * d * d * eps * float(np.abs(Ys[0]).max())
                 for l in range(E.shape[0]))
        best = min(best, ub)
    return float(best)
