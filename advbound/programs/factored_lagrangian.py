"""The augmented-Lagrangian machinery of the factored ADV± solver: pair structure, L-BFGS, factor state.

This module owns the optimiser behind :func:`advbound.programs.factored.solve_factored`: the
bipartite pair structure :class:`_Pairs` (pair sums of the factors and their adjoints, evaluated
block by block from the short side), the in-place L-BFGS used for the inner problems, and
:class:`FactoredState` (factors, epigraph variable, multipliers; inner solve, multiplier step,
rank growth).  It computes no reported number: the bounds are verified in
:mod:`advbound.programs.factored`.
"""

from __future__ import annotations

import math
import time

import numpy as np
import scipy.linalg.blas as _blas

__all__ = ["FactoredState"]


class _Pairs:
    """The bipartite pair structure: sums ``S = sum_j M_j o (U0_j U1_j^T)`` and their adjoints.

    Factors are stored position-major, ``u0[j]`` of shape ``(n0, r)``.  For every position ``j`` and
    every symbol ``a`` of the 0-inputs, the pairs ``{x: x_j = a} x {y: y_j != a}`` form one block;
    a block is evaluated in *row form* (its few rows against all 1-inputs, then masked) or in
    *column form* (all 0-inputs against its few columns), whichever is smaller, so that a
    position-search row costs ``O(|D0| |D1| r)`` per position block instead of ``O(|D0| |D1| N r)``.
    """

    def __init__(self, s0: np.ndarray, s1: np.ndarray, costs: np.ndarray):
        self.n0, self.n1 = s0.shape[0], s1.shape[0]
        self.N = s0.shape[1]
        self.costs = np.asarray(costs, dtype=float)
        self.s0, self.s1 = s0, s1
        self.rows = []   # (j, A index array, column mask over D1 (float))
        self.cols = []   # (j, C index array, row mask over D0 (float))
        cnt = np.zeros((self.n0, self.n1))
        deg0 = np.zeros((self.N, self.n0))
        deg1 = np.zeros((self.N, self.n1))
        for j in range(self.N):
            for a in np.unique(s0[:, j]):
                amask = s0[:, j] == a
                cmask = s1[:, j] != a
                na, nc = int(amask.sum()), int(cmask.sum())
                if na == 0 or nc == 0:
                    continue
                cnt += np.outer(amask, cmask)
                if na * self.n1 <= nc * self.n0:
                    self.rows.append((j, np.flatnonzero(amask), cmask.astype(float)))
                else:
                    self.cols.append((j, np.flatnonzero(cmask), amask.astype(float)))
                deg0[j] += amask * nc
                deg1[j] += cmask * na
        self.count = cnt
        # diagonal preconditioner: variables of (x, j) meet deg[j, x] constraints
        mean = float(np.concatenate([deg0.ravel(), deg1.ravel()]).mean())
        self.w0 = np.sqrt(mean / np.maximum(deg0, 1.0))[:, :, None]
        self.w1 = np.sqrt(mean / np.maximum(deg1, 1.0))[:, :, None]

    def sums(self, u0, u1):
        """``S[x, y] = sum_{j: x_j != y_j} <u0[j, x], u1[j, y]>``."""
        s = np.zeros((self.n0, self.n1))
        st = np.zeros((self.n1, self.n0))
        for j, a, cm in self.rows:
            s[a] += (u0[j][a] @ u1[j].T) * cm
        for j, c, am in self.cols:
            st[c] += (u1[j][c] @ u0[j].T) * am
        return s + st.T

    def adjoint(self, lam, u0, u1):
        """Gradients of ``<lam, S(u0, u1)>`` with respect to ``u0`` and ``u1``."""
        g0 = np.zeros_like(u0)
        g1 = np.zeros_like(u1)
        lt = np.ascontiguousarray(lam.T)
        for j, a, cm in self.rows:
            k = lam[a] * cm
            g0[j][a] += k @ u1[j]
            g1[j] += k.T @ u0[j][a]
        for j, c, am in self.cols:
            k = lt[c] * am
            g1[j][c] += k @ u0[j]
            g0[j] += k.T @ u1[j][c]
        return g0, g1

    def mask(self, j: int) -> np.ndarray:
        """Boolean ``(n0, n1)``: pairs that differ at position ``j``."""
        return self.s0[:, j][:, None] != self.s1[:, j][None, :]


def _lbfgs(fun, z, maxiter, m=8, gtol=1e-12, deadline=math.inf):
    """Minimise ``fun`` (returning value and gradient) by L-BFGS with a backtracking Armijo search.

    Vector updates go through BLAS ``daxpy``/``ddot`` in place: at ``10^5``-``10^6`` variables the
    two-loop recursion, not the function, would otherwise dominate.
    """
    axpy, dot = _blas.daxpy, _blas.ddot
    f, g = fun(z)
    ss, ys, rhos = [], [], []
    nit = 0
    gn0 = math.sqrt(dot(g, g)) or 1.0
    q = np.empty_like(z)
    for nit in range(1, maxiter + 1):
        q[:] = g
        alphas = []
        for s_, y_, r_ in zip(reversed(ss), reversed(ys), reversed(rhos)):
            a_ = r_ * dot(s_, q)
            alphas.append(a_)
            axpy(y_, q, a=-a_)
        if ys:
            q *= dot(ss[-1], ys[-1]) / dot(ys[-1], ys[-1])
        else:
            q *= 1.0 / gn0
        for (s_, y_, r_), a_ in zip(zip(ss, ys, rhos), reversed(alphas)):
            b_ = r_ * dot(y_, q)
            axpy(s_, q, a=a_ - b_)
        slope = -dot(g, q)
        if slope >= 0:
            ss, ys, rhos = [], [], []
            q[:] = g
            q *= 1.0 / gn0
            slope = -dot(g, q)
        step = 1.0
        for _ in range(30):
            zn = z.copy()
            axpy(q, zn, a=-step)
            fn, gn = fun(zn)
            if fn <= f + 1e-4 * step * slope:
                break
            step *= 0.3
        else:
            break
        # reuse the oldest pair's storage for the new one
        if len(ss) >= m:
            s_, y_ = ss.pop(0), ys.pop(0)
            rhos.pop(0)
            s_[:] = zn
        else:
            s_, y_ = zn.copy(), np.empty_like(z)
        axpy(z, s_, a=-1.0)
        y_[:] = gn
        axpy(g, y_, a=-1.0)
        sy = dot(s_, y_)
        if sy > 1e-300:
            ss.append(s_)
            ys.append(y_)
            rhos.append(1.0 / sy)
        z, f, g = zn, fn, gn
        if math.sqrt(dot(g, g)) <= gtol * gn0 or time.perf_counter() > deadline:
            break
    return z, f, nit


def _diag_sums(u, costs):
    """``sum_j c_j ||u[j, x]||^2`` for every input ``x``."""
    return costs @ np.einsum("jxr,jxr->jx", u, u)


def _gamma_from(lam, mu0, mu1):
    """``-lam / (2 sqrt(mu0 mu1^T))``, 0 on rows/columns whose multiplier vanishes."""
    d0, d1 = np.sqrt(mu0), np.sqrt(mu1)
    tiny = 1e-12 * max(float(d0.max(initial=0)), float(d1.max(initial=0)), 1e-300)
    i0 = np.where(d0 > tiny, 1.0 / np.maximum(d0, tiny), 0.0)
    i1 = np.where(d1 > tiny, 1.0 / np.maximum(d1, tiny), 0.0)
    return -0.5 * lam * i0[:, None] * i1[None, :]


class FactoredState:
    """Factors ``u0 (N, |D0|, r)``, ``u1 (N, |D1|, r)``, epigraph variable and multipliers."""

    def __init__(self, pairs: _Pairs, rank: int, rng: np.random.Generator):
        self.pairs = pairs
        n0, n1, N = pairs.n0, pairs.n1, pairs.N
        # start from the constant point u = alpha e_1 (pair sums alpha^2 count), plus 10% noise
        alpha = 1.0 / math.sqrt(max(float(pairs.count.mean()), 1e-12))
        u0 = 0.1 * alpha * rng.standard_normal((N, n0, rank)) / math.sqrt(rank)
        u1 = 0.1 * alpha * rng.standard_normal((N, n1, rank)) / math.sqrt(rank)
        u0[:, :, 0] += alpha
        u1[:, :, 0] += alpha
        self.u0, self.u1 = u0, u1
        self.t = float(max(_diag_sums(self.u0, pairs.costs).max(), _diag_sums(self.u1, pairs.costs).max()))
        self.lam = np.zeros((n0, n1))
        nd = n0 + n1
        self.mu0 = np.full(n0, 1.0 / nd)
        self.mu1 = np.full(n1, 1.0 / nd)

    @property
    def rank(self) -> int:
        return self.u0.shape[2]

    def grow(self, extra: int, rng):
        """Append ``extra`` small random columns to every factor."""
        n0, n1, N = self.pairs.n0, self.pairs.n1, self.pairs.N
        eps = 1e-3 * math.sqrt(max(self.t, 1e-12) / max(N, 1))
        self.u0 = np.concatenate([self.u0, eps * rng.standard_normal((N, n0, extra))], axis=2)
        self.u1 = np.concatenate([self.u1, eps * rng.standard_normal((N, n1, extra))], axis=2)

    def inner(self, sig_e, sig_i, maxiter, precondition=True, gtol=1e-12, deadline=math.inf):
        """Minimise the augmented Lagrangian in (U, t) for fixed multipliers; returns the iterations."""
        p = self.pairs
        n0, n1, N, r = p.n0, p.n1, p.N, self.rank
        c = p.costs
        k0, k1 = N * n0 * r, N * n1 * r
        lam, mu0, mu1 = self.lam, self.mu0, self.mu1
        cst = float(mu0 @ mu0 + mu1 @ mu1)

        w0 = np.broadcast_to(p.w0, (N, n0, r)) if precondition else np.ones((N, n0, r))
        w1 = np.broadcast_to(p.w1, (N, n1, r)) if precondition else np.ones((N, n1, r))
        wz = np.concatenate([w0.ravel(), w1.ravel(), [1.0]])

        def fun(zs):
            z = zs * wz
            u0 = z[:k0].reshape(N, n0, r)
            u1 = z[k0:k0 + k1].reshape(N, n1, r)
            t = z[-1]
            h = p.sums(u0, u1) - 1.0
            le = lam + sig_e * h
            gu0, gu1 = p.adjoint(le, u0, u1)
            g0 = _diag_sums(u0, c)
            g1 = _diag_sums(u1, c)
            m0 = np.maximum(0.0, mu0 + sig_i * (g0 - t))
            m1 = np.maximum(0.0, mu1 + sig_i * (g1 - t))
            val = (t + float(np.vdot(lam, h)) + 0.5 * sig_e * float(np.vdot(h, h))
                   + (float(m0 @ m0 + m1 @ m1) - cst) / (2 * sig_i))
            gu0 += (2.0 * c[:, None] * m0[None, :])[:, :, None] * u0
            gu1 += (2.0 * c[:, None] * m1[None, :])[:, :, None] * u1
            gt = 1.0 - float(m0.sum() + m1.sum())
            return val, np.concatenate([gu0.ravel(), gu1.ravel(), [gt]]) * wz

        z0 = np.concatenate([self.u0.ravel(), self.u1.ravel(), [self.t]]) / wz
        zs, _, nit = _lbfgs(fun, z0, maxiter, gtol=gtol, deadline=deadline)
        z = zs * wz
        self.u0 = z[:k0].reshape(N, n0, r)
        self.u1 = z[k0:k0 + k1].reshape(N, n1, r)
        self.t = float(z[-1])
        return nit

    def update(self, sig_e, sig_i):
        """Multiplier step; returns the (max equality, max inequality) violations before it."""
        p = self.pairs
        h = p.sums(self.u0, self.u1) - 1.0
        g0, g1 = _diag_sums(self.u0, p.costs), _diag_sums(self.u1, p.costs)
        self.lam = self.lam + sig_e * h
        viol_i = max(float(np.max(np.maximum(g0 - self.t, -self.mu0 / sig_i))),
                     float(np.max(np.maximum(g1 - self.t, -self.mu1 / sig_i))))
        self.mu0 = np.maximum(0.0, self.mu0 + sig_i * (g0 - self.t))
        self.mu1 = np.maximum(0.0, self.mu1 + sig_i * (g1 - self.t))
        return float(np.max(np.abs(h))), abs(viol_i)

    def gamma_block(self):
        """The adversary block ``-lam / (2 sqrt(mu0 mu1^T))`` (0 where a multiplier vanishes)."""
        return _gamma_from(self.lam, self.mu0, self.mu1)

    def escape(self, block, rng, extra=1):
        """Grow the rank, starting one new column along the most violated LMI direction."""
        p = self.pairs
        d0, d1 = np.sqrt(self.mu0), np.sqrt(self.mu1)
        best, bj, bvec = 0.0, None, None
        for j in range(p.N):
            b = np.where(p.mask(j), block, 0.0)
            if not b.any():
                continue
            uu, ss, vv = np.linalg.svd(b, full_matrices=False)
            if ss[0] / p.costs[j] > best:
                best, bj, bvec = ss[0] / p.costs[j], j, (uu[:, 0], vv[0])
        self.grow(extra, rng)
        if bj is not None:
            x0, x1 = d0 * bvec[0], -d1 * bvec[1]
            nrm = math.sqrt(float(x0 @ x0 + x1 @ x1)) or 1.0
            scale = 0.1 * math.sqrt(max(self.t, 1e-12))
            self.u0[bj, :, -1] += scale * x0 / nrm
            self.u1[bj, :, -1] += scale * x1 / nrm
