"""The positive bound ADV of interchangeable rows by its minimax form (``method="minimax"``), and its witness.

Sources for the values asserted here:

* ADV(OR_n) = √n: the star Γ and uniform weights on the zero input with all weight on the single
  one ("Quantum lower bounds by quantum arguments", 2000, arXiv:quant-ph/0002066, Theorem 5.1 for
  the lower bound; the matching upper bound is Grover search, common knowledge).
* The minimax form of ADV ("All quantum adversary methods are equivalent", 2006,
  arXiv:quant-ph/0409116, Theorem 2).  For OR_3 the weights below are worked out by hand: the input
  000 spreads 1/3 over its rows, an input with k ones puts 1/k on each one; the least pair sum is
  √(1/3 · 1) = 1/√3 (000 against one 1), the largest load is 1, so the witness proves ADV ≤ √3.
* Values of other instances are compared with the dense positive program and the row-symmetric
  program, which are checked against each other elsewhere (tests/test_rowsym.py).
"""

import itertools
import json
import math

import numpy as np
import pytest

from advbound.cli import main
from advbound.errors import CertificateError, InvalidFunctionError
from advbound.evidence.minimaxcheck import _potential_floor, _assign
from advbound.evidence.orbitcert import load_any_certificate
from advbound.evidence.orbitcheck import verify_orbit_certificate
from advbound.functions.builders import position_search_composition
from advbound.functions.rowfamily import position_search_family
from advbound.programs.choose import choose_method
from advbound.programs.solve import solve
from orbit_star import recheck, star_arrays, write

pytest.importorskip("clarabel")

#: OR_3 by hand: contents 000, 001, 011, 111 over the letters "0", "1"; weights (content, letter, position).
WEIGHTS = np.array([[[1 / 3], [0.0]], [[0.0], [1.0]], [[0.0], [0.5]], [[0.0], [1 / 3]]])


def base(**changes):
    """The OR_3 star (tests/orbit_star.py) with the hand-made query weights, as positive-bound arrays."""
    return star_arrays("positive", **{"query_weights": WEIGHTS.copy(), **changes})


def _changed(c, a, q, v):
    w = WEIGHTS.copy()
    w[c, a, q] = v
    return w


def test_hand_made_witness_proves_sqrt3_in_both_checkers(tmp_path, capsys):
    path = write(tmp_path / "or3.npz", base())
    rep = verify_orbit_certificate(load_any_certificate(path))
    assert rep.passed, rep.checks
    assert rep.lower == pytest.approx(math.sqrt(3), rel=1e-12)
    assert rep.upper == pytest.approx(math.sqrt(3), rel=1e-12)
    assert main(["verify", str(path)]) == 0
    assert "verdict: VERIFIED" in capsys.readouterr().out
    out = recheck(path)
    assert out.returncode == 0, out.stdout + out.stderr
    assert "minimax_witness ok" in out.stdout and "1.7320508" in out.stdout


FORGERIES = {
    "negative weight": (dict(query_weights=_changed(0, 0, 0, -0.1)), ">= 0"),
    "NaN weight": (dict(query_weights=_changed(1, 1, 0, np.nan)), "finite"),
    "weight on a letter the content lacks": (dict(query_weights=_changed(3, 0, 0, 0.2)), "holds no row"),
    "a content with no weight": (dict(query_weights=_changed(3, 1, 0, 0.0)), "all 0"),
    "wrong shape": (dict(query_weights=np.ones((4, 2, 2))), "query_weights"),
    "general bound": (dict(metadata=np.array(json.dumps({"bound": "general"}))), "positive"),
    "with a dual as well": (dict(dual_sizes=np.array([1]), dual_values=np.array([1.0])), "both"),
}


@pytest.mark.parametrize("name", sorted(FORGERIES))
def test_forged_weights_are_refused_by_both_checkers(name, tmp_path, capsys):
    changes, word = FORGERIES[name]
    path = write(tmp_path / "forged.npz", base(**changes))
    with pytest.raises(CertificateError) as err:
        load_any_certificate(path)
    assert word.lower() in str(err.value).lower(), str(err.value)
    assert main(["verify", str(path)]) == 2
    captured = capsys.readouterr()
    assert "VERIFIED" not in captured.out and len(captured.err.strip().splitlines()) == 1
    out = recheck(path)
    assert out.returncode == 2, (name, out.stdout, out.stderr)


def test_claimed_upper_below_the_witness_fails_in_both_checkers(tmp_path, capsys):
    """The witness proves √3; a file claiming 1.7 (below it) is not verified."""
    path = write(tmp_path / "claim.npz", base(metadata=np.array(json.dumps({"bound": "positive",
                                                                            "claimed_upper": 1.7}))))
    assert main(["verify", str(path)]) == 1
    assert "NOT VERIFIED" in capsys.readouterr().out
    out = recheck(path)
    assert out.returncode == 1 and "NOT VERIFIED" in out.stdout


def test_poorer_weights_prove_a_weaker_bound_not_a_wrong_one(tmp_path):
    """Uniform weights (1/3 everywhere) give least pair sum 1/3 and so the upper bound 3, not √3."""
    w = np.where(np.array([[[1], [0]], [[1], [1]], [[1], [1]], [[0], [1]]]) > 0, 1 / 3, 0.0)
    rep = verify_orbit_certificate(load_any_certificate(write(tmp_path / "u.npz", base(query_weights=w))))
    assert rep.passed and rep.upper == pytest.approx(3.0, rel=1e-12)


@pytest.mark.parametrize("n", [2, 3, 4, 5])
def test_or_of_n_bits_is_sqrt_n(n):
    r = solve(position_search_composition("or", n, 1, n), bound="positive", method="minimax")
    assert r.status == "optimal", r.message
    assert r.lower == pytest.approx(math.sqrt(n), rel=1e-6) and r.upper == pytest.approx(math.sqrt(n), rel=1e-6)


@pytest.mark.parametrize("n,T,max_ones,outer", [
    (3, 6, None, "or"), (3, 7, None, "or"), (3, 6, None, "and"), (3, 5, None, "threshold:2"), (4, 6, 1, "or")])
def test_agrees_with_the_dense_positive_program(n, T, max_ones, outer):
    from advbound.functions.rowbasis import expand_gamma, row_basis
    from advbound.programs.minimax import solve_minimax_rows

    fam = position_search_family(outer, n, T, max_ones)
    basis = row_basis(fam)
    f, _ = expand_gamma(basis, np.zeros(basis.n_weights))
    dense = solve(f, bound="positive", method="dense", solver="CLARABEL")
    mm = solve_minimax_rows(fam)
    assert mm.status == "optimal", mm.message
    assert mm.lower <= dense.upper * (1 + 1e-6) and dense.lower <= mm.upper * (1 + 1e-6)
    assert mm.lower == pytest.approx(dense.lower, rel=1e-5)
    assert mm.verification.dense_lower is not None


@pytest.mark.parametrize("n,T", [(4, 8), (5, 10)])
def test_agrees_with_the_row_symmetric_program_at_most_one_row_of_value_1(n, T):
    from advbound.programs.minimax import solve_minimax_rows
    from advbound.programs.rowsym import solve_rows

    fam = position_search_family("or", n, T, max_ones=1)
    rows = solve_rows(fam, bound="positive")
    mm = solve_minimax_rows(fam)
    assert mm.status == "optimal", mm.message
    assert mm.lower == pytest.approx(rows.lower, rel=1e-5)
    assert mm.upper >= rows.lower * (1 - 1e-9) and mm.lower <= rows.upper * (1 + 1e-9)
    assert mm.domain_size == fam.size


def test_auto_picks_minimax_only_for_the_positive_bound():
    f = position_search_composition("or", 3, 5, 7)
    assert choose_method(f, "positive").method == "minimax"
    assert choose_method(f, "general").method == "rows"


def test_minimax_refuses_the_general_bound():
    with pytest.raises(InvalidFunctionError, match="positive bound only"):
        solve(position_search_composition("or", 3, 5, 7), bound="general", method="minimax")


def test_potential_floor_is_below_every_assignment_and_tight_at_the_optimum():
    """Against brute force over all 5! assignments of random cost matrices (LP duality, common knowledge)."""
    rng = np.random.default_rng(0)
    C = rng.random((20, 5, 5))
    C[:, 1] = C[:, 0]                       # identical rows, as contents have
    floor = _potential_floor(C, _assign(C))
    best = np.array([min(sum(c[r, p[r]] for r in range(5)) for p in itertools.permutations(range(5))) for c in C])
    assert np.all(floor <= best + 1e-12)
    assert floor == pytest.approx(best, rel=1e-12)
    wrong = np.tile(np.arange(5), (20, 1))  # not optimal: the floor is still a floor
    assert np.all(_potential_floor(C, wrong) <= best + 1e-12)
