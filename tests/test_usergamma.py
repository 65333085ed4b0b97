"""Tests of advbound.usergamma and the ``advbound gamma`` command."""

import math

import numpy as np
import pytest
import scipy.sparse as sp

from advbound.cli import main
from advbound.function import PartialFunction
from advbound.usergamma import (GammaError, evaluate_gamma, gamma_from_callable, gamma_from_entries, improve_gamma,
                                load_callable)


def or_weight1(n):
    """OR_n restricted to Hamming weight <= 1."""
    pairs = [("0" * n, 0)] + [("0" * i + "1" + "0" * (n - 1 - i), 1) for i in range(n)]
    return PartialFunction.from_pairs("01", pairs, description=f"OR_{n} weight<=1")


def star(x, y):
    """The star adversary matrix of OR_n: 1 between 0^n and each e_i."""
    return 1.0 if {x.count("1"), y.count("1")} == {0, 1} else 0.0


def test_star_callable():
    """Star Γ for OR_5: ||Γ|| = √5, every ||Γ∘Δ_j|| = 1, all positions bind (common knowledge)."""
    f = or_weight1(5)
    rep = evaluate_gamma(f, gamma_from_callable(f, star))
    assert abs(rep.norm - math.sqrt(5)) < 1e-12 and abs(rep.ratio - math.sqrt(5)) < 1e-12
    assert rep.binding == (0, 1, 2, 3, 4) and rep.was_symmetric and rep.zeroed_entries == 0


def test_asymmetric_and_equal_output_mass_reported():
    """An asymmetric Γ is symmetrised and equal-output entries are zeroed, and the report says so."""
    f = or_weight1(3)
    g = gamma_from_callable(f, star)
    g[1, 2] = g[2, 1] = 7.0  # both inputs have output 1
    g[0, 1] = 3.0            # asymmetric entry; the pair (1, 0) keeps 1
    rep = evaluate_gamma(f, g)
    assert not rep.was_symmetric and rep.asymmetry == 2.0
    assert rep.zeroed_entries == 2 and rep.zeroed_max == 7.0


def test_costs_change_binding():
    """With costs (1, 2) on OR_2 and the star Γ, only position 1 binds: ratio 1/1 = ||Γ||/1 → √2 (derived)."""
    f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1)], costs=(1.0, 2.0))
    rep = evaluate_gamma(f, gamma_from_callable(f, star))
    assert rep.binding == (0,) and abs(rep.ratio - math.sqrt(2)) < 1e-12


def test_sparse_path_certified_below_estimate():
    """Above the dense limit the certified ratio is at most the estimate, and both are near √6 (common knowledge)."""
    f = or_weight1(6)
    g = sp.csr_matrix(gamma_from_callable(f, star))
    rep = evaluate_gamma(f, g, dense_limit=3)
    assert rep.method == "sparse"
    assert rep.certified_ratio <= rep.ratio * (1 + 1e-9)
    assert abs(rep.certified_ratio - math.sqrt(6)) < 1e-6


def test_improve_never_worse_and_helps():
    """Gradient ascent from a perturbed star Γ for OR_4 raises the ratio towards 2 = √4 (common knowledge)."""
    f = or_weight1(4)
    g = gamma_from_callable(f, star)
    g[0, 1:] = g[1:, 0] = [1.0, 0.5, 0.8, 1.3]
    res = improve_gamma(f, g, iterations=60)
    assert res.improved_ratio >= res.original_ratio
    assert res.improved_ratio > res.original_ratio + 0.01 and res.improved_ratio <= 2 + 1e-9


def test_tsv_entries_mirrored(tmp_path):
    """A text file listing each pair once is mirrored and gives the star bound √3."""
    f = or_weight1(3)
    p = tmp_path / "g.tsv"
    p.write_text("# star\n000 001 1\n000 010 1\n000 100 1\n")
    rep = evaluate_gamma(f, gamma_from_entries(f, p))
    assert rep.was_symmetric and abs(rep.ratio - math.sqrt(3)) < 1e-12


def test_npz_coo_with_inputs(tmp_path):
    """A COO .npz whose 'inputs' array fixes its own row order is mapped onto the canonical order."""
    f = or_weight1(2)
    p = tmp_path / "g.npz"
    np.savez(p, inputs=np.array(["10", "00", "01"]), gamma_row=np.array([0, 1]), gamma_col=np.array([1, 2]),
             gamma_val=np.array([1.0, 1.0]))
    rep = evaluate_gamma(f, gamma_from_entries(f, p))
    assert abs(rep.ratio - math.sqrt(2)) < 1e-12


def test_entries_outside_domain(tmp_path):
    """An entries line naming an input outside the domain is an error naming file and line."""
    f = or_weight1(2)
    p = tmp_path / "g.tsv"
    p.write_text("00 01 1\n00 11 1\n")
    with pytest.raises(GammaError, match=r"g.tsv:2: input '11' is not in the domain"):
        gamma_from_entries(f, p)


@pytest.mark.parametrize("func,match", [
    (lambda x, y: 1 / 0, r"gamma\('00', '00'\) raised ZeroDivisionError"),
    (lambda x, y: float("nan") if x == "01" else 0.0, r"gamma\('01', '00'\) returned nan"),
    (lambda x, y: "1.0", r"returned '1.0' \(str\), not a real number"),
])
def test_bad_callable(func, match):
    """A callable that raises, returns NaN or a non-number gives an error naming the pair."""
    with pytest.raises(GammaError, match=match):
        gamma_from_callable(or_weight1(2), func)


def test_load_callable_errors(tmp_path):
    """Missing module, missing file and missing function each give a one-line error."""
    mod = tmp_path / "m.py"
    mod.write_text("def g(x, y):\n    return 0.0\n")
    assert load_callable(f"{mod}:g")("0", "1") == 0.0
    for spec, match in [("no_such_module_xyz:f", "cannot import module"), (f"{tmp_path}/nope.py:g", "no such file"),
                        (f"{mod}:h", "has no function 'h'"), ("nocolon", "expected MODULE:FUNCTION")]:
        with pytest.raises(GammaError, match=match):
            load_callable(spec)


def _table(tmp_path, n=3):
    """Write OR_n on weight <= 1 as a table file."""
    p = tmp_path / "or.tbl"
    p.write_text(or_weight1(n).to_table())
    return p


def test_cli_callable_nan_exit_2(tmp_path, capsys):
    """CLI: a callable returning NaN exits 2 with one line naming the pair."""
    mod = tmp_path / "bad.py"
    mod.write_text("def g(x, y):\n    return float('nan')\n")
    assert main(["gamma", str(_table(tmp_path)), "--callable", f"{mod}:g"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "returned nan" in err and "gamma('000', '000')" in err


def test_cli_callable_raises_exit_2(tmp_path, capsys):
    """CLI: a callable that raises exits 2 with one line naming the pair and the exception."""
    mod = tmp_path / "bad.py"
    mod.write_text("def g(x, y):\n    raise KeyError(x)\n")
    assert main(["gamma", str(_table(tmp_path)), "--callable", f"{mod}:g"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "raised KeyError" in err


def test_cli_json_improve(tmp_path, capsys):
    """CLI --json --improve reports ratio √3 for the star Γ of OR_3 (common knowledge) and both ratios."""
    import json
    mod = tmp_path / "g.py"
    mod.write_text("def g(x, y):\n    return 1.0 if {x.count('1'), y.count('1')} == {0, 1} else 0.0\n")
    assert main(["gamma", str(_table(tmp_path)), "--callable", f"{mod}:g", "--json", "--improve",
                 "--iterations", "5"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert abs(d["ratio"] - math.sqrt(3)) < 1e-12 and d["improve"]["improved_ratio"] >= d["ratio"]


def test_cli_save_certificate_then_rigorous(tmp_path, capsys):
    """gamma --save-certificate writes a file that verify --rigorous certifies at √3 (OR_3 star; common knowledge)."""
    import json
    from fractions import Fraction
    mod = tmp_path / "g.py"
    mod.write_text("def g(x, y):\n    return 1.0 if {x.count('1'), y.count('1')} == {0, 1} else 0.0\n")
    cert = tmp_path / "c.npz"
    assert main(["gamma", str(_table(tmp_path)), "--callable", f"{mod}:g", "--save-certificate", str(cert)]) == 0
    capsys.readouterr()
    assert main(["verify", str(cert), "--rigorous", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    exact = Fraction(d["lower_exact"])
    assert d["verified"] and exact ** 2 <= 3 and 1 - float(exact) / math.sqrt(3) < 2e-6
