"""Tests of ``advbound solve`` (advbound/cli/solve.py) through advbound.cli.main."""

import json
import math

import pytest

import advbound.programs.solve
from advbound.evidence.certificate import load_certificate
from advbound.cli import main
from advbound.result import SolveResult
from advbound.evidence.verify import verify_certificate


@pytest.fixture
def or3(tmp_path):
    """OR_3 as a table file (ADV±(OR_3) = sqrt(3), common knowledge)."""
    p = tmp_path / "or3.tbl"
    p.write_text("".join(f"{i:03b} {int(i > 0)}\n" for i in range(8)))
    return p


def test_json(or3, capsys):
    """--json prints one object with the verified bounds sqrt(3) for OR_3 (common knowledge)."""
    assert main(["solve", str(or3), "--solver", "CLARABEL", "--tol", "1e-9", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    for key in ("bound", "lower", "upper", "gap", "status", "domain_size", "solver"):
        assert key in d
    assert d["status"] == "optimal" and d["domain_size"] == 8 and d["bound"] == "general"
    assert d["lower"] == pytest.approx(math.sqrt(3), rel=1e-6) and d["upper"] == pytest.approx(math.sqrt(3), rel=1e-6)
    assert d["verification"]["passed"] is True


def test_summary(or3, capsys):
    """The human summary shows the verified lower bound sqrt(3) = 1.7320508... and the status (SCS default)."""
    assert main(["solve", str(or3)]) == 0
    out = capsys.readouterr().out
    assert "lower     1.73205080" in out and "status    optimal" in out and "8 inputs" in out


def test_positive_bound(or3, capsys):
    """--bound positive solves ADV(OR_3) = sqrt(3) (common knowledge: the OR adversary is non-negative)."""
    assert main(["solve", str(or3), "--bound", "positive", "--solver", "CLARABEL", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["bound"] == "positive" and d["lower"] == pytest.approx(math.sqrt(3), rel=1e-5)


def test_save_certificate(or3, tmp_path, capsys):
    """--save-certificate writes a file that re-verifies to sqrt(3)."""
    cert = tmp_path / "or3.npz"
    assert main(["solve", str(or3), "--solver", "CLARABEL", "--save-certificate", str(cert)]) == 0
    assert "saved" in capsys.readouterr().out
    rep = verify_certificate(load_certificate(cert))
    assert rep.passed and rep.lower == pytest.approx(math.sqrt(3), rel=1e-6)


def test_missing_file(tmp_path, capsys):
    """A missing file is bad input: exit 2 with a one-line message."""
    assert main(["solve", str(tmp_path / "nope.tbl")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "nope.tbl" in err


def test_constant_function(tmp_path, capsys):
    """A constant function is bad input (its bound is 0): exit 2."""
    p = tmp_path / "c.tbl"
    p.write_text("00 1\n11 1\n")
    assert main(["solve", str(p)]) == 2
    assert "constant" in capsys.readouterr().err


def test_bad_solver(or3, capsys):
    """An unsupported solver name is bad input: exit 2."""
    assert main(["solve", str(or3), "--solver", "NOPE"]) == 2
    assert "not supported" in capsys.readouterr().err


def test_unverified_exit_1(or3, monkeypatch, capsys):
    """An unverified result gives exit 1 and a one-line message on stderr."""
    monkeypatch.setattr(advbound.programs.solve, "solve", lambda f, **kw: SolveResult(
        message="check(s) dual_repair failed", status="unverified", bound="general", lower=1.0, domain_size=f.size))
    assert main(["solve", str(or3)]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "unverified" in err and "dual_repair" in err


def test_toml_instance_with_set(capsys):
    """--set T=5 on the shipped OR-of-3-rows instance: 48 inputs (3 rows, profiles of k_1+k_2+k_3 = 5: 6 x 2^3).

    The value is compared with the test-side construction tests/known_instances.or_of_search_rows(3, 3, 5),
    solved through the API, so the CLI, the instance loader and the API must agree.
    """
    from pathlib import Path

    from advbound.programs.solve import solve
    from known_instances import or_of_search_rows

    path = Path(__file__).parents[1] / "instances" / "or3_sum_T.toml"
    if not path.exists():
        pytest.skip("instance file not shipped")
    code = main(["solve", str(path), "--set", "T=5", "--solver", "CLARABEL", "--tol", "1e-9", "--json"])
    d = json.loads(capsys.readouterr().out)
    assert code == 0 and d["domain_size"] == 48 and d["params"] == {"T": 5}
    ref = solve(or_of_search_rows(3, 3, 5), solver="CLARABEL", tol=1e-9)
    assert d["lower"] == pytest.approx(ref.lower, rel=1e-6) and d["upper"] == pytest.approx(ref.upper, rel=1e-6)


def test_bad_set(or3, capsys):
    """--set on a table file is bad input: exit 2."""
    assert main(["solve", str(or3), "--set", "T=5"]) == 2
    assert "T" in capsys.readouterr().err
