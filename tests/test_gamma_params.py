"""Free constants in a user-supplied Γ: ``gamma(x, y, **params)``, ``--param``, ``--fit`` and parameter files.

Covers advbound.evidence.gammainput.check_params, advbound.programs.gammafit and the
constants options of ``advbound gamma`` (driven through :func:`advbound.cli.main`).
"""

import importlib.util
import json
import math
import os
import re

import pytest

from advbound.cli import main
from advbound.evidence.usergamma import GammaError, evaluate_gamma, gamma_from_callable
from advbound.functions.builders import parity_function, position_search_composition
from advbound.functions.function import PartialFunction
from advbound.programs.gammafit import fit_gamma_params, read_params_file

ROOT = os.path.join(os.path.dirname(__file__), "..")
EXAMPLE = os.path.join(ROOT, "examples", "gamma_star.py")


def _example():
    spec = importlib.util.spec_from_file_location("gamma_star_example", EXAMPLE)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def or_weight1(n):
    """OR_n restricted to Hamming weight <= 1."""
    pairs = [("0" * n, 0)] + [("0" * i + "1" + "0" * (n - 1 - i), 1) for i in range(n)]
    return PartialFunction.from_pairs("01", pairs, description=f"OR_{n} weight<=1")


def star_ab(x, y, a=1.0, b=1.0):
    """Star of OR_n on weight <= 1: weight a between 0^n and 10..0, weight b between 0^n and the other e_i."""
    if x.count("1") + y.count("1") != 1:   # both weight 0, or both weight 1 (equal outputs): 0
        return 0.0
    one = x if "1" in x else y
    return a if one.startswith("1") else b


def bipartite(x, y):
    """1 on every pair of inputs of different parity."""
    return float(x.count("1") % 2 != y.count("1") % 2)


def hamming_one(x, y):
    """1 on every pair of inputs at Hamming distance 1 (the hypercube)."""
    return float(sum(a != b for a, b in zip(x, y)) == 1)


def same_profile_star(x, y):
    """1 between the all-zero input of a profile and each input of that profile with exactly one row of value 1."""
    if ("1" in x) == ("1" in y):
        return 0.0
    zero, one = (y, x) if "1" in x else (x, y)
    same = [i for i, c in enumerate(zero) if c != "*"] == [i for i, c in enumerate(one) if c != "*"]
    return 1.0 if same and one.count("1") == 1 else 0.0


# ---------------------------------------------------------------------------------------------
# Outside values at given constants
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("n", [3, 4, 5, 6])
def test_or_uniform_star_at_given_constants(n):
    """The uniform star of OR_n on weight <= 1 proves exactly √n ("Quantum lower bounds by quantum arguments",
    2000, arXiv:quant-ph/0002066): ||Γ|| = √n, each ||Γ∘Δ_j|| = 1.  Here a = b = 1 are passed as constants."""
    f = or_weight1(n)
    rep = evaluate_gamma(f, gamma_from_callable(f, star_ab, params={"a": 1.0, "b": 1.0}))
    assert abs(rep.certified_ratio - math.sqrt(n)) < 1e-12
    assert all(abs(v - 1.0) < 1e-12 for v in rep.constraint_norms)


def test_or_star_constants_change_the_bound():
    """With a = 1, b = 0.1 the star's bound is sqrt(1 + (n-1)·0.01) / 1 (derived: ||Γ|| = sqrt(a² + (n-1)b²),
    ||Γ∘Δ_1|| = |a|, the others |b|), so the constants really reach the callable."""
    f = or_weight1(4)
    rep = evaluate_gamma(f, gamma_from_callable(f, star_ab, params={"a": 1.0, "b": 0.1}))
    assert abs(rep.certified_ratio - math.sqrt(1 + 3 * 0.01)) < 1e-12


@pytest.mark.parametrize("n", [2, 3, 4, 5])
def test_parity_hypercube_gives_n(n):
    """PARITY_n, all n-bit inputs: Γ = 1 on pairs at Hamming distance 1 gives exactly n (common knowledge; the
    unweighted adversary of "Quantum lower bounds by quantum arguments", 2000, arXiv:quant-ph/0002066):
    Γ is the hypercube's adjacency matrix, ||Γ|| = n, and each Γ∘Δ_j is a perfect matching, norm 1."""
    f = parity_function(n)
    rep = evaluate_gamma(f, gamma_from_callable(f, hamming_one))
    assert abs(rep.certified_ratio - n) < 1e-9 and abs(rep.norm - n) < 1e-9


@pytest.mark.parametrize("n", [2, 3, 4, 5])
def test_parity_all_ones_bipartite_gives_two(n):
    """PARITY_n: Γ = 1 on *every* pair of different parity gives 2, not n (derived): it is the complete bipartite
    graph between 2^(n-1) even and 2^(n-1) odd inputs, ||Γ|| = 2^(n-1); Γ∘Δ_j joins each input to the
    2^(n-2) inputs of the other parity that differ from it at j, a regular bipartite graph, ||Γ∘Δ_j|| = 2^(n-2)."""
    f = parity_function(n)
    rep = evaluate_gamma(f, gamma_from_callable(f, bipartite))
    assert abs(rep.norm - 2 ** (n - 1)) < 1e-9 and abs(rep.certified_ratio - 2) < 1e-9


@pytest.mark.parametrize("n,T", [(2, 4), (2, 6), (3, 5), (3, 7)])
def test_position_search_same_profile_star(n, T):
    """OR of n position-search rows under sum k_i = T: the same-profile star gives exactly √n at any T (derived).

    For each time profile (the positions of the non-stars) Γ connects the all-zero input of that profile to
    each input of the same profile with exactly one row of value 1: a star with n leaves.  Stars of different
    profiles are disjoint, so ||Γ|| = √n.  Each Γ∘Δ_j is a matching (an input with one 1-row differs from its
    star centre only at that row's non-star position), so ||Γ∘Δ_j|| = 1 wherever it is non-zero.  Inputs with
    more than one row of value 1 are outside the star and get Γ = 0.  The shipped example at cross = 0 is
    the same matrix.
    """
    f = position_search_composition("or", n, None, T)
    rep = evaluate_gamma(f, gamma_from_callable(f, same_profile_star))
    assert abs(rep.norm - math.sqrt(n)) < 1e-12 and abs(rep.certified_ratio - math.sqrt(n)) < 1e-12
    assert max(rep.constraint_norms) == pytest.approx(1.0, abs=1e-12)
    ex = evaluate_gamma(f, gamma_from_callable(f, _example().gamma, params={"cross": 0.0}))
    assert abs(ex.certified_ratio - math.sqrt(n)) < 1e-12


# ---------------------------------------------------------------------------------------------
# Fitting
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("n", [4, 5])
@pytest.mark.parametrize("method", ["nelder-mead", "powell"])
def test_fit_reaches_sqrt_n_from_a_poor_start(n, method):
    """From a = 1, b = 0.1 the fit reaches √n to 1e-4: the family's maximum, at |a| = |b|
    ("Quantum lower bounds by quantum arguments", 2000, arXiv:quant-ph/0002066, for the value √n;
    the bound sqrt(a² + (n-1)b²) / max(|a|, |b|) <= √n is derived), never exceeding it."""
    f = or_weight1(n)
    res = fit_gamma_params(f, star_ab, {"a": 1.0, "b": 0.1}, method=method)
    assert abs(res.start_lower - math.sqrt(1 + (n - 1) * 0.01)) < 1e-12
    assert res.evaluations <= res.max_evaluations == 300
    rep = evaluate_gamma(f, gamma_from_callable(f, star_ab, params=res.params))
    assert abs(rep.certified_ratio - math.sqrt(n)) < 1e-4 and rep.certified_ratio <= math.sqrt(n) + 1e-12
    assert abs(abs(res.params["a"]) - abs(res.params["b"])) < 1e-4 * abs(res.params["a"])


def test_fit_is_repeatable_and_respects_the_budget():
    """The same random state gives the same starts and result; a budget of 7 evaluations is never exceeded."""
    f = or_weight1(4)
    r1 = fit_gamma_params(f, star_ab, {"a": 1.0, "b": 0.1}, max_evaluations=7, random_state=3)
    r2 = fit_gamma_params(f, star_ab, {"a": 1.0, "b": 0.1}, max_evaluations=7, random_state=3)
    assert r1 == r2 and r1.evaluations == 7 and len(r1.starts) == 4
    assert r1.starts[0] == {"a": 1.0, "b": 0.1}


def test_fit_counts_failing_points_as_no_bound():
    """A callable that raises for b < 0 only loses those points; the fit still reaches √4 = 2 (as above)."""
    def picky(x, y, a=1.0, b=1.0):
        if b < 0:
            raise ValueError("b must be >= 0")
        return star_ab(x, y, a, b)

    res = fit_gamma_params(or_weight1(4), picky, {"a": 1.0, "b": 0.1}, spread=3.0)
    assert res.failed_evaluations > 0
    assert abs(res.best_lower - 2.0) < 1e-4 and res.params["b"] >= 0


def test_fit_refuses_unknown_constant_and_failing_start():
    """A constant the callable does not take, and a callable failing at the start, are one-line errors."""
    f = or_weight1(3)
    with pytest.raises(GammaError, match=r"does not accept a parameter 'c' \(its parameters after x, y: a, b\)"):
        fit_gamma_params(f, star_ab, {"c": 1.0})
    with pytest.raises(GammaError, match="raised ZeroDivisionError"):
        fit_gamma_params(f, lambda x, y, a=0.0: 1 / a, {"a": 0.0})


# ---------------------------------------------------------------------------------------------
# The command line
# ---------------------------------------------------------------------------------------------
OR2 = """[instance]
name = "or2-sum-T"
description = "OR of 2 position-search rows, k_1 + k_2 = T"
outer = "or"
rows = 2
inner = "position_search"
row_length = "T - 1"
time = "sqrt"
budget = { sum_squares = "T" }

[grid]
T = { from = 3, to = 8 }
"""


def run(capsys, *argv):
    """(exit code, stdout, stderr lines) of ``advbound ARGV``."""
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err.strip().splitlines()


def one_error(code, lines):
    """The single stderr line of a refused command (exit 2, no traceback)."""
    assert code == 2 and len(lines) == 1, lines
    assert lines[0].startswith("advbound: error: ") and "Traceback" not in lines[0]
    return lines[0]


@pytest.fixture
def or2(tmp_path):
    p = tmp_path / "or2.toml"
    p.write_text(OR2)
    return p


def test_cli_fit_save_and_reuse_at_another_T(capsys, tmp_path, or2):
    """--fit at T=4 from cross = 0, --save-params, then --params-file at T=6.

    Outside values: at cross = 0 the example is the same-profile star, √2 (derived above); the fitted bound
    may not exceed ADV± of the instance, 1.849334805 at T=4 (verified dual bound printed by
    ``advbound solve`` for this instance, computed once); the reused value gives, at T=6, exactly what
    evaluating the example at that value gives."""
    saved = tmp_path / "cross.json"
    spec = f"{EXAMPLE}:gamma"
    code, out, _ = run(capsys, "gamma", or2, "--set", "T=4", "--callable", spec, "--param", "cross=0", "--fit",
                       "--save-params", saved, "--json")
    assert code == 0
    d = json.loads(out)
    assert d["fit"]["start_lower"] == pytest.approx(math.sqrt(2), abs=1e-12)
    assert d["fit"]["method"] == "Nelder-Mead" and 1 <= d["fit"]["evaluations"] <= 300
    assert math.sqrt(2) + 0.3 < d["lower"] <= 1.849334805 + 1e-6
    assert json.loads(saved.read_text()) == d["params"]
    f4 = position_search_composition("or", 2, None, 4)
    direct = evaluate_gamma(f4, gamma_from_callable(f4, _example().gamma, params=d["params"]))
    assert d["lower"] == direct.certified_ratio
    code, out, _ = run(capsys, "gamma", or2, "--set", "T=6", "--callable", spec, "--params-file", saved, "--json")
    assert code == 0
    d6 = json.loads(out)
    f6 = position_search_composition("or", 2, None, 6)
    direct6 = evaluate_gamma(f6, gamma_from_callable(f6, _example().gamma, params=d["params"]))
    assert d6["params"] == d["params"] and d6["lower"] == direct6.certified_ratio > math.sqrt(2)
    assert "fit" not in d6


def test_cli_text_output_with_constants(capsys, tmp_path):
    """Text output names the constants; --param overrides the file's value (OR_3 star: √3, as above)."""
    tbl = tmp_path / "or3.tbl"
    tbl.write_text("000 0\n001 1\n010 1\n100 1\n")
    pf = tmp_path / "p.json"
    pf.write_text('{"a": 1.0, "b": 0.5}')
    code, out, _ = run(capsys, "gamma", tbl, "--callable", f"{__file__}:star_ab", "--params-file", pf,
                       "--param", "b=1")
    assert code == 0 and "constants: a = 1, b = 1" in out and "ratio = 1.73205080757" in out


@pytest.mark.parametrize("text,match", [
    ("[1, 2]", r"p\.json: expected a JSON object .* got list"),
    ("3.5", r"p\.json: expected a JSON object .* got float"),
    ('{"cross": NaN}', r"p\.json: parameter cross = nan is not a finite number"),
    ('{"cross": 1e999}', r"p\.json: parameter cross = inf is not a finite number"),
    ('{"cross": "0.1"}', r"p\.json: parameter cross = '0\.1' \(str\) is not a real number"),
    ('{"cross": true}', r"p\.json: parameter cross = True \(bool\) is not a real number"),
    ('{"crosss": 0.1}', r"p\.json: gamma callable .*gamma_star\.py:gamma does not accept a parameter 'crosss' "
                        r"\(its parameters after x, y: cross\)"),
    ('{"cross": 0.1, "cross": 0.2}', r"p\.json: parameter 'cross' appears twice"),
    ('{"cross": ', r"p\.json: not JSON"),
    ('{"1x": 0.1}', r"p\.json: parameter name '1x' is not a Python identifier"),
])
def test_cli_malformed_params_file(capsys, tmp_path, or2, text, match):
    """Each malformed parameter file is refused with one line naming the file (exit 2)."""
    pf = tmp_path / "p.json"
    pf.write_text(text)
    code, _, err = run(capsys, "gamma", or2, "--set", "T=4", "--callable", f"{EXAMPLE}:gamma", "--params-file", pf)
    assert re.search(match, one_error(code, err))


@pytest.mark.parametrize("args,match", [
    (["--param", "cross=abc"], r"--param 'cross=abc': 'abc' is not a number"),
    (["--param", "cross"], r"--param 'cross': expected NAME=VALUE"),
    (["--param", "1x=2"], r"--param '1x=2': '1x' is not a Python identifier"),
    (["--param", "cross=nan"], r"--param 'cross=nan': 'nan' is not a finite number"),
    (["--param", "cross=1", "--param", "cross=2"], r"--param cross is given twice"),
    (["--param", "depth=1"], r"gamma callable .*gamma_star\.py:gamma does not accept a parameter 'depth'"),
    (["--fit"], r"--fit needs constants"),
    (["--param", "cross=0", "--fit", "--starts", "0"], r"--starts must be a positive integer, got 0"),
    (["--param", "cross=0", "--fit", "--max-evals", "0"], r"--max-evals must be a positive integer, got 0"),
    (["--params-file", "no/such/file.json"], r"--params-file no/such/file\.json: no such file"),
])
def test_cli_bad_constants(capsys, or2, args, match):
    """Bad --param values and option combinations are one-line errors with exit 2."""
    code, _, err = run(capsys, "gamma", or2, "--set", "T=4", "--callable", f"{EXAMPLE}:gamma", *args)
    assert re.search(match, one_error(code, err))


def test_cli_constants_need_a_callable(capsys, tmp_path, or2):
    """An entries file has no free constants: --param with --entries is refused."""
    e = tmp_path / "e.tsv"
    e.write_text("")
    code, _, err = run(capsys, "gamma", or2, "--set", "T=4", "--entries", e, "--param", "cross=1")
    assert "--param needs --callable" in one_error(code, err)


def test_read_params_file_round_trip(tmp_path):
    """write → read gives the same floats, bit for bit (JSON float reprs round-trip, common knowledge)."""
    from advbound.programs.gammafit import write_params_file
    p = tmp_path / "p.json"
    write_params_file(p, {"a": 0.1 + 0.2, "b": -1e-300})
    assert read_params_file(p) == {"a": 0.1 + 0.2, "b": -1e-300}


def test_cli_certificate_records_constants(capsys, tmp_path, or2):
    """--save-certificate with constants stores them in the metadata and the certificate verifies; at
    cross = 0 its bound is the same-profile star's √2 (derived above)."""
    cert = tmp_path / "c.npz"
    code, _, _ = run(capsys, "gamma", or2, "--set", "T=4", "--callable", f"{EXAMPLE}:gamma", "--param", "cross=0",
                     "--save-certificate", cert)
    assert code == 0
    from advbound.evidence.certificate import load_certificate
    assert load_certificate(cert).metadata["params"] == {"cross": 0.0}
    code, out, _ = run(capsys, "verify", cert, "--json")
    assert code == 0 and json.loads(out)["lower"] == pytest.approx(math.sqrt(2), abs=1e-9)
