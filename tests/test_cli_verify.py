"""Tests of the ``advbound verify`` command."""

import json
import math

import numpy as np

from advbound.evidence.certificate import Certificate, save_certificate
from advbound.cli import main


def _star(n):
    """OR_n on weight <= 1 with the star Γ (||Γ|| = √n, constraints 1; common knowledge)."""
    inputs = tuple(sorted(["0" * n] + ["0" * i + "1" + "0" * (n - 1 - i) for i in range(n)]))
    outputs = tuple("0" if x == "0" * n else "1" for x in inputs)
    g = np.zeros((n + 1, n + 1))
    g[0, 1:] = g[1:, 0] = 1.0
    return Certificate(("0", "1"), inputs, outputs, np.ones(n), g, metadata={"description": f"OR_{n} star"})


def test_rigorous_json(tmp_path, capsys):
    """--rigorous --json reports verified, a float lower <= the exact rational, within 2e-6 of √6."""
    p = tmp_path / "c.npz"
    save_certificate(_star(6), p)
    assert main(["verify", str(p), "--rigorous", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    from fractions import Fraction
    exact = Fraction(d["lower_exact"])
    assert d["verified"] is True and Fraction(d["lower"]) <= exact and exact ** 2 <= 6
    assert 1 - d["lower"] / math.sqrt(6) < 2e-6


def test_text_output_lists_checks(tmp_path, capsys):
    """The summary names ||Γ||, every position and the verdict."""
    p = tmp_path / "c.npz"
    save_certificate(_star(3), p)
    assert main(["verify", str(p), "--rigorous", "--method", "cholesky"]) == 0
    out = capsys.readouterr().out
    assert "||Γ∘Δ_3||" in out and "lower_exact" in out and "verdict: VERIFIED" in out


def test_corrupted_exit_1(tmp_path, capsys):
    """A claimed lower bound above what Γ proves fails verification: exit code 1, NOT VERIFIED.

    (This test used to put mass on an equal-output pair; such a file now breaks the acceptance rule and
    is refused with exit 2, see tests/test_certificate_forgery.py, and save_certificate cleans it.)
    The star Γ of OR_3 proves √3; the file claims 2.
    """
    from dataclasses import replace
    c = _star(3)
    p = tmp_path / "bad.npz"
    save_certificate(replace(c, metadata=dict(c.metadata, claimed_lower=2.0)), p)
    assert main(["verify", str(p), "--rigorous"]) == 1
    out = capsys.readouterr().out
    assert "NOT VERIFIED" in out and "[FAIL] claimed_lower" in out


def test_claim_below_bound_passes(tmp_path, capsys):
    """A claimed lower bound below the recomputed one is conservative: still VERIFIED (√3 proved, 1.5 claimed)."""
    from dataclasses import replace
    c = _star(3)
    p = tmp_path / "low.npz"
    save_certificate(replace(c, metadata=dict(c.metadata, claimed_lower=1.5)), p)
    assert main(["verify", str(p), "--rigorous"]) == 0
    assert "verdict: VERIFIED" in capsys.readouterr().out


def test_equal_output_mass_in_file_exit_2(tmp_path, capsys):
    """A file with Γ non-zero on an equal-output pair is refused (exit 2), not silently zeroed."""
    c = _star(3)
    g = c.gamma.copy()
    g[1, 2] = g[2, 1] = 4.0
    p = tmp_path / "eq.npz"
    np.savez(p, format=np.array("advbound-certificate/1"), alphabet=np.array(c.alphabet),
             inputs=np.array(c.inputs), outputs=np.array(c.outputs), costs=np.ones(3),
             metadata=np.array("{}"), gamma=g)
    assert main(["verify", str(p), "--rigorous"]) == 2
    out, err = capsys.readouterr()
    assert "VERIFIED" not in out and "zero on equal-output pairs" in err and err.count("\n") == 1


def test_unreadable_exit_2(tmp_path, capsys):
    """A file that is not a certificate gives a one-line error and exit code 2."""
    p = tmp_path / "junk.npz"
    p.write_text("not an archive")
    assert main(["verify", str(p), "--rigorous"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("advbound: error:") and err.count("\n") == 1


def test_denominator_option(tmp_path, capsys):
    """--denominator is used and reported in the JSON."""
    p = tmp_path / "c.npz"
    save_certificate(_star(4), p)
    assert main(["verify", str(p), "--rigorous", "--denominator", "1024", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["rigorous"]["denominator"] == 1024 and d["verified"]


def test_bad_denominator_exit_2(tmp_path, capsys):
    """A non-positive --denominator is bad input (exit 2)."""
    p = tmp_path / "c.npz"
    save_certificate(_star(2), p)
    assert main(["verify", str(p), "--rigorous", "--denominator", "0"]) == 2
