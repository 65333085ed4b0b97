"""Tests of ``advbound exact`` (advbound/cli/exact.py) through advbound.cli.main."""

import json
import math
import re
from pathlib import Path

import pytest

from advbound.cli import main
from advbound.cli.exact import adversary_factor

INSTANCES = Path(__file__).resolve().parent.parent / "instances"


@pytest.fixture
def or2(tmp_path):
    """OR_2 as a table file."""
    p = tmp_path / "or2.tbl"
    p.write_text("".join(f"{i:02b} {int(i > 0)}\n" for i in range(4)))
    return p


@pytest.fixture
def or3(tmp_path):
    """OR_3 as a table file."""
    p = tmp_path / "or3.tbl"
    p.write_text("".join(f"{i:03b} {int(i > 0)}\n" for i in range(8)))
    return p


def test_queries_json(or2, capsys):
    """--queries 1 --json reports the one-query optimum 9/10 of OR_2 (derived in tests/test_exact.py)."""
    assert main(["exact", str(or2), "--queries", "1", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["queries"] == 1 and d["status"] == "optimal"
    assert d["success_probability"] == pytest.approx(0.9, abs=1e-5)
    assert d["upper_bound"] == pytest.approx(0.9, abs=1e-5)


def test_error_zero_json(or3, capsys):
    """--error 0 finds that exact OR_3 needs 3 queries ("Quantum lower bounds by polynomials", 1998,
    arXiv:quant-ph/9802049)."""
    assert main(["exact", str(or3), "--error", "0", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["queries"] == 3 and d["reached"] is True and d["success_probability"] >= 1 - 1e-4
    assert [h["queries"] for h in d["history"]] == [0, 1, 2, 3]


def test_max_queries_not_reached(or3, capsys):
    """With --max-queries 2 exact OR_3 is not reached (same source): exit 1 and 'NOT reached'."""
    assert main(["exact", str(or3), "--error", "0", "--max-queries", "2"]) == 1
    assert "NOT reached" in capsys.readouterr().out


def test_summary_and_adversary_check(or2, capsys):
    """The summary names the oracle and prints the ADV± check, which holds: 1 query >= 0.2828...
    = ((1 - 2 sqrt(0.09))/2) sqrt(2) for OR_2 (ADV±(OR_2) = sqrt 2, common knowledge)."""
    assert main(["exact", str(or2), "--queries", "1", "--compare-adversary"]) == 0
    out = capsys.readouterr().out
    assert "phase oracle (-1)^(b*x_j)" in out
    success = float(re.search(r"^success +([0-9.]+)", out, re.M).group(1))
    assert success == pytest.approx(0.9, abs=1e-5)
    assert "ADV± >= 1.41421" in out and ": holds" in out


def test_instance_file_with_set(capsys):
    """An instance file with --set T=4 (two outputs) gives 1/2 with no query: the best guess (common knowledge)."""
    path = INSTANCES / "or3_sum_T.toml"
    if not path.exists():
        pytest.skip("instance file not present")
    assert main(["exact", str(path), "--set", "T=4", "--queries", "0", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["params"] == {"T": 4} and d["success_probability"] == pytest.approx(0.5, abs=1e-6)


def test_needs_a_mode(or2, capsys):
    """Without --queries or --error the command is bad input (exit 2)."""
    assert main(["exact", str(or2)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--queries" in err


def test_bad_error_value(or2, capsys):
    """--error 1.5 is bad input: exit 2 with a one-line message naming --error."""
    assert main(["exact", str(or2), "--error", "1.5"]) == 2
    err = capsys.readouterr().err
    assert "--error" in err and err.count("\n") == 1


def test_adversary_factor():
    """The factor (1 - 2 sqrt(ε(1-ε)))/2 is 1/2 at ε = 0 and (1 - 2 sqrt(2)/3)/2 at ε = 1/3 (the formula)."""
    assert adversary_factor(0.0) == 0.5
    assert adversary_factor(1 / 3) == pytest.approx((1 - 2 * math.sqrt(2) / 3) / 2)
