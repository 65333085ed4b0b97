"""Tests of binding a certificate to its function: ``verify --against`` and ``export --against``."""

import dataclasses
import json
import re
from pathlib import Path

import numpy as np
import pytest

from advbound.evidence.certificate import Certificate, save_certificate
from advbound.cli import main
from advbound.evidence.export import export_rows, match_instance
from advbound.functions.instance import load_function, load_instance, spec_key
from advbound.evidence.verify import function_difference

ROOT = Path(__file__).resolve().parent.parent
OR3 = ROOT / "instances" / "or3_sum_T.toml"
MAJ3 = ROOT / "instances" / "tables" / "maj3.tbl"


def _cert_for(f, shuffle: bool = False) -> Certificate:
    """A valid certificate for ``f``: Γ[x,y] = 1 exactly when f(x) != f(y) (zero on equal outputs, symmetric).

    With ``shuffle`` the inputs are stored in reverse order (Γ permuted with them) and the alphabet
    reversed, so only the function, not its canonical order, is the same.
    """
    inputs, outputs = list(f.inputs), list(f.outputs)
    alphabet = tuple(f.alphabet)
    if shuffle:
        inputs, outputs, alphabet = inputs[::-1], outputs[::-1], alphabet[::-1]
    o = np.array(outputs)
    g = (o[:, None] != o[None, :]).astype(float)
    return Certificate(alphabet, tuple(inputs), tuple(outputs), np.asarray(f.costs, float), g,
                       metadata={"bound": "general", "description": "bipartite Γ"})


@pytest.fixture(scope="module")
def or3_t5():
    """OR of 3 position-search rows at T = 5 (48 inputs, 9 positions) from the shipped instance file."""
    return load_function(OR3, {"T": 5})


def test_matching_instance_in_any_order(or3_t5, tmp_path, capsys):
    """A certificate built from the T = 5 function, stored in reverse order, matches --set T=5: exit 0, VERIFIED."""
    p = tmp_path / "c.npz"
    save_certificate(_cert_for(or3_t5, shuffle=True), p)
    assert main(["verify", str(p), "--against", str(OR3), "--set", "T=5", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["verified"] is True and d["against"]["matched"] is True
    assert d["against"]["spec_key"] == spec_key(load_instance(OR3), {"T": 5}) and d["against"]["params"] == {"T": 5}
    assert main(["verify", str(p), "--against", str(OR3), "--set", "T=5", "--rigorous"]) == 0
    out = capsys.readouterr().out
    assert "same function (spec hash" in out and "verdict: VERIFIED" in out


def test_grid_search_finds_the_point(or3_t5, tmp_path, capsys):
    """Without --set every grid point is tried; the T = 5 point is found and named."""
    p = tmp_path / "c.npz"
    save_certificate(_cert_for(or3_t5), p)
    assert main(["verify", str(p), "--against", str(OR3), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["against"]["params"] == {"T": 5} and d["verified"]


def test_other_T_fails(or3_t5, tmp_path, capsys):
    """A certificate for T = 5 checked against T = 6: exit 1, NOT VERIFIED, one line naming the first difference.

    At T = 6 the rows have length 4 (T - 2), so the functions have 12 and 9 positions.
    """
    p = tmp_path / "c.npz"
    save_certificate(_cert_for(or3_t5), p)
    assert main(["verify", str(p), "--against", str(OR3), "--set", "T=6", "--rigorous"]) == 1
    out = capsys.readouterr().out
    assert "VERIFIED" not in out.replace("NOT VERIFIED", "")
    assert "the certificate has 9 positions, the instance 12" in out and "verdict: NOT VERIFIED" in out
    assert main(["verify", str(p), "--against", str(OR3), "--set", "T=6", "--json"]) == 1
    d = json.loads(capsys.readouterr().out)
    assert d["verified"] is False and d["against"]["matched"] is False


def test_no_grid_point_matches(tmp_path, capsys):
    """MAJ_3 checked against the OR-of-rows grid: no grid point matches, exit 1."""
    f = load_function(MAJ3)
    p = tmp_path / "maj.npz"
    save_certificate(_cert_for(f), p)
    assert main(["verify", str(p), "--against", str(OR3)]) == 1
    assert "none of the 9 grid points" in capsys.readouterr().out


def test_table_file(tmp_path, capsys):
    """--against a table file: same function passes (no spec hash, the table's SHA-256 instead)."""
    f = load_function(MAJ3)
    p = tmp_path / "maj.npz"
    save_certificate(_cert_for(f, shuffle=True), p)
    assert main(["verify", str(p), "--against", str(MAJ3), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["against"]["spec_key"] is None and re.fullmatch(r"[0-9a-f]{64}", d["against"]["table_sha256"])


@pytest.mark.parametrize("edit,message", [
    (lambda c: dataclasses.replace(c, outputs=("1",) + c.outputs[1:]),
     r"input '000' has output '1' in the certificate but '0' in the instance"),
    (lambda c: dataclasses.replace(c, costs=np.array([1.0, 2.0, 1.0])),
     r"cost of position 2 is 2\.0 in the certificate but 1\.0 in the instance"),
    (lambda c: dataclasses.replace(c, inputs=c.inputs[1:], outputs=c.outputs[1:], gamma=c.gamma[1:, 1:]),
     r"input '000' of the instance is missing from the certificate"),
    (lambda c: dataclasses.replace(c, alphabet=("0", "1", "*"), inputs=c.inputs + ("11*",), outputs=c.outputs + ("1",)),
     r"input '11\*' of the certificate is not in the instance's domain"),
])
def test_first_difference_named(edit, message, tmp_path, capsys):
    """Each kind of difference from MAJ_3 is named in one line, exit 1."""
    f = load_function(MAJ3)
    c = edit(_cert_for(f))
    c = dataclasses.replace(c, gamma=(np.array(c.outputs)[:, None] != np.array(c.outputs)[None, :]).astype(float))
    p = tmp_path / "m.npz"
    save_certificate(c, p)
    assert main(["verify", str(p), "--against", str(MAJ3)]) == 1
    out = capsys.readouterr().out
    assert re.search(message, out), out
    assert re.search(message, function_difference(c, f))


def test_bad_instance_exit_2(or3_t5, tmp_path, capsys):
    """An unknown --set name, --set without --against, or a missing instance file: bad input, exit 2."""
    p = tmp_path / "c.npz"
    save_certificate(_cert_for(or3_t5), p)
    assert main(["verify", str(p), "--against", str(OR3), "--set", "Q=5"]) == 2
    assert "unknown parameter 'Q'" in capsys.readouterr().err
    assert main(["verify", str(p), "--set", "T=5"]) == 2
    assert "--set is only used with --against" in capsys.readouterr().err
    assert main(["verify", str(p), "--against", str(tmp_path / "missing.toml")]) == 2
    assert capsys.readouterr().err.count("\n") == 1


def test_match_instance_api(or3_t5):
    """match_instance returns the spec hash of the matched point (the same hash studies store)."""
    m = match_instance(_cert_for(or3_t5, shuffle=True), OR3)
    assert m.matched and m.params == {"T": 5} and m.spec_key == spec_key(load_instance(OR3), {"T": 5})


def test_export_writes_spec_hash(or3_t5, tmp_path):
    """export --against writes the instance's spec hash beside each certificate's SHA-256 (checked)."""
    f4 = load_function(OR3, {"T": 4})
    paths = []
    for name, f in (("t4.npz", f4), ("t5.npz", or3_t5)):
        paths.append(tmp_path / name)
        save_certificate(_cert_for(f), paths[-1])
    out = tmp_path / "e.tex"
    assert main(["export", *map(str, paths), "--against", str(OR3), "--out", str(out)]) == 0
    tex = out.read_text()
    spec = load_instance(OR3)
    for T, sfx in ((4, "A"), (5, "B")):
        key = spec_key(spec, {"T": T})
        assert re.search(rf"% certificate {sfx}: t{T}\.npz  sha256 [0-9a-f]{{64}}  spec {key} \(instance .*\[T={T}\], "
                         r"same function\)", tex)
    assert "Instance spec hashes (checked against the instance file)" in tex


def test_export_mismatch_fails_row(or3_t5, tmp_path, capsys):
    """export --against with a certificate of another function: the row is failed, exit 1."""
    p = tmp_path / "t5.npz"
    save_certificate(_cert_for(or3_t5), p)
    rows = export_rows([p], against=OR3, params={"T": 6}, check=False)
    assert rows[0].verified is False and rows[0].lower_display == "failed" and rows[0].spec_key is None
    assert main(["export", str(p), "--against", str(OR3), "--set", "T=6"]) == 1
    out, err = capsys.readouterr()
    assert "DOES NOT MATCH" in out and "not for" in err


def test_export_recorded_spec_key_marked_unchecked(or3_t5, tmp_path):
    """A spec_key stored in the metadata is written, marked as recorded and not checked."""
    c = _cert_for(or3_t5)
    key = spec_key(load_instance(OR3), {"T": 5})
    p = tmp_path / "c.npz"
    save_certificate(dataclasses.replace(c, metadata=dict(c.metadata, spec_key=key)), p)
    assert main(["export", str(p), "--no-check", "--out", str(tmp_path / "e.tex")]) == 0
    assert f"spec {key} (recorded in the file, not checked)" in (tmp_path / "e.tex").read_text()
