"""Tests of advbound.evidence.certificate: lossless, pickle-free save/load and rejection of malformed files."""

import json
import math

import numpy as np
import pytest
import scipy.sparse as sp

from advbound.evidence.certificate import FORMAT, Certificate, load_certificate, save_certificate
from advbound.errors import CertificateError
from advbound.programs.solve import solve
from advbound.evidence.verify import verify_certificate

from known_instances import boolean, from_rule


@pytest.fixture(scope="module")
def solved():
    """MAJ_3 solved with CLARABEL (ADV± = 2, arXiv:0904.2759 table, from memory)."""
    return solve(boolean(3, lambda x: sum(x) >= 2), solver="CLARABEL", tol=1e-9)


def test_round_trip_dense(solved, tmp_path):
    """Every array and the metadata survive save/load unchanged; the file loads with allow_pickle=False."""
    c = solved.certificate
    p = tmp_path / "maj3.npz"
    save_certificate(c, p)
    with np.load(p, allow_pickle=False) as z:
        assert str(z["format"]) == FORMAT
        assert {"alphabet", "inputs", "outputs", "costs", "gamma", "dual_t", "dual_plus", "metadata"} <= set(z.files)
        assert json.loads(str(z["metadata"]))["bound"] == "general"
    d = load_certificate(p)
    assert (d.alphabet, d.inputs, d.outputs) == (c.alphabet, c.inputs, c.outputs)
    assert np.array_equal(d.costs, c.costs) and np.array_equal(d.gamma, c.gamma)
    assert np.array_equal(d.dual_plus, c.dual_plus) and d.dual_minus is None and d.dual_t == c.dual_t
    assert d.metadata == json.loads(json.dumps(c.metadata))


def test_loaded_certificate_verifies(solved, tmp_path):
    """A reloaded MAJ_3 certificate re-verifies to lower = upper = 2 (arXiv:0904.2759, from memory)."""
    p = tmp_path / "maj3.npz"
    save_certificate(solved.certificate, p)
    rep = verify_certificate(load_certificate(p))
    assert rep.passed, rep.message
    assert rep.lower == pytest.approx(2.0, rel=1e-6) and rep.upper == pytest.approx(2.0, rel=1e-6)
    assert rep.lower == pytest.approx(solved.lower, rel=1e-12)


def test_round_trip_sparse_and_minus(tmp_path):
    """A COO-stored Γ and an X⁻ stack (3 outputs) round-trip; the sparse Γ gives the same lower bound 2.

    Hamming weight of 2 bits has ADV± = 2 (derived in tests/test_solve.py::TestKnownValues::test_hamming_weight).
    """
    r = solve(from_rule("01", 2, lambda x: x.count("1")), solver="CLARABEL", tol=1e-9)
    c = r.certificate
    sparse = Certificate(c.alphabet, c.inputs, c.outputs, c.costs, sp.csr_matrix(c.gamma), c.dual_t,
                         c.dual_plus, c.dual_minus, c.metadata)
    p = tmp_path / "w2.npz"
    save_certificate(sparse, p)
    with np.load(p, allow_pickle=False) as z:
        assert "gamma" not in z.files and "gamma_row" in z.files and "dual_minus" in z.files
    d = load_certificate(p)
    assert sp.issparse(d.gamma) and np.allclose(d.gamma.toarray(), c.gamma)
    assert np.array_equal(d.dual_minus, c.dual_minus)
    assert verify_certificate(d).lower == pytest.approx(2.0, rel=1e-6)


def test_corrupted_file_caught(solved, tmp_path):
    """Tripling the row and column of Γ's largest entry changes the ratio; the stored claim exposes it."""
    c = solved.certificate
    g = c.gamma.copy()
    i = int(np.argmax(np.abs(g).max(axis=1)))
    g[i, :] *= 3.0
    g[:, i] *= 3.0
    p = tmp_path / "bad.npz"
    save_certificate(Certificate(c.alphabet, c.inputs, c.outputs, c.costs, g, c.dual_t, c.dual_plus, None,
                                 c.metadata), p)
    rep = verify_certificate(load_certificate(p))
    assert not rep.passed and "claimed_lower" in rep.failed_checks()
    assert rep.lower <= 2.0 * (1 + 1e-9)   # still a valid lower bound on ADV±(MAJ_3) = 2


def test_not_a_certificate(tmp_path):
    """A file that is not an .npz archive raises CertificateError naming the file."""
    p = tmp_path / "x.npz"
    p.write_text("hello")
    with pytest.raises(CertificateError, match="x.npz"):
        load_certificate(p)


def test_missing_arrays(tmp_path):
    """An archive without the required arrays raises CertificateError listing them."""
    p = tmp_path / "y.npz"
    np.savez(p, gamma=np.zeros((2, 2)))
    with pytest.raises(CertificateError, match="missing array"):
        load_certificate(p)


def test_gamma_shape_mismatch(tmp_path):
    """A Γ whose shape disagrees with the number of inputs is refused when written and when read.

    save_certificate now applies the acceptance rule before writing, so the malformed file is
    forged with numpy directly to test the reader.
    """
    c = Certificate(("0", "1"), ("0", "1"), ("0", "1"), np.ones(1), np.zeros((3, 3)))
    p = tmp_path / "z.npz"
    with pytest.raises(CertificateError, match=r"gamma has shape \(3, 3\), expected \(2, 2\)"):
        save_certificate(c, p)
    assert not p.exists()
    np.savez(p, format=np.array(FORMAT), alphabet=np.array(["0", "1"]), inputs=np.array(["0", "1"]),
             outputs=np.array(["0", "1"]), costs=np.ones(1), metadata=np.array("{}"), gamma=np.zeros((3, 3)))
    with pytest.raises(CertificateError, match="shape"):
        load_certificate(p)


def test_save_cleans_solver_residue(tmp_path):
    """Tiny asymmetry and residue on equal-output pairs are cleaned on writing; the bound is unchanged.

    The OR_2 textbook Γ (ratio √2, common knowledge) plus 1e-13 noise: the in-memory verifier computes
    with the symmetrised, zeroed matrix, which is exactly what the file then holds.
    """
    f = boolean(2, any)
    g = np.zeros((4, 4))
    g[0, 1] = g[1, 0] = g[0, 2] = g[2, 0] = 1.0
    g += 1e-13 * np.random.default_rng(0).standard_normal((4, 4))
    c = Certificate(f.alphabet, f.inputs, f.outputs, np.ones(2), g, metadata={"bound": "general"})
    p = tmp_path / "noisy.npz"
    save_certificate(c, p)
    d = load_certificate(p)
    out = np.array(f.outputs)
    assert np.array_equal(d.gamma, d.gamma.T) and not d.gamma[out[:, None] == out[None, :]].any()
    assert verify_certificate(d).lower == verify_certificate(c).lower
    assert verify_certificate(d).lower == pytest.approx(math.sqrt(2), rel=1e-9)


def test_save_cleans_sparse_and_positive(tmp_path):
    """A sparse Γ with an equal-output entry and, for a positive certificate, a negative entry is written
    clean (both dropped), symmetric as a COO set, and re-loads to the star value √2 (common knowledge)."""
    f = boolean(2, any)
    g = np.zeros((4, 4))
    g[0, 1] = g[1, 0] = g[0, 2] = g[2, 0] = 1.0
    g[1, 2] = 0.25          # 01 and 10 both have output 1
    g[0, 3] = g[3, 0] = -1e-9
    c = Certificate(f.alphabet, f.inputs, f.outputs, np.ones(2), sp.csr_matrix(g), metadata={"bound": "positive"})
    p = tmp_path / "pos.npz"
    save_certificate(c, p)
    with np.load(p, allow_pickle=False) as z:
        pairs = set(zip(z["gamma_row"].tolist(), z["gamma_col"].tolist()))
    assert pairs == {(0, 1), (1, 0), (0, 2), (2, 0)}
    assert verify_certificate(load_certificate(p)).lower == pytest.approx(math.sqrt(2))


def test_wide_alphabet(tmp_path):
    """300 symbols (more than int8 holds): symbols stay distinct and the one-position bound is exactly 1.

    For N = 1 every pair of distinct inputs differs at the only position, so Γ∘Δ_1 = Γ and the ratio is 1
    for any Γ (common knowledge: one query computes any function of one symbol).  With int8 symbol codes,
    symbol 256 would alias symbol 0, drop a pair from Δ_1 and give a ratio above 1.
    """
    alphabet = tuple(chr(0x100 + i) for i in range(300))
    outputs = tuple("0" if i == 0 else "1" for i in range(300))
    g = np.zeros((300, 300))
    g[0, 1:] = g[1:, 0] = 1.0
    c = Certificate(alphabet, alphabet, outputs, np.ones(1), g)
    assert c.symbols.max() == 299 and len(set(c.symbols[:, 0].tolist())) == 300
    p = tmp_path / "wide.npz"
    save_certificate(c, p)
    d = load_certificate(p)
    assert verify_certificate(d).lower == pytest.approx(1.0, rel=1e-12)
    from advbound.evidence.rigorous import verify_rigorous
    rig = verify_rigorous(d)
    assert rig.verified and rig.lower_exact <= 1


def test_or2_textbook(tmp_path):
    """The textbook OR_2 Γ (Γ[00,01] = Γ[00,10] = 1) saved and reloaded still gives sqrt(2) (common knowledge)."""
    f = boolean(2, any)
    g = np.zeros((4, 4))
    g[0, 1] = g[1, 0] = g[0, 2] = g[2, 0] = 1.0
    p = tmp_path / "or2.npz"
    save_certificate(Certificate(f.alphabet, f.inputs, f.outputs, np.ones(2), g), p)
    assert verify_certificate(load_certificate(p)).lower == pytest.approx(math.sqrt(2))
