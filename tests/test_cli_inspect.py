"""``advbound inspect``: text and JSON output, parameters, and exit code 2 with one-line errors."""

import json
import re
import math
import os
import subprocess
import sys

import pytest

from advbound.cli import main

HERE = os.path.dirname(__file__)
OR3 = os.path.join(HERE, "..", "instances", "or3_sum_T.toml")
MAJ3 = os.path.join(HERE, "..", "instances", "tables", "maj3.tbl")


def run(capsys, *argv):
    code = main(["inspect", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_json_instance(capsys):
    """--json prints one object; or3_sum_T at T=7 has C(6,2) 2^3 = 120 inputs, 15 positions, 15 zeros."""
    code, out, err = run(capsys, OR3, "--set", "T=7", "--json")
    assert code == 0
    d = json.loads(out)
    assert d["domain_size"] == math.comb(6, 2) * 8 and d["positions"] == 15
    assert d["outputs"] == {"0": 15, "1": 105} and d["params"] == {"T": 7}
    assert d["sum_squares"] == {"7": 120} and len(d["time_profiles"]) == math.comb(6, 2)
    # with k_1 + k_2 + k_3 = 7 every k is at most 5 = T - 2, so no position is dead
    assert d["dead_positions"] == []
    # bipartite reduced form: |D0| |D1| + |D| variables, one LMI of size |D| per live position
    assert d["sdp"]["variables"] == 15 * 105 + 120 and d["sdp"]["lmi_sizes"] == {"120": 15}


def test_text_instance_default_point(capsys):
    """Without --set the first grid point (T=4) is used and said so; the main facts are printed."""
    code, out, err = run(capsys, OR3)
    assert code == 0 and err == ""
    assert "T=4; first of 9 grid points" in out
    assert "domain: 24 inputs on 6 positions, alphabet '01*'" in out
    assert "outputs: 0: 3, 1: 21" in out
    assert "sum t_i^2: 4: 24" in out and "(1,1,2): 8" in out
    assert "SDP (ADV±, bipartite form): 87 variables, 6 LMIs (6 of size 24)" in out


def test_dead_positions_flagged(tmp_path, capsys):
    """A position with the same symbol on every input is flagged dead and gets no LMI (one LMI is left)."""
    p = tmp_path / "dead.tbl"
    p.write_text("00 0\n01 1\n")
    code, out, err = run(capsys, str(p), "--json")
    d = json.loads(out)
    assert code == 0 and d["dead_positions"] == ["x1"] and d["sdp"]["lmi_count"] == 1
    code, out, err = run(capsys, str(p))
    assert "x1(dead)" in out and "positions: 2 (1 live, 1 dead)" in out


def test_table_file(capsys):
    """A table file is inspected without time profiles; MAJ_3 has 4 + 4 inputs (common knowledge)."""
    code, out, err = run(capsys, MAJ3, "--json")
    d = json.loads(out)
    assert code == 0 and d["domain_size"] == 8 and d["outputs"] == {"0": 4, "1": 4}
    assert d["time_profiles"] is None and d["positions"] == 3


def test_constant_function(tmp_path, capsys):
    """A constant function is reported as such: its bound is 0."""
    p = tmp_path / "c.tbl"
    p.write_text("00 1\n11 1\n")
    code, out, err = run(capsys, str(p))
    assert code == 0 and "constant function: bound is 0" in out


def test_positive_bound_sizes(capsys):
    """--bound positive sizes the positive-weight SDP (same variables plus sign constraints)."""
    code, out, err = run(capsys, MAJ3, "--json", "--bound", "positive")
    d = json.loads(out)
    assert d["sdp"]["sign_constraints"] == 16 and d["sdp"]["bound"] == "positive"


@pytest.mark.parametrize("content, argv, msg", [
    ("00 0\n01 1\n01x 1\n", [], r"f\.tbl:3: input '01x' has length 3, expected 2"),
    (None, ["--set", "X=3"], r"unknown parameter 'X' \(the grid defines T\)"),
    (None, ["--set", "T"], r"--set 'T': expected NAME=NUMBER"),
    ("0 0\n", ["--set", "T=3"], r"--set given for a table file"),
    ('[instance]\nouter = "or"\nrows = 2\nrow_length = "Tx"\n', [],
     r"f\.toml: \[instance\] row_length: unknown name 'Tx'$"),
    ('[instance]\nouter = "or"\nrows = 2\nrow_length = 1\nbudget = { sum_squares = 1 }\n', [],
     r"f\.toml: the budget \(sum t_i\^2 = 1\) allows no time profile: the smallest sum of t_i\^2 any input "
     r"has is 2, above 1$"),
])
def test_errors_exit_2(tmp_path, capsys, content, argv, msg):
    """Bad input gives exit code 2 and a single 'advbound: error:' line on stderr."""
    if content is None:
        path = OR3
    else:
        name = "f.toml" if content.startswith("[instance]") else "f.tbl"
        path = str(tmp_path / name)
        (tmp_path / name).write_text(content)
    code, out, err = run(capsys, path, *argv)
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("advbound: error: ")
    assert re.search(msg, lines[0])


def test_missing_file_subprocess(tmp_path):
    """Through the installed entry point, a missing file gives exit 2 and one stderr line."""
    r = subprocess.run([sys.executable, "-m", "advbound", "inspect", str(tmp_path / "none.tbl")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and r.stderr.strip().count("\n") == 0
    assert "no such file" in r.stderr


def test_row_length_cut_is_counted(tmp_path, capsys):
    """t = k^0.3, Σ t_i² ≤ 5, OR of 3 rows: row_length T - 2 keeps 184 of the 304 allowed inputs, so it drops
    120; inspect prints the count and --json has it under row_length_cut (the 304 and 184 of
    tests/test_budgets.py, a user's report, recomputed there by the builder)."""
    p = tmp_path / "k03.toml"
    p.write_text('[instance]\nouter = "or"\nrows = 3\ninner = "position_search"\nrow_length = "T - 2"\n'
                 'time = { alpha = "0.3" }\nbudget = { at_most = "T" }\n[grid]\nT = [5]\n')
    code, out, err = run(capsys, str(p), "--json")
    d = json.loads(out)
    assert code == 0 and d["domain_size"] == 184
    assert d["row_length_cut"] == {"rows": [{"row": i, "positions": [4, 6]} for i in (1, 2, 3)],
                                   "inputs": 184, "allowed": 304, "dropped": 120}
    code, out, err = run(capsys, str(p))
    assert ("row_length cuts allowed time profiles: it leaves out 120 of the 304 inputs the budget allows "
            "(row 1: positions 4..6; row 2: positions 4..6; row 3: positions 4..6)") in out


def test_no_row_length_cut_for_the_sqrt_rows(capsys):
    """For t = √k and Σ k_i = T the length T - 2 is exactly what the budget allows: nothing is cut."""
    code, out, err = run(capsys, OR3, "--set", "T=7", "--json")
    assert code == 0 and json.loads(out)["row_length_cut"] is None
