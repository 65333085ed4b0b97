"""Tests of the factored first-order ADV± solver (advbound.programs.factored) against known values and a dense SDP."""

import itertools
import math

import numpy as np
import pytest

from advbound import quantities
from advbound.functions.domain import domain
from advbound.errors import InvalidFunctionError
from advbound.programs.factored import solve_factored
from advbound.functions.function import PartialFunction
from advbound.programs.largescale import family_function, position_search_or_arrays


def _or(n, costs=None):
    pairs = [("".join(b), int("1" in b)) for b in itertools.product("01", repeat=n)]
    return PartialFunction.from_pairs("01", pairs, costs=costs)


def _dense_adv(f):
    """ADV± by the bipartite primal of formulations.md (max 2 sum W, c_j diag(rho) - W o Delta_j >= 0), CLARABEL."""
    cp = pytest.importorskip("cvxpy")
    d = domain(f)
    i0, i1 = d.part(0), d.part(1)
    s0, s1 = d.symbols[i0], d.symbols[i1]
    w = cp.Variable((len(i0), len(i1)))
    r0 = cp.Variable(len(i0), nonneg=True)
    r1 = cp.Variable(len(i1), nonneg=True)
    cons = [cp.sum(r0) + cp.sum(r1) == 1]
    for j in range(d.n):
        m = (s0[:, j][:, None] != s1[:, j][None, :]).astype(float)
        if m.any():
            b = cp.multiply(m, w)
            cons.append(cp.bmat([[d.costs[j] * cp.diag(r0), -b], [-b.T, d.costs[j] * cp.diag(r1)]]) >> 0)
    prob = cp.Problem(cp.Maximize(2 * cp.sum(w)), cons)
    prob.solve(solver="CLARABEL")
    return prob.value


class TestKnownValues:
    def test_or4_is_two(self):
        """ADV±(OR_4) = sqrt(4) = 2 (common knowledge; formulations.md 'Useful facts'), both bounds within 1e-4."""
        r = solve_factored(_or(4), tol=1e-5)
        assert r.status == "optimal"
        assert r.lower <= 2.0 + 1e-9 and r.upper >= 2.0 - 1e-9
        assert abs(r.lower - 2.0) < 1e-4 and abs(r.upper - 2.0) < 1e-4

    def test_cost_weighted_or(self):
        """Cost-weighted OR_3 with costs (1, 2, 3) has ADV±_c = sqrt(1 + 4 + 9) (common knowledge: known-times search)."""
        r = solve_factored(_or(3, costs=(1.0, 2.0, 3.0)), tol=1e-5)
        exact = math.sqrt(14.0)
        assert r.status == "optimal"
        assert r.lower <= exact + 1e-9 <= r.upper + 2e-9
        assert r.relative_gap <= 1e-5

    def test_or_of_position_search_rows_matches_dense_sdp(self):
        """OR_3 of position-search rows, sum k = 5 (48 inputs): verified bounds bracket the dense cvxpy optimum within 1e-4."""
        f = family_function(position_search_or_arrays(3, 5))
        dense = _dense_adv(f)
        r = solve_factored(f, tol=1e-4, time_limit=120)
        assert r.status == "optimal"
        assert r.lower <= dense * (1 + 1e-6) and r.upper >= dense * (1 - 1e-6)
        assert r.relative_gap <= 1e-4


class TestCertificate:
    def test_lower_bound_recomputes_from_gamma(self):
        """The reported lower bound equals quantities.adversary_ratio of the certificate's Γ (definition)."""
        f = _or(3)
        r = solve_factored(f, tol=1e-5)
        d = domain(f)
        g = r.certificate.gamma
        assert quantities.equal_output_mass(g, d.output_index) == 0.0
        assert math.isclose(quantities.adversary_ratio(g, d.symbols, d.costs), r.lower, rel_tol=1e-12)

    def test_dual_witness_is_feasible(self):
        """The stored dual witness satisfies every equality (<= 1e-9), is PSD, and its objective is the upper bound."""
        f = _or(3)
        r = solve_factored(f, tol=1e-5)
        c = r.certificate
        d = domain(f)
        assert quantities.dual_equality_residual(c.dual_plus, None, d.symbols, d.output_index) < 1e-9
        for xj in c.dual_plus:
            assert np.linalg.eigvalsh(xj).min() > -1e-9
        assert quantities.dual_objective(c.dual_plus, None, d.costs) <= r.upper * (1 + 1e-9)

    def test_independent_verifier_passes(self):
        """advbound.evidence.verify.verify_certificate accepts the certificate and its bounds bracket sqrt(3) (ADV±(OR_3), common knowledge)."""
        import advbound.evidence.verify as verify
        r = solve_factored(_or(3), tol=1e-5)
        rep = verify.verify_certificate(r.certificate)
        assert rep.passed
        assert rep.lower <= math.sqrt(3) + 1e-9 <= rep.upper + 2e-9


class TestMisuse:
    def test_three_outputs_rejected(self):
        """A function with three output values raises InvalidFunctionError naming the limitation."""
        f = PartialFunction.from_pairs("012", [("0", "a"), ("1", "b"), ("2", "c")])
        with pytest.raises(InvalidFunctionError, match="exactly two"):
            solve_factored(f)

    def test_positive_bound_rejected(self):
        """bound='positive' raises InvalidFunctionError (only ADV± is implemented)."""
        with pytest.raises(InvalidFunctionError, match="positive"):
            solve_factored(_or(2), bound="positive")

    def test_unknown_option_rejected(self):
        """An unknown option name raises instead of being ignored."""
        with pytest.raises(InvalidFunctionError, match="unknown option"):
            solve_factored(_or(2), bogus=1)


@pytest.mark.slow
def test_or_of_position_search_rows_t7_matches_dense_sdp():
    """OR_3 of position-search rows, sum k = 7 (120 inputs): bounds bracket the dense optimum within 1e-4."""
    f = family_function(position_search_or_arrays(3, 7))
    dense = _dense_adv(f)
    r = solve_factored(f, tol=1e-4, time_limit=600)
    assert r.lower <= dense * (1 + 1e-6) and r.upper >= dense * (1 - 1e-6)
    assert r.relative_gap <= 1e-4
