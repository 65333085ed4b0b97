"""Tests of the large-instance lower bounds (advbound.programs.largescale) against dense definitions and exact values."""

import math

import numpy as np
import pytest

from advbound import quantities
from advbound.functions.domain import domain
from advbound.errors import InvalidFunctionError
from advbound.programs.factored import solve_factored
from advbound.programs.largescale import (arrays_from_function, family_function, large_lower_bound, lowrank_ratio,
                                          position_search_or_arrays, product_weights_factors)


def _dense_gamma(arr, f, p, q):
    """Γ = p q^T placed on f's canonical order."""
    idx = f._index()
    alph = "01*"
    i0 = [idx["".join(alph[c] for c in r)] for r in arr.symbols(0)]
    i1 = [idx["".join(alph[c] for c in r)] for r in arr.symbols(1)]
    g = np.zeros((f.size, f.size))
    g[np.ix_(i0, i1)] = p @ q.T
    g[np.ix_(i1, i0)] = q @ p.T
    return g


@pytest.mark.parametrize("n,T", [(2, 5), (3, 7), (4, 8)])
def test_family_size(n, T):
    """|D| = C(T-1, n-1) 2^n: compositions of T into n positive parts (each <= T-n+1 automatically), 2^n values."""
    arr = position_search_or_arrays(n, T)
    assert arr.size == math.comb(T - 1, n - 1) * 2 ** n
    assert arr.k0.shape[0] == math.comb(T - 1, n - 1)
    assert np.all(arr.k0.sum(axis=1) == T) and np.all(arr.k1.sum(axis=1) == T)


def test_family_matches_builder():
    """The array enumeration equals builders.compose(or_function(3), position_search_row(4), budget sum k = 6)."""
    import advbound.functions.builders as builders
    from advbound.functions.timemodel import Budget

    f = builders.compose(builders.or_function(3), builders.position_search_row(4), budget=Budget.sum_squares(6))
    g = family_function(position_search_or_arrays(3, 6))
    assert f.inputs == g.inputs and f.outputs == g.outputs
    back = arrays_from_function(f)
    assert back.size == f.size and back.T == 6


@pytest.mark.parametrize("seed", range(3))
def test_lowrank_norms_match_dense_definition(seed):
    """For random positive product weights the certified ratio equals quantities.adversary_ratio of the dense Γ."""
    arr = position_search_or_arrays(3, 6)
    f = family_function(arr)
    rng = np.random.default_rng(seed)
    w0, w1, wz = (np.concatenate([[1.0], rng.random(arr.m) + 0.2]) for _ in range(3))
    p, q = product_weights_factors(arr, w0, w1, wz)
    d = domain(f)
    dense = quantities.adversary_ratio(_dense_gamma(arr, f, p, q), d.symbols, d.costs)
    generic, _, _ = lowrank_ratio(arr.symbols(0), arr.symbols(1), np.ones(arr.positions), p, q)
    res = large_lower_bound(3, 6, max_ones=None, weights=(w0, w1, wz))
    assert math.isclose(generic, dense, rel_tol=1e-9)
    assert res.lower <= dense * (1 + 1e-12) and math.isclose(res.lower, dense, rel_tol=1e-9)


def test_signed_rank_two_lowrank_ratio():
    """lowrank_ratio also handles signed rank-2 factors (checked against the dense definition)."""
    arr = position_search_or_arrays(2, 5)
    f = family_function(arr)
    rng = np.random.default_rng(5)
    p, q = rng.standard_normal((arr.k0.shape[0], 2)), rng.standard_normal((arr.k1.shape[0], 2))
    d = domain(f)
    dense = quantities.adversary_ratio(_dense_gamma(arr, f, p, q), d.symbols, d.costs)
    got, _, _ = lowrank_ratio(arr.symbols(0), arr.symbols(1), np.ones(arr.positions), p, q)
    assert got <= dense * (1 + 1e-12) and math.isclose(got, dense, rel_tol=1e-9)


def test_or_without_positions_gives_sqrt_n():
    """With T = n (rows of length 1) the family is OR_4 on weight <= 1; uniform Γ gives sqrt(4) = 2 (common knowledge)."""
    r = large_lower_bound(4, 4, max_ones=1, optimise=False)
    assert r.upper is None and r.success
    assert abs(r.lower - 2.0) < 1e-9 and r.lower <= 2.0


def test_lower_bound_below_exact_value():
    """On OR_3 of position-search rows with sum k = 5 the large-scale bound is below the factored solver's verified upper bound."""
    f = family_function(position_search_or_arrays(3, 5))
    exact = solve_factored(f, tol=1e-4, time_limit=120)
    for max_ones in (None, 1):
        r = large_lower_bound(3, 5, max_ones=max_ones, maxiter=20)
        assert 0 < r.lower <= exact.upper
    # the fitted weights do at least as well as uniform ones
    assert large_lower_bound(3, 5, max_ones=None, maxiter=20).lower >= \
        large_lower_bound(3, 5, max_ones=None, optimise=False).lower - 1e-12


def test_rejects_non_family_function():
    """A function without row groups is refused with a message naming the requirement."""
    from advbound.functions.function import PartialFunction

    f = PartialFunction.from_pairs("01*", [("0*", 0), ("1*", 1)])
    with pytest.raises(InvalidFunctionError, match="groups"):
        large_lower_bound(f)


@pytest.mark.slow
def test_hundred_thousand_inputs():
    """OR_4 of position-search rows, sum k = 52, <= one row of value 1: 5 C(51, 3) = 104,125 inputs certified."""
    r = large_lower_bound(4, 52, max_ones=1, fit_T=24, maxiter=30, time_limit=120)
    assert r.domain_size == 5 * math.comb(51, 3) and r.domain_size >= 100_000
    # the domain contains OR_4 on weight <= 1 (fix all k), whose ADV± is sqrt(4) = 2 (common knowledge);
    # the fitted bound must be at least the uniform-weight one
    assert r.lower >= large_lower_bound(4, 52, max_ones=1, optimise=False).lower > 2.0
