"""Tests of the matrix-free norm bounds in advbound.evidence.iterative against dense LAPACK norms."""

import math

import numpy as np
import pytest
import scipy.sparse as sp

from advbound.evidence.iterative import (lanczos_failure_epsilon, norm_lower, norm_upper_blocks, norm_upper_lowrank,
                                         norm_upper_nonnegative, norm_upper_probabilistic)


def _dense_norm(a):
    return float(np.linalg.norm(a.toarray() if sp.issparse(a) else a, 2))


@pytest.mark.parametrize("seed", range(5))
def test_lower_is_below_dense_norm_signed(seed):
    """A Rayleigh-type lower bound never exceeds the dense spectral norm of a random signed sparse matrix."""
    rng = np.random.default_rng(seed)
    a = sp.random(120, 80, density=0.1, random_state=seed, data_rvs=rng.standard_normal, format="csr")
    b = norm_lower(a, iters=300, seed=seed)
    exact = _dense_norm(a)
    assert b.side == "lower" and b.deterministic
    assert b.value <= exact
    assert b.value >= 0.999 * exact


@pytest.mark.parametrize("seed", range(5))
def test_schur_bound_brackets_nonnegative(seed):
    """The Schur-test bound of a random nonnegative matrix is above its dense norm and within 1e-6 of it."""
    a = sp.random(200, 150, density=0.05, random_state=seed, format="csr")
    up = norm_upper_nonnegative(a)
    exact = _dense_norm(a)
    assert exact <= up.value <= exact * (1 + 1e-6)


def test_schur_bound_on_reducible_matrix_is_valid():
    """A block-diagonal nonnegative matrix (two components, norms 3 and 1) gets an upper bound >= 3."""
    a = sp.block_diag([np.full((3, 3), 1.0), np.eye(4)]).tocsr()   # norms: ||J_3|| = 3, ||I|| = 1
    up = norm_upper_nonnegative(a)
    assert 3.0 <= up.value <= 3.0 + 1e-9


def test_schur_rejects_negative_entries():
    """The Schur test refuses a matrix with a negative entry."""
    with pytest.raises(ValueError, match="negative"):
        norm_upper_nonnegative(np.array([[1.0, -1.0], [0.0, 1.0]]))


def test_blocks_bound_on_signed_block_matrix():
    """The component-wise bound of a signed block-diagonal matrix equals the largest block norm (dense check)."""
    rng = np.random.default_rng(3)
    blocks = [rng.standard_normal((k, k + 1)) for k in (3, 5, 7)]
    a = sp.block_diag(blocks).tocsr()
    perm_r = rng.permutation(a.shape[0])
    perm_c = rng.permutation(a.shape[1])
    a = a[perm_r][:, perm_c]
    up = norm_upper_blocks(a)
    exact = _dense_norm(a)
    assert up.details["components"] == 3
    assert exact <= up.value <= exact * (1 + 1e-8)


def test_blocks_bound_refuses_large_component():
    """A component above max_block raises instead of returning a number."""
    with pytest.raises(ValueError, match="max_block"):
        norm_upper_blocks(sp.csr_matrix(np.ones((10, 10))), max_block=5)


@pytest.mark.parametrize("seed", range(3))
def test_lowrank_bound(seed):
    """||P Q^T|| from the Gram matrices matches the dense norm of a random rank-3 product."""
    rng = np.random.default_rng(seed)
    p, q = rng.standard_normal((60, 3)), rng.standard_normal((40, 3))
    up = norm_upper_lowrank(p, q)
    exact = float(np.linalg.norm(p @ q.T, 2))
    assert exact <= up.value <= exact * (1 + 1e-9)


def test_probabilistic_bound_is_labelled_and_valid():
    """The random-start Lanczos bound is marked probabilistic and lies above the dense norm here."""
    rng = np.random.default_rng(7)
    a = rng.standard_normal((150, 100))
    up = norm_upper_probabilistic(a, steps=40, failure_probability=1e-6, seed=1)
    assert not up.deterministic and up.failure_probability == 1e-6
    assert up.value >= _dense_norm(a)


def test_lanczos_epsilon_formula():
    """The epsilon solves 1.648 sqrt(n) exp(-sqrt(e)(2k-1)) = p (formula of the 1992 random-start paper, from memory)."""
    n, k, p = 10_000, 50, 1e-3
    e = lanczos_failure_epsilon(n, k, p)
    assert math.isclose(1.648 * math.sqrt(n) * math.exp(-math.sqrt(e) * (2 * k - 1)), p, rel_tol=1e-12)
