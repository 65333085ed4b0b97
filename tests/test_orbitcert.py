"""Orbit certificates: the acceptance rule and forged files, in advbound and in the standalone re-checker.

The base file is written by hand with ``np.savez``: the OR_3 star of tests/orbit_star.py, whose
docstring derives its value √3 and names the source.
"""

import json
import math

import numpy as np
import pytest

from advbound.cli import main
from advbound.errors import CertificateError
from advbound.evidence.orbitcert import load_any_certificate
from advbound.evidence.orbitcheck import verify_orbit_certificate

from orbit_star import FORMAT, ROOT, recheck, star_arrays, write


def base(**changes):
    """The OR_3 star as orbit-certificate arrays of the general bound; a change of ``None`` removes the array."""
    return star_arrays("general", **changes)


def test_hand_made_star_verifies_to_sqrt3(tmp_path, capsys):
    """advbound and the re-checker both verify √3 for the OR_3 star (source in the module docstring)."""
    path = write(tmp_path / "star.npz", base())
    rep = verify_orbit_certificate(load_any_certificate(path))
    assert rep.passed, rep.message
    assert rep.lower == pytest.approx(math.sqrt(3), rel=1e-12) and rep.dense_lower == pytest.approx(math.sqrt(3))
    assert main(["verify", str(path)]) == 0
    assert "verdict: VERIFIED" in capsys.readouterr().out
    out = recheck(path)
    assert out.returncode == 0, out.stdout + out.stderr
    lower = float(next(l for l in out.stdout.splitlines() if l.startswith("lower_float")).split()[1])
    assert math.sqrt(3) * (1 - 1e-5) <= lower <= math.sqrt(3)


KEYS_EQUAL_OUTPUTS = np.array([[[0, 0], [0, 1], [1, 1]]], dtype=np.int64)       # 001 with 011: both output 1
KEYS_REVERSED = np.array([[[0, 0], [0, 0], [1, 0]]], dtype=np.int64)            # from output 1 to output 0
FORGERIES = {
    "duplicate content": (dict(contents=np.array([[0, 0, 0], [0, 0, 0], [0, 1, 1], [1, 1, 1]])), "same multiset"),
    "unsorted content": (dict(contents=np.array([[0, 0, 0], [1, 0, 0], [0, 1, 1], [1, 1, 1]])), "not sorted"),
    "letter out of range": (dict(contents=np.array([[0, 0, 0], [0, 0, 2], [0, 1, 1], [1, 1, 1]])), "outside"),
    "letters not distinct": (dict(letters=np.array(["0", "0"])), "distinct"),
    "letter outside alphabet": (dict(letters=np.array(["0", "2"])), "alphabet"),
    "letters of two lengths": (dict(letters=np.array(["0", "11"])), "length"),
    "outputs short": (dict(outputs=np.array(["0", "1", "1"])), "output"),
    "constant outputs": (dict(outputs=np.array(["1", "1", "1", "1"])), "same output"),
    "zero cost": (dict(costs=np.zeros(1)), "cost"),
    "two costs for one position": (dict(costs=np.ones(2)), "length"),
    "unsorted pair orbit": (dict(pair_keys=np.array([[[0, 1], [0, 0], [0, 0]]])), "sorted"),
    "pair orbit with equal outputs": (dict(pair_keys=KEYS_EQUAL_OUTPUTS), "output"),
    "pair orbit from the larger label": (dict(pair_keys=KEYS_REVERSED), "label"),
    "pair orbit twice": (dict(pair_keys=np.array([[[0, 0], [0, 0], [0, 1]]] * 2), gamma=np.ones(2)), "orbit"),
    "pair orbit outside the contents": (dict(contents=np.array([[0, 0, 0], [0, 0, 1]]), outputs=np.array(["0", "1"]),
                                             rho=np.array([0.5, 1 / 6]),
                                             pair_keys=np.array([[[0, 0], [0, 1], [0, 1]]])), "content"),
    "gamma NaN": (dict(gamma=np.array([np.nan])), "finite"),
    "gamma per orbit missing": (dict(gamma=np.ones(2)), "gamma"),
    "negative gamma, positive bound": (dict(gamma=-np.ones(1), metadata=np.array(json.dumps({"bound": "positive"}))),
                                       "gamma"),
    "negative rho": (dict(rho=np.array([0.5, -1.0, 0.0, 0.0])), "rho"),
    "zero rho": (dict(rho=np.zeros(4)), "rho"),
    "dual sizes without values": (dict(dual_sizes=np.array([2])), "dual"),
    "dual values of the wrong length": (dict(dual_sizes=np.array([2]), dual_values=np.ones(3)), "dual"),
    "dual NaN": (dict(dual_sizes=np.array([1]), dual_values=np.array([np.nan])), "dual"),
    "unknown array": (dict(extra=np.ones(1)), "unknown array"),
    "missing gamma": (dict(gamma=None), "gamma"),
    "pickled array": (dict(letters=np.array(["0", "1"], dtype=object)), "pickle"),
}


@pytest.mark.parametrize("name", sorted(FORGERIES))
def test_forged_file_is_refused_by_both_checkers(name, tmp_path, capsys):
    """Each rule of the orbit acceptance rule: advbound exits 2 with one line, the re-checker exits 2."""
    changes, word = FORGERIES[name]
    path = tmp_path / "forged.npz"
    write(path, base(**changes))
    with pytest.raises(CertificateError) as err:
        load_any_certificate(path)
    assert word.lower() in str(err.value).lower(), str(err.value)
    assert main(["verify", str(path)]) == 2
    captured = capsys.readouterr()
    assert "VERIFIED" not in captured.out and len(captured.err.strip().splitlines()) == 1
    out = recheck(path)
    assert out.returncode == 2, (name, out.stdout, out.stderr)
    assert "VERIFIED" not in out.stdout


@pytest.mark.parametrize("claims", [{"claimed_lower": 2.0}, {"claimed_upper": 1.5}])
def test_inflated_claims_are_not_verified(claims, tmp_path, capsys):
    """A claimed lower bound above √3, or an upper bound below the dual's, fails in both checkers (exit 1)."""
    meta = dict(bound="general", **claims)
    arrays = base(metadata=np.array(json.dumps(meta)))
    if "claimed_upper" in claims:   # a dual is needed for an upper bound: solve for it below
        pytest.importorskip("clarabel")
        from advbound.programs.rowsym import formulate_rows, solve_reduced
        prog = formulate_rows(load_any_certificate(write(tmp_path / "b.npz", base())).family())
        pt = solve_reduced(prog)
        arrays.update(dual_sizes=np.array([z.shape[0] for z in pt.duals]),
                      dual_values=np.concatenate([z.ravel() for z in pt.duals]))
    path = write(tmp_path / "claim.npz", arrays)
    assert main(["verify", str(path)]) == 1
    assert "NOT VERIFIED" in capsys.readouterr().out
    if "claimed_lower" in claims:
        out = recheck(path)
        assert out.returncode == 1 and "NOT VERIFIED" in out.stdout


def test_solved_certificate_round_trip_and_tampering(tmp_path, capsys):
    """solve --save-certificate writes an orbit file that both checkers verify; scaling one Γ orbit breaks its claim."""
    inst = ROOT / "instances" / "or3_sum_T.toml"
    path = tmp_path / "or3.npz"
    assert main(["solve", str(inst), "--set", "T=6", "--save-certificate", str(path)]) == 0
    capsys.readouterr()
    z = dict(np.load(path))
    assert str(z["format"]) == FORMAT
    assert main(["verify", str(path), "--against", str(inst), "--set", "T=6"]) == 0
    assert "same function" in capsys.readouterr().out
    assert main(["verify", str(path), "--against", str(inst), "--set", "T=7"]) == 1
    capsys.readouterr()
    assert recheck(path).returncode == 0
    k = int(np.argmax(z["gamma"]))
    z["gamma"] = z["gamma"].copy()
    z["gamma"][k] *= 1.5
    tampered = write(tmp_path / "tampered.npz", z)
    assert main(["verify", str(tampered)]) == 1
    assert "claimed_lower" in capsys.readouterr().out
    assert recheck(tampered).returncode == 1


def test_dual_of_another_basis_convention_is_not_matched(tmp_path, capsys):
    """A stored dual refers to one convention of the blocks; a file naming another fails dual_matches (exit 1)."""
    inst = ROOT / "instances" / "or3_sum_T.toml"
    path = tmp_path / "or3.npz"
    assert main(["solve", str(inst), "--set", "T=5", "--save-certificate", str(path)]) == 0
    z = dict(np.load(path))
    meta = json.loads(str(z["metadata"]))
    meta["basis"] = "some other convention"
    z["metadata"] = np.array(json.dumps(meta))
    write(tmp_path / "other.npz", z)
    capsys.readouterr()
    assert main(["verify", str(tmp_path / "other.npz")]) == 1
    assert "[FAIL] dual_matches" in capsys.readouterr().out


def test_trivial_block_dual_proves_only_the_positive_bound(tmp_path, capsys):
    """The positive bound is solved on the trivial block alone (metadata cones = "trivial"); the file verifies
    as written, and the same file relabelled as the general bound fails dual_matches (its dual says nothing
    about the other blocks).  The re-checker does not read the reduced dual (docs/evidence.md) and still
    verifies the lower bound of the non-negative Γ, which holds for the general bound too."""
    inst = ROOT / "instances" / "or3_sum_T.toml"
    path = tmp_path / "pos.npz"
    assert main(["solve", str(inst), "--set", "T=6", "--bound", "positive", "--method", "rows", "--save-certificate", str(path)]) == 0
    capsys.readouterr()
    z = dict(np.load(path))
    meta = json.loads(str(z["metadata"]))
    assert meta["cones"] == "trivial" and meta["bound"] == "positive"
    assert main(["verify", str(path)]) == 0
    capsys.readouterr()
    meta["bound"] = "general"
    meta.pop("claimed_upper", None)
    z["metadata"] = np.array(json.dumps(meta))
    write(tmp_path / "relabelled.npz", z)
    assert main(["verify", str(tmp_path / "relabelled.npz")]) == 1
    assert "[FAIL] dual_matches" in capsys.readouterr().out
    assert recheck(tmp_path / "relabelled.npz").returncode == 0
