"""``[grid] where``: a condition that keeps part of the cartesian product (non-rectangular grids)."""

import textwrap

import pytest

from advbound.errors import InvalidInstanceError
from advbound.functions.expressions import condition
from advbound.functions.instance import grid_points, parse_instance

BASE = textwrap.dedent("""
    [instance]
    outer = "or"
    rows = "rows"
    inner = "position_search"
    row_length = "T - rows + 1"
    budget = { sum_squares = "T" }

    [grid]
    rows = [2, 3, 4, 5]
    T = [4, 6]
    """)


def test_where_keeps_the_points_that_meet_it():
    """rows <= T / 2 + 1 keeps (2,4), (2,6), (3,4), (3,6), (4,6) of the product (last key varies fastest)."""
    spec = parse_instance(BASE + 'where = "rows <= T / 2 + 1"\n')
    assert [(p["rows"], p["T"]) for p in grid_points(spec)] == [(2, 4), (2, 6), (3, 4), (3, 6), (4, 6)]


def test_without_where_a_point_with_too_many_rows_is_refused():
    """Without the condition rows = 5 at T = 4 cannot be built, and loading names that grid point."""
    with pytest.raises(InvalidInstanceError, match="rows=5, T=4"):
        parse_instance(BASE)


@pytest.mark.parametrize("expr,msg", [("rows + 1", "not a condition"), ("rows <= Tx", "unknown name"),
                                      ("rows <=", "not a valid condition")])
def test_bad_conditions_get_one_line(expr, msg):
    """A condition that is not a comparison, names an unknown parameter or does not parse is refused."""
    with pytest.raises(InvalidInstanceError, match=msg):
        parse_instance(BASE + f'where = "{expr}"\n')


def test_condition_operators():
    """Chained comparisons, and/or/not, each side an arithmetic expression."""
    assert condition("2 <= rows < T and not rows == 3", {"rows": 2, "T": 5})
    assert not condition("rows > 3 or T != 5", {"rows": 2, "T": 5})
