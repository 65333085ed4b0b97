"""The one numerical definition of each quantity behind the bounds (numpy/scipy only).

Everything that reports a bound (``verify``, ``report``, the tests) calls these
functions; only the SDP layer knows a cone encoding.  They take plain arrays so
that a certificate file can be checked without building a function:

* ``symbols``: int array ``(|D|, N)`` of alphabet indices, canonical order;
* ``output_index``: int array ``(|D|,)``;
* ``costs``: float array ``(N,)``.

Adversary ratio (common knowledge; see "Negative weights make adversaries
stronger", 2007, arXiv:quant-ph/0611054): for any real symmetric ``Gamma``
with ``Gamma[x, y] = 0`` whenever ``f(x) = f(y)``,

    ||Gamma|| / max_j (||Gamma o Delta_j|| / c_j)  <=  ADV±_c(f).

>>> import numpy as np
>>> sym = np.array([[0, 0], [1, 0], [0, 1]])          # OR_2 restricted to weight <= 1
>>> out = np.array([0, 1, 1])
>>> g = np.zeros((3, 3)); g[0, 1:] = g[1:, 0] = 1.0
>>> round(adversary_ratio(g, sym, np.ones(2)), 12)
1.414213562373
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

__all__ = [
    "spectral_norm",
    "delta_mask",
    "masked",
    "constraint_norms",
    "adversary_ratio",
    "equal_output_mass",
    "zero_equal_outputs",
    "dual_objective",
    "dual_pair_sums",
    "dual_equality_residual",
]


def spectral_norm(m) -> float:
    """Largest singular value of a dense or scipy-sparse matrix (dense LAPACK for dense input)."""
    if sp.issparse(m):
        m = m.toarray()
    m = np.asarray(m, dtype=float)
    if m.size == 0:
        return 0.0
    if m.shape[0] == m.shape[1] and np.array_equal(m, m.T):
        w = np.linalg.eigvalsh(m)
        return float(max(abs(w[0]), abs(w[-1])))
    return float(np.linalg.norm(m, 2))


def delta_mask(symbols: np.ndarray, j: int) -> np.ndarray:
    """Boolean matrix, True where inputs differ at position ``j``."""
    col = np.asarray(symbols)[:, j]
    return col[:, None] != col[None, :]


def masked(gamma, symbols: np.ndarray, j: int):
    """``Gamma o Delta_j`` (dense in, dense out; sparse in, sparse out)."""
    col = np.asarray(symbols)[:, j]
    if sp.issparse(gamma):
        g = gamma.tocoo()
        keep = col[g.row] != col[g.col]
        return sp.coo_matrix((g.data[keep], (g.row[keep], g.col[keep])), shape=g.shape).tocsr()
    return np.where(col[:, None] != col[None, :], gamma, 0.0)


def constraint_norms(gamma, symbols: np.ndarray) -> np.ndarray:
    """``||Gamma o Delta_j||`` for every position ``j``."""
    symbols = np.asarray(symbols)
    return np.array([spectral_norm(masked(gamma, symbols, j)) for j in range(symbols.shape[1])])


def adversary_ratio(gamma, symbols: np.ndarray, costs: np.ndarray) -> float:
    """``||Gamma|| / max_j(||Gamma o Delta_j|| / c_j)``: a lower bound on ADV±_c when Γ vanishes on F."""
    norms = constraint_norms(gamma, symbols)
    worst = float(np.max(norms / np.asarray(costs, dtype=float))) if norms.size else 0.0
    if worst == 0.0:
        return 0.0
    return spectral_norm(gamma) / worst


def equal_output_mass(gamma, output_index: np.ndarray) -> float:
    """Largest ``|Gamma[x, y]|`` over pairs with equal outputs (0 for a valid adversary matrix)."""
    o = np.asarray(output_index)
    if sp.issparse(gamma):
        g = gamma.tocoo()
        bad = o[g.row] == o[g.col]
        return float(np.max(np.abs(g.data[bad]), initial=0.0))
    g = np.asarray(gamma)
    return float(np.max(np.abs(np.where(o[:, None] == o[None, :], g, 0.0)), initial=0.0))


def zero_equal_outputs(gamma, output_index: np.ndarray):
    """Copy of ``Gamma`` with the equal-output entries set to zero, symmetrised."""
    o = np.asarray(output_index)
    if sp.issparse(gamma):
        g = gamma.tocoo()
        keep = o[g.row] != o[g.col]
        g = sp.coo_matrix((g.data[keep], (g.row[keep], g.col[keep])), shape=g.shape).tocsr()
        return (g + g.T) * 0.5
    g = np.where(o[:, None] != o[None, :], np.asarray(gamma, dtype=float), 0.0)
    return (g + g.T) * 0.5


def dual_objective(x_plus: np.ndarray, x_minus: np.ndarray | None, costs: np.ndarray) -> float:
    """``max_x sum_j c_j (X_j+ + X_j-)[x, x]`` for stacks ``X`` of shape ``(N, |D|, |D|)``."""
    diag = np.einsum("jxx->jx", x_plus)
    if x_minus is not None:
        diag = diag + np.einsum("jxx->jx", x_minus)
    return float(np.max(np.asarray(costs, dtype=float) @ diag))


def dual_pair_sums(x_plus: np.ndarray, x_minus: np.ndarray | None, symbols: np.ndarray) -> np.ndarray:
    """``S[x, y] = sum_{j: x_j != y_j} (X_j+ - X_j-)[x, y]`` (the dual's equality left-hand side)."""
    symbols = np.asarray(symbols)
    s = np.zeros(x_plus.shape[1:])
    for j in range(symbols.shape[1]):
        d = delta_mask(symbols, j)
        xj = x_plus[j] if x_minus is None else x_plus[j] - x_minus[j]
        s += np.where(d, xj, 0.0)
    return s


def dual_equality_residual(x_plus, x_minus, symbols, output_index) -> float:
    """Largest ``|S[x, y] - 1|`` over pairs with different outputs."""
    o = np.asarray(output_index)
    s = dual_pair_sums(x_plus, x_minus, symbols)
    diff = o[:, None] != o[None, :]
    if not diff.any():
        return 0.0
    return float(np.max(np.abs(s[diff] - 1.0)))
