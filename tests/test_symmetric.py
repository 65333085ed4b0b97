"""Tests for advbound.programs.symmetric: the invariant, block-diagonalised adversary program."""

import math

import numpy as np
import pytest
import scipy.sparse as sp

from advbound.functions.builders import (compose, exact_function, majority_function, or_function, parity_function,
                                         position_search_row)
from advbound.functions.domain import domain
from advbound.errors import InvalidFunctionError, SolverError
from advbound.functions.function import PartialFunction
from advbound.programs.symmetric import chordal_cliques, formulate_symmetric, solve_symmetric
from advbound.functions.symmetry import Group
from advbound.quantities import adversary_ratio
from advbound.functions.timemodel import Budget
from advbound.evidence.verify import verify_certificate


def _rows(T, rows=3):
    return compose(or_function(rows), [position_search_row(T - rows + 1)] * rows, budget=Budget.sum_squares(T))


def _max3():
    """A 3-output function: the largest symbol of a ternary string of length 2 (9 inputs)."""
    pairs = [(a + b, max(a, b)) for a in "012" for b in "012"]
    return PartialFunction.from_pairs("012", pairs, description="max of 2 ternary symbols")


def dense_value(f, bound="general"):
    """ADV± / ADV of ``f`` from the dense program of formulations.md, written here with cvxpy."""
    import cvxpy as cp

    d = domain(f)
    n = d.size
    o = np.asarray(d.output_index)
    F = (o[:, None] == o[None, :]).astype(float)
    W = cp.Variable((n, n), symmetric=True)
    rho = cp.Variable(n)
    cons = [cp.multiply(W, F) == 0, rho >= 0, cp.sum(rho) == 1]
    if bound == "positive":
        cons.append(W >= 0)
    two_sided = bound == "general" and len(f.labels) > 2
    for j in range(d.n):
        dj = d.delta(j).astype(float)
        if not dj.any():
            continue
        cons.append(f.costs[j] * cp.diag(rho) - cp.multiply(W, dj) >> 0)
        if two_sided:
            cons.append(f.costs[j] * cp.diag(rho) + cp.multiply(W, dj) >> 0)
    prob = cp.Problem(cp.Maximize(cp.sum(W)), cons)
    prob.solve(solver="CLARABEL", tol_gap_abs=1e-9, tol_gap_rel=1e-9, tol_feas=1e-9)
    return float(prob.value)


class TestAgainstDense:
    """The invariant program has the dense program's value."""

    @pytest.mark.parametrize("make,bound", [
        (lambda: or_function(4), "general"),
        (lambda: majority_function(3), "general"),
        (_max3, "general"),
        (lambda: exact_function(4, 2), "positive"),
        (lambda: _rows(4), "general"),
        (lambda: compose(or_function(2), position_search_row(3), budget=Budget.sum_squares(4)), "positive"),
    ], ids=["or4", "maj3", "max3", "exact2of4-positive", "rows3-T4", "rows2-T4-positive"])
    def test_equals_dense(self, make, bound):
        """Symmetric value equals the dense value (written in this file) to 1e-5 relative."""
        f = make()
        r = solve_symmetric(f, bound=bound, solver="CLARABEL", tol=1e-9)
        assert r.success, r.message
        dv = dense_value(f, bound)
        assert r.lower == pytest.approx(dv, rel=1e-5)
        assert r.upper == pytest.approx(dv, rel=1e-5)

    @pytest.mark.slow
    @pytest.mark.parametrize("T", [5, 6, 7])
    def test_rows_equal_dense(self, T):
        """OR of 3 position-search rows with k_1+k_2+k_3 = T: symmetric value equals dense to 1e-5."""
        f = _rows(T)
        r = solve_symmetric(f, solver="CLARABEL", tol=1e-9)
        assert r.success, r.message
        assert r.lower == pytest.approx(dense_value(f), rel=1e-5)


class TestKnownValues:
    """Values known from outside the code."""

    @pytest.mark.parametrize("n", [2, 3, 4, 5])
    def test_or(self, n):
        """ADV±(OR_n) = sqrt(n) (common knowledge; formulations.md), with SCS."""
        r = solve_symmetric(or_function(n))
        assert r.status == "optimal", r.message
        assert r.lower == pytest.approx(math.sqrt(n), rel=1e-5)
        assert r.upper == pytest.approx(math.sqrt(n), rel=1e-5)

    def test_parity_positive(self):
        """ADV(PARITY_4) = 4 (common knowledge; formulations.md)."""
        r = solve_symmetric(parity_function(4), bound="positive", solver="CLARABEL")
        assert r.lower == pytest.approx(4.0, rel=1e-5)

    def test_cost_weighted_or(self):
        """Cost-weighted OR_3 with costs (1, 1, 2) has ADV±_c = sqrt(1 + 1 + 4) (formulations.md)."""
        f = PartialFunction.from_pairs("01", [(format(i, "03b"), int(i > 0)) for i in range(8)],
                                       costs=(1, 1, 2))
        r = solve_symmetric(f, solver="CLARABEL")
        assert r.success, r.message
        assert r.lower == pytest.approx(math.sqrt(6.0), rel=1e-5)

    def test_composition_of_rows(self):
        """OR_2 of position-search rows of length 2 (no budget): ADV± = sqrt(2)·ADV±(row), multiplicative
        composition for Boolean functions (formulations.md), with ADV±(row of length 2) from the solver."""
        row = solve_symmetric(position_search_row(2), solver="CLARABEL").lower
        f = compose(or_function(2), position_search_row(2))
        r = solve_symmetric(f, solver="CLARABEL")
        assert r.lower == pytest.approx(math.sqrt(2) * row, rel=1e-5)


class TestFormulation:
    """The reduced program's data."""

    def test_or3_sizes(self):
        """OR_3: 3 weight orbits (0^3 against weight 1, 2, 3), 4 input orbits, 1 position orbit (derived)."""
        s = formulate_symmetric(or_function(3)).sizes()
        assert (s["weights"], s["densities"], s["representatives"], s["group_order"]) == (3, 4, 1, 6)

    @pytest.mark.parametrize("f", [or_function(4), _rows(6), _max3()], ids=["or4", "rows6", "max3"])
    def test_blocks_reproduce_lmi_spectrum(self, f):
        """At a random invariant point, the blocks' smallest eigenvalue equals the smallest eigenvalue of
        all full LMIs (the decomposition is exact, copies included)."""
        form = formulate_symmetric(f)
        rng = np.random.default_rng(5)
        v = rng.standard_normal(form.n_weights + form.n_densities)
        v[form.n_weights:] = np.abs(v[form.n_weights:])
        W, rho = form.expand(v)
        d = form.domain
        sides = (1,) if form.form == "bipartite" or form.bound == "positive" else (1, -1)
        full = min(np.linalg.eigvalsh(f.costs[j] * np.diag(rho) - s * np.where(d.delta(j), W, 0.0))[0]
                   for j in range(d.n) for s in sides)
        blocks = min(np.linalg.eigvalsh((b.coefficients @ v).reshape(b.size, b.size))[0] for b in form.blocks)
        assert blocks == pytest.approx(full, rel=1e-9, abs=1e-9)

    def test_bases_are_orthonormal_and_cover(self):
        """Each block basis is orthonormal, and Σ multiplicity·size = |D| for each representative."""
        f = _rows(6)
        form = formulate_symmetric(f)
        for j in form.representatives:
            blocks = [b for b in form.blocks if b.position == j and b.side == 1]
            assert sum(b.multiplicity * b.size for b in blocks) == f.size
            for b in blocks:
                q = b.basis.toarray() if sp.issparse(b.basis) else b.basis
                assert np.allclose(q.T @ q, np.eye(b.size))

    def test_block_reduction_for_or(self):
        """OR_5 under S_4 (stabiliser of a position): the largest block is far below |D| = 32."""
        form = formulate_symmetric(or_function(5))
        assert max(b.size for b in form.blocks) <= 10


class TestSolve:
    """Results, certificates and errors."""

    def test_certificate_verifies_on_full_domain(self):
        """The returned certificate is on the full domain and re-verifies to the reported numbers."""
        f = _rows(5)
        r = solve_symmetric(f, solver="CLARABEL")
        cert = r.certificate
        assert cert.inputs == f.inputs and cert.dual_plus.shape == (f.n, f.size, f.size)
        rep = verify_certificate(cert)
        assert rep.passed and rep.lower == pytest.approx(r.lower) and rep.upper == pytest.approx(r.upper)
        assert adversary_ratio(cert.gamma, cert.symbols, cert.costs) == pytest.approx(r.lower, rel=1e-9)

    def test_three_outputs_have_two_sided_witness(self):
        """A 3-output function uses the two-sided form, and its X⁻ stack is part of the witness."""
        r = solve_symmetric(_max3(), solver="CLARABEL")
        assert r.success and r.certificate.dual_minus is not None
        assert r.solver_stats.options["form"] == "full"

    def test_positive_three_outputs(self):
        """ADV of the 3-output max function keeps only upper LMIs and equals the dense ADV (this file)."""
        f = _max3()
        r = solve_symmetric(f, bound="positive", solver="CLARABEL", tol=1e-9)
        assert r.success and r.certificate.dual_minus is None
        assert r.lower == pytest.approx(dense_value(f, "positive"), rel=1e-5)

    def test_trivial_group_gives_same_value(self):
        """Solving with the trivial group (no reduction) gives the same value as the full group."""
        f = majority_function(3)
        trivial = Group(f, (), 1, "known")
        a = solve_symmetric(f, solver="CLARABEL", group=trivial)
        b = solve_symmetric(f, solver="CLARABEL")
        assert a.lower == pytest.approx(b.lower, rel=1e-6)

    def test_constant_function_raises(self):
        """A constant function raises InvalidFunctionError (its bound is 0)."""
        f = PartialFunction.from_pairs("01", [("0", 1), ("1", 1)])
        with pytest.raises(InvalidFunctionError, match="constant"):
            solve_symmetric(f)

    def test_unknown_solver_raises(self):
        """An unsupported solver name raises SolverError."""
        with pytest.raises(SolverError, match="not supported"):
            solve_symmetric(or_function(2), solver="NOPE")

    def test_witness_limit(self):
        """With a witness limit below N·|D|², no dual is built and only the lower bound is reported."""
        r = solve_symmetric(or_function(3), solver="CLARABEL", witness_limit=10)
        assert r.upper is None and r.lower == pytest.approx(math.sqrt(3), rel=1e-5)


class TestChordal:
    """The chordal splitting of sparse blocks."""

    def test_psd_completion(self):
        """Completing a PSD matrix known only on the cliques of its pattern gives a PSD matrix that
        agrees on those entries (the completion theorem of 1984 cited in the code)."""
        from advbound.programs.symmetric_blocks import _psd_completion
        rng = np.random.default_rng(8)
        p = rng.random((30, 30)) < 0.1
        p = p | p.T
        cl = chordal_cliques(p)
        a = rng.standard_normal((30, 30))
        full = a @ a.T
        known = np.zeros((30, 30), bool)
        for c in cl:
            known[np.ix_(c, c)] = True
        m = _psd_completion(np.where(known, full, 0.0), cl)
        assert np.allclose(m[known], full[known])
        assert np.linalg.eigvalsh(m)[0] > -1e-8

    def test_cliques_cover_every_edge(self):
        """Every edge of a random sparse pattern lies inside one of the returned cliques."""
        rng = np.random.default_rng(7)
        p = rng.random((40, 40)) < 0.08
        p = p | p.T
        cl = chordal_cliques(p)
        covered = np.zeros_like(p)
        for c in cl:
            covered[np.ix_(c, c)] = True
        assert covered[p].all()
        assert sorted(set(np.concatenate(cl).tolist())) == list(range(40))

    def test_chordal_solve_equals_plain(self):
        """OR of 3 rows with T = 7: the chordal program has the same verified bounds as the plain one
        (its dual witness comes from a PSD completion of the clique multipliers)."""
        f = _rows(7)
        a = solve_symmetric(f, solver="CLARABEL", chordal=True)
        b = solve_symmetric(f, solver="CLARABEL")
        assert a.status == "optimal", a.message
        assert a.lower == pytest.approx(b.lower, rel=1e-5)
        assert a.upper == pytest.approx(b.upper, rel=1e-5)
        s = formulate_symmetric(f, chordal=True).sizes()
        assert s["chordal_blocks"] > 0 and s["largest_cone"] < 54
