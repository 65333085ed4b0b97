"""Tests of advbound.evidence.rigorous (exact rational certification) and of tools/recheck_certificate.py."""

import math
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest

from advbound.evidence.certificate import Certificate, load_certificate, save_certificate
from advbound.evidence.rigorous import (cholesky_shift, exact_rayleigh, floor_decimal, floor_float, prove_pd_cholesky,
                                        prove_pd_ldl, prove_pd_residual, rational_gamma, verify_rigorous)
from advbound.evidence.verify import verify_certificate

RECHECK = Path(__file__).resolve().parents[1] / "tools" / "recheck_certificate.py"


def star_or(n, weight=1.0):
    """OR_n restricted to inputs of Hamming weight <= 1, with the star Γ[0^n, e_i] = weight."""
    inputs = ["0" * n] + ["0" * (n - 1 - i) + "1" + "0" * i for i in range(n)]
    order = sorted(range(n + 1), key=lambda k: inputs[k])
    inputs = [inputs[k] for k in order]
    outputs = ["0" if x == "0" * n else "1" for x in inputs]
    z = inputs.index("0" * n)
    g = np.zeros((n + 1, n + 1))
    for k in range(n + 1):
        if k != z:
            g[z, k] = g[k, z] = weight
    return Certificate(("0", "1"), tuple(inputs), tuple(outputs), np.ones(n), g, metadata={"description": f"OR_{n}"})


def parity2():
    """PARITY_2 with Γ = 1 on every pair of different parity."""
    inputs = ("00", "01", "10", "11")
    outputs = ("0", "1", "1", "0")
    o = np.array([0, 1, 1, 0])
    g = (o[:, None] != o[None, :]).astype(float)
    return Certificate(("0", "1"), inputs, outputs, np.ones(2), g)


def random_cert(size, n=6, seed=0, outputs=2):
    """Random symmetric Γ on random distinct inputs, equal-output entries zeroed (correct, not optimal)."""
    rng = np.random.default_rng(seed)
    idx = np.sort(rng.choice(2**n, size=size, replace=False))
    inputs = tuple(format(int(i), f"0{n}b") for i in idx)
    out = rng.integers(0, outputs, size)
    g = rng.standard_normal((size, size))
    g = (g + g.T) / 2
    g[out[:, None] == out[None, :]] = 0
    return Certificate(("0", "1"), inputs, tuple(str(int(b)) for b in out), np.ones(n), g)


class TestKnownBounds:
    @pytest.mark.parametrize("n", [2, 5, 9])
    def test_star_or(self, n):
        """Star Γ for OR_n: ||Γ|| = √n, ||Γ∘Δ_i|| = 1, ratio √n (common knowledge); exact bound ≤ √n, within 1e-6."""
        rep = verify_rigorous(star_or(n), safety=1e-8)
        assert rep.verified
        assert rep.lower_exact ** 2 <= n
        assert math.sqrt(n) - float(rep.lower_exact) < 1e-6
        assert rep.lower <= rep.lower_exact

    def test_star_or_default_safety_relative(self):
        """With the default safety 1e-6 the exact bound is within 2e-6 (relative) of √7 (common knowledge)."""
        rep = verify_rigorous(star_or(7))
        assert rep.lower_exact ** 2 <= 7 and 1 - rep.lower / math.sqrt(7) < 2e-6

    @pytest.mark.parametrize("method", ["ldl", "cholesky"])
    def test_parity2(self, method):
        """PARITY_2 with the all-ones Γ: ||Γ|| = 2 (2-regular bipartite), each ||Γ∘Δ_j|| = 1 (a matching): bound 2."""
        rep = verify_rigorous(parity2(), method=method, safety=1e-9)
        assert rep.verified and rep.lower_exact <= 2 and 2 - rep.lower_exact < 1e-6

    @pytest.mark.parametrize("sign", [1.0, -1.0])
    def test_three_outputs(self, sign):
        """Identity on one ternary symbol, Γ = ±(J - I): ||Γ|| = 2 and Γ∘Δ_1 = Γ, so the ratio is 1 (derived)."""
        g = sign * (np.ones((3, 3)) - np.eye(3))
        cert = Certificate(("0", "1", "2"), ("0", "1", "2"), ("a", "b", "c"), np.ones(1), g)
        rep = verify_rigorous(cert, safety=1e-9)
        assert rep.verified and rep.lower_exact <= 1 and 1 - rep.lower_exact < 1e-6
        assert all("mI + M" in p.detail for p in rep.positions)

    def test_costs(self):
        """Cost-weighted OR_2 star with Γ weights (3, 4) and costs (3, 4): ratio √(9+16) = 5 (derived)."""
        g = np.zeros((3, 3))
        g[0, 1] = g[1, 0] = 4.0  # inputs 00, 01, 10: 01 differs at position 2 (cost 4)
        g[0, 2] = g[2, 0] = 3.0
        cert = Certificate(("0", "1"), ("00", "01", "10"), ("0", "1", "1"), np.array([3.0, 4.0]), g)
        rep = verify_rigorous(cert, safety=1e-9)
        assert rep.verified and rep.lower_exact <= 5 and 5 - rep.lower_exact < 1e-6


class TestAgreement:
    def test_float_and_rational_agree(self):
        """Exact bound and the float ratio of advbound.evidence.verify agree to 1e-6 (relative) on a random Γ."""
        cert = random_cert(30, seed=1)
        rep = verify_rigorous(cert, safety=1e-8)
        fl = verify_certificate(cert)
        assert rep.verified and abs(rep.lower - fl.lower) <= 1e-6 * fl.lower
        assert rep.lower <= fl.lower * (1 + 1e-9)

    @pytest.mark.parametrize("outputs", [2, 3])
    def test_methods_give_same_rational(self, outputs):
        """Exact LDLᵀ, verified Cholesky and the exact residual check give the same rational."""
        cert = random_cert(24, seed=2, outputs=outputs)
        a = verify_rigorous(cert, method="ldl")
        b = verify_rigorous(cert, method="cholesky")
        c = verify_rigorous(cert, method="residual")
        assert a.verified and b.verified and c.verified and a.lower_exact == b.lower_exact == c.lower_exact

    def test_file_round_trip(self, tmp_path):
        """Saving and loading a certificate (dense and sparse Γ) leaves the exact bound unchanged."""
        import scipy.sparse as sp
        cert = random_cert(20, seed=3)
        p1, p2 = tmp_path / "d.npz", tmp_path / "s.npz"
        save_certificate(cert, p1)
        from dataclasses import replace
        save_certificate(replace(cert, gamma=sp.csr_matrix(cert.gamma)), p2)
        want = verify_rigorous(cert).lower_exact
        assert verify_rigorous(load_certificate(p1)).lower_exact == want
        assert verify_rigorous(load_certificate(p2)).lower_exact == want

    @pytest.mark.parametrize("method", ["exact", "cholesky"])
    def test_standalone_rechecker_agrees(self, tmp_path, method):
        """tools/recheck_certificate.py prints the same rational as advbound.evidence.rigorous."""
        cert = random_cert(18, seed=4)
        path = tmp_path / "c.npz"
        save_certificate(cert, path)
        want = verify_rigorous(load_certificate(path)).lower_exact
        res = subprocess.run([sys.executable, str(RECHECK), str(path), "--method", method],
                             capture_output=True, text=True, timeout=120)
        assert res.returncode == 0, res.stderr
        line = next(s for s in res.stdout.splitlines() if s.startswith("lower_exact"))
        assert Fraction(line.split()[1]) == want

    def test_rechecker_does_not_import_advbound(self):
        """The standalone re-checker imports only numpy and the standard library."""
        text = RECHECK.read_text()
        assert "advbound" not in "\n".join(l for l in text.splitlines() if l.startswith(("import", "from")))


class TestCorruption:
    def test_equal_output_entry_rejected(self):
        """A large value on an equal-output pair makes the check fail (Γ must vanish on F)."""
        cert = star_or(4)
        g = cert.gamma.copy()
        g[1, 2] = g[2, 1] = 5.0  # two inputs of weight 1, both outputs 1
        from dataclasses import replace
        rep = verify_rigorous(replace(cert, gamma=g))
        assert not rep.verified
        assert any(nm == "equal_outputs" and not ok for nm, ok, _ in rep.checks)

    def test_changed_entry_lowers_bound(self):
        """Γ[0^4, e_1] = 3 in the OR_4 star: ||Γ|| = √(9+3), max constraint 3, ratio √12/3 (derived); claim 2 rejected."""
        cert = star_or(4)
        g = cert.gamma.copy()
        z = cert.inputs.index("0000")
        k = cert.inputs.index("0001")
        g[z, k] = g[k, z] = 3.0
        from dataclasses import replace
        rep = verify_rigorous(replace(cert, gamma=g, metadata={"claimed_lower": 2.0}))
        assert abs(float(rep.lower_exact) - math.sqrt(12) / 3) < 1e-5 and rep.lower_exact ** 2 <= Fraction(12, 9)
        assert not rep.verified
        assert any(nm == "claimed_lower" and not ok for nm, ok, _ in rep.checks)

    def test_insufficient_safety_cannot_prove(self):
        """A bound below the true norm cannot be proved: m I - M with m < ||M|| is not positive definite."""
        a = np.array([[3, -2], [-2, 3]])  # eigenvalues 1 and 5
        assert prove_pd_ldl(a, use_flint=False)[0] and prove_pd_cholesky(a)[0] and prove_pd_residual(a)[0]
        b = np.array([[2, -3], [-3, 2]])  # eigenvalues -1 and 5
        assert not prove_pd_ldl(b, use_flint=False)[0] and not prove_pd_cholesky(b)[0]
        assert not prove_pd_residual(b)[0] and not prove_pd_residual(a, lam_min_hint=-1.0)[0]


class TestPrimitives:
    @pytest.mark.parametrize("size", [5, 30])
    def test_path_graph(self, size):
        """2I - A(P_n) is PD and I - A(P_n) is not (eigenvalues of A(P_n) are 2cos(kπ/(n+1)); common knowledge)."""
        adj = np.zeros((size, size), dtype=np.int64)
        i = np.arange(size - 1)
        adj[i, i + 1] = adj[i + 1, i] = 1
        for prove in (lambda a: prove_pd_ldl(a, use_flint=False), prove_pd_cholesky, prove_pd_residual):
            assert prove(2 * np.eye(size, dtype=np.int64) - adj)[0]
            assert not prove(np.eye(size, dtype=np.int64) - adj)[0]

    def test_flint_backend_agrees(self):
        """python-flint's fraction-free LU (when installed) decides like the pure-Python elimination."""
        pytest.importorskip("flint")
        rng = np.random.default_rng(5)
        for _ in range(5):
            m = rng.integers(-5, 6, (12, 12))
            m = m + m.T
            a = 20 * np.eye(12, dtype=np.int64) - m
            assert prove_pd_ldl(a, use_flint=True)[0] == prove_pd_ldl(a, use_flint=False)[0]
            assert prove_pd_ldl(a, use_flint=True)[0] == (np.linalg.eigvalsh(a.astype(float)).min() > 0)

    def test_cholesky_shift_exceeds_error_bound(self):
        """The shift d - d̃ exceeds γ/(1-γ)·n·d with γ = (n+1)u/(1-(n+1)u) (derived in prove_pd_cholesky)."""
        n, d = 200, 3 * 2**28
        u = Fraction(1, 2**53)
        g = (n + 1) * u / (1 - (n + 1) * u)
        assert Fraction(d) - Fraction(cholesky_shift(n, d)) > g / (1 - g) * n * d

    def test_exact_rayleigh_large_entries(self):
        """vᵀNv is exact for entries near 2^28 and v near 2^26 (compared with Python integers)."""
        rng = np.random.default_rng(6)
        n_int = rng.integers(-2**28, 2**28, (50, 50))
        n_int = n_int + n_int.T
        v = rng.integers(-2**26, 2**26, 50)
        num = sum(int(v[i]) * int(n_int[i, j]) * int(v[j]) for i in range(50) for j in range(50))
        assert exact_rayleigh(n_int, v) == Fraction(abs(num), sum(int(x) ** 2 for x in v))

    def test_rounding_helpers(self):
        """floor_float never exceeds its argument; floor_decimal rounds 1/3 down to 0.333."""
        x = Fraction(10, 3)
        assert Fraction(floor_float(x)) <= x and floor_decimal(Fraction(1, 3), 3) == "0.333"

    def test_rational_gamma_zeroes_and_symmetrises(self):
        """Rounding averages Γ with Γᵀ and zeroes pairs with equal outputs exactly."""
        g = np.array([[1.0, 0.5, 0.25], [0.75, 0.0, 2.0], [0.25, 2.0, 0.0]])
        n_int, q = rational_gamma(g, np.array([0, 1, 1]), denominator=4)
        assert q == 4 and n_int.tolist() == [[0, 2, 1], [2, 0, 0], [1, 0, 0]]


class TestMoreFormats:
    def test_rechecker_sparse_three_outputs(self, tmp_path):
        """The re-checker agrees on a COO-stored Γ with three output values (both signs proved)."""
        import scipy.sparse as sp
        from dataclasses import replace
        cert = random_cert(15, seed=7, outputs=3)
        path = tmp_path / "s.npz"
        save_certificate(replace(cert, gamma=sp.coo_matrix(cert.gamma)), path)
        want = verify_rigorous(load_certificate(path)).lower_exact
        res = subprocess.run([sys.executable, str(RECHECK), str(path)], capture_output=True, text=True, timeout=120)
        assert res.returncode == 0, res.stderr
        assert Fraction(res.stdout.split()[1]) == want

    def test_positive_bound_clips_negative_entries(self):
        """For a positive-bound certificate negative entries are clipped, so Γ = star - 0.5·(edge) gives the star bound."""
        cert = star_or(3)
        g = cert.gamma.copy()
        z = cert.inputs.index("000")
        k = cert.inputs.index("001")
        g[z, k] = g[k, z] = -0.5
        from dataclasses import replace
        rep = verify_rigorous(replace(cert, gamma=g, metadata={"bound": "positive"}), safety=1e-9)
        # after clipping: star on two leaves, ||Γ|| = √2, constraints 1 (common knowledge for OR_2)
        assert rep.negative_mass == 0.5 and abs(float(rep.lower_exact) - math.sqrt(2)) < 1e-6
        assert not rep.verified  # a negative entry of size 0.5·max|Γ| is too large for a positive certificate

    def test_given_denominator(self):
        """With Q = 10 the star Γ (entries 1) is exact: N = 10·Γ, and the bound is √5 up to the safety scaling."""
        rep = verify_rigorous(star_or(5), denominator=10, safety=1e-9)
        assert rep.denominator == 10 and rep.verified and rep.lower_exact ** 2 <= 5
        assert math.sqrt(5) - rep.lower < 1e-6


def test_residual_int64_matches_python_integers(monkeypatch):
    """The int64 evaluation of the exact residual decides like the Python-integer one (forced fallback)."""
    import advbound.evidence.exactlinalg as rig
    cert = random_cert(40, seed=8)
    want = verify_rigorous(cert, method="residual")
    calls = []
    orig = rig._residual_slack_int64
    monkeypatch.setattr(rig, "_residual_slack_int64", lambda *a: calls.append(orig(*a) is not None))
    got = verify_rigorous(cert, method="residual")
    assert any(calls) and want.verified and got.verified and want.lower_exact == got.lower_exact
