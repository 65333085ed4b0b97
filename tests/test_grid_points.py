"""``[grid] points`` (an explicit list of grid points) and ``[grid] zip`` (keys that vary together).

Both are factors of the grid: they combine with the cartesian product of the other keys and with
``where``; ``grid_size`` counts the product of the factor sizes without listing the points.
"""

import json
import textwrap

import pytest

from advbound.cli import main
from advbound.errors import InvalidInstanceError
from advbound.functions.instance import grid_points, grid_size, iter_grid_points, parse_instance
from advbound.studies.store import Store

BASE = textwrap.dedent("""
    [instance]
    outer = "or"
    rows = "rows"
    inner = "position_search"
    row_length = "T - rows + 1"
    budget = { sum_squares = "T" }

    [grid]
    """)


def _spec(grid: str, **kw):
    return parse_instance(BASE + textwrap.dedent(grid), source="f.toml", **kw)


def _pairs(spec):
    return [(p["T"], p["rows"]) for p in grid_points(spec)]


def test_points_list_is_the_grid():
    """Three points written out give exactly those three points, in the order written."""
    spec = _spec('points = [{T = 6, rows = 3}, {T = 8, rows = 4}, {T = 4, rows = 2}]\n')
    assert _pairs(spec) == [(6, 3), (8, 4), (4, 2)]
    assert spec.grid == {"T": [6, 8, 4], "rows": [3, 4, 2]} and grid_size(spec) == 3


def test_array_of_tables_form():
    """[[grid.points]] tables are the same TOML value as the inline list."""
    spec = _spec("""
        [[grid.points]]
        T = 5
        rows = 2
        [[grid.points]]
        T = 7
        rows = 3
        """)
    assert _pairs(spec) == [(5, 2), (7, 3)]


def test_points_times_other_keys_and_where():
    """points x max_ones is a product (last key fastest); where then drops (T=8, rows=4, max_ones=0)."""
    text = 'points = [{T = 6, rows = 3}, {T = 8, rows = 4}]\nw = [0, 1]\n'
    spec = parse_instance(BASE.replace('budget = { sum_squares = "T" }',
                                       'budget = { sum_squares = "T" }\nmax_ones = "w"') + text)
    assert [(p["T"], p["rows"], p["w"]) for p in grid_points(spec)] == [(6, 3, 0), (6, 3, 1), (8, 4, 0), (8, 4, 1)]
    spec = parse_instance(BASE.replace('budget = { sum_squares = "T" }', 'budget = { sum_squares = "T" }\n'
                                       'max_ones = "w"') + text + 'where = "w >= 1 or T < 8"\n')
    assert [(p["T"], p["rows"], p["w"]) for p in grid_points(spec)] == [(6, 3, 0), (6, 3, 1), (8, 4, 1)]
    assert grid_size(spec) == 4          # where only filters: the size is the product, an upper bound


def test_zip_reads_lists_side_by_side():
    """zip = [["T", "rows"]] pairs the i-th T with the i-th rows: 3 points, not 9."""
    spec = _spec('T = [4, 6, 8]\nrows = [2, 3, 4]\nzip = [["T", "rows"]]\n')
    assert _pairs(spec) == [(4, 2), (6, 3), (8, 4)] and grid_size(spec) == 3


def test_zip_single_group_shorthand_and_where():
    """zip = ["T", "rows"] is one group; with where = "T > 4" the first pair goes."""
    spec = _spec('T = [4, 6, 8]\nrows = [2, 3, 4]\nzip = ["T", "rows"]\nwhere = "T > 4"\n')
    assert _pairs(spec) == [(6, 3), (8, 4)]


def test_zip_times_another_key():
    """A zip group is one factor of the product: (T, rows) pairs x two values of w, w fastest."""
    text = BASE.replace('budget = { sum_squares = "T" }', 'budget = { sum_squares = "T" }\nmax_ones = "w"')
    spec = parse_instance(text + 'T = [4, 6]\nw = [0, 1]\nrows = [2, 3]\nzip = [["T", "rows"]]\n')
    assert [(p["T"], p["w"], p["rows"]) for p in grid_points(spec)] == [(4, 0, 2), (4, 1, 2), (6, 0, 3), (6, 1, 3)]
    assert list(grid_points(spec)[0]) == ["T", "w", "rows"]      # parameters in the order written


def test_zip_counts_without_listing():
    """Zipping two 1000-value ranges gives 1000 x 200 = 200,000 points, refused as more than 100,000,
    with the factor sizes named (the plain product would be 2 * 10^8)."""
    grid = ('T = { from = 1, to = 1000 }\nrows = { from = 1, to = 1000 }\nw = { from = 1, to = 200 }\n'
            'zip = [["T", "rows"]]\n')
    with pytest.raises(InvalidInstanceError, match=r"f\.toml: \[grid\] has 200,000 points \(T\+rows: 1000 x w: 200 "
                                                   r"values\), more than 100,000"):
        _spec(grid)
    spec = _spec(grid, max_points=10 ** 6, check_points=False)
    assert grid_size(spec) == 200_000 and next(iter_grid_points(spec)) == {"T": 1, "rows": 1, "w": 1}


@pytest.mark.parametrize("grid,msg", [
    ('points = [{T = 6, rows = 3}, {T = 8}]', r"\[grid\] points\[2\]: missing rows \(every point gives T, rows\)"),
    ('points = [{T = 6, rows = 3}, {T = 8, rows = 4, colour = 1}]', r"\[grid\] points\[2\]: unknown key 'colour'"),
    ('points = [{T = 6, rows = "three"}]', r"\[grid\] points\[1\]\.rows: value 'three' is not a number"),
    ('points = [{T = 6, rows = true}]', r"\[grid\] points\[1\]\.rows: value True is not a number"),
    ('points = [{T = 6, rows = 3}, {T = 6.0, rows = 3}]', r"\[grid\] points: point 2 repeats point 1"),
    ('points = []', r"\[grid\] points: expected a non-empty list of tables"),
    ('points = [6, 8]', r"\[grid\] points\[1\]: expected a table of parameter values"),
    ('T = [4, 6]\npoints = [{T = 6, rows = 3}]', r"\[grid\] points\[1\]: T is also a \[grid\] key"),
    ('points = [{where = 6, rows = 3}]', r"\[grid\] points\[1\]: 'where' is not usable as a parameter name"),
    ('T = [4, 6, 8]\nrows = [2, 3]\nzip = [["T", "rows"]]',
     r'\[grid\] zip\[1\] \["T", "rows"\]: zipped keys need lists of equal length \(T: 3, rows: 2 values\)'),
    ('T = [4, 6]\nzip = [["T", "rows"]]', r"zip\[1\] .*: rows is not a \[grid\] key with a list of values"),
    ('T = [4, 6]\nrows = [2, 3]\nzip = [["T"]]', r"zip\[1\]: a group needs two or more key names"),
    ('T = [4, 6]\nrows = [2, 3]\nzip = [["T", "rows"], ["rows", "T"]]', r"zip\[2\]: key rows is already in group 1"),
    ('T = [4, 4]\nrows = [2, 2]\nzip = ["T", "rows"]', r"zip\[1\] .*: entry 2 repeats entry 1 \(T=4, rows=2\)"),
    ('T = [4, 6]\nrows = [2, 3]\nzip = "T, rows"', r"\[grid\] zip: expected a list of key lists"),
])
def test_bad_shapes_get_one_line(grid, msg):
    """Each bad points list or zip group is refused with one line naming the file and the entry."""
    with pytest.raises(InvalidInstanceError, match=r"^f\.toml: " + ".*" + msg) as info:
        _spec(grid + "\n")
    assert "\n" not in str(info.value)


STUDY = textwrap.dedent("""
    [instance]
    name = "pts"
    outer = "or"
    rows = "rows"
    inner = "position_search"
    row_length = "T - 2 * rows + 2"
    budget = { sum_squares = "T" }

    [grid]
    points = [{ T = 4, rows = 2 }, { T = 6, rows = 3 }]

    [study]
    bounds = ["general"]
    method = "dense"
    solver = "CLARABEL"
    growth = "T"
    """)


def test_study_over_a_points_list(tmp_path, capsys):
    """A study over two listed points runs end to end and writes its report.

    With rows of length T - 2 rows + 2 = 2 and k_1 + ... + k_n = T = 2n the only profile is (2, ..., 2),
    so each point is OR_n of n bits: ADV± = sqrt(n) (common knowledge: the adversary bound of OR_n).
    """
    path = tmp_path / "pts.toml"
    path.write_text(STUDY)
    store, rep = tmp_path / "pts.sqlite", tmp_path / "rep"
    code = main(["study", str(path), "--store", str(store), "--quiet", "--out", str(rep)])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "2 point(s); 0 already stored, 2 solved now" in out
    with Store(str(store), readonly=True) as s:
        rows = {(r.params["T"], r.params["rows"]): r for r in s.rows()}
    assert set(rows) == {(4, 2), (6, 3)}
    assert abs(rows[4, 2].lower - 2 ** 0.5) < 1e-5 and abs(rows[6, 3].lower - 3 ** 0.5) < 1e-5
    assert (rep / "summary.md").exists()
    reported = json.loads((rep / "data.json").read_text())["rows"]
    assert sorted((r["params"]["T"], r["params"]["rows"]) for r in reported) == [(4, 2), (6, 3)]
