"""A row-invariant Γ evaluated by orbits: the family of an instance file, quotient norms, representative-set norms.

Outside checks: the dense evaluation of the same Γ on the built function
(:func:`advbound.evidence.usergamma.evaluate_gamma`, which lists every input and uses LAPACK on
|D|×|D| matrices), brute-force counts, and values known from the literature:

* OR_n on inputs of weight <= 1 with the uniform star Γ: exactly √n ("Quantum lower bounds by
  quantum arguments", 2000, arXiv:quant-ph/0002066);
* PARITY_n with Γ = 1 on pairs at Hamming distance 1: exactly n (the same paper; common knowledge);
* OR of n position-search rows with the same-profile star: exactly √n at any T (derived in
  tests/test_gamma_params.py: disjoint stars of n leaves, and every Γ∘Δ_j a matching).
"""

import hashlib
import itertools
import json
import math
import os
import re
from collections import Counter

import numpy as np
import pytest

from advbound.cli import main
from advbound.evidence.gammainput import GammaError
from advbound.evidence.orbitgamma import orbit_gamma
from advbound.evidence.orbitquotient import pair_tables, quotient_gamma
from advbound.evidence.usergamma import evaluate_gamma, gamma_from_callable
from advbound.errors import InvalidInstanceError
from advbound.functions.instance import build_instance, parse_instance
from advbound.functions.rowfamily import family_of, position_search_family
from advbound.functions.specfamily import family_from_spec

ROOT = os.path.join(os.path.dirname(__file__), "..")
ENVELOPE = os.path.join(ROOT, "instances", "studies", "envelope.toml")
STAR = os.path.join(ROOT, "examples", "gamma_star.py") + ":gamma"


def spec_of(outer='"or"', rows=3, row_length=None, time='"sqrt"', budget='{ sum_squares = "T" }',
            max_ones=None, grid="T = [5, 6, 7]"):
    row_length = row_length or f"T - {rows} + 1"
    text = f"""
[instance]
outer = {outer}
rows = {rows}
inner = "position_search"
row_length = "{row_length}"
{'time = ' + time if time else ''}
{'budget = ' + budget if budget else ''}
{'max_ones = ' + str(max_ones) if max_ones is not None else ''}
[grid]
{grid}
"""
    return parse_instance(text, source="t.toml")


def canon(fam):
    return sorted((tuple(sorted(fam.letters[a] for a in c)), y) for c, y in zip(fam.contents, fam.outputs))


# -- the family of an instance file ---------------------------------------------------------------------------

@pytest.mark.parametrize("kw,params", [
    ({}, {"T": 7}),
    ({"max_ones": 1}, {"T": 7}),
    ({"outer": '"and"'}, {"T": 6}),
    ({"outer": '{ function = "threshold", k = 2 }'}, {"T": 6}),
    ({"budget": '{ at_most = "T" }'}, {"T": 5}),
    ({"time": '{ alpha = 0.3 }', "budget": '{ at_most = "T" }', "row_length": "5"}, {"T": 3}),
    ({"budget": None, "time": None, "row_length": "2"}, {"T": 5}),
])
def test_family_from_spec_matches_the_built_function(kw, params):
    """The orbits listed from the instance are exactly the orbits of the function the builder lists input by input."""
    spec = spec_of(**kw)
    fam = family_from_spec(spec, params)
    built = family_of(build_instance(spec, params))
    assert built is not None
    assert canon(fam) == canon(built)
    assert fam.size == built.size


def test_family_counts_of_the_envelope_instance():
    """57,915 inputs in 88 orbits for 8 rows at T = 16 with at most one row of value 1, and 17.6 million in 348
    at T = 24 (counted independently by brute force over partitions; the same counts are in docs/symmetry.md)."""
    from advbound.functions.instance import load_instance
    spec = load_instance(ENVELOPE)
    fam = family_from_spec(spec, {"T": 16, "rows": 8})
    assert (fam.size, len(fam.contents)) == (57915, 88)
    fam = family_from_spec(spec, {"T": 24, "rows": 12})
    assert len(fam.contents) == 348 and fam.size == 17_577_014


@pytest.mark.parametrize("kw,match", [
    ({"time": '[{ alpha = 0.5 }, { alpha = 0.5 }, { alpha = 0.3 }]', "budget": '{ at_most = "T" }'},
     "same time model in every row"),
    ({"budget": "{ profiles = [[1, 1, 3]] }"}, "orbit form needs"),
    ({"time": '{ inputs = { "0" = 1.0 } }', "row_length": "1", "budget": None}, "time per position"),
])
def test_family_from_spec_refuses_other_shapes(kw, match):
    spec = spec_of(**kw)
    with pytest.raises(InvalidInstanceError, match=match) as err:
        family_from_spec(spec, {"T": 5})
    assert "\n" not in str(err.value)


def test_pair_tables_count_matches_brute_force():
    """Tables with given margins = S_n-orbits of pairs of words with those contents (brute force over all pairs)."""
    cx, cz = (0, 0, 1, 2), (1, 3, 3, 3)
    brute = {tuple(sorted(zip(x, z))) for x in set(itertools.permutations(cx)) for z in set(itertools.permutations(cz))}
    tabs = list(pair_tables(sorted(Counter(cx).items()), sorted(Counter(cz).items())))
    as_keys = {tuple(sorted(p for p, t in cells for _ in range(t))) for cells in tabs}
    assert len(tabs) == len(brute) and as_keys == brute


# -- values from the literature ------------------------------------------------------------------------------

def one_bit_family(n, outer="or", max_ones=None):
    """OR (or PARITY) of n one-bit rows: position-search rows of length 1, no budget."""
    spec = spec_of(outer=f'"{outer}"', rows=n, row_length="1", time=None, budget=None, max_ones=max_ones,
                   grid="T = [1]")
    return family_from_spec(spec, {"T": 1})


def uniform_star(x, y):
    """1 between the all-zero input and each input of weight one."""
    return float(sorted((x.count("1"), y.count("1"))) == [0, 1])


def hamming_one(x, y):
    return float(sum(a != b for a, b in zip(x, y)) == 1)


@pytest.mark.parametrize("n", [2, 4, 7])
def test_or_star_gives_sqrt_n(n):
    """OR_n, weight <= 1, uniform star: √n ("Quantum lower bounds by quantum arguments", 2000)."""
    fam = one_bit_family(n, max_ones=1)
    assert quotient_gamma(fam, uniform_star).lower == pytest.approx(math.sqrt(n), rel=1e-12)
    assert orbit_gamma(fam, uniform_star).lower == pytest.approx(math.sqrt(n), rel=1e-12)


@pytest.mark.parametrize("n", [2, 3, 5])
def test_parity_hypercube_gives_n(n):
    """PARITY_n, Γ = 1 at Hamming distance 1: exactly n (common knowledge)."""
    fam = one_bit_family(n, outer="parity")
    assert quotient_gamma(fam, hamming_one).lower == pytest.approx(n, rel=1e-12)


@pytest.mark.parametrize("n,T", [(3, 7), (5, 10), (8, 16), (6, 18)])
def test_same_profile_star_gives_sqrt_n_at_any_T(n, T):
    """The same-profile star (examples/gamma_star.py at cross = 0): √n, by quotient norms, up to 57,915 inputs."""
    from advbound.evidence.gammainput import load_callable
    fam = position_search_family("or", n, T, max_ones=1)
    rep = quotient_gamma(fam, load_callable(STAR), {"cross": 0.0})
    assert rep.passed and rep.exact_norms
    assert rep.lower == pytest.approx(math.sqrt(n), rel=1e-12)


# -- agreement with the dense evaluation ---------------------------------------------------------------------

def hashed(x, y):
    """A non-negative row-invariant Γ: a pseudo-random value of the pair orbit (sorted row pairs)."""
    L = len(x) // 3
    key = tuple(sorted((x[i * L:(i + 1) * L], y[i * L:(i + 1) * L]) for i in range(3)))
    if (("1" in x) == ("1" in y)):
        return 0.0
    key = tuple(sorted([key, tuple((b, a) for a, b in key)]))[0]       # the same value in both orders
    return int(hashlib.sha256(repr(key).encode()).hexdigest()[:8], 16) / 2 ** 32


def signed(x, y):
    return hashed(x, y) - 0.4 * float(("1" in x) != ("1" in y))


@pytest.mark.parametrize("max_ones", [None, 1])
def test_orbit_bounds_agree_with_the_dense_evaluation(max_ones):
    """Γ ≥ 0: quotient and representative set give the dense ratio; signed Γ: neither ever more than it."""
    spec = spec_of(max_ones=max_ones)
    f = build_instance(spec, {"T": 7})
    fam = family_from_spec(spec, {"T": 7})
    for func in (hashed, signed):
        dense = evaluate_gamma(f, gamma_from_callable(f, func)).ratio
        q = quotient_gamma(fam, func).lower
        b = orbit_gamma(fam, func).lower
        if func is hashed:
            assert b == pytest.approx(dense, rel=1e-9)
            assert q == pytest.approx(dense, rel=1e-9)
        else:      # the invariant test vector may miss ‖Γ‖, and |Γ| bounds the Δ norms: never more
            assert 0.9 * dense < b <= dense * (1 + 1e-9)
            assert 0 < q <= dense * (1 + 1e-9)            # |Γ| can be far from Γ in norm


@pytest.mark.parametrize("evaluate", [quotient_gamma, orbit_gamma])
def test_a_callable_that_is_not_row_invariant_is_refused(evaluate):
    fam = position_search_family("or", 3, 6)

    def first_row_heavier(x, y):
        return uniform_star(x, y) + (1.0 if x[0] == "1" or y[0] == "1" else 0.0) * float(("1" in x) != ("1" in y))

    with pytest.raises(GammaError, match="not invariant under permuting rows") as err:
        evaluate(fam, first_row_heavier, samples=400)
    assert "\n" not in str(err.value)


# -- the command line ----------------------------------------------------------------------------------------

def run(capsys, *argv):
    code = main(list(argv))
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def test_cli_orbits_text_and_json(capsys):
    code, out, _ = run(capsys, "gamma", ENVELOPE, "--set", "T=16", "--set", "rows=8", "--orbits",
                       "--callable", STAR, "--param", "cross=0")
    assert code == 0
    assert "|D| = 57,915 in 88 row orbits" in out and "norms of Γ∘Δ: exact" in out
    val = float(re.search(r"lower bound = ([0-9.]+)", out).group(1))
    assert val == pytest.approx(math.sqrt(8), rel=1e-10)
    code, out, _ = run(capsys, "gamma", ENVELOPE, "--set", "T=10", "--set", "rows=5", "--orbits", "--blocks",
                       "--callable", STAR, "--param", "cross=0", "--json")
    d = json.loads(out)
    assert code == 0 and d["mode"] == "orbits" and d["lower"] == pytest.approx(math.sqrt(5), rel=1e-10)


def test_cli_orbit_certificate_is_verified(capsys, tmp_path):
    cert = tmp_path / "star.npz"
    code, _, _ = run(capsys, "gamma", ENVELOPE, "--set", "T=8", "--set", "rows=4", "--orbits", "--blocks",
                     "--callable", STAR, "--param", "cross=0.02", "--save-certificate", str(cert))
    assert code == 0
    code, out, _ = run(capsys, "verify", str(cert))
    assert code == 0 and "VERIFIED" in out


@pytest.mark.parametrize("extra,match", [
    (["--fit"], "--fit does not combine with --orbits"),
    (["--improve"], "--improve does not combine with --orbits"),
    (["--save-certificate", "x.npz"], "needs --blocks"),
    (["--samples", "-1"], "--samples must be non-negative"),
])
def test_cli_orbits_refuses_what_it_cannot_do(capsys, extra, match, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, out, err = run(capsys, "gamma", ENVELOPE, "--set", "T=8", "--set", "rows=4", "--orbits",
                         "--callable", STAR, "--param", "cross=0", *extra)
    assert code == 2 and match in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


# -- lifting a solved Γ ----------------------------------------------------------------------------------------

def shipped_certificate(name):
    import glob
    found = glob.glob(os.path.join(ROOT, "reports", "envelope", "certificates", f"{name}_general-*.npz"))
    assert len(found) == 1
    return found[0]


def test_lift_same_reproduces_the_certificate_and_shift_stays_below_the_optimum():
    """Outside values: the envelope store's verified bounds for 4 rows (T = 8: 3.3108876153, solved; T = 10:
    upper bound 3.9400683835).  The same-size lift is the certificate's Γ; a lift to T = 10 proves a
    positive bound, never above the optimum there."""
    from advbound.evidence.lift import lifted_gamma
    from advbound.evidence.orbitcert import load_any_certificate
    cert = load_any_certificate(shipped_certificate("T=8_rows=4"))
    same = orbit_gamma(position_search_family("or", 4, 8, max_ones=1), lifted_gamma(cert, "same"))
    assert same.lower == pytest.approx(3.3108876153, rel=1e-8)
    up = orbit_gamma(position_search_family("or", 4, 10, max_ones=1), lifted_gamma(cert, "shift"))
    assert 0 < up.lower <= 3.9400683835


def test_cli_lift(capsys):
    cert = shipped_certificate("T=8_rows=4")
    code, out, _ = run(capsys, "gamma", ENVELOPE, "--set", "T=10", "--set", "rows=4", "--orbits", "--blocks",
                       "--lift", cert, "--json")
    d = json.loads(out)
    assert code == 0 and 0 < d["lower"] <= 3.9400683835 and d["source"].startswith("callable lift of")
    code, _, err = run(capsys, "gamma", ENVELOPE, "--set", "T=10", "--set", "rows=5", "--orbits", "--lift", cert)
    assert code == 2 and "the certificate has 4 rows but" in err
    assert len(err.strip().splitlines()) == 1
    code, out, err = run(capsys, "gamma", ENVELOPE, "--set", "T=10", "--set", "rows=4", "--lift", cert)
    assert code == 0, err          # the dense path takes a lifted Γ too
    dense = float(re.search(r"ratio = ([0-9.]+)", out).group(1))
    assert dense == pytest.approx(d["lower"], rel=1e-8)
