"""Tests of tools/recheck_certificate.py run as a program: acceptance rule, verdict, dual witness, imports.

Forged files are written with ``np.savez`` directly, so these tests do not depend on advbound's writer.
"""

import ast
import io
import json
import math
import subprocess
import sys
import zipfile
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from orbit_star import apply_changes

ROOT = Path(__file__).resolve().parents[1]
RECHECK = ROOT / "tools" / "recheck_certificate.py"
FORMAT = "advbound-certificate/1"

# OR_2 on inputs 00 01 10 11 with the star Γ[00,01] = Γ[00,10] = 1: ||Γ|| = √2, ||Γ∘Δ_j|| = 1 (common knowledge)
OR2_GAMMA = np.array([[0, 1, 1, 0], [1, 0, 0, 0], [1, 0, 0, 0], [0, 0, 0, 0]], dtype=float)


def or2_arrays(**changes):
    """The OR_2 certificate as plain arrays; a change of ``None`` removes the array."""
    a = {"format": np.array(FORMAT), "alphabet": np.array(["0", "1"]), "inputs": np.array(["00", "01", "10", "11"]),
         "outputs": np.array(["0", "1", "1", "1"]), "costs": np.ones(2), "gamma": OR2_GAMMA.copy(),
         "metadata": np.array(json.dumps({"bound": "general"}))}
    return apply_changes(a, changes)


def coo_arrays(rows, cols, vals, **changes):
    """The OR_2 certificate with Γ in COO form."""
    return or2_arrays(gamma=None, gamma_row=np.array(rows, dtype=np.int64), gamma_col=np.array(cols, dtype=np.int64),
                      gamma_val=np.array(vals, dtype=float), **changes)


def meta(**kw):
    """A metadata array holding ``kw`` as JSON."""
    return np.array(json.dumps(kw))


def write(path, arrays):
    """Write ``arrays`` with np.savez (object arrays are pickled by numpy, as a forger would)."""
    np.savez(path, **arrays)
    return path


def run(*args):
    """Run the re-checker with this interpreter."""
    return subprocess.run([sys.executable, str(RECHECK), *map(str, args)], capture_output=True, text=True,
                          timeout=300)


def assert_refused(res, fragment):
    """Exit 2, one stderr line naming the defect, nothing claiming verification."""
    assert res.returncode == 2, (res.returncode, res.stdout, res.stderr)
    lines = res.stderr.splitlines()
    assert len(lines) == 1, res.stderr
    assert lines[0].startswith("recheck: ") and fragment in lines[0], lines[0]
    assert "verified true" not in res.stdout and "VERIFIED" not in res.stdout
    assert "Traceback" not in res.stderr


def assert_failed(res, check):
    """Exit 1 with the named check marked FAIL and a NOT VERIFIED verdict."""
    assert res.returncode == 1, (res.returncode, res.stdout, res.stderr)
    assert f"check {check} FAIL" in res.stdout, res.stdout
    assert "verified false" in res.stdout and "verdict NOT VERIFIED" in res.stdout
    assert "verified true" not in res.stdout


def lower_exact(res):
    """The ``lower_exact p/q`` value as a Fraction."""
    line = next(s for s in res.stdout.splitlines() if s.startswith("lower_exact"))
    return Fraction(line.split()[1])


# ------------------------------------------------------------------------------------------------
# genuine certificates
# ------------------------------------------------------------------------------------------------
class TestGenuine:
    def test_or2_star(self, tmp_path):
        """OR_2 star Γ: exact bound just below √2 (common knowledge ADV±(OR_2) = √2), exit 0, VERIFIED."""
        res = run(write(tmp_path / "or2.npz", or2_arrays()))
        assert res.returncode == 0, res.stderr
        low = lower_exact(res)
        assert low * low < 2 and float(low) > math.sqrt(2) * (1 - 1e-5)
        assert res.stdout.splitlines()[0].startswith("lower_exact ")
        assert "verified true" in res.stdout and "verdict VERIFIED" in res.stdout and "FAIL" not in res.stdout

    def test_issue_forge_fixed_is_one(self, tmp_path):
        """The 1-bit identity with Γ = 1 on its one pair proves 1 (ADV± of one bit is 1, common knowledge), never 100."""
        a = or2_arrays(inputs=np.array(["0", "1"]), outputs=np.array(["0", "1"]), costs=np.ones(1),
                       gamma=np.array([[0.0, 1.0], [1.0, 0.0]]))
        res = run(write(tmp_path / "id.npz", a))
        assert res.returncode == 0, res.stderr
        assert 1 - 1e-5 < float(lower_exact(res)) <= 1

    def test_coo_three_outputs(self, tmp_path):
        """A COO Γ for the 2-bit weight (3 outputs) passes; L <= float ratio ||Γ||/max_j||Γ∘Δ_j|| <= L(1+s)(1+1e-6)."""
        g = np.zeros((4, 4))
        for i, j, v in [(0, 1, 1.0), (0, 2, 1.0), (1, 3, 1.0), (2, 3, 1.0), (0, 3, 0.5)]:
            g[i, j] = g[j, i] = v
        r, c = np.nonzero(g)
        a = coo_arrays(r, c, g[r, c], outputs=np.array(["0", "1", "1", "2"]))
        res = run(write(tmp_path / "w.npz", a), "--method", "cholesky")
        assert res.returncode == 0, res.stderr
        sym = np.array([[int(ch) for ch in x] for x in ["00", "01", "10", "11"]])
        norm = max(abs(np.linalg.eigvalsh(g)))
        cons = max(max(abs(np.linalg.eigvalsh(np.where(sym[:, j][:, None] != sym[:, j][None, :], g, 0))))
                   for j in range(2))
        low = float(lower_exact(res))
        assert low <= norm / cons * (1 + 1e-12) and norm / cons <= low * (1 + 1e-6) * (1 + 1e-6) * (1 + 1e-9)

    def test_claimed_lower_below_is_fine(self, tmp_path):
        """A claimed lower bound below the certified one is only weaker: exit 0."""
        res = run(write(tmp_path / "c.npz", or2_arrays(metadata=meta(bound="general", claimed_lower=1.0))))
        assert res.returncode == 0, res.stdout
        assert "check claimed_lower ok" in res.stdout

    def test_claimed_lower_too_high_fails(self, tmp_path):
        """claimed_lower = 1.5 above the certified √2 bound: check claimed_lower fails, exit 1."""
        res = run(write(tmp_path / "c.npz", or2_arrays(metadata=meta(bound="general", claimed_lower=1.5))))
        assert_failed(res, "claimed_lower")

    def test_claimed_upper_below_lower_fails(self, tmp_path):
        """claimed_upper = 1.2 below the certified √2 lower bound is contradictory: exit 1."""
        res = run(write(tmp_path / "c.npz", or2_arrays(metadata=meta(bound="general", claimed_upper=1.2))))
        assert_failed(res, "claimed_upper")

    def test_zero_gamma_is_not_verified(self, tmp_path):
        """An all-zero Γ certifies nothing: exit 1, no lower_exact value."""
        res = run(write(tmp_path / "z.npz", or2_arrays(gamma=np.zeros((4, 4)))))
        assert_failed(res, "constraints")
        assert "lower_exact none" in res.stdout

    def test_optional_metadata_and_lone_dual_t(self, tmp_path):
        """A hex spec_key, null claims and a dual_t without witness are all accepted (exit 0)."""
        a = or2_arrays(metadata=meta(bound="general", spec_key="0123456789abcdef" * 4, claimed_lower=None,
                                     claimed_upper=None), dual_t=np.array(2.0))
        res = run(write(tmp_path / "m.npz", a))
        assert res.returncode == 0, res.stderr
        assert "check dual_" not in res.stdout

    def test_json_output(self, tmp_path):
        """--json prints one object with the verdict and checks."""
        res = run(write(tmp_path / "or2.npz", or2_arrays()), "--json")
        obj = json.loads(res.stdout)
        assert res.returncode == 0 and obj["verified"] is True and obj["verdict"] == "VERIFIED" and obj["exit"] == 0
        assert Fraction(obj["lower_exact"]) == lower_exact(run(tmp_path / "or2.npz"))
        assert {c["name"] for c in obj["checks"]} >= {"well_formed", "constraints"}

    def test_json_error(self, tmp_path):
        """--json on a refused file prints only {"error", "exit": 2} on stdout."""
        res = run(write(tmp_path / "f.npz", or2_arrays(costs=np.array([1.0, 0.0]))), "--json")
        obj = json.loads(res.stdout)
        assert res.returncode == 2 and obj["exit"] == 2 and "costs[1]" in obj["error"] and res.stderr == ""

    @pytest.mark.parametrize("name", ["scaling_rows2/certificates/T4.npz", "scaling_rows2/certificates/T6.npz",
                                      "rows_envelope/certificates/T6_rows2.npz"])
    def test_shipped_certificate(self, name):
        """A small certificate shipped under reports/ satisfies the acceptance rule and verifies."""
        path = ROOT / "reports" / name
        if not path.exists():
            pytest.skip(f"{path} not shipped")
        res = run(path)
        assert res.returncode == 0, (res.stdout, res.stderr)
        assert "verdict VERIFIED" in res.stdout


# ------------------------------------------------------------------------------------------------
# the acceptance rule: one forged file per clause
# ------------------------------------------------------------------------------------------------
BAD_COO_ROWS = ([0, 0, 1, 2], [1, 2, 0, 0], [1.0, 1.0, 1.0, 1.0])

FORGED = {
    # name: (arrays, fragment of the one-line message)
    "issue_duplicate_input": (or2_arrays(alphabet=np.array(["0", "1"]), inputs=np.array(["0", "0", "1"]),
                                         outputs=np.array(["0", "1", "1"]), costs=np.ones(1),
                                         gamma=np.array([[0, 100, 1], [100, 0, 0], [1, 0, 0]], float)),
                              "inputs[0] and inputs[1] are both '0' (inputs must be distinct)"),
    "format_wrong": (or2_arrays(format=np.array("advbound-certificate/2")), "format is 'advbound-certificate/2'"),
    "format_missing": (or2_arrays(format=None), "missing array(s) format"),
    "alphabet_empty": (or2_arrays(alphabet=np.array([], dtype="U1")), "alphabet is empty"),
    "alphabet_multichar": (or2_arrays(alphabet=np.array(["0", "10"])), "alphabet[1] is '10', not a single character"),
    "alphabet_duplicate": (or2_arrays(alphabet=np.array(["0", "1", "0"])), "alphabet[0] and alphabet[2]"),
    "alphabet_not_strings": (or2_arrays(alphabet=np.array([0, 1])), "alphabet has dtype"),
    "inputs_empty": (or2_arrays(inputs=np.array([], dtype="U2"), outputs=np.array([], dtype="U1")), "inputs is empty"),
    "inputs_lengths": (or2_arrays(inputs=np.array(["00", "01", "10", "1"])), "inputs[3] = '1' has length 1"),
    "inputs_symbol": (or2_arrays(inputs=np.array(["00", "01", "20", "11"])),
                      "symbol '2' at position 1 is not in the alphabet"),
    "inputs_2d": (or2_arrays(inputs=np.array([["00", "01"], ["10", "11"]])), "inputs is 2-d"),
    "outputs_count": (or2_arrays(outputs=np.array(["0", "1", "1"])), "3 outputs for 4 inputs"),
    "costs_count": (or2_arrays(costs=np.ones(3)), "3 costs for inputs of length 2"),
    "cost_zero": (or2_arrays(costs=np.array([1.0, 0.0])), "costs[1] = 0.0 (costs must be finite and > 0)"),
    "cost_negative": (or2_arrays(costs=np.array([-1.0, 1.0])), "costs[0] = -1.0"),
    "cost_nan": (or2_arrays(costs=np.array([1.0, np.nan])), "costs[1] = nan"),
    "cost_inf": (or2_arrays(costs=np.array([np.inf, 1.0])), "costs[0] = inf"),
    "costs_int": (or2_arrays(costs=np.array([1, 1])), "costs has dtype int64, expected floats"),
    "gamma_nan": (or2_arrays(gamma=np.where(OR2_GAMMA == 0, 0, np.nan)), "(Γ must be finite)"),
    "gamma_inf": (or2_arrays(gamma=np.where(OR2_GAMMA == 0, 0, np.inf)), "(Γ must be finite)"),
    "gamma_shape": (or2_arrays(gamma=np.zeros((3, 3))), "gamma has shape (3, 3), expected (4, 4)"),
    "gamma_asymmetric": (or2_arrays(gamma=OR2_GAMMA + np.outer([1, 0, 0, 0], [0, 1e-9, 0, 0])),
                         "(Γ must be exactly symmetric)"),
    "gamma_equal_outputs": (or2_arrays(gamma=OR2_GAMMA + 5 * np.array([[0, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0],
                                                                        [0, 0, 0, 0]])),
                            "gamma[1,2] = 5.0 on inputs '01' and '10', which both have output '1'"),
    "gamma_diagonal": (or2_arrays(gamma=OR2_GAMMA + np.diag([0, 0, 0, 2.0])), "gamma[3,3] = 2.0"),
    "positive_negative_entry": (or2_arrays(gamma=OR2_GAMMA - 1.5 * np.array([[0, 0, 0, 1], [0, 0, 0, 0], [0, 0, 0, 0],
                                                                             [1, 0, 0, 0]]),
                                           metadata=meta(bound="positive")),
                                "gamma[0,3] = -1.5 in a positive-bound certificate (Γ must be >= 0)"),
    "gamma_tiny_scale": (or2_arrays(gamma=OR2_GAMMA * 1e-300), "outside [2^-900, 2^52)"),
    "gamma_missing": (or2_arrays(gamma=None), "no adversary matrix"),
    "both_forms": (or2_arrays(gamma_row=np.array([0]), gamma_col=np.array([1]), gamma_val=np.array([1.0])),
                   "both gamma and gamma_row/gamma_col/gamma_val are present"),
    "coo_incomplete": (or2_arrays(gamma=None, gamma_row=np.array([0]), gamma_col=np.array([1])),
                       "COO form incomplete: missing gamma_val"),
    "coo_lengths": (coo_arrays([0, 0, 1, 2], [1, 2, 0], [1.0, 1.0, 1.0, 1.0]),
                    "have lengths 4, 3, 4 (must be equal)"),
    "coo_row_out_of_range": (coo_arrays([0, 0, 1, 4], [1, 2, 0, 0], [1.0] * 4), "gamma_row[3] = 4 is outside 0..3"),
    "coo_col_negative": (coo_arrays([0, 0, 1, 2], [1, 2, 0, -1], [1.0] * 4), "gamma_col[3] = -1 is outside 0..3"),
    "coo_duplicate": (coo_arrays([0, 0, 1, 2, 0], [1, 2, 0, 0, 1], [1.0] * 5), "both give gamma[0,1] (no duplicates)"),
    "coo_missing_mirror": (coo_arrays([0, 0, 1], [1, 2, 0], [1.0] * 3), "(Γ must be exactly symmetric)"),
    "coo_unequal_mirror": (coo_arrays(*BAD_COO_ROWS[:2], [1.0, 1.0, 1.0, 2.0]), "(Γ must be exactly symmetric)"),
    "coo_float_indices": (or2_arrays(gamma=None, gamma_row=np.array([0.0, 1.0]), gamma_col=np.array([1.0, 0.0]),
                                     gamma_val=np.array([1.0, 1.0])), "gamma_row has dtype float64, expected integers"),
    "coo_nan_value": (coo_arrays(*BAD_COO_ROWS[:2], [1.0, np.nan, 1.0, np.nan]), "gamma_val[1] = nan"),
    "coo_equal_outputs": (coo_arrays([1, 2], [2, 1], [1.0, 1.0]), "which both have output '1'"),
    "dual_t_nan": (or2_arrays(dual_t=np.array(np.nan), dual_plus=np.zeros((2, 4, 4))), "dual_t = nan (must be finite)"),
    "dual_t_vector": (or2_arrays(dual_t=np.array([1.0]), dual_plus=np.zeros((2, 4, 4))), "dual_t is 1-d, expected 0-d"),
    "dual_plus_shape": (or2_arrays(dual_t=np.array(1.0), dual_plus=np.zeros((2, 4, 3))),
                        "dual_plus has shape (2, 4, 3), expected (2, 4, 4)"),
    "dual_plus_nan": (or2_arrays(dual_t=np.array(1.0), dual_plus=np.full((2, 4, 4), np.nan)),
                      "dual_plus[0,0,0] = nan (must be finite)"),
    "dual_minus_shape": (or2_arrays(dual_t=np.array(1.0), dual_plus=np.zeros((2, 4, 4)),
                                    dual_minus=np.zeros((1, 4, 4))), "dual_minus has shape (1, 4, 4)"),
    "dual_minus_alone": (or2_arrays(dual_minus=np.zeros((2, 4, 4))), "dual_minus without dual_plus"),
    "metadata_not_json": (or2_arrays(metadata=np.array("{bound: general")), "metadata is not JSON"),
    "metadata_not_object": (or2_arrays(metadata=np.array("[1, 2]")), "metadata is not a JSON object"),
    "metadata_bound": (or2_arrays(metadata=meta(bound="positiv")), "metadata bound is 'positiv'"),
    "claimed_lower_nan": (or2_arrays(metadata=np.array('{"claimed_lower": NaN}')),
                          "metadata claimed_lower is 'nan', not a finite number"),
    "claimed_upper_inf": (or2_arrays(metadata=np.array('{"claimed_upper": Infinity}')),
                          "metadata claimed_upper is 'inf', not a finite number"),
    "claimed_lower_string": (or2_arrays(metadata=meta(claimed_lower="100")), "metadata claimed_lower is '100'"),
    "claimed_lower_bool": (or2_arrays(metadata=meta(claimed_lower=True)), "metadata claimed_lower is 'True'"),
    "spec_key_not_hex": (or2_arrays(metadata=meta(spec_key="xyz")), "metadata spec_key is 'xyz', not a 64-digit hex"),
    "unknown_array": (or2_arrays(extra=np.zeros(2)), "unknown array 'extra'"),
    "pickled_metadata": (or2_arrays(metadata=np.array({"bound": "general"}, dtype=object)),
                         "array 'metadata' holds Python objects (pickled data is refused)"),
    "pickled_inputs": (or2_arrays(inputs=np.array(["00", "01", "10", "11"], dtype=object)),
                       "array 'inputs' holds Python objects"),
}


@pytest.mark.parametrize("name", sorted(FORGED))
def test_forged_file_refused(tmp_path, name):
    """Each forged file breaks one clause of the acceptance rule and is refused with that clause named."""
    arrays, fragment = FORGED[name]
    assert_refused(run(write(tmp_path / f"{name}.npz", arrays)), fragment)


def test_issue_reproducer_message(tmp_path):
    """The issue's forged 1-bit certificate is refused naming the file and the duplicate input."""
    path = write(tmp_path / "forge.npz", FORGED["issue_duplicate_input"][0])
    res = run(path)
    assert_refused(res, f"recheck: {path}: inputs[0] and inputs[1] are both '0'")


def test_not_a_zip(tmp_path):
    """A text file is refused as not a zip archive."""
    path = tmp_path / "t.npz"
    path.write_text("not a certificate\n")
    assert_refused(run(path), "not a zip (.npz) archive")


def test_bare_npy_refused(tmp_path):
    """A single .npy array (not a zip) is refused."""
    path = tmp_path / "g.npz"
    with open(path, "wb") as fh:
        np.save(fh, OR2_GAMMA)
    assert_refused(run(path), "not a zip (.npz) archive")


def _zip_with_header(path, arrays, name, header):
    """Write ``arrays`` as an .npz, then add member ``name`` holding only a crafted .npy header."""
    write(path, arrays)
    buf = io.BytesIO()
    np.lib.format.write_array_header_2_0(buf, header)
    with zipfile.ZipFile(path, "a") as zf:
        zf.writestr(name + ".npy", buf.getvalue())
    return path


def test_oversized_declared_array(tmp_path):
    """A gamma header declaring 10^6 × 10^6 doubles (8 TB) is refused before anything is read."""
    path = _zip_with_header(tmp_path / "big.npz", or2_arrays(gamma=None), "gamma",
                            {"descr": "<f8", "fortran_order": False, "shape": (10**6, 10**6)})
    assert_refused(run(path), "array 'gamma' declares 8000000000000 bytes")


def test_truncated_array(tmp_path):
    """A gamma member whose header promises more data than it holds is refused."""
    path = _zip_with_header(tmp_path / "cut.npz", or2_arrays(gamma=None), "gamma",
                            {"descr": "<f8", "fortran_order": False, "shape": (4, 4)})
    assert_refused(run(path), "cannot be read")


def test_corrupt_zip(tmp_path):
    """A zip whose compressed data is damaged is refused, not a traceback."""
    path = tmp_path / "c.npz"
    np.savez_compressed(path, **or2_arrays())
    raw = bytearray(path.read_bytes())
    mid = len(raw) // 3
    raw[mid:mid + 40] = b"\xff" * 40
    path.write_bytes(bytes(raw))
    res = run(path)
    assert res.returncode == 2 and len(res.stderr.splitlines()) == 1 and "Traceback" not in res.stderr
    assert "VERIFIED" not in res.stdout


def test_too_many_inputs_for_dense(tmp_path):
    """4001 inputs exceed the dense check's 4000 and are refused from the header alone."""
    inputs = np.array([format(i, "012b") for i in range(4001)])
    a = or2_arrays(inputs=inputs, outputs=np.array(["0"] * 4001), costs=np.ones(12), gamma=np.zeros((1, 1)))
    assert_refused(run(write(tmp_path / "big.npz", a)), "4001 inputs: the dense check handles at most 4000")


def test_exact_method_size_cap(tmp_path):
    """--method exact on 401 inputs is refused with the cap and the alternative named."""
    inputs = np.array([format(i, "09b") for i in range(401)])
    outputs = np.array([str(x.count("1") % 2) for x in inputs])
    a = or2_arrays(inputs=inputs, outputs=outputs, costs=np.ones(9), gamma=np.zeros((401, 401)))
    assert_refused(run(write(tmp_path / "e.npz", a), "--method", "exact"),
                   "--method exact handles at most 400 inputs (this file has 401); use --method cholesky")


@pytest.mark.parametrize("args, fragment", [
    (["--safety", "0"], "--safety must be in (0, 1]"),
    (["--safety", "nan"], "--safety must be in (0, 1]"),
    (["--denominator", "0"], "--denominator must be a positive integer"),
    (["--method", "magic"], "usage:"),
])
def test_bad_options(tmp_path, args, fragment):
    """Bad options give one usage line and exit 2."""
    assert_refused(run(write(tmp_path / "or2.npz", or2_arrays()), *args), fragment)


def test_missing_file(tmp_path):
    """A missing path is one line naming it, exit 2."""
    assert_refused(run(tmp_path / "nope.npz"), "nope.npz")


def test_directory(tmp_path):
    """A directory is refused in one line."""
    assert_refused(run(tmp_path), str(tmp_path))


# ------------------------------------------------------------------------------------------------
# dual witness: a solved certificate and tampered copies
# ------------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def solved_or2(tmp_path_factory):
    """OR_2 solved by advbound (general bound, with its dual witness), as a dict of arrays."""
    from advbound.evidence.certificate import save_certificate
    from advbound.functions.function import PartialFunction
    from advbound.programs.solve import solve

    f = PartialFunction.from_pairs("01", [(x, "0" if x == "00" else "1") for x in ("00", "01", "10", "11")])
    res = solve(f, solver="CLARABEL", tol=1e-9)
    path = tmp_path_factory.mktemp("solved") / "or2.npz"
    save_certificate(res.certificate, path)
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    assert "dual_plus" in arrays
    return path, arrays


class TestDual:
    def test_solved_certificate_verifies(self, solved_or2):
        """advbound's OR_2 certificate passes every check; upper within 1e-6 of √2 (common knowledge)."""
        res = run(solved_or2[0])
        assert res.returncode == 0, (res.stdout, res.stderr)
        for name in ("dual_psd", "dual_pairs", "dual_t", "bounds_ordered", "claimed_upper"):
            assert f"check {name} ok" in res.stdout
        up = float(next(s for s in res.stdout.splitlines() if s.startswith("upper_float")).split()[1])
        assert math.sqrt(2) * (1 - 1e-6) <= up <= math.sqrt(2) * (1 + 1e-6)

    def _tampered(self, solved_or2, tmp_path, **changes):
        arrays = dict(solved_or2[1])
        arrays.update(changes)
        return run(write(tmp_path / "t.npz", arrays))

    def test_witness_without_dual_t(self, solved_or2, tmp_path):
        """A witness stored without dual_t is still checked (all dual checks but dual_t), exit 0."""
        arrays = {k: v for k, v in solved_or2[1].items() if k != "dual_t"}
        res = run(write(tmp_path / "w.npz", arrays))
        assert res.returncode == 0, res.stdout
        assert "check dual_pairs ok" in res.stdout and "check dual_t" not in res.stdout

    def test_negative_eigenvalue(self, solved_or2, tmp_path):
        """X_1⁺ − 0.5·I has a negative eigenvalue: dual_psd fails, exit 1."""
        xp = solved_or2[1]["dual_plus"].copy()
        xp[0] -= 0.5 * np.eye(4)
        assert_failed(self._tampered(solved_or2, tmp_path, dual_plus=xp), "dual_psd")

    def test_broken_pair_constraint(self, solved_or2, tmp_path):
        """Adding 0.3 to X_1⁺[00,10] (pair differing at position 1) breaks its constraint: dual_pairs fails."""
        xp = solved_or2[1]["dual_plus"].copy()
        xp[0, 0, 2] += 0.3
        xp[0, 2, 0] += 0.3
        assert_failed(self._tampered(solved_or2, tmp_path, dual_plus=xp), "dual_pairs")

    def test_scaled_witness_breaks_pairs(self, solved_or2, tmp_path):
        """Halving the whole witness keeps it PSD but every pair sum becomes 1/2: dual_pairs fails."""
        xp = solved_or2[1]["dual_plus"] * 0.5
        res = self._tampered(solved_or2, tmp_path, dual_plus=xp, dual_t=np.array(float(solved_or2[1]["dual_t"]) / 2))
        assert_failed(res, "dual_pairs")

    def test_dual_t_too_small(self, solved_or2, tmp_path):
        """dual_t = 1 below the witness objective √2: dual_t fails."""
        assert_failed(self._tampered(solved_or2, tmp_path, dual_t=np.array(1.0)), "dual_t")

    def test_claimed_upper_too_small(self, solved_or2, tmp_path):
        """claimed_upper = 1.4142 below the recomputed upper bound: claimed_upper fails."""
        m = json.loads(str(solved_or2[1]["metadata"]))
        m["claimed_upper"] = 1.4142
        assert_failed(self._tampered(solved_or2, tmp_path, metadata=np.array(json.dumps(m))), "claimed_upper")

    def test_claimed_lower_too_high(self, solved_or2, tmp_path):
        """claimed_lower = 1.42 above the certified bound (< √2): claimed_lower fails."""
        m = json.loads(str(solved_or2[1]["metadata"]))
        m["claimed_lower"] = 1.42
        assert_failed(self._tampered(solved_or2, tmp_path, metadata=np.array(json.dumps(m))), "claimed_lower")


# ------------------------------------------------------------------------------------------------
# independence
# ------------------------------------------------------------------------------------------------
def test_imports_only_numpy_and_stdlib():
    """Every import in the tool (at any depth) is numpy or a standard-library module."""
    tree = ast.parse(RECHECK.read_text())
    mods = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            mods.update(a.name.split(".")[0] for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            assert node.level == 0, "relative import"
            mods.add(node.module.split(".")[0])
        elif isinstance(node, ast.Call) and getattr(node.func, "id", "") == "__import__":
            raise AssertionError("dynamic import")
    assert "numpy" in mods
    assert mods - {"numpy"} <= set(sys.stdlib_module_names), mods
    assert not any(m in mods for m in ("advbound", "scipy"))
