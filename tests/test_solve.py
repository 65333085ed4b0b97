"""Tests of advbound.programs.solve.solve against values known from the literature, derivations and a second route."""

import dataclasses
import math

import cvxpy as cp
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import advbound.programs.sdp
from advbound import status
from advbound.errors import InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.programs.solve import solve
from advbound.evidence.verify import verify_certificate

from known_instances import KNOWN, boolean, from_rule, or_of_search_rows, search_row
from strategies import (partial_functions, permute_positions, position_permutations, relabel_symbols, restrict,
                        symbol_relabellings)

CLARABEL = dict(solver="CLARABEL", tol=1e-9)
PROPERTY = settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _assert_verified(r):
    assert r.success, f"status {r.status}: {r.message}"
    assert r.verification.passed, r.verification.message
    assert r.lower <= r.upper + 1e-7 * max(1.0, r.upper)


def _reference(f: PartialFunction, bound: str = "general") -> float:
    """Value of the plain program, written here independently of advbound.programs.sdp.

    A symmetric |D|x|D| variable W (W = 0 on equal outputs), ρ >= 0 with Σρ = 1, and both
    -c_j diag(ρ) ⪯ W∘Δ_j ⪯ c_j diag(ρ) for every position, dead or not; no bipartite reduction.
    """
    n = f.size
    w = cp.Variable((n, n), symmetric=True)
    rho = cp.Variable(n, nonneg=True)
    same = np.array([[float(a == b) for b in f.outputs] for a in f.outputs])
    cons = [cp.multiply(w, same) == 0, cp.sum(rho) == 1]
    if bound == "positive":
        cons.append(w >= 0)
    for j, c in enumerate(f.costs):
        d = np.array([[float(x[j] != y[j]) for y in f.inputs] for x in f.inputs])
        m = cp.multiply(w, d)
        cons += [c * cp.diag(rho) - m >> 0, c * cp.diag(rho) + m >> 0]
    prob = cp.Problem(cp.Maximize(cp.sum(w)), cons)
    prob.solve(solver="CLARABEL")
    return float(prob.value)


class TestKnownValues:
    """Known adversary bounds, each entry of known_instances.KNOWN naming its source."""

    @pytest.mark.parametrize("known", KNOWN, ids=[f"{k.name} [{k.bound}]" for k in KNOWN])
    def test_clarabel(self, known):
        """Verified lower and upper bounds bracket the known value (source in the KNOWN entry)."""
        r = solve(known.function, bound=known.bound, **CLARABEL)
        _assert_verified(r)
        assert r.lower == pytest.approx(known.expected, rel=known.rtol), known.source
        assert r.upper == pytest.approx(known.expected, rel=known.rtol), known.source
        assert r.lower <= known.expected * (1 + 1e-9)
        assert r.upper >= known.expected * (1 - 1e-9)

    @pytest.mark.parametrize("name", ["MAJ_3", "EXACT_2_of_3", "OR_3 costs (1,2,3)",
                                      pytest.param("PARITY_2 o OR_2", marks=pytest.mark.slow)])
    def test_scs(self, name):
        """SCS with its default settings agrees to 1e-4 relative (sources in KNOWN)."""
        known = next(k for k in KNOWN if k.name == name)
        r = solve(known.function, bound=known.bound, method="dense", solver="SCS")
        _assert_verified(r)
        assert r.solver_stats.name == "SCS"
        assert r.lower == pytest.approx(known.expected, rel=1e-4)
        assert r.upper == pytest.approx(known.expected, rel=1e-4)

    @pytest.mark.parametrize("n,bound", [(2, "general"), (3, "general"), (3, "positive")])
    def test_hamming_weight(self, n, bound):
        """Hamming weight of n bits (n+1 outputs) has ADV± = ADV = n.

        Derivation: merging outputs to their parity can only shrink the feasible Γ set, so the bound is
        >= ADV(PARITY_n) = n (common knowledge); and every ADV±_c(f) <= Σ c_j, since
        Γ = Σ_j Γ∘E_j with E_j "first difference at j" = Δ_j ∘ (block-diagonal all-ones), and Schur
        multiplication by such a PSD unit-diagonal pattern does not increase the norm.
        """
        f = from_rule("01", n, lambda x: x.count("1"))
        r = solve(f, bound=bound, **CLARABEL)
        _assert_verified(r)
        assert r.certificate.dual_minus is not None or bound == "positive"
        assert r.lower == pytest.approx(n, rel=1e-6) and r.upper == pytest.approx(n, rel=1e-6)

    def test_three_outputs_against_reference(self):
        """A 3-output partial function (weight mod 3 on 3 bits, input 111 removed) matches the plain program."""
        f = from_rule("01", 3, lambda x: x.count("1") % 3, keep=lambda x: x != "111")
        r = solve(f, **CLARABEL)
        _assert_verified(r)
        ref = _reference(f)
        assert r.lower == pytest.approx(ref, rel=1e-5) and r.upper == pytest.approx(ref, rel=1e-5)

    def test_one_position_three_symbols(self):
        """One ternary position, three outputs: Γ∘Δ_1 = Γ (all distinct inputs differ there), so the bound is 1."""
        r = solve(from_rule("012", 1, lambda x: x), **CLARABEL)
        _assert_verified(r)
        assert r.lower == pytest.approx(1.0, rel=1e-7)


class TestPositionSearch:
    """Position-search rows, compared against a separately written program and against the dual program."""

    @pytest.mark.parametrize("m", [1, 2, 3, 4])
    def test_row(self, m):
        """A position-search row: verified bounds equal the plain program's value."""
        f = search_row(m)
        r = solve(f, **CLARABEL)
        _assert_verified(r)
        ref = _reference(f)
        assert r.lower == pytest.approx(ref, rel=1e-5) and r.upper == pytest.approx(ref, rel=1e-5)
        if m == 1:
            assert r.lower == pytest.approx(1.0, rel=1e-7)  # one position: the bound is 1 (see above)

    @pytest.mark.parametrize("rows,m,T", [(2, 2, 3), (2, 3, 4), pytest.param(3, 2, 4, marks=pytest.mark.slow)])
    def test_or_of_rows(self, rows, m, T):
        """OR of position-search rows under the budget Σ k_i = T: matches the plain program and the dual program."""
        f = or_of_search_rows(rows, m, T)
        r = solve(f, **CLARABEL)
        _assert_verified(r)
        ref = _reference(f)
        assert r.lower == pytest.approx(ref, rel=1e-5) and r.upper == pytest.approx(ref, rel=1e-5)
        rd = solve(f, dual_source="program", **CLARABEL)
        _assert_verified(rd)
        assert rd.upper == pytest.approx(ref, rel=1e-5)

    def test_or_of_rows_positive(self):
        """The positive bound of an OR of two rows matches the plain program with W >= 0 and is <= ADV±."""
        f = or_of_search_rows(2, 2, 3)
        r = solve(f, bound="positive", **CLARABEL)
        _assert_verified(r)
        assert r.lower == pytest.approx(_reference(f, "positive"), rel=1e-5)
        assert r.lower <= solve(f, **CLARABEL).upper + 1e-7


class TestProperties:
    """Properties on random small partial functions (strategies in tests/strategies.py)."""

    @PROPERTY
    @given(partial_functions(max_n=3, max_size=8))
    def test_positive_below_general(self, f):
        """ADV <= ADV± (common knowledge: non-negative Γ are a subset of all Γ)."""
        pos = solve(f, bound="positive", **CLARABEL)
        gen = solve(f, **CLARABEL)
        _assert_verified(pos)
        _assert_verified(gen)
        assert pos.lower <= gen.upper + 1e-6

    @PROPERTY
    @given(partial_functions(max_n=3, max_size=8, max_outputs=3))
    def test_lower_below_upper(self, f):
        """The verified lower bound never exceeds the verified upper bound (weak duality), up to 3 outputs."""
        r = solve(f, **CLARABEL)
        _assert_verified(r)

    @PROPERTY
    @given(st.data())
    def test_permutation_and_relabelling_invariance(self, data):
        """Permuting positions and relabelling symbols per position leave ADV± unchanged (common knowledge)."""
        f = data.draw(partial_functions(max_n=3, max_size=8))
        perm = data.draw(position_permutations(f.n))
        relab = data.draw(symbol_relabellings(f.alphabet, f.n))
        g = relabel_symbols(permute_positions(f, perm), [relab[perm.index(j)] for j in range(f.n)])
        a, b = solve(f, **CLARABEL), solve(g, **CLARABEL)
        _assert_verified(a)
        _assert_verified(b)
        assert a.lower == pytest.approx(b.lower, rel=1e-5, abs=1e-7)

    @PROPERTY
    @given(st.data())
    def test_restriction_never_increases(self, data):
        """Restricting the domain never increases ADV± (common knowledge)."""
        f = data.draw(partial_functions(max_n=3, min_size=3, max_size=8))
        keep = data.draw(st.lists(st.integers(0, f.size - 1), min_size=2, unique=True))
        g = restrict(f, keep)
        if g.is_constant:
            return
        big, small = solve(f, **CLARABEL), solve(g, **CLARABEL)
        _assert_verified(big)
        _assert_verified(small)
        assert small.lower <= big.upper + 1e-6


    @PROPERTY
    @given(partial_functions(max_n=3, max_size=8, with_costs=True), st.sampled_from([0.5, 3.0]))
    def test_cost_scaling(self, f, scale):
        """Scaling every cost by s scales ADV±_c by s (derivation: Γ is feasible for c iff sΓ is feasible for sc)."""
        g = dataclasses.replace(f, costs=tuple(scale * c for c in f.costs))
        a, b = solve(f, **CLARABEL), solve(g, **CLARABEL)
        _assert_verified(a)
        _assert_verified(b)
        assert b.lower == pytest.approx(scale * a.lower, rel=1e-5)


class TestSolveBehaviour:
    """Statuses, errors and the certificate attached to a result."""

    def test_constant_raises(self):
        """A constant function raises InvalidFunctionError saying its bound is 0."""
        with pytest.raises(InvalidFunctionError, match="constant.*bound is 0"):
            solve(PartialFunction.from_pairs("01", [("0", 1), ("1", 1)]))

    def test_unknown_method(self):
        """An unknown method is misuse."""
        with pytest.raises(InvalidFunctionError, match="method 'magic'"):
            solve(boolean(2, any), method="magic")

    @pytest.mark.parametrize("method", ["symmetric", pytest.param("factored", marks=pytest.mark.slow)])
    def test_method_dispatch(self, method):
        """method='symmetric'/'factored' reach their modules and give ADV±(OR_3) = sqrt(3) (common knowledge)."""
        r = solve(boolean(3, any), method=method)
        assert r.success, r.message
        assert r.lower == pytest.approx(math.sqrt(3), rel=1e-5)

    def test_unknown_bound(self):
        """An unknown bound kind is misuse."""
        with pytest.raises(InvalidFunctionError, match="bound 'weird'"):
            solve(boolean(2, any), bound="weird")

    def test_without_dual(self):
        """with_dual=False reports only the lower bound sqrt(2) for OR_2 (common knowledge)."""
        r = solve(boolean(2, any), with_dual=False, **CLARABEL)
        assert r.success and r.upper is None and r.gap is None
        assert r.lower == pytest.approx(math.sqrt(2), rel=1e-7)
        assert r.certificate.dual_plus is None

    def test_certificate_reverifies(self):
        """The attached certificate re-verifies to the reported numbers (claims stored in its metadata)."""
        r = solve(boolean(3, lambda x: sum(x) >= 2), **CLARABEL)
        meta = r.certificate.metadata
        assert meta["claimed_lower"] == r.lower and meta["claimed_upper"] == r.upper and meta["bound"] == "general"
        rep = verify_certificate(r.certificate)
        assert rep.passed and rep.lower == pytest.approx(r.lower, rel=1e-12)

    def test_corrupted_solver_output_unverified(self, monkeypatch):
        """A solver whose dual witness is off by a factor 2 yields status 'unverified' naming dual_repair."""
        real = advbound.programs.sdp.solve_formulation

        def bad(*args, **kwargs):
            raw = real(*args, **kwargs)
            return dataclasses.replace(raw, dual_plus=raw.dual_plus * 0.5)

        monkeypatch.setattr(advbound.programs.sdp, "solve_formulation", bad)
        r = solve(boolean(2, any), **CLARABEL)
        assert r.status == status.UNVERIFIED and not r.success
        assert "dual_repair" in r.message and r.upper is None

    def test_iteration_limit_is_a_status(self):
        """SCS stopped after 5 iterations gives a non-optimal status, not an exception; a reported lower bound is valid."""
        with pytest.warns(Warning):
            r = solve(boolean(3, lambda x: sum(x) == 2), max_iters=5)
        assert r.status in (status.INACCURATE, status.FAILED, status.UNVERIFIED)
        if r.lower is not None:
            assert r.lower <= math.sqrt(7) * (1 + 1e-9)   # EXACT-2-of-3, arXiv:0904.2759 (from memory)


def test_non_finite_solver_point_is_a_failed_status(monkeypatch):
    """A solver point with NaN entries gives status 'failed' and no bound, never an exception."""
    import dataclasses as dc

    import numpy as np

    from advbound.programs import sdp
    from advbound.functions.builders import or_function
    real = sdp.solve_formulation

    def broken(*a, **k):
        raw = real(*a, **k)
        return dc.replace(raw, weights=np.full_like(raw.weights, np.nan))

    monkeypatch.setattr(sdp, "solve_formulation", broken)
    r = solve(or_function(2), solver="CLARABEL")
    assert r.status == "failed" and r.lower is None and "non-finite" in r.message
