"""``method="auto"``: which program runs, why, and that it gives the same verified numbers."""

import json
import math

import pytest

from advbound.cli import main
from advbound.functions.builders import majority_function, or_function, position_search_composition
from advbound.functions.function import PartialFunction
from advbound.functions.sizing import TooLargeError
from advbound.programs.choose import choose_method
from advbound.programs.solve import solve

ROWS_3_7 = position_search_composition("or", 3, 5, 7)   # OR of 3 rows, k_1 + k_2 + k_3 = 7: 120 inputs


def _count_ones(n):
    """The number of ones of n bits (n + 1 outputs), as a table function without row structure."""
    return PartialFunction.from_pairs("01", [(format(i, f"0{n}b"), str(bin(i).count("1"))) for i in range(2 ** n)])


def test_interchangeable_rows_pick_the_rows_program():
    """A position-search composition has interchangeable rows: auto picks the S_n-reduced program."""
    c = choose_method(ROWS_3_7)
    assert (c.method, c.solver) == ("rows", "CLARABEL")
    assert "S_3" in c.reason and "26 input orbits" in c.reason and "120 inputs" in c.reason


def test_a_requested_solver_is_respected():
    """Asking for SCS skips the CLARABEL-only rows program, and the reason says so."""
    c = choose_method(ROWS_3_7, solver="scs")
    assert (c.method, c.solver) == ("dense", "SCS")
    assert "CLARABEL only" in c.reason


def test_no_row_structure_picks_dense_clarabel():
    """A table function (no rows) that fits in memory runs densely on the faster interior-point solver."""
    c = choose_method(majority_function(3))
    assert (c.method, c.solver) == ("dense", "CLARABEL") and "fits in memory" in c.reason


def test_too_large_two_outputs_pick_factored():
    """Past the memory budget, a two-output function goes to the factored first-order solver."""
    c = choose_method(or_function(3), budget=100)
    assert c.method == "factored" and "100 B" in c.reason


def test_too_large_many_outputs_is_refused_by_solve(monkeypatch):
    """With more than two outputs and no room, auto names the dense program and solve refuses it up front."""
    assert choose_method(_count_ones(3), budget=100).method == "dense"
    monkeypatch.setenv("ADVBOUND_MEMORY_LIMIT", "100")
    with pytest.raises(TooLargeError, match="allow_large"):
        solve(_count_ones(3))


def test_auto_is_the_default_and_agrees_with_dense():
    """solve(f) runs the rows program on 120 inputs and matches the dense CLARABEL program (computed here)."""
    auto = solve(ROWS_3_7)
    dense = solve(ROWS_3_7, method="dense", solver="CLARABEL")
    assert auto.method == "rows" and dense.method == "dense"
    assert auto.success and dense.success, (auto.message, dense.message)
    assert auto.lower == pytest.approx(dense.lower, abs=1e-5)
    assert auto.upper == pytest.approx(dense.upper, abs=1e-5)
    assert "interchangeable rows" in auto.method_reason and dense.method_reason == "method 'dense' was asked for"


def test_cli_prints_the_program_and_json_has_method(tmp_path, capsys):
    """`advbound solve` says which program ran and why; --json carries `method` (OR_3 = √3, common knowledge)."""
    table = tmp_path / "or3.tbl"
    table.write_text("".join(f"{i:03b} {int(i > 0)}\n" for i in range(8)))
    assert main(["solve", str(table)]) == 0
    out = capsys.readouterr().out
    assert "program   dense: no row symmetry" in out
    assert main(["solve", str(table), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["method"] == "dense" and d["requested_method"] == "auto" and d["solver"]["name"] == "CLARABEL"
    assert d["lower"] == pytest.approx(math.sqrt(3), rel=1e-6)


def test_cli_explicit_method_stays_available(tmp_path, capsys):
    """--method dense --solver SCS still runs exactly that program."""
    table = tmp_path / "or3.tbl"
    table.write_text("".join(f"{i:03b} {int(i > 0)}\n" for i in range(8)))
    assert main(["solve", str(table), "--method", "dense", "--solver", "SCS", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["method"] == "dense" and d["solver"]["name"] == "SCS"


def test_rows_refuses_another_solver():
    """method='rows' with SCS is refused in one line instead of silently running CLARABEL."""
    from advbound.errors import InvalidFunctionError
    with pytest.raises(InvalidFunctionError, match="CLARABEL only"):
        solve(ROWS_3_7, method="rows", solver="SCS")


def test_inspect_says_which_program_auto_runs(capsys):
    """`advbound inspect` names the program `solve` would pick, in text and in --json."""
    from pathlib import Path
    inst = str(Path(__file__).resolve().parents[1] / "instances" / "or3_sum_T.toml")
    assert main(["inspect", inst, "--set", "T=7"]) == 0
    assert "program (solve --method auto): rows with CLARABEL: 3 interchangeable rows" in capsys.readouterr().out
    assert main(["inspect", inst, "--set", "T=7", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["auto_method"]["method"] == "rows"
