"""Tests of advbound.evidence.usergamma and the ``advbound gamma`` command."""

import math
import os

import numpy as np
import pytest
import scipy.sparse as sp

from advbound.cli import main
from advbound.functions.function import PartialFunction
from advbound.evidence.usergamma import (GammaError, evaluate_gamma, gamma_from_callable, gamma_from_entries, improve_gamma,
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


# ---------------------------------------------------------------------------------------------
# Hostile callables, specs and entries files
# ---------------------------------------------------------------------------------------------
def _exit_at_01(x, y):
    """Calls sys.exit on the pair ('00', '01')."""
    import sys
    if (x, y) == ("00", "01"):
        sys.exit(7)
    return 0.0


def test_callable_sys_exit_named():
    """A callable that calls sys.exit is an error naming the callable, the exit code and the pair."""
    with pytest.raises(GammaError, match=r"^gamma callable mine called sys.exit\(7\) at pair \('00', '01'\)$"):
        gamma_from_callable(or_weight1(2), _exit_at_01, name="mine")


@pytest.mark.parametrize("value,match", [
    (10 ** 400, r"returned 1000.*\.\.\., which is not representable as a float"),
    (1j, r"returned 1j \(complex\), not a real number"),
    (np.array([1.0]), r"\(ndarray\), not a real number"),
    (True, r"\(bool\), not a real number"),
])
def test_callable_unrepresentable_values(value, match):
    """Huge integers, complex numbers, arrays and booleans are refused with the pair named."""
    with pytest.raises(GammaError, match=match):
        gamma_from_callable(or_weight1(2), lambda x, y: value)


def test_overflowing_entries_refused():
    """An entry of 1e308 (finite, but its square overflows) is refused naming the pair and the remedy."""
    f = or_weight1(2)
    g = gamma_from_callable(f, lambda x, y: 1e308 if {x, y} == {"00", "01"} else 0.0)
    with pytest.raises(GammaError, match=r"Γ\('00', '01'\) = 1e\+308: .* divide Γ by a constant"):
        evaluate_gamma(f, g)
    with pytest.raises(GammaError, match=r"divide Γ by a constant"):
        evaluate_gamma(f, sp.csr_matrix(g))


def test_large_but_safe_entries_scale_invariant():
    """Entries of 1e100 are accepted and give the same ratio as the unscaled star Γ (the ratio is scale-invariant)."""
    f = or_weight1(3)
    g = gamma_from_callable(f, star)
    assert abs(evaluate_gamma(f, 1e100 * g).ratio - evaluate_gamma(f, g).ratio) < 1e-12


def test_load_callable_paths(tmp_path, monkeypatch):
    """A folder, a non-.py file, a module that calls sys.exit on import and a relative name: one-line errors."""
    (tmp_path / "pkgdir").mkdir()
    (tmp_path / "data.txt").write_text("x = 1\n")
    (tmp_path / "quits.py").write_text("import sys\nsys.exit('bye')\n")
    monkeypatch.chdir(tmp_path)
    for spec, match in [("pkgdir/:g", r"'pkgdir/' is a folder, not a \.py file"),
                        ("pkgdir:g", r"'pkgdir' is a folder, not a module"),
                        ("data.txt:g", r"'data.txt' is a file but not a Python source file"),
                        (f"{tmp_path}/data.txt:g", r"is not a Python source file \(\.py\)"),
                        ("quits.py:g", r"importing quits.py called sys.exit\('bye'\)"),
                        (".rel:g", r"relative module names are not supported")]:
        with pytest.raises(GammaError, match=match):
            load_callable(spec)


def test_entries_text_encodings(tmp_path):
    """A byte-order mark is accepted; binary and Latin-1 bytes are refused naming file and line."""
    f = or_weight1(3)
    p = tmp_path / "bom.tsv"
    p.write_bytes("\ufeff000 001 1\n000 010 1\n000 100 1\n".encode("utf-8"))
    assert abs(evaluate_gamma(f, gamma_from_entries(f, p)).ratio - math.sqrt(3)) < 1e-12
    p = tmp_path / "latin1.tsv"
    p.write_bytes(b"000 001 1\n# caf\xe9\n")
    with pytest.raises(GammaError, match=r"latin1.tsv:2: not UTF-8 text \(byte 0xe9 at column 6\)"):
        gamma_from_entries(f, p)


def test_entries_endless_line_refused(tmp_path):
    """/dev/zero (or any line longer than 1 MiB) is refused instead of read forever."""
    f = or_weight1(2)
    src = "/dev/zero" if os.path.exists("/dev/zero") else None
    if src is None:
        src = tmp_path / "long.tsv"
        src.write_text("0" * (2 << 20))
    with pytest.raises(GammaError, match=r":1: line longer than"):
        gamma_from_entries(f, src)


def test_npz_entries_hostile(tmp_path):
    """npz entries: wrong shape (checked from the header), object arrays, float indices, repeated inputs."""
    f = or_weight1(2)
    cases = [
        ("shape.npz", dict(gamma=np.zeros((5, 5))), r"gamma has shape \(5, 5\), expected \(3, 3\)"),
        ("floatidx.npz", dict(gamma_row=np.array([0.0]), gamma_col=np.array([1]), gamma_val=np.array([1.0])),
         r"gamma_row has dtype float64, expected signed integers or unsigned integers"),
        ("dup.npz", dict(inputs=np.array(["00", "00"]), gamma=np.zeros((2, 2))), r"inputs\[1\] = '00' repeats"),
    ]
    for name, arrays, match in cases:
        np.savez(tmp_path / name, **arrays)
        with pytest.raises(GammaError, match=match):
            gamma_from_entries(f, tmp_path / name)
    np.savez(tmp_path / "obj.npz", gamma=np.array([[None] * 3] * 3, dtype=object))
    with pytest.raises(GammaError, match=r"gamma .*(dtype object|unreadable)"):
        gamma_from_entries(f, tmp_path / "obj.npz")


def test_npz_dense_shape_not_decompressed(tmp_path):
    """A header promising a 10^6 x 10^6 gamma is refused from the header alone (the data is never read)."""
    import io
    import zipfile
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, {"descr": "<f8", "fortran_order": False, "shape": (10**6, 10**6)})
    p = tmp_path / "bomb.npz"
    with zipfile.ZipFile(p, "w") as z:
        z.writestr("gamma.npy", buf.getvalue())  # the header (with its magic) and no data
    with pytest.raises(GammaError, match=r"gamma has shape \(1000000, 1000000\), expected \(3, 3\)"):
        gamma_from_entries(or_weight1(2), p)


def test_cli_sys_exit_callable_exit_2(tmp_path, capsys):
    """CLI: a callable calling sys.exit(3) exits 2 (not 3, not 0) with one line naming the spec and the pair."""
    mod = tmp_path / "quit.py"
    mod.write_text("import sys\ndef g(x, y):\n    sys.exit(3)\n")
    spec = f"{mod}:g"
    assert main(["gamma", str(_table(tmp_path)), "--callable", spec]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and f"gamma callable {spec} called sys.exit(3) at pair ('000', '000')" in err


def test_callable_constants_passed_as_keywords():
    """Constants reach the callable as keyword arguments (also through **kwargs); a name it does not take is a
    one-line error naming the parameter and the callable.  Star of OR_3 with weight w: the ratio is √3 for any
    w > 0 (common knowledge; scaling Γ does not change the bound)."""
    f = or_weight1(3)
    rep = evaluate_gamma(f, gamma_from_callable(f, lambda x, y, w=1.0: w * star(x, y), params={"w": 2.5}))
    assert abs(rep.norm - 2.5 * math.sqrt(3)) < 1e-12 and abs(rep.ratio - math.sqrt(3)) < 1e-12
    g = gamma_from_callable(f, lambda x, y, **kw: kw["w"] * star(x, y), params={"w": 2.0})
    assert g.max() == 2.0
    with pytest.raises(GammaError, match=r"gamma callable m\.py:g does not accept a parameter 'v'"):
        gamma_from_callable(f, lambda x, y, w=1.0: 0.0, name="m.py:g", params={"v": 1.0})
