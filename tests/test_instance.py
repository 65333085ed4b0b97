"""Instance files (advbound.functions.instance): expressions, schema errors, grids, keys, building, shipped files."""

import glob
import json
import math
import os
import textwrap

import pytest

from advbound.functions.builders import compose, or_function, position_search_row
from advbound.errors import InvalidInstanceError
from advbound.functions.instance import (
                                         build_instance, evaluate, grid_points, load_function, load_instance, parse_instance, parse_params,
                                         resolved, spec_key, time_model_of,
                                         )
from advbound.functions.timemodel import Budget, TimeModel

HERE = os.path.dirname(__file__)
INSTANCES = os.path.join(HERE, "..", "instances")


def write(tmp_path, text, name="study.toml"):
    p = tmp_path / name
    p.write_text(textwrap.dedent(text))
    return str(p)


BASE = """
[instance]
outer = "or"
rows = 3
row_length = "T - 2"
budget = { sum_squares = "T" }

[grid]
T = { from = 4, to = 6 }
"""


class TestEvaluate:
    """Tests for the expression evaluator."""

    @pytest.mark.parametrize("expr, want", [
        ("T - 2", 5), ("2 ** 3 + 1", 9), ("T // 2", 3), ("T / 2", 3.5), ("-T + 10", 3), ("(T + 1) * 2", 16),
        ("min(T, 3)", 3), ("max(T, 3, 9)", 9), ("sqrt(16)", 4.0), ("log(1)", 0.0), ("ceil(2.1)", 3),
        ("floor(2.9)", 2), ("T % 4", 3), (4, 4), (2.5, 2.5),
    ])
    def test_values(self, expr, want):
        """Arithmetic evaluates as in ordinary arithmetic with T = 7 (common knowledge)."""
        assert evaluate(expr, {"T": 7}) == want

    @pytest.mark.parametrize("expr, msg", [
        ("Tx - 2", r"^w: unknown name 'Tx'$"),
        ("__import__('os')", r"unknown function '__import__'"),
        ("T.real", r"is not allowed in an expression"),
        ("'a'", r"'a' is not a number"),
        ("1 / 0", r"cannot evaluate '1 / 0'"),
        ("sqrt(-1)", r"cannot evaluate"),
        ("2 ** 2000", r"too large"),
        ("T +", r"cannot parse expression"),
        ("lambda: 1", r"is not allowed"),
        (True, r"expected a number or an expression"),
    ])
    def test_errors(self, expr, msg):
        """Unknown names, calls, attributes, strings and bad arithmetic raise InvalidInstanceError."""
        with pytest.raises(InvalidInstanceError, match=msg):
            evaluate(expr, {"T": 7}, "w")


class TestSchema:
    """Tests for loading and validating instance files."""

    def test_unknown_name_message(self, tmp_path):
        """The message names the file, table, key and the unknown name."""
        path = write(tmp_path, BASE.replace('"T - 2"', '"Tx - 2"'))
        with pytest.raises(InvalidInstanceError,
                           match=r"study\.toml \[grid point T=4\]: \[instance\] row_length: unknown name 'Tx'$"):
            load_instance(path)

    @pytest.mark.parametrize("change, msg", [
        (('rows = 3', 'rows = 3\ncolour = "red"'), r"\[instance\] colour: unknown key"),
        (('outer = "or"', 'outer = "xor"'), r"\[instance\] outer: unknown function 'xor'"),
        (('outer = "or"', 'outer = { function = "threshold" }'), r"\[instance\] outer: function 'threshold' needs a parameter k"),
        (('outer = "or"', 'outer = { function = "threshold", k = 5 }'), r"k must be between 0 and 3"),
        (('outer = "or"', 'outer = { function = "or", n = 3 }'), r"unknown key 'n' \(the outer arity is rows\)"),
        (('rows = 3', 'rows = 0'), r"\[instance\] rows: must be >= 1, got 0"),
        (('rows = 3', 'rows = "T / 3"'), r"\[instance\] rows = \"T / 3\" evaluates to 1\.33+, must be an integer"),
        (('budget = { sum_squares = "T" }', 'budget = { sum = "T" }'), r"give exactly one of sum_squares, at_most, profiles"),
        (('budget = { sum_squares = "T" }', 'budget = { sum_squares = "T", rtol = 2 }'), r"rtol: must be in \[0, 1\)"),
        (('budget = { sum_squares = "T" }', 'budget = { profiles = [[1, 2]] }'), r"has 2 entries, expected 3"),
        (('budget = { sum_squares = "T" }', 'budget = { sum_squares = "T" }\ntime = "cube"'), r"\[instance\] time: expected \"sqrt\""),
        (('budget = { sum_squares = "T" }', 'budget = { sum_squares = "T" }\nmax_ones = -1'), r"max_ones: must be >= 0"),
        (('T = { from = 4, to = 6 }', 'T = { from = 6, to = 4 }'), r"\[grid\] T: 'to' \(4\) is smaller than 'from' \(6\)"),
        (('T = { from = 4, to = 6 }', 'T = []'), r"\[grid\] T: the list of values is empty"),
        (('T = { from = 4, to = 6 }', 'T = { from = 4, upto = 6 }'), r"\[grid\] T: unknown key 'upto'"),
        (('[grid]', 'stray = 1\n[grid]'), r"\[instance\] stray: unknown key"),
        (('row_length = "T - 2"', 'row_length = "T - 2"\ninner = { table = "nope.tbl" }'), r"cannot read table file 'nope\.tbl'"),
        (('row_length = "T - 2"\nbudget = { sum_squares = "T" }', 'inner = "position_search"'),
         r"row_length: missing \(needed by inner = \"position_search\" without a budget"),
    ])
    def test_schema_errors(self, tmp_path, change, msg):
        """Unknown keys and bad values raise InvalidInstanceError naming the file, grid point and key."""
        old, new = change
        assert old in BASE
        path = write(tmp_path, BASE.replace(old, new, 1))
        with pytest.raises(InvalidInstanceError, match=r"study\.toml( \[grid point T=4\])?: .*" + msg):
            load_instance(path)

    def test_invalid_toml(self, tmp_path):
        """A TOML syntax error names the file."""
        with pytest.raises(InvalidInstanceError, match=r"study\.toml: invalid TOML"):
            load_instance(write(tmp_path, "[instance\nouter = 1"))

    def test_missing_instance_table(self, tmp_path):
        """A file without [instance] is rejected."""
        with pytest.raises(InvalidInstanceError, match=r"missing \[instance\] table"):
            load_instance(write(tmp_path, "[study]\nx = 1\n"))

    def test_top_level_key_outside_table(self, tmp_path):
        """A top-level key outside any table is rejected (it was probably meant for [instance])."""
        with pytest.raises(InvalidInstanceError, match=r"top-level key 'rows' must be inside a table"):
            load_instance(write(tmp_path, "rows = 3\n" + BASE))

    def test_other_tables_pass_through(self, tmp_path):
        """[study], [solve] and [report] are kept untouched for their modules."""
        extra = '\n[study]\nbound = "general"\nnested = { a = [1, 2] }\n[solve]\ntol = 1e-7\n[report]\ntitle = "x"\n'
        spec = load_instance(write(tmp_path, BASE + extra))
        assert spec.study == {"bound": "general", "nested": {"a": [1, 2]}}
        assert spec.tables == {"solve": {"tol": 1e-7}, "report": {"title": "x"}}
        assert spec.name == "study" and spec.description == ""


class TestGridAndParams:
    """Tests for grids, params and keys."""

    def test_grid_points_order(self, tmp_path):
        """The grid is the cartesian product in the order written, last key fastest."""
        text = BASE.replace("T = { from = 4, to = 6 }", "T = [6, 4]\nw = { from = 0, to = 1 }")
        text = text.replace('budget = { sum_squares = "T" }', 'budget = { sum_squares = "T" }\nmax_ones = "w"')
        spec = load_instance(write(tmp_path, text))
        assert grid_points(spec) == [{"T": 6, "w": 0}, {"T": 6, "w": 1}, {"T": 4, "w": 0}, {"T": 4, "w": 1}]

    def test_grid_forms(self, tmp_path):
        """Scalars, lists and ranges with a step."""
        spec = load_instance(write(tmp_path, BASE.replace("T = { from = 4, to = 6 }", "T = { from = 4, to = 9, step = 2 }")))
        assert spec.grid == {"T": [4, 6, 8]}
        spec = load_instance(write(tmp_path, BASE.replace("T = { from = 4, to = 6 }", "T = 5")))
        assert grid_points(spec) == [{"T": 5}]
        spec = parse_instance('[instance]\nouter = "or"\nrows = 2\nrow_length = 2\n')
        assert grid_points(spec) == [{}]

    def test_params_errors(self, tmp_path):
        """build_instance needs every grid parameter and rejects unknown ones."""
        spec = load_instance(write(tmp_path, BASE))
        with pytest.raises(InvalidInstanceError, match=r"missing value for grid parameter\(s\) T"):
            build_instance(spec)
        with pytest.raises(InvalidInstanceError, match=r"unknown parameter 'm' \(the grid defines T\)"):
            build_instance(spec, {"T": 5, "m": 1})

    def test_params_outside_grid_allowed(self, tmp_path):
        """A grid parameter may take a value outside its grid (T = 9 here): C(8,2) 2^3 inputs."""
        spec = load_instance(write(tmp_path, BASE))
        assert build_instance(spec, {"T": 9}).size == math.comb(8, 2) * 8

    def test_parse_params(self):
        """NAME=VALUE pairs become ints or floats; malformed ones are rejected."""
        assert parse_params(["T=7", "alpha = 0.25"]) == {"T": 7, "alpha": 0.25}
        assert parse_params(None) == {}
        for bad, msg in (("T", "expected NAME=NUMBER"), ("T=x", "'x' is not a number"), ("1T=2", "expected NAME"),
                         ("T=inf", "not a finite number")):
            with pytest.raises(InvalidInstanceError, match=msg):
                parse_params([bad])

    def test_resolved_is_json(self, tmp_path):
        """resolved() evaluates every expression into plain JSON-able values."""
        spec = load_instance(write(tmp_path, BASE))
        r = resolved(spec, {"T": 5})
        assert json.loads(json.dumps(r)) == r
        assert r["inner"] == [{"position_search": 3}] * 3 and r["budget"] == {"sum_squares": 5, "rtol": 1e-9}
        assert r["time"] == {"alpha": 0.5} and r["outer"] == {"function": "or", "n": 3}

    def test_spec_key_equivalent_spellings(self, tmp_path):
        """Equivalent specs written differently share a key; a different T or outer changes it."""
        a = load_instance(write(tmp_path, BASE, "a.toml"))
        other = """
        [instance]
        name = "renamed"
        description = "same function, other spelling"
        outer = { function = "OR" }
        rows = "1 + 2"
        inner = [ { position_search = "T - 2" }, { position_search = "T-2" }, { position_search = "T - 1 - 1" } ]
        time = { alpha = 0.5 }
        budget = { sum_squares = "T * 1.0", rtol = 1e-9 }

        [grid]
        T = [4, 5, 6]
        """
        b = load_instance(write(tmp_path, other, "b.toml"))
        for T in (4, 5, 6):
            assert spec_key(a, {"T": T}) == spec_key(b, {"T": T})
        assert spec_key(a, {"T": 4}) != spec_key(a, {"T": 5})
        c = load_instance(write(tmp_path, BASE.replace('outer = "or"', 'outer = "and"'), "c.toml"))
        assert spec_key(c, {"T": 4}) != spec_key(a, {"T": 4})
        assert len(spec_key(a, {"T": 4})) == 64

    def test_profiles_permutations_canonical(self, tmp_path):
        """With permutations = true, listing (2,1,1) or (1,1,2) is the same spec."""
        t1 = BASE.replace('budget = { sum_squares = "T" }', 'budget = { profiles = [[2, 1, 1]], permutations = true }')
        t2 = BASE.replace('budget = { sum_squares = "T" }', 'budget = { profiles = [[1, 1, 2], [1, 2, 1]], permutations = true }')
        a, b = load_instance(write(tmp_path, t1, "a.toml")), load_instance(write(tmp_path, t2, "b.toml"))
        assert spec_key(a, {"T": 4}) == spec_key(b, {"T": 4})
        assert build_instance(a, {"T": 4}).inputs == build_instance(b, {"T": 4}).inputs


class TestBuild:
    """Tests for ``build_instance`` and ``load_function``."""

    def test_same_as_api(self, tmp_path):
        """The TOML instance and the equivalent Python call give the same inputs and outputs."""
        spec = load_instance(write(tmp_path, BASE))
        for params in grid_points(spec):
            T = params["T"]
            f = build_instance(spec, params)
            g = compose(or_function(3), position_search_row(T - 2), time_model=TimeModel.sqrt(),
                        budget=Budget.sum_squares(T))
            assert (f.inputs, f.outputs, f.costs, f.position_names) == (g.inputs, g.outputs, g.costs, g.position_names)
            assert "[T=%d]" % T in f.description

    def test_table_outer_and_inner(self, tmp_path):
        """Outer and inner functions may come from table files (paths relative to the instance file)."""
        (tmp_path / "or2.tbl").write_text("00 0\n01 1\n10 1\n11 1\n")
        (tmp_path / "row.tbl").write_text("0* 0\n1* 1\n*0 0\n*1 1\n")
        text = '[instance]\nouter = { table = "or2.tbl" }\ninner = { table = "row.tbl" }\nbudget = { sum_squares = 3 }\n'
        f = build_instance(load_instance(write(tmp_path, text)))
        g = compose(or_function(2), position_search_row(2), budget=Budget.sum_squares(3))
        assert (f.inputs, f.outputs) == (g.inputs, g.outputs)

    def test_table_outer_arity_mismatch(self, tmp_path):
        """rows must match the arity of a table outer function."""
        (tmp_path / "or2.tbl").write_text("00 0\n01 1\n10 1\n11 1\n")
        text = '[instance]\nouter = { table = "or2.tbl" }\nrows = 3\nrow_length = 2\n'
        with pytest.raises(InvalidInstanceError, match=r"the table has 2 positions, but rows = 3"):
            load_instance(write(tmp_path, text))

    def test_build_errors_name_file(self, tmp_path):
        """A restriction that leaves nothing is reported with the file name."""
        text = BASE.replace('row_length = "T - 2"', 'row_length = 1')
        spec = load_instance(write(tmp_path, text))
        with pytest.raises(InvalidInstanceError,
                           match=r"study\.toml \[grid point T=5\]: the budget .* allows no time profile"):
            build_instance(spec, {"T": 5})

    def test_load_function_dispatch(self, tmp_path):
        """.toml uses the first grid point when params is None; other suffixes are table files."""
        path = write(tmp_path, BASE)
        assert load_function(path).size == math.comb(3, 2) * 8  # T = 4
        assert load_function(path, {"T": 6}).size == math.comb(5, 2) * 8
        (tmp_path / "x.tbl").write_text("0 0\n1 1\n")
        assert load_function(tmp_path / "x.tbl").size == 2
        with pytest.raises(InvalidInstanceError, match="given for a table file"):
            load_function(tmp_path / "x.tbl", {"T": 1})

    def test_time_model_of(self, tmp_path):
        """time_model_of returns the model written (default sqrt under a budget)."""
        spec = load_instance(write(tmp_path, BASE))
        assert time_model_of(spec, {"T": 4}) == TimeModel.sqrt()
        spec = load_instance(write(tmp_path, BASE.replace("rows = 3", 'rows = 3\ntime = { table = [1, "sqrt(2)", 2] }')))
        assert time_model_of(spec, {"T": 4}) == TimeModel.positions([1, math.sqrt(2), 2])


class TestShippedInstances:
    """The instances shipped in instances/ load and build."""

    @pytest.mark.parametrize("path", sorted(glob.glob(os.path.join(INSTANCES, "*.toml"))),
                             ids=os.path.basename)
    def test_loads_and_builds(self, path):
        """Every shipped instance loads and builds at each grid point."""
        spec = load_instance(path)
        for params in grid_points(spec):
            f = build_instance(spec, params)
            assert f.size > 0

    def test_or3_sum_T_sizes(self):
        """or3_sum_T has C(T-1, 2) 2^3 inputs for T = 4..12 (compositions of T into 3 parts)."""
        spec = load_instance(os.path.join(INSTANCES, "or3_sum_T.toml"))
        assert [p["T"] for p in grid_points(spec)] == list(range(4, 13))
        for params in grid_points(spec):
            T = params["T"]
            assert build_instance(spec, params).size == math.comb(T - 1, 2) * 8

    def test_or4_one_defect_sizes(self):
        """or4_one_defect has C(T-1, 3) (1 + 4) inputs (at most one row with value 1)."""
        spec = load_instance(os.path.join(INSTANCES, "or4_one_defect.toml"))
        for params in grid_points(spec):
            T = params["T"]
            assert build_instance(spec, params).size == math.comb(T - 1, 3) * 5

    def test_maj3_table(self):
        """The shipped majority table agrees with the weight rule (common knowledge)."""
        f = load_function(os.path.join(INSTANCES, "tables", "maj3.tbl"))
        assert all(y == str(int(x.count("1") >= 2)) for x, y in zip(f.inputs, f.outputs)) and f.size == 8
