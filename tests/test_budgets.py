"""Budgets for any time model: derived row lengths, a warning for rows cut short, and the exact-sum trap.

The counts 304 and 184 (OR of 3 rows, t = k^0.3, Σ t_i² ≤ 5) are the ones a user reported when a
row length written for t = √k silently cut the domain; here they are recomputed by the builder.
"""

import textwrap
import warnings

import pytest

from advbound.errors import AdvboundWarning, InvalidInstanceError
from advbound.functions.instance import build_instance, parse_instance, resolved

BASE = textwrap.dedent("""
    [instance]
    outer = "or"
    rows = 3
    inner = "position_search"
    time = {{ alpha = "0.3" }}
    budget = {budget}
    {row_length}
    [grid]
    T = [5]
    """)


def _spec(budget='{ at_most = "T" }', row_length=""):
    return parse_instance(BASE.format(budget=budget, row_length=row_length))


def test_row_length_is_derived_from_the_budget():
    """Without row_length each row gets every position an allowed profile uses: 304 inputs, rows of 6."""
    spec = _spec()
    f = build_instance(spec, {"T": 5})
    assert f.size == 304 and f.n == 18
    assert [d["position_search"] for d in resolved(spec, {"T": 5})["inner"]] == [6, 6, 6]


def test_a_row_length_that_cuts_allowed_positions_is_reported():
    """row_length = T - 2 (written for t = √k) keeps 184 of the 304 inputs and says which positions it cuts."""
    with pytest.warns(AdvboundWarning, match=r"row 1: positions 4\.\.6"):
        spec = _spec(row_length='row_length = "T - 2"')
        f = build_instance(spec, {"T": 5})
    assert f.size == 184


def test_sqrt_rows_of_the_usable_length_warn_nothing():
    """For t = √k and Σ k_i = T the written length T - 2 is exactly the usable one: no warning, same function."""
    text = BASE.format(budget='{ sum_squares = "T" }', row_length='row_length = "T - 2"').replace(
        'time = { alpha = "0.3" }', 'time = "sqrt"')
    with warnings.catch_warnings():
        warnings.simplefilter("error", AdvboundWarning)
        f = build_instance(parse_instance(text), {"T": 5})
    g = build_instance(parse_instance(text.replace('row_length = "T - 2"', "")), {"T": 5})
    assert f.size == g.size == 48 and f.inputs == g.inputs


def test_an_exact_sum_no_profile_meets_names_the_fixes():
    """Σ t_i² = T with t = k^0.3 is met by no profile: the one-line error names at_most and rtol."""
    from advbound.errors import AdvboundError
    with pytest.raises(AdvboundError, match="allows no time profile.*at_most.*rtol"):
        build_instance(_spec(budget='{ sum_squares = "T" }'), {"T": 5})


def test_row_length_needed_without_a_budget():
    """Without a budget there is nothing to derive the length from: one line says so."""
    text = BASE.format(budget='{ at_most = "T" }', row_length="").replace('budget = { at_most = "T" }', "")
    with pytest.raises(InvalidInstanceError, match="row_length: missing"):
        parse_instance(text)
