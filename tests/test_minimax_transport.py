"""The minimax program in one solve (:mod:`advbound.programs.minimax_transport`).

Sources for what is asserted here:

* The Birkhoff–von Neumann theorem (a doubly stochastic matrix is a convex combination of
  permutation matrices) and the integrality of transportation polytopes with integer margins:
  common knowledge.  The plans below are built as known combinations of integer plans, so the
  decomposition must reproduce them exactly.
* The program's value is compared with the cutting planes of :mod:`advbound.programs.minimax`, an
  independent algorithm for the same minimax form ("All quantum adversary methods are
  equivalent", 2006, arXiv:quant-ph/0409116, Theorem 2), and with the dense positive program in
  tests/test_minimax.py (which now runs this program by default).
"""

import numpy as np
import pytest

from advbound.functions.rowfamily import position_search_family
from advbound.programs.minimax import solve_minimax, solve_minimax_rows
from advbound.programs.minimax_transport import decompose_plan, solve_transport, transport_layout


def _integer_plan(rng, left, right):
    """A random integer plan with the given margins (rows of a random permutation, grouped)."""
    ra, rb = np.repeat(np.arange(left.size), left), np.repeat(np.arange(right.size), right)
    N = np.zeros((left.size, right.size), dtype=np.int64)
    np.add.at(N, (ra, rb[rng.permutation(rb.size)]), 1)
    return N


@pytest.mark.parametrize("seed", range(6))
def test_decomposition_rebuilds_the_plan_from_integer_plans_with_its_margins(seed):
    rng = np.random.default_rng(seed)
    left, right = rng.integers(1, 4, size=3), None
    n = int(left.sum())
    right = np.bincount(rng.integers(0, 4, size=n), minlength=4)
    right = right[right > 0]
    thetas = rng.random(5)
    plan = sum(t * _integer_plan(rng, left, right) for t in thetas)
    parts = decompose_plan(plan, left, right)
    assert sum(t for t, _ in parts) == pytest.approx(thetas.sum(), rel=1e-9)
    rebuilt = sum(t * N for t, N in parts)
    assert np.allclose(rebuilt, plan, atol=1e-9)
    for t, N in parts:
        assert t > 0 and np.array_equal(N.sum(axis=1), left) and np.array_equal(N.sum(axis=0), right)


def test_decomposition_of_a_zero_plan_is_empty():
    assert decompose_plan(np.zeros((2, 2)), np.array([1, 1]), np.array([1, 1])) == []


@pytest.mark.parametrize("n,T,max_ones,outer", [
    (3, 6, None, "or"), (3, 6, None, "and"), (3, 5, None, "threshold:2"), (4, 8, 1, "or"), (5, 10, 1, "or"),
    (4, 7, None, "or")])
def test_one_solve_agrees_with_the_cutting_planes(n, T, max_ones, outer):
    fam = position_search_family(outer, n, T, max_ones)
    one, cuts = solve_transport(fam), solve_minimax(fam)
    assert one.status == "optimal" and cuts.status == "optimal"
    assert one.t == pytest.approx(cuts.t, rel=1e-6) and one.phi == pytest.approx(cuts.phi, rel=1e-6)
    # the multipliers are a distribution over pair orbits of total mass t (stationarity in t)
    assert one.multipliers.min() > 0 and one.multipliers.sum() == pytest.approx(1.0, rel=1e-5)


def test_layout_counts_one_edge_per_letter_pair_of_each_content_pair():
    fam = position_search_family("or", 4, 8, max_ones=1)
    lay = transport_layout(fam)
    held = [(np.bincount(c, minlength=len(fam.letters)) > 0).sum() for c in fam.contents]
    assert lay["edge_pair"].size == sum(held[i] * held[j] for i, j in lay["pairs"].tolist())
    assert lay["pot_pair"].size == sum(held[i] + held[j] for i, j in lay["pairs"].tolist())


def test_without_a_point_the_cutting_planes_take_over(monkeypatch):
    import advbound.programs.minimax_transport as mt

    real = mt.solve_transport

    def failed(fam, tol=1e-6, verbose=False):
        pt = real(fam, tol)
        return type(pt)(**{**pt.__dict__, "status": "failed"})

    monkeypatch.setattr(mt, "solve_transport", failed)
    r = solve_minimax_rows(position_search_family("or", 4, 8, max_ones=1))
    assert r.status == "optimal" and "cutting planes program" in r.message
    assert r.certificate.metadata["minimax"]["program"] == "cutting planes"


def test_cost_weighted_rows_agree_with_the_dense_positive_program():
    """Unequal query costs per position (the cost-weighted bound ADV_c): the one solve against the dense program."""
    import dataclasses

    from advbound.functions.rowbasis import expand_gamma, row_basis
    from advbound.programs.solve import solve

    fam = position_search_family("or", 3, 6, None)
    fam = dataclasses.replace(fam, costs=tuple(1.0 + 0.5 * q for q in range(fam.row_length)))
    basis = row_basis(fam)
    f, _ = expand_gamma(basis, np.zeros(basis.n_weights))
    assert f.costs == tuple(fam.costs) * fam.n               # the expanded inputs are the rows side by side
    dense = solve(f, bound="positive", method="dense", solver="CLARABEL")
    one = solve_minimax_rows(fam)
    assert one.status == "optimal", one.message
    assert one.lower == pytest.approx(dense.lower, rel=1e-5)
    assert one.lower <= dense.upper * (1 + 1e-6) and dense.lower <= one.upper * (1 + 1e-6)
