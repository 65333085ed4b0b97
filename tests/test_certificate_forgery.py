"""Forged and malformed certificate files: each breach of the acceptance rule is refused everywhere.

Every case below is a real ``.npz`` file (or a file that pretends to be one) written byte for
byte, then read through the Python API (:func:`advbound.evidence.certificate.load_certificate`) and
through the command line (``verify``, ``verify --rigorous``, ``export``): exit code 2, one line
on stderr naming the file and the defect, and the word VERIFIED never printed.
"""

import io
import json
import math
import re
import zipfile

import numpy as np
import pytest
import scipy.sparse as sp

from advbound.evidence.certificate import Certificate, check_acceptance, load_certificate, save_certificate
from advbound.cli import main
from advbound.errors import CertificateError
from advbound.evidence.rigorous import verify_rigorous
from advbound.evidence.verify import verify_certificate

FORMAT = "advbound-certificate/1"


def _base() -> dict:
    """OR_2 with the textbook Γ (Γ[00,01] = Γ[00,10] = 1): ||Γ|| = √2, ||Γ∘Δ_j|| = 1 (common knowledge)."""
    g = np.zeros((4, 4))
    g[0, 1] = g[1, 0] = g[0, 2] = g[2, 0] = 1.0
    return {"format": np.array(FORMAT), "alphabet": np.array(["0", "1"]),
            "inputs": np.array(["00", "01", "10", "11"]), "outputs": np.array(["0", "1", "1", "1"]),
            "costs": np.ones(2), "metadata": np.array(json.dumps({"bound": "general"})), "gamma": g}


def _write(path, arrays: dict, raw: dict | None = None) -> None:
    """Write ``arrays`` (pickling allowed, so object arrays can be forged) and ``raw`` members as a zip."""
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for key, a in arrays.items():
            buf = io.BytesIO()
            np.lib.format.write_array(buf, np.asanyarray(a), allow_pickle=True)
            zf.writestr(key + ".npy", buf.getvalue())
        for name, data in (raw or {}).items():
            zf.writestr(name, data)


def _with(**changes):
    """The base arrays with some replaced (``None`` deletes an array)."""
    def make(path):
        a = _base()
        for k, v in changes.items():
            if v is None:
                a.pop(k, None)
            else:
                a[k] = v
        _write(path, a)
    return make


def _gamma(edit):
    """The base arrays with Γ changed in place by ``edit``."""
    def make(path):
        a = _base()
        edit(a["gamma"])
        _write(path, a)
    return make


def _set(*entries):
    def edit(g):
        for r, c, v in entries:
            g[r, c] = v
    return edit


def _meta(obj, raw_text=None):
    text = raw_text if raw_text is not None else json.dumps(obj)
    return _with(metadata=np.array(text))


def _coo(rows, cols, vals, **extra):
    """The base with Γ stored as COO triplets (``rows``/``cols`` may be float to forge the dtype)."""
    def make(path):
        a = _base()
        del a["gamma"]
        a.update(gamma_row=np.asarray(rows), gamma_col=np.asarray(cols), gamma_val=np.asarray(vals, float))
        for k, v in extra.items():
            if v is None:
                a.pop(k, None)
            else:
                a[k] = v
        _write(path, a)
    return make


_SYM_ROWS, _SYM_COLS, _SYM_VALS = [0, 1, 0, 2], [1, 0, 2, 0], [1.0, 1.0, 1.0, 1.0]


def _dual(**arrays):
    def make(path):
        a = _base()
        a.update(arrays)
        _write(path, a)
    return make


def _empty(path):
    open(path, "wb").close()


def _text(path):
    with open(path, "w") as fh:
        fh.write("inputs,outputs\n00,0\n")


def _truncated(path):
    _write(path, _base())
    data = open(path, "rb").read()
    with open(path, "wb") as fh:
        fh.write(data[: len(data) // 2])


def _corrupted_member(path):
    """A complete zip whose compressed Γ bytes are damaged (the directory is intact)."""
    buf = io.BytesIO()
    _write(buf, _base())
    data = bytearray(buf.getvalue())
    with zipfile.ZipFile(io.BytesIO(bytes(data))) as zf:
        info = zf.getinfo("gamma.npy")
    start = info.header_offset + 30 + len(info.filename) + len(info.extra)
    for k in range(start + 2, start + info.compress_size - 2):
        data[k] ^= 0x5A
    with open(path, "wb") as fh:
        fh.write(bytes(data))


def _oversized(path):
    """Γ's .npy header declares 10^6 x 10^6 float64 (8 TB) but the member holds 64 bytes."""
    a = _base()
    del a["gamma"]
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, {"descr": "<f8", "fortran_order": False, "shape": (10**6, 10**6)})
    buf.write(b"\0" * 64)
    _write(path, a, raw={"gamma.npy": buf.getvalue()})


def _pickled(path):
    a = _base()
    a["inputs"] = np.array(["00", "01", "10", "11"], dtype=object)
    _write(path, a)


def _npy_not_npz(path):
    with open(path, "wb") as fh:  # a plain .npy (np.load would return it as one array) named .npz
        np.save(fh, np.zeros((4, 4)))


def _repro_raw(path):
    """The issue's reproducer, written without advbound: '0' listed twice with outputs 0 and 1."""
    _write(path, {"format": np.array(FORMAT), "alphabet": np.array(["0", "1"]), "inputs": np.array(["0", "0", "1"]),
                  "outputs": np.array(["0", "1", "1"]), "costs": np.ones(1),
                  "gamma": np.array([[0, 100, 1], [100, 0, 0], [1, 0, 0]], float),
                  "metadata": np.array(json.dumps({"bound": "general"}))})


#: (case id, writer, regular expression the one-line message must contain)
CASES = [
    ("issue-reproducer", _repro_raw, r"inputs 1 and 2 are both '0' \(inputs must be distinct\)"),
    ("duplicate-inputs", _with(inputs=np.array(["00", "01", "01", "11"])), r"inputs 2 and 3 are both '01'"),
    ("ragged-lengths", _with(inputs=np.array(["00", "01", "1", "11"])), r"input 3 '1' has length 1, but there are 2"),
    ("cost-count", _with(costs=np.ones(3)), r"input 1 '00' has length 2, but there are 3 costs"),
    ("symbol-outside-alphabet", _with(inputs=np.array(["00", "01", "12", "11"])),
     r"input 3 '12' has symbol '2' at position 2, which is not in the alphabet '01'"),
    ("outputs-count", _with(outputs=np.array(["0", "1", "1"])), r"3 outputs for 4 inputs"),
    ("outputs-count-long", _with(outputs=np.array(["0", "1", "1", "1", "0"])), r"5 outputs for 4 inputs"),
    ("cost-zero", _with(costs=np.array([1.0, 0.0])), r"cost of position 2 is 0\.0 \(every cost must be finite and > 0\)"),
    ("cost-negative", _with(costs=np.array([-1.0, 1.0])), r"cost of position 1 is -1\.0"),
    ("cost-inf", _with(costs=np.array([1.0, np.inf])), r"cost of position 2 is inf"),
    ("cost-nan", _with(costs=np.array([np.nan, 1.0])), r"cost of position 1 is nan"),
    ("no-costs", _with(costs=np.zeros(0), inputs=np.array([""]), outputs=np.array(["0"]), gamma=np.zeros((1, 1))),
     r"there are no costs"),
    ("costs-not-numbers", _with(costs=np.array(["1", "1"])), r"array 'costs' has shape \(2,\) and dtype <U1"),
    ("gamma-nan", _gamma(_set((0, 1, np.nan), (1, 0, np.nan))), r"row 1, column 2.* is nan \(entries must be finite\)"),
    ("gamma-inf", _gamma(_set((0, 2, np.inf), (2, 0, np.inf))), r"row 1, column 3.* is inf"),
    ("gamma-wrong-shape", _with(gamma=np.zeros((3, 3))), r"gamma has shape \(3, 3\), expected \(4, 4\)"),
    ("gamma-1d", _with(gamma=np.zeros(16)), r"array 'gamma' has shape \(16,\)"),
    ("gamma-asymmetric", _gamma(_set((0, 1, 100.0))), r"row 1, column 2.* is 100\.0 but its mirror .* is 1\.0 "
                                                       r"\(gamma must be exactly symmetric\)"),
    ("gamma-asymmetric-tiny", _gamma(_set((0, 1, 1.0 + 2**-52))), r"exactly symmetric"),
    ("gamma-equal-outputs", _gamma(_set((1, 2, 1.0), (2, 1, 1.0))),
     r"row 2, column 3; inputs '01', '10'\) is 1\.0, but both inputs have output '1' "
     r"\(gamma must be zero on equal-output pairs\)"),
    ("gamma-diagonal", _gamma(_set((0, 0, 0.5))), r"row 1, column 1.* both inputs have output '0'"),
    ("gamma-negative-positive-bound",
     lambda p: _write(p, {**_base(), "metadata": np.array(json.dumps({"bound": "positive"})),
                          "gamma": _negative_gamma()}),
     r"row 1, column 4.* is -0\.5 < 0 in a certificate of the positive bound"),
    ("coo-duplicates", _coo(_SYM_ROWS + [0], _SYM_COLS + [1], _SYM_VALS + [1.0]),
     r"gamma COO entries 1 and 5 both give \(row 1, column 2\)"),
    ("coo-out-of-range", _coo([0, 4], [4, 0], [1.0, 1.0]), r"gamma_row entry 2 is 4, outside 0\.\.3"),
    ("coo-negative-index", _coo([0, -1], [1, 0], [1.0, 1.0]), r"gamma_row entry 2 is -1, outside 0\.\.3"),
    ("coo-lengths", _coo([0, 1, 0], [1, 0], [1.0, 1.0]), r"lengths 3, 2 and 2 \(they must be equal\)"),
    ("coo-asymmetric-set", _coo([0, 1, 0], [1, 0, 2], [1.0, 1.0, 1.0]),
     r"row 1, column 3.* is 1\.0 but its mirror \(row 3, column 1\) is 0\.0"),
    ("coo-asymmetric-values", _coo(_SYM_ROWS, _SYM_COLS, [1.0, 1.0, 1.0, 2.0]), r"row 1, column 3.* exactly symmetric"),
    ("coo-equal-outputs", _coo(_SYM_ROWS + [1, 2], _SYM_COLS + [2, 1], _SYM_VALS + [3.0, 3.0]),
     r"row 2, column 3.* both inputs have output '1'"),
    ("coo-nan", _coo(_SYM_ROWS, _SYM_COLS, [np.nan, np.nan, 1.0, 1.0]), r"row 1, column 2.* is nan"),
    ("coo-float-indices", _coo(np.array(_SYM_ROWS, float), _SYM_COLS, _SYM_VALS),
     r"array 'gamma_row' has shape \(4,\) and dtype float64, expected a 1-d integer array"),
    ("coo-incomplete", _coo(_SYM_ROWS, _SYM_COLS, _SYM_VALS, gamma_val=None), r"come together \(missing gamma_val\)"),
    ("dense-and-coo", _coo(_SYM_ROWS, _SYM_COLS, _SYM_VALS, gamma=np.zeros((4, 4))), r"both a dense gamma and COO"),
    ("no-gamma", _with(gamma=None), r"no adversary matrix"),
    ("pickled-object-array", _pickled, r"array 'inputs' holds pickled Python objects"),
    ("empty-file", _empty, r"the file is empty"),
    ("not-a-zip", _text, r"not a complete \.npz \(zip\) archive"),
    ("npy-not-npz", _npy_not_npz, r"not a complete \.npz \(zip\) archive"),
    ("truncated-zip", _truncated, r"not a complete \.npz \(zip\) archive .*truncated"),
    ("corrupted-member", _corrupted_member, r"damaged or malformed archive"),
    ("oversized-declared-array", _oversized,
     r"array 'gamma' declares shape \(1000000, 1000000\) of float64 \(7\.45e\+03 GiB\), more than the limit"),
    ("unknown-array", lambda p: _write(p, {**_base(), "extra": np.zeros(3)}), r"unknown array 'extra'"),
    ("not-npy-member", lambda p: _write(p, _base(), raw={"notes.txt": b"hi"}), r"member 'notes\.txt' is not a \.npy"),
    ("format-wrong", _with(format=np.array("advbound-certificate/2")), r"format 'advbound-certificate/2', expected"),
    ("format-missing", _with(format=None), r"missing array\(s\) format"),
    ("metadata-not-json", _meta(None, raw_text="{bound: general"), r"metadata is not valid JSON"),
    ("metadata-json-list", _meta(["bound", "general"]), r"metadata is a JSON list, not a JSON object"),
    ("metadata-deep-nesting", _meta(None, raw_text="[" * 100000 + "]" * 100000), r"metadata is not valid JSON"),
    ("metadata-bad-bound", _meta({"bound": "maybe"}), r"metadata bound is 'maybe'"),
    ("claimed-lower-nan", _meta(None, raw_text='{"claimed_lower": NaN}'), r"metadata claimed_lower is nan"),
    ("claimed-upper-string", _meta({"claimed_upper": "3"}), r"metadata claimed_upper is '3'"),
    ("spec-key-malformed", _meta({"spec_key": "abc"}), r"metadata spec_key is 'abc'"),
    ("alphabet-multichar", _with(alphabet=np.array(["0", "10"])), r"alphabet symbol 2 is '10' \(symbols must be single"),
    ("alphabet-duplicate", _with(alphabet=np.array(["0", "1", "0"])), r"alphabet symbols 1 and 3 are both '0'"),
    ("alphabet-empty", _with(alphabet=np.array([], dtype="<U1")), r"the alphabet is empty"),
    ("no-inputs", _with(inputs=np.array([], dtype="<U2"), outputs=np.array([], dtype="<U1"), gamma=np.zeros((0, 0))),
     r"there are no inputs"),
    ("inputs-2d", _with(inputs=np.array([["00", "01"], ["10", "11"]])), r"array 'inputs' has shape \(2, 2\)"),
    ("dual-wrong-shape", _dual(dual_t=np.array(1.5), dual_plus=np.zeros((2, 3, 3))),
     r"dual_plus has shape \(2, 3, 3\), expected \(2, 4, 4\)"),
    ("dual-nan", _dual(dual_t=np.array(1.5), dual_plus=np.where(np.eye(4, dtype=bool)[None], np.nan, 0.0) * np.ones((2, 4, 4))),
     r"dual_plus entry \(position 1, row 1, column 1\) is nan"),
    ("dual-minus-inf", _dual(dual_plus=np.zeros((2, 4, 4)), dual_minus=np.full((2, 4, 4), np.inf)),
     r"dual_minus entry \(position 1, row 1, column 1\) is inf"),
    ("dual-t-nan", _dual(dual_t=np.array(np.nan), dual_plus=np.zeros((2, 4, 4))), r"dual_t is nan"),
    ("dual-t-vector", _dual(dual_t=np.ones(2), dual_plus=np.zeros((2, 4, 4))), r"array 'dual_t' has shape \(2,\)"),
    ("dual-minus-alone", _dual(dual_minus=np.zeros((2, 4, 4))), r"dual_minus is present without dual_plus"),
]


def _negative_gamma():
    g = _base()["gamma"]
    g[0, 3] = g[3, 0] = -0.5
    return g


@pytest.fixture(params=CASES, ids=[c[0] for c in CASES])
def forged(request, tmp_path):
    """(path, expected message pattern) of one forged file."""
    name, make, pattern = request.param
    path = tmp_path / f"{name}.npz"
    make(path)
    return path, pattern


def test_valid_base_is_accepted(tmp_path, capsys):
    """Control: the unforged base file verifies (ratio √2 for OR_2, common knowledge), so refusals are meaningful."""
    p = tmp_path / "ok.npz"
    _write(p, _base())
    assert verify_certificate(load_certificate(p)).lower == pytest.approx(math.sqrt(2))
    assert main(["verify", str(p), "--rigorous"]) == 0
    assert "verdict: VERIFIED" in capsys.readouterr().out


def test_api_refuses(forged):
    """load_certificate raises CertificateError with one line naming the file and the defect."""
    path, pattern = forged
    with pytest.raises(CertificateError) as info:
        load_certificate(path)
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith(f"{path}: ")
    assert re.search(pattern, msg), msg


@pytest.mark.parametrize("command", [["verify"], ["verify", "--rigorous"], ["export"]], ids=["verify", "rigorous", "export"])
def test_cli_refuses(forged, command, capsys, tmp_path):
    """verify, verify --rigorous and export: exit 2, one stderr line naming the file and defect, never VERIFIED."""
    path, pattern = forged
    out_file = tmp_path / "snippet.tex"
    extra = ["--out", str(out_file)] if command == ["export"] else []
    code = main([command[0], str(path), *command[1:], *extra])
    out, err = capsys.readouterr()
    assert code == 2
    assert "VERIFIED" not in out and "VERIFIED" not in err
    assert err.count("\n") == 1 and err.startswith("advbound: error: ") and str(path) in err
    assert re.search(pattern, err), err
    assert not out_file.exists()


def test_export_refuses_whole_batch(tmp_path, capsys):
    """One forged file among good ones: export exits 2 and writes nothing."""
    good, bad, out = tmp_path / "good.npz", tmp_path / "bad.npz", tmp_path / "t.tex"
    _write(good, _base())
    _repro_raw(bad)
    assert main(["export", str(good), str(bad), "--out", str(out)]) == 2
    assert not out.exists() and "bad.npz" in capsys.readouterr().err


def test_issue_reproducer_save_refused(tmp_path):
    """The issue's reproducer verbatim: save_certificate refuses to write it (no file appears)."""
    p = tmp_path / "forge.npz"
    with pytest.raises(CertificateError, match=r"inputs 1 and 2 are both '0' \(inputs must be distinct\)"):
        save_certificate(Certificate(('0', '1'), ('0', '0', '1'), ('0', '1', '1'), np.ones(1),
                                     np.array([[0, 100, 1], [100, 0, 0], [1, 0, 0]], float),
                                     metadata={'bound': 'general'}), p)
    assert not p.exists()


def test_folder_and_missing_file(tmp_path, capsys):
    """A folder or a missing path given as the certificate: one line, exit 2."""
    assert main(["verify", str(tmp_path)]) == 2
    assert "is a folder" in capsys.readouterr().err
    assert main(["verify", str(tmp_path / "nope.npz"), "--rigorous"]) == 2
    err = capsys.readouterr().err
    assert "no such file" in err and err.count("\n") == 1


# ---- the same rule on objects built in memory -------------------------------------------------
def _mem(**changes):
    """OR_2 textbook certificate in memory with fields replaced."""
    a = _base()
    fields = dict(alphabet=("0", "1"), inputs=("00", "01", "10", "11"), outputs=("0", "1", "1", "1"),
                  costs=np.ones(2), gamma=a["gamma"], metadata={"bound": "general"})
    fields.update(changes)
    return Certificate(**fields)


MEMORY_CASES = [
    ("issue-reproducer", dict(alphabet=("0", "1"), inputs=("0", "0", "1"), outputs=("0", "1", "1"), costs=np.ones(1),
                              gamma=np.array([[0, 100, 1], [100, 0, 0], [1, 0, 0]], float)), r"inputs 1 and 2 are both"),
    ("duplicate-inputs", dict(inputs=("00", "01", "01", "11")), r"inputs 2 and 3 are both '01'"),
    ("ragged", dict(inputs=("00", "01", "1", "11")), r"input 3 '1' has length 1"),
    ("cost-count", dict(costs=np.ones(3)), r"but there are 3 costs"),
    ("symbol", dict(inputs=("00", "01", "1x", "11")), r"symbol 'x' at position 2"),
    ("outputs-count", dict(outputs=("0", "1", "1")), r"3 outputs for 4 inputs"),
    ("cost-zero", dict(costs=np.array([0.0, 1.0])), r"cost of position 1 is 0\.0"),
    ("cost-nan", dict(costs=np.array([1.0, np.nan])), r"cost of position 2 is nan"),
    ("gamma-nan", dict(gamma=np.full((4, 4), np.nan)), r"is nan \(entries must be finite\)"),
    ("gamma-shape", dict(gamma=np.zeros((5, 5))), r"gamma has shape \(5, 5\)"),
    ("sparse-gamma-inf", dict(gamma=sp.csr_matrix(np.where(np.eye(4) > 0, 0.0, np.inf))), r"is inf"),
    ("dual-shape", dict(dual_plus=np.zeros((1, 4, 4))), r"dual_plus has shape \(1, 4, 4\)"),
    ("dual-t-inf", dict(dual_t=math.inf, dual_plus=np.zeros((2, 4, 4))), r"dual_t is inf"),
    ("bad-bound", dict(metadata={"bound": "both"}), r"metadata bound is 'both'"),
    ("claimed-nan", dict(metadata={"claimed_lower": math.nan}), r"metadata claimed_lower is nan"),
    ("multichar-symbol", dict(alphabet=("0", "1", "10")), r"alphabet symbol 3 is '10'"),
    ("metadata-not-dict", dict(metadata=["x"]), r"metadata is a list, not a JSON object"),
]


@pytest.mark.parametrize("changes,pattern", [c[1:] for c in MEMORY_CASES], ids=[c[0] for c in MEMORY_CASES])
def test_memory_objects_refused(changes, pattern):
    """verify_certificate, verify_rigorous and save_certificate refuse an in-memory Certificate breaking the rule."""
    cert = _mem(**changes)
    for call in (verify_certificate, verify_rigorous):
        with pytest.raises(CertificateError, match=pattern):
            call(cert)
    with pytest.raises(CertificateError, match=pattern):
        check_acceptance(cert)


def test_memory_residue_is_a_failed_check_not_a_bound():
    """An in-memory Γ that is asymmetric or non-zero on equal outputs is repaired and reported: never VERIFIED.

    Γ[00,01] = 100 one way only: the symmetrised Γ has Γ[00,01] = 50.5, Γ[00,10] = 1, whose ratio is
    sqrt(50.5² + 1) / 50.5 ≈ 1.0002 (each star edge is its own Δ_j block), a valid bound <= √2 = ADV±(OR_2).
    """
    g = _base()["gamma"]
    g[0, 1] = 100.0
    rep = verify_certificate(_mem(gamma=g))
    assert not rep.passed and "symmetric" in rep.failed_checks()
    assert rep.lower == pytest.approx(math.sqrt(50.5**2 + 1) / 50.5)
    rig = verify_rigorous(_mem(gamma=g))
    assert not rig.verified and any(nm == "symmetric" and not ok for nm, ok, _ in rig.checks)


def test_bound_argument_checked():
    """An unknown ``bound`` argument is misuse (CertificateError), not a silent general bound."""
    with pytest.raises(CertificateError, match="bound must be"):
        verify_certificate(_mem(), bound="positve")
    with pytest.raises(CertificateError, match="bound must be"):
        verify_rigorous(_mem(), bound="positve")
