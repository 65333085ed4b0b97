"""Tests of advbound.programs.sdp: the formulation's structure and the raw solver output."""

import math

import numpy as np
import pytest

from advbound import quantities as q
from advbound.functions.domain import domain
from advbound.errors import AdvboundWarning, InvalidFunctionError, SolverError
from advbound.functions.function import PartialFunction
from advbound.programs.sdp import formulate, solve_formulation

from known_instances import boolean, from_rule


def _or(n):
    return boolean(n, any)


class TestFormulate:
    """Tests for ``formulate``."""

    def test_or2_bipartite_sizes(self):
        """OR_2: bipartite form, one |D|x|D| upper LMI per position, 1x3 block plus 4 rho variables."""
        s = formulate(domain(_or(2))).sizes()
        assert (s["form"], s["lmi_sizes"], s["primal_variables"], s["lmi_count"]) == ("bipartite", [4, 4], 7, 2)

    def test_three_outputs_keep_both_sides(self):
        """Hamming weight of 2 bits (3 outputs): full form with an upper and a lower LMI per position."""
        form = formulate(domain(from_rule("01", 2, lambda x: x.count("1"))))
        assert form.form == "full" and len(form.upper) == 2 and len(form.lower) == 2
        assert form.sizes()["lmi_count"] == 4

    def test_positive_drops_lower_side_and_is_nonnegative(self):
        """The positive bound keeps only upper LMIs (implied lower side) and non-negative W blocks."""
        form = formulate(domain(from_rule("01", 2, lambda x: x.count("1"))), bound="positive")
        assert form.lower == () and len(form.upper) == 2
        assert all(v.attributes["nonneg"] for v in form.blocks.values())

    def test_dead_position_skipped(self):
        """A position on which all inputs agree gets no LMI."""
        f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1)])
        form = formulate(domain(f))
        assert form.live == (1,) and form.sizes()["lmi_count"] == 1

    def test_dual_sizes(self):
        """The dual of OR_2 has t plus one symmetric 4x4 matrix per position (1 + 2*10 scalars)."""
        form = formulate(domain(_or(2)))
        assert form.sizes()["dual_variables"] == 21
        assert len(form.dual.x_plus) == 2 and form.dual.x_minus == ()

    def test_constant_rejected(self):
        """A constant function has no program (its bound is 0)."""
        f = PartialFunction.from_pairs("01", [("00", 1), ("11", 1)])
        with pytest.raises(InvalidFunctionError, match="constant"):
            formulate(domain(f))

    def test_unknown_bound(self):
        """An unknown bound kind is misuse."""
        with pytest.raises(InvalidFunctionError, match="bound 'negative'"):
            formulate(domain(_or(2)), bound="negative")


class TestSolveFormulation:
    """Tests for ``solve_formulation``."""

    def test_or3_point(self):
        """OR_3: W symmetric, zero on equal outputs, sum rho = 1, objective sqrt(3) (common knowledge)."""
        d = domain(_or(3))
        raw = solve_formulation(formulate(d), solver="CLARABEL", tol=1e-9)
        w = raw.weights
        assert np.allclose(w, w.T)
        assert q.equal_output_mass(w, d.output_index) == 0.0
        assert raw.rho.sum() == pytest.approx(1.0, abs=1e-7)
        assert w.sum() == pytest.approx(math.sqrt(3), rel=1e-6)
        assert raw.objective == pytest.approx(math.sqrt(3), rel=1e-6)

    def test_multipliers_are_dual_feasible(self):
        """The primal multipliers satisfy the dual pair constraints and their value is sqrt(3) for OR_3."""
        d = domain(_or(3))
        raw = solve_formulation(formulate(d), solver="CLARABEL", tol=1e-9)
        assert raw.dual_minus is None
        assert q.dual_equality_residual(raw.dual_plus, None, d.symbols, d.output_index) < 1e-6
        assert q.dual_objective(raw.dual_plus, None, d.costs) == pytest.approx(math.sqrt(3), rel=1e-6)

    def test_dual_program_matches(self):
        """Solving the dual program separately also gives sqrt(3) for OR_3 (strong duality)."""
        d = domain(_or(3))
        raw = solve_formulation(formulate(d), solver="CLARABEL", tol=1e-9, dual_source="program")
        assert raw.dual_source == "program"
        assert raw.dual_t == pytest.approx(math.sqrt(3), rel=1e-6)

    def test_three_output_multipliers(self):
        """Hamming weight of 2 bits: X+ and X- multipliers with pair sums 1 and value 2 (derived in test_solve)."""
        d = domain(from_rule("01", 2, lambda x: x.count("1")))
        raw = solve_formulation(formulate(d), solver="CLARABEL", tol=1e-9)
        assert raw.dual_minus is not None and raw.dual_minus.shape == (2, 4, 4)
        assert q.dual_equality_residual(raw.dual_plus, raw.dual_minus, d.symbols, d.output_index) < 1e-6
        assert q.dual_objective(raw.dual_plus, raw.dual_minus, d.costs) == pytest.approx(2.0, rel=1e-6)

    def test_scs(self):
        """SCS reaches sqrt(2) for OR_2 to its tolerance (common knowledge)."""
        raw = solve_formulation(formulate(domain(_or(2))), solver="scs", tol=1e-8)
        assert raw.stats.name == "SCS" and raw.stats.iterations > 0
        assert raw.objective == pytest.approx(math.sqrt(2), rel=1e-5)

    def test_unknown_option_warns(self):
        """An option the solver does not know draws an AdvboundWarning and is dropped."""
        with pytest.warns(AdvboundWarning, match="not a known CLARABEL option"):
            raw = solve_formulation(formulate(domain(_or(2))), solver="CLARABEL", bogus_option=3)
        assert "bogus_option" not in raw.stats.options

    def test_known_option_recorded(self):
        """A known option is passed on and recorded in the stats."""
        raw = solve_formulation(formulate(domain(_or(2))), solver="SCS", alpha=1.5)
        assert raw.stats.options == {"alpha": 1.5}

    def test_unsupported_solver(self):
        """A solver advbound does not support raises SolverError naming the supported ones."""
        with pytest.raises(SolverError, match="CLARABEL, SCS"):
            solve_formulation(formulate(domain(_or(2))), solver="NOPE")

    def test_missing_solver(self, monkeypatch):
        """A supported but absent solver raises SolverError with install advice."""
        import cvxpy
        monkeypatch.setattr(cvxpy, "installed_solvers", lambda: ["SCS"])
        with pytest.raises(SolverError, match="not installed"):
            solve_formulation(formulate(domain(_or(2))), solver="CLARABEL")
