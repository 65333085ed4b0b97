"""The row-symmetric (S_n-reduced) program against counts, known values and the dense program."""
import itertools
import math

import numpy as np
import pytest

from advbound.functions.builders import position_search_composition
from advbound.functions.rowfamily import RowFamily, family_of, position_search_family
from advbound.functions.tableaux import partitions, semistandard_tableaux, standard_tableaux_count
from advbound.evidence.orbitcheck import orbit_lower_bound, orbit_upper_bound
from advbound.functions.rowbasis import check_dimensions, expand_gamma
from advbound.programs.rowsym import formulate_rows, gamma_on_orbits, solve_reduced, solve_rows
from advbound.programs.solve import solve
from advbound.evidence.verify import verify_certificate


def _boolean_family(n, rule):
    """The symmetric function rule(#ones) on n bits, as a family of n rows of one bit."""
    contents = tuple(tuple(sorted(c)) for c in itertools.combinations_with_replacement((0, 1), n))
    return RowFamily(("0", "1"), contents, tuple(str(rule(sum(c))) for c in contents), (1.0,))


def _reduced_value(fam, bound="general"):
    prog = formulate_rows(fam, bound)
    pt = solve_reduced(prog)
    assert pt.status in ("optimal", "optimal_inaccurate")
    g, rho = gamma_on_orbits(prog, pt.x)
    return orbit_lower_bound(prog.basis, g, rho)["lower"], prog, g


@pytest.mark.parametrize("mu", [(1, 1, 1), (2, 1), (2, 2, 1), (3, 1, 1, 1), (2, 2, 2)])
def test_young_rule_dimension_count(mu):
    """Σ_λ f^λ K_{λμ} = n!/Π μ_i! (Young's rule: M^μ = ⊕ K_{λμ} S^λ; common knowledge)."""
    n = sum(mu)
    content = list(enumerate(mu))
    total = sum(standard_tableaux_count(lam) * len(semistandard_tableaux(lam, content)) for lam in partitions(n))
    assert total == math.factorial(n) // math.prod(math.factorial(k) for k in mu)


def test_kostka_and_hook_values():
    """K_{(2,1),(1,1,1)} = 2, K_{(3,2),(2,2,1)} = 2, f^{(3,2)} = 5, f^{(2,2)} = 2 (common knowledge tables)."""
    assert len(semistandard_tableaux((2, 1), [(0, 1), (1, 1), (2, 1)])) == 2
    assert len(semistandard_tableaux((3, 2), [(0, 2), (1, 2), (2, 1)])) == 2
    assert standard_tableaux_count((3, 2)) == 5 and standard_tableaux_count((2, 2)) == 2


@pytest.mark.parametrize("n,T,max_ones", [(3, 7, None), (4, 8, 1), (5, 8, 1), (4, 7, None)])
def test_blocks_cover_the_domain(n, T, max_ones):
    """Σ_λ f^λ · (block size) = |D|: the representative set spans every isotypic component."""
    total, size = check_dimensions(formulate_rows(position_search_family("or", n, T, max_ones)))
    assert total == size


def test_family_of_composition_matches_direct_enumeration():
    """family_of(f) of the built composition has the contents the direct enumerator lists."""
    f = position_search_composition("or", 3, 4, 6)
    fam = family_of(f)
    direct = position_search_family("or", 3, 6)
    assert fam.size == f.size == direct.size
    as_strings = lambda fm: sorted(tuple(sorted(fm.letters[a] for a in c)) for c in fm.contents)  # noqa: E731
    assert as_strings(fam) == as_strings(direct)


def test_family_of_refuses_non_interchangeable_rows():
    """A domain that is not closed under row swaps has no row family."""
    f = position_search_composition("or", 2, 3, 4)
    keep = [i for i, x in enumerate(f.inputs) if x != f.inputs[0]]
    from advbound.functions.function import PartialFunction
    g = PartialFunction.from_pairs("".join(f.alphabet), [(f.inputs[i], f.outputs[i]) for i in keep])
    g = type(g)(g.alphabet, g.inputs, g.outputs, g.costs, groups=f.groups)
    assert family_of(g) is None


@pytest.mark.parametrize("n", [2, 3, 4])
def test_or_n_is_sqrt_n(n):
    """ADV±(OR_n) = √n ("Quantum lower bounds by quantum arguments", 2000, arXiv:quant-ph/0002066)."""
    low, _, _ = _reduced_value(_boolean_family(n, lambda k: int(k > 0)))
    assert low == pytest.approx(math.sqrt(n), rel=1e-6)


def test_parity_is_n():
    """ADV±(PARITY_3) = 3 (common knowledge); three outputs sides are not needed, two outputs here."""
    low, _, _ = _reduced_value(_boolean_family(3, lambda k: k % 2))
    assert low == pytest.approx(3.0, rel=1e-6)


@pytest.mark.parametrize("n,T,max_ones,outer", [
    (2, 5, None, "or"), (3, 6, None, "or"), (3, 6, 1, "or"), (3, 6, None, "and"),
    (3, 5, None, "threshold:2"), (4, 5, None, "or"), (4, 6, 1, "or")])
def test_reduced_equals_dense(n, T, max_ones, outer):
    """The reduced optimum equals the dense program's verified value (dense CLARABEL, computed in the test)."""
    fam = position_search_family(outer, n, T, max_ones)
    low, prog, g = _reduced_value(fam)
    f, G = expand_gamma(prog, g)
    dense = solve(f, method="dense", solver="CLARABEL")
    assert dense.lower is not None and dense.upper is not None
    assert dense.lower * (1 - 5e-6) <= low <= dense.upper * (1 + 1e-9)
    assert low == pytest.approx(dense.upper, rel=1e-5)


def test_positive_bound_equals_dense():
    """ADV (non-negative weights) of OR_3 of rows, T = 5: reduced = dense (dense computed in the test)."""
    fam = position_search_family("or", 3, 5)
    low, prog, g = _reduced_value(fam, "positive")
    f, _ = expand_gamma(prog, g)
    dense = solve(f, "positive", method="dense", solver="CLARABEL")
    assert low == pytest.approx(dense.upper, rel=1e-5)


def test_three_outputs_need_both_sides():
    """Counting the ones of 3 rows (4 outputs) reduced = dense, both LMI sides imposed."""
    rows = position_search_family("or", 3, 5)
    fam = RowFamily(rows.letters, rows.contents, tuple(str(sum(a % 2 for a in c)) for c in rows.contents),
                    rows.costs)
    low, prog, g = _reduced_value(fam)
    assert prog.sides == (1, -1)
    f, _ = expand_gamma(prog, g)
    dense = solve(f, method="dense", solver="CLARABEL")
    assert low == pytest.approx(dense.upper, rel=1e-5)


@pytest.mark.parametrize("n,expected", [(4, 3.31089), (5, 3.30030)])
def test_reference_values_at_T8(n, expected):
    """OR of n rows, Σk = 8, at most one row of value 1: the dense program's values 3.31089 and 3.30030
    (computed with the dense and factored programs of this package, README table, rows_envelope study)."""
    low, _, _ = _reduced_value(position_search_family("or", n, 8, max_ones=1))
    assert low == pytest.approx(expected, abs=2e-5)


def test_expanded_gamma_reproduces_reduced_norms():
    """verify_certificate on the expanded Γ gives the reduced-basis ratio (independent dense check)."""
    from advbound.evidence.certificate import Certificate
    low, prog, g = _reduced_value(position_search_family("or", 3, 7))
    f, G = expand_gamma(prog, g)
    rep = verify_certificate(Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs), G))
    assert rep.passed and rep.lower == pytest.approx(low, rel=1e-7)


def test_solve_method_rows():
    """solve(method="rows") on the built composition: lower verified on the full domain, equal to dense."""
    f = position_search_composition("or", 3, 5, 7)
    r = solve(f, method="rows")
    assert r.lower == pytest.approx(2.858167, abs=2e-6)   # 3 rows, T = 7: README table / dense program
    assert r.certificate is not None and r.verification.passed
    assert r.status == "optimal", r.message
    assert r.upper == pytest.approx(2.858167, abs=2e-6) and r.upper >= r.lower


@pytest.mark.parametrize("n,T,max_ones,outer,bound", [
    (3, 6, None, "or", "general"), (3, 6, None, "and", "general"), (3, 6, 1, "or", "general"), (3, 5, None, "threshold:2", "general"),
    (3, 5, None, "or", "positive")])
def test_reduced_dual_bound_matches_dense(n, T, max_ones, outer, bound):
    """The weak-duality bound from the reduced dual equals the dense program's verified upper bound."""
    fam = position_search_family(outer, n, T, max_ones)
    prog = formulate_rows(fam, bound)
    pt = solve_reduced(prog)
    up = orbit_upper_bound(prog.basis, prog.bound, pt.duals)
    f, _ = expand_gamma(prog, gamma_on_orbits(prog, pt.x)[0])
    dense = solve(f, bound, method="dense", solver="CLARABEL")
    assert dense.upper is not None
    assert up["upper"] == pytest.approx(dense.upper, rel=1e-5)
    assert up["upper"] >= dense.lower - 1e-7


def test_any_psd_dual_gives_a_valid_upper_bound():
    """Weak duality: random PSD matrices, zero matrices and a scaled optimum all bound the optimum from above."""
    fam = position_search_family("or", 3, 6)
    prog = formulate_rows(fam)
    pt = solve_reduced(prog)
    optimum = orbit_upper_bound(prog.basis, prog.bound, pt.duals)["upper"]
    rng = np.random.default_rng(7)
    trials = [[np.zeros_like(Z) for Z in pt.duals], [0.5 * Z for Z in pt.duals], [2.0 * Z for Z in pt.duals]]
    for _ in range(5):
        trials.append([(A := rng.standard_normal(Z.shape)) @ A.T for Z in pt.duals])
    for duals in trials:
        assert orbit_upper_bound(prog.basis, prog.bound, duals)["upper"] >= optimum * (1 - 1e-6)


def test_dual_bound_refuses_non_finite_matrices():
    """A dual matrix with a NaN gives no upper bound, never a number."""
    prog = formulate_rows(position_search_family("or", 2, 4))
    pt = solve_reduced(prog)
    duals = [Z.copy() for Z in pt.duals]
    duals[0][0, 0] = np.nan
    assert orbit_upper_bound(prog.basis, prog.bound, duals)["upper"] is None


def test_solve_rows_refuses_non_row_function():
    """A function without interchangeable rows gets a one-line refusal."""
    from advbound.functions.builders import majority_function
    from advbound.errors import InvalidFunctionError
    with pytest.raises(InvalidFunctionError, match="interchangeable rows"):
        solve_rows(majority_function(3))


@pytest.mark.parametrize("n,T", [(3, 6), (3, 8)])
def test_positive_bound_needs_only_the_trivial_block(n, T):
    """For W >= 0 the Perron vector of every D^-1/2 (W∘Δ) D^-1/2 is row-invariant (Perron–Frobenius, common
    knowledge), so the trivial block alone gives ADV: the same value as the dense positive program."""
    import dataclasses
    from advbound.functions.builders import position_search_composition
    from advbound.functions.rowbasis import row_basis
    from advbound.programs.rowsym import RowProgram, solve_reduced
    from advbound.programs.solve import solve

    basis = row_basis(position_search_family("or", n, T, max_ones=1))
    trivial = tuple(b for b in basis.blocks if tuple(b.shape) == (n - 1,))
    prog = RowProgram(dataclasses.replace(basis, blocks=trivial), "positive")
    pt = solve_reduced(prog)
    value = float(2 * prog.pair_counts @ pt.x[:prog.n_weights])
    dense = solve(position_search_composition("or", n, T - n + 1, T, max_ones=1), bound="positive",
                  method="dense", solver="CLARABEL")
    assert dense.lower <= value * (1 + 1e-6) and value <= dense.upper * (1 + 1e-6)


def test_cost_weighted_rows_agree_with_the_dense_program_and_the_dense_check():
    """Unequal costs per position (ADV±_c): the reduced program, its dense cross-check, and the dense program.

    The expanded function carries the family's costs (before, it dropped them, and the dense
    cross-check of every cost-weighted orbit certificate compared with an unweighted ratio).
    """
    import dataclasses

    from advbound.functions.rowbasis import row_basis

    fam = position_search_family("or", 3, 6, None)
    fam = dataclasses.replace(fam, costs=tuple(0.5 + 0.5 * q for q in range(fam.row_length)))
    basis = row_basis(fam)
    f, _ = expand_gamma(basis, np.zeros(basis.n_weights))
    assert f.costs == tuple(fam.costs) * fam.n
    dense = solve(f, method="dense", solver="CLARABEL")
    red = solve_rows(fam)
    assert red.status == "optimal", red.message
    assert red.verification.dense_lower is not None
    assert red.lower == pytest.approx(dense.lower, rel=1e-5)
    assert red.lower <= dense.upper * (1 + 1e-6) and dense.lower <= red.upper * (1 + 1e-6)
