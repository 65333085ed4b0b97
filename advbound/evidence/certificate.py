"""Certificates: the adversary matrix and dual witness behind a reported bound, and their file format.

A :class:`Certificate` holds everything needed to re-check a bound without the
solver: the inputs (as strings), their outputs, the query costs, the adversary
matrix Γ and, where available, the dual witness.  :func:`save_certificate` writes
a NumPy ``.npz`` archive with no pickled objects (it loads with
``allow_pickle=False``); :func:`load_certificate` reads it back.

This module also owns the *acceptance rule* (:func:`check_acceptance`): the
conditions under which a certificate describes a well-defined partial function,
cost vector and adversary matrix, so that the number recomputed from it is a
lower bound on the adversary quantity of that function.  Every reader in advbound
applies it (:func:`load_certificate`, and :mod:`advbound.evidence.verify` and
:mod:`advbound.evidence.rigorous` on in-memory objects); anything else raises
:class:`~advbound.errors.CertificateError` with one line naming the defect.
``docs/evidence.md`` states the same rule in words.

Arrays in the file (all plain NumPy dtypes):

``format``
    0-d string, ``"advbound-certificate/1"``.
``alphabet``
    1-d string array, one distinct single-character symbol per entry.
``inputs``
    1-d string array of length ``|D|``: the domain (distinct strings of length ``N``).
``outputs``
    1-d string array of length ``|D|``: the output label of each input.
``costs``
    1-d float64 array of length ``N``: the query cost of each position (finite, > 0).
``gamma``
    float64 ``(|D|, |D|)``, the symmetric adversary matrix Γ (zero on equal-output pairs); or,
    when stored sparse, ``gamma_row``, ``gamma_col`` (int64) and ``gamma_val`` (float64), the
    COO triplets of *all* non-zero entries (both ``(x, y)`` and ``(y, x)``, each once).
``dual_t``, ``dual_plus``, ``dual_minus`` (optional)
    The dual witness: the scalar ``t`` and stacks ``X_j^+``, ``X_j^-`` of shape ``(N, |D|, |D|)``
    (``dual_minus`` absent for two-output functions).
``metadata``
    0-d string holding a JSON object: function description, bound kind, solver settings,
    versions, claimed lower and upper bounds.

>>> import numpy as np, tempfile, os
>>> c = Certificate(("0", "1"), ("0", "1"), ("0", "1"), np.ones(1), np.array([[0., 1.], [1., 0.]]))
>>> p = os.path.join(tempfile.mkdtemp(), "c.npz")
>>> save_certificate(c, p); load_certificate(p).gamma.tolist()
[[0.0, 1.0], [1.0, 0.0]]
>>> bad = Certificate(("0", "1"), ("0", "0", "1"), ("0", "1", "1"), np.ones(1), np.zeros((3, 3)))
>>> check_acceptance(bad, "forge.npz")
Traceback (most recent call last):
...
advbound.errors.CertificateError: forge.npz: inputs 1 and 2 are both '0' (inputs must be distinct)
"""

from __future__ import annotations

import dataclasses
import json
import logging
import math
import os
import re
import stat
import zipfile
import zlib

import numpy as np
import scipy.sparse as sp

from advbound.errors import CertificateError

__all__ = ["Certificate", "save_certificate", "load_certificate", "check_acceptance", "clean_gamma",
           "cleaned", "FORMAT", "BOUNDS", "MAX_ARRAY_BYTES", "MAX_TOTAL_BYTES", "MAX_FILE_BYTES"]

log = logging.getLogger("advbound")

FORMAT = "advbound-certificate/1"
#: The bound kinds a certificate may state in ``metadata["bound"]`` (default ``"general"``).
BOUNDS = ("general", "positive")
#: Largest decompressed size one array of a certificate file may declare (2 GiB); checked from the
#: ``.npy`` header before any data is read.
MAX_ARRAY_BYTES = 2 << 30
#: Largest decompressed size all arrays of a certificate file together may declare (4 GiB).
MAX_TOTAL_BYTES = 4 << 30
#: Largest certificate file read at all (4 GiB on disk).
MAX_FILE_BYTES = 4 << 30

_REQUIRED = ("format", "alphabet", "inputs", "outputs", "costs", "metadata")
_OPTIONAL = ("gamma", "gamma_row", "gamma_col", "gamma_val", "dual_t", "dual_plus", "dual_minus")
_COO = ("gamma_row", "gamma_col", "gamma_val")
_HEX64 = re.compile(r"[0-9a-f]{64}")
#: Rows of Γ examined at a time by the dense checks (keeps temporaries small).
_BLOCK_ELEMENTS = 1 << 22


@dataclasses.dataclass(frozen=True, eq=False)
class Certificate:
    """Adversary matrix, optional dual witness and the domain they are indexed by.

    ``gamma`` is a dense ndarray or a scipy sparse matrix; ``metadata`` is a
    JSON-serialisable dict.  Constructing one checks nothing; :func:`check_acceptance`
    decides whether it is a certificate at all.
    """

    alphabet: tuple[str, ...]
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    costs: np.ndarray
    gamma: object
    dual_t: float | None = None
    dual_plus: np.ndarray | None = None
    dual_minus: np.ndarray | None = None
    metadata: dict = dataclasses.field(default_factory=dict)

    @property
    def symbols(self) -> np.ndarray:
        """``(|D|, N)`` alphabet indices of the inputs (int16, or int32 past 32,767 symbols)."""
        order = {s: i for i, s in enumerate(self.alphabet)}
        n = len(self.costs)
        dtype = np.int16 if len(self.alphabet) <= np.iinfo(np.int16).max else np.int32
        return np.array([[order[c] for c in x] for x in self.inputs], dtype=dtype).reshape(len(self.inputs), n)

    @property
    def output_index(self) -> np.ndarray:
        """Index of each input's output into the sorted labels."""
        labels = sorted(set(self.outputs))
        li = {lab: i for i, lab in enumerate(labels)}
        return np.array([li[y] for y in self.outputs], dtype=np.int64)


# ---------------------------------------------------------------------------------------------
# The acceptance rule
# ---------------------------------------------------------------------------------------------
def _show(value, limit: int = 40) -> str:
    """``repr`` of ``value`` on one line, shortened to about ``limit`` characters."""
    text = repr(str(value)) if isinstance(value, str) else repr(value)
    text = text.replace("\n", "\\n")
    return text if len(text) <= limit else text[: limit - 4] + "...'"


def _bound_of(meta) -> str:
    return meta.get("bound", "general") if isinstance(meta, dict) else "general"


def check_acceptance(cert: Certificate, where: str = "certificate") -> None:
    """Raise :class:`CertificateError` unless ``cert`` satisfies the acceptance rule.

    The rule (``docs/evidence.md``, "What a certificate is"): a non-empty alphabet of distinct
    single-character symbols; ``N >= 1`` costs, each finite and > 0; a non-empty list of
    distinct inputs, each a string of length ``N`` over the alphabet; one string output per
    input; Γ real and finite, of shape ``(|D|, |D|)``, exactly symmetric, exactly zero on every
    pair with equal outputs (the diagonal included) and, when ``metadata["bound"]`` is
    ``"positive"``, non-negative; dual stacks (if any) finite of shape ``(N, |D|, |D|)``, ``dual_t``
    a finite number, ``dual_minus`` only with ``dual_plus``; metadata a dict whose ``bound`` (if
    present) is ``"general"`` or ``"positive"``, whose ``claimed_lower``/``claimed_upper`` (if
    present and not null) are finite numbers and whose ``spec_key`` (if present) is a 64-digit
    hex string.

    Parameters
    ----------
    cert : Certificate
    where : str
        Prefix of the message (the file name, for a file).

    Raises
    ------
    CertificateError
        One line ``"<where>: <defect> (<rule>)"`` naming the first defect found.
    """
    def fail(msg):
        return CertificateError(f"{where}: {msg}")

    _check_metadata(cert.metadata, fail)
    alphabet = _check_alphabet(cert.alphabet, fail)
    costs = _check_costs(cert.costs, fail)
    inputs = _check_inputs(cert.inputs, alphabet, costs.size, fail)
    outputs = _check_outputs(cert.outputs, len(inputs), fail)
    codes = _output_codes(outputs)
    positive = _bound_of(cert.metadata) == "positive"
    g = cert.gamma
    if sp.issparse(g):
        _check_gamma_sparse(g, inputs, outputs, codes, positive, fail)
    else:
        _check_gamma_dense(g, inputs, outputs, codes, positive, fail)
    _check_dual(cert, costs.size, len(inputs), fail)


def _check_metadata(meta, fail) -> None:
    if not isinstance(meta, dict):
        raise fail(f"metadata is a {type(meta).__name__}, not a JSON object")
    if "bound" in meta and meta["bound"] not in BOUNDS:
        raise fail(f"metadata bound is {_show(meta['bound'])} (it must be 'general' or 'positive')")
    for key in ("claimed_lower", "claimed_upper"):
        v = meta.get(key)
        if v is None:
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise fail(f"metadata {key} is {_show(v)} (it must be a finite number or null)")
    if "spec_key" in meta and not (isinstance(meta["spec_key"], str) and _HEX64.fullmatch(meta["spec_key"])):
        raise fail(f"metadata spec_key is {_show(meta['spec_key'])} (it must be a 64-digit hex SHA-256)")


def _check_alphabet(alphabet, fail) -> tuple:
    if isinstance(alphabet, str) or not isinstance(alphabet, (tuple, list)):
        raise fail(f"the alphabet is a {type(alphabet).__name__}, not a sequence of symbols")
    if not alphabet:
        raise fail("the alphabet is empty (it needs at least one symbol)")
    seen: dict = {}
    for i, s in enumerate(alphabet, 1):
        if not isinstance(s, str) or len(s) != 1:
            raise fail(f"alphabet symbol {i} is {_show(s)} (symbols must be single characters)")
        if s in seen:
            raise fail(f"alphabet symbols {seen[s]} and {i} are both {_show(s)} (symbols must be distinct)")
        seen[s] = i
    return tuple(alphabet)


def _check_costs(costs, fail) -> np.ndarray:
    c = np.asarray(costs)
    if c.ndim != 1 or c.dtype.kind not in "fiu":
        raise fail(f"costs must be a 1-d array of numbers, got shape {c.shape} and dtype {c.dtype}")
    if c.size == 0:
        raise fail("there are no costs (a certificate needs at least one position)")
    c = c.astype(np.float64)
    bad = np.flatnonzero(~(np.isfinite(c) & (c > 0)))
    if bad.size:
        j = int(bad[0])
        raise fail(f"cost of position {j + 1} is {float(c[j])!r} (every cost must be finite and > 0)")
    return c


def _check_inputs(inputs, alphabet, n, fail) -> tuple:
    if isinstance(inputs, str) or not isinstance(inputs, (tuple, list)):
        raise fail(f"the inputs are a {type(inputs).__name__}, not a sequence of strings")
    if not inputs:
        raise fail("there are no inputs (the domain must not be empty)")
    known = set(alphabet)
    drop = str.maketrans(dict.fromkeys(alphabet))
    first: dict = {}
    for i, x in enumerate(inputs, 1):
        if not isinstance(x, str):
            raise fail(f"input {i} is {_show(x)}, not a string")
        if len(x) != n:
            raise fail(f"input {i} {_show(x)} has length {len(x)}, but there are {n} costs "
                       "(inputs must all have one symbol per position)")
        if x.translate(drop):
            k = next(k for k, ch in enumerate(x) if ch not in known)
            raise fail(f"input {i} {_show(x)} has symbol {_show(x[k])} at position {k + 1}, which is not in "
                       f"the alphabet {_show(''.join(alphabet))}")
        if x in first:
            raise fail(f"inputs {first[x]} and {i} are both {_show(x)} (inputs must be distinct)")
        first[x] = i
    return tuple(inputs)


def _check_outputs(outputs, size, fail) -> tuple:
    if isinstance(outputs, str) or not isinstance(outputs, (tuple, list)):
        raise fail(f"the outputs are a {type(outputs).__name__}, not a sequence of strings")
    if len(outputs) != size:
        raise fail(f"{len(outputs)} outputs for {size} inputs (exactly one output per input)")
    for i, y in enumerate(outputs, 1):
        if not isinstance(y, str):
            raise fail(f"output {i} is {_show(y)}, not a string")
    return tuple(outputs)


def _output_codes(outputs) -> np.ndarray:
    index: dict = {}
    return np.array([index.setdefault(y, len(index)) for y in outputs], dtype=np.int64)


def _entry(r: int, c: int, inputs) -> str:
    return f"gamma entry (row {r + 1}, column {c + 1}; inputs {_show(inputs[r], 24)}, {_show(inputs[c], 24)})"


def _check_gamma_dense(g, inputs, outputs, codes, positive, fail) -> None:
    size = len(inputs)
    g = np.asarray(g)
    if g.dtype.kind not in "fiu":
        raise fail(f"gamma has dtype {g.dtype} (it must hold real numbers)")
    if g.shape != (size, size):
        raise fail(f"gamma has shape {g.shape}, expected {(size, size)} (one row and one column per input)")
    step = max(1, _BLOCK_ELEMENTS // max(size, 1))
    for lo in range(0, size, step):
        bad = ~np.isfinite(g[lo:lo + step])
        if bad.any():
            r, c = (int(v) for v in np.argwhere(bad)[0])
            raise fail(f"{_entry(lo + r, c, inputs)} is {float(g[lo + r, c])!r} (entries must be finite)")
    for lo in range(0, size, step):
        blk = g[lo:lo + step]
        bad = blk != g[:, lo:lo + step].T
        if bad.any():
            r, c = (int(v) for v in np.argwhere(bad)[0])
            raise fail(f"{_entry(lo + r, c, inputs)} is {float(g[lo + r, c])!r} but its mirror (row {c + 1}, "
                       f"column {lo + r + 1}) is {float(g[c, lo + r])!r} (gamma must be exactly symmetric)")
        bad = (codes[lo:lo + step, None] == codes[None, :]) & (blk != 0)
        if bad.any():
            r, c = (int(v) for v in np.argwhere(bad)[0])
            raise fail(f"{_entry(lo + r, c, inputs)} is {float(g[lo + r, c])!r}, but both inputs have output "
                       f"{_show(outputs[c], 24)} (gamma must be zero on equal-output pairs)")
        if positive:
            bad = blk < 0
            if bad.any():
                r, c = (int(v) for v in np.argwhere(bad)[0])
                raise fail(f"{_entry(lo + r, c, inputs)} is {float(g[lo + r, c])!r} < 0 in a certificate of "
                           "the positive bound (its gamma must be >= 0)")


def _first(rows, cols, mask):
    """The (row, column) with mask set that comes first in row-major order."""
    idx = np.flatnonzero(mask)
    k = idx[np.lexsort((cols[idx], rows[idx]))[0]]
    return int(rows[k]), int(cols[k]), k


def _check_gamma_sparse(g, inputs, outputs, codes, positive, fail) -> None:
    size = len(inputs)
    if g.dtype.kind not in "fiu":
        raise fail(f"gamma has dtype {g.dtype} (it must hold real numbers)")
    if g.shape != (size, size):
        raise fail(f"gamma has shape {g.shape}, expected {(size, size)} (one row and one column per input)")
    m = sp.coo_matrix(g.tocsr().astype(np.float64))  # csr sums any duplicate in-memory entries
    r, c, v = m.row.astype(np.int64), m.col.astype(np.int64), m.data
    if not np.isfinite(v).all():
        i, j, k = _first(r, c, ~np.isfinite(v))
        raise fail(f"{_entry(i, j, inputs)} is {float(v[k])!r} (entries must be finite)")
    d = sp.coo_matrix(m.tocsr() - m.tocsr().T)
    d.eliminate_zeros()
    if d.nnz:
        i, j, _ = _first(d.row.astype(np.int64), d.col.astype(np.int64), np.ones(d.nnz, bool))
        a, b = float(m.tocsr()[i, j]), float(m.tocsr()[j, i])
        raise fail(f"{_entry(i, j, inputs)} is {a!r} but its mirror (row {j + 1}, column {i + 1}) is {b!r} "
                   "(gamma must be exactly symmetric)")
    bad = (codes[r] == codes[c]) & (v != 0)
    if bad.any():
        i, j, k = _first(r, c, bad)
        raise fail(f"{_entry(i, j, inputs)} is {float(v[k])!r}, but both inputs have output "
                   f"{_show(outputs[j], 24)} (gamma must be zero on equal-output pairs)")
    if positive and (v < 0).any():
        i, j, k = _first(r, c, v < 0)
        raise fail(f"{_entry(i, j, inputs)} is {float(v[k])!r} < 0 in a certificate of the positive bound "
                   "(its gamma must be >= 0)")


def _check_dual(cert, n, size, fail) -> None:
    if cert.dual_minus is not None and cert.dual_plus is None:
        raise fail("dual_minus is present without dual_plus")
    for name in ("dual_plus", "dual_minus"):
        a = getattr(cert, name)
        if a is None:
            continue
        a = np.asarray(a)
        if a.dtype.kind not in "fiu":
            raise fail(f"{name} has dtype {a.dtype} (it must hold real numbers)")
        if a.shape != (n, size, size):
            raise fail(f"{name} has shape {a.shape}, expected {(n, size, size)} (one |D|x|D| matrix per position)")
        for j in range(n):
            bad = ~np.isfinite(a[j])
            if bad.any():
                r, c = (int(v) for v in np.argwhere(bad)[0])
                raise fail(f"{name} entry (position {j + 1}, row {r + 1}, column {c + 1}) is {float(a[j, r, c])!r} "
                           "(entries must be finite)")
    t = cert.dual_t
    if t is not None:
        arr = np.asarray(t)
        if arr.shape != () or arr.dtype.kind not in "fiu" or isinstance(t, bool):
            raise fail(f"dual_t is {_show(t)} (it must be a single number)")
        if not math.isfinite(float(arr)):
            raise fail(f"dual_t is {float(arr)!r} (it must be finite)")


# ---------------------------------------------------------------------------------------------
# Cleaning (what advbound's writers do before saving)
# ---------------------------------------------------------------------------------------------
def clean_gamma(gamma, outputs, positive: bool = False):
    """Γ made exactly symmetric, ``(Γ + Γᵀ)/2``, with equal-output entries (and, for the positive
    bound, negative entries) set to exactly 0.

    Verification computes with this matrix anyway, so cleaning never changes a recomputed
    bound; it makes solver output (tiny asymmetry, residue on equal-output pairs) satisfy the
    acceptance rule.  A Γ whose shape does not fit ``outputs`` is returned as a float copy,
    unchanged, for :func:`check_acceptance` to refuse.

    >>> clean_gamma(np.array([[1e-12, 2.], [1., 0.]]), ("0", "1")).tolist()
    [[0.0, 1.5], [1.5, 0.0]]
    """
    codes = _output_codes(outputs)
    size = len(codes)
    if sp.issparse(gamma):
        m = sp.coo_matrix(gamma.tocsr().astype(np.float64))
        if m.shape != (size, size):
            return m.tocsr()
        keep = codes[m.row] != codes[m.col]
        m = sp.csr_matrix((m.data[keep], (m.row[keep], m.col[keep])), shape=m.shape)
        m = ((m + m.T) * 0.5).tocsr()
        if positive:
            m.data[m.data < 0] = 0.0
        m.eliminate_zeros()
        return m
    g = np.array(gamma, dtype=np.float64)
    if g.shape != (size, size):
        return g
    g = (g + g.T) * 0.5
    g[codes[:, None] == codes[None, :]] = 0.0
    if positive:
        g[g < 0] = 0.0
    return g


def cleaned(cert: Certificate) -> Certificate:
    """``cert`` with Γ replaced by :func:`clean_gamma` (positive clipping when ``metadata["bound"]``
    is ``"positive"``); everything else untouched."""
    if isinstance(cert.outputs, str) or not isinstance(cert.outputs, (tuple, list)):
        return cert
    try:
        g = clean_gamma(cert.gamma, cert.outputs, positive=_bound_of(cert.metadata) == "positive")
    except (TypeError, ValueError):
        return cert  # not numbers: check_acceptance names the defect
    return dataclasses.replace(cert, gamma=g)


# ---------------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------------
def save_certificate(cert: Certificate, path) -> None:
    """Write ``cert`` to ``path`` as a pickle-free compressed ``.npz`` archive.

    Γ is cleaned first (:func:`cleaned`), so solver output with tiny asymmetry or residue on
    equal-output pairs is written as an exactly valid matrix; the result must then pass
    :func:`check_acceptance`, or :class:`CertificateError` is raised and nothing is written.
    """
    clean = cleaned(cert)
    check_acceptance(clean, f"{path} (not written)")
    arrays = {
        "format": np.array(FORMAT),
        "alphabet": np.array(list(clean.alphabet), dtype=str),
        "inputs": np.array(list(clean.inputs), dtype=str),
        "outputs": np.array(list(clean.outputs), dtype=str),
        "costs": np.asarray(clean.costs, dtype=np.float64),
        "metadata": np.array(json.dumps(clean.metadata, sort_keys=True)),
    }
    if sp.issparse(clean.gamma):
        g = clean.gamma.tocoo()
        arrays.update(gamma_row=g.row.astype(np.int64), gamma_col=g.col.astype(np.int64),
                      gamma_val=g.data.astype(np.float64))
    else:
        arrays["gamma"] = np.asarray(clean.gamma, dtype=np.float64)
    if clean.dual_t is not None:
        arrays["dual_t"] = np.array(float(clean.dual_t))
    if clean.dual_plus is not None:
        arrays["dual_plus"] = np.asarray(clean.dual_plus, dtype=np.float64)
    if clean.dual_minus is not None:
        arrays["dual_minus"] = np.asarray(clean.dual_minus, dtype=np.float64)
    with open(path, "wb") as fh:
        np.savez_compressed(fh, **arrays)


# ---------------------------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------------------------
def load_certificate(path) -> Certificate:
    """Read a certificate file and apply the acceptance rule.

    Raises
    ------
    CertificateError
        One line naming the file and its first defect: not a complete zip archive, an array
        that is pickled, oversized, of the wrong kind or shape, or any breach of
        :func:`check_acceptance`.
    """
    where = os.fspath(path) if isinstance(path, (str, os.PathLike)) else str(path)
    arrays = _read_archive(path, where)
    cert = _decode(arrays, where)
    check_acceptance(cert, where)
    return cert


def _gib(nbytes: int) -> str:
    return f"{nbytes / 2**30:.3g} GiB" if nbytes >= 2**30 else f"{nbytes / 2**20:.3g} MiB"


def _read_archive(path, where: str, required=_REQUIRED, optional=_OPTIONAL) -> dict:
    """The arrays of the ``.npz`` at ``path``, after checking the archive and every array header.

    ``required`` and ``optional`` are the array names a file of this kind may hold (the dense
    certificate's by default); any other member is refused.
    """
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise CertificateError(f"{where}: no such file") from None
    except (OSError, ValueError) as err:
        raise CertificateError(f"{where}: cannot read the file ({getattr(err, 'strerror', None) or err})") from None
    if stat.S_ISDIR(st.st_mode):
        raise CertificateError(f"{where}: is a folder, not a certificate file")
    if not stat.S_ISREG(st.st_mode):
        raise CertificateError(f"{where}: is not a regular file (a certificate is a .npz file)")
    if st.st_size == 0:
        raise CertificateError(f"{where}: the file is empty (not a certificate)")
    if st.st_size > MAX_FILE_BYTES:
        raise CertificateError(f"{where}: the file has {_gib(st.st_size)}, more than the limit of "
                               f"{_gib(MAX_FILE_BYTES)} for a certificate")
    try:
        with open(path, "rb") as fh:
            if not zipfile.is_zipfile(fh):
                raise CertificateError(f"{where}: not a complete .npz (zip) archive (no zip directory found: "
                                       "another kind of file, or a truncated one)")
            fh.seek(0)
            with zipfile.ZipFile(fh) as zf:
                return _read_members(zf, where, required, optional)
    except CertificateError:
        raise
    except MemoryError:
        raise CertificateError(f"{where}: too large to read into memory") from None
    except (zipfile.BadZipFile, zlib.error, EOFError, ValueError, OSError, NotImplementedError, RuntimeError,
            KeyError, TypeError, SyntaxError, OverflowError) as err:
        msg = " ".join(str(err).split())[:160] or type(err).__name__
        raise CertificateError(f"{where}: damaged or malformed archive ({msg})") from None


def _read_members(zf: zipfile.ZipFile, where: str, required, optional) -> dict:
    infos = zf.infolist()
    known = tuple(required) + tuple(optional)
    if len(infos) > len(known):
        raise CertificateError(f"{where}: the archive has {len(infos)} members; a certificate has at most "
                               f"{len(known)} arrays")
    members: dict = {}
    for info in infos:
        name = info.filename
        if info.is_dir() or not name.endswith(".npy"):
            raise CertificateError(f"{where}: archive member {_show(name)} is not a .npy array")
        key = name[:-4]
        if key not in known:
            raise CertificateError(f"{where}: unknown array {_show(key)} (a certificate holds only "
                                   f"{', '.join(known)})")
        if key in members:
            raise CertificateError(f"{where}: array {_show(key)} appears twice in the archive")
        members[key] = info
    missing = [k for k in required if k not in members]
    if missing:
        raise CertificateError(f"{where}: missing array(s) {', '.join(missing)}")
    total = 0
    for key, info in members.items():
        with zf.open(info) as fp:
            version = np.lib.format.read_magic(fp)
            if version not in ((1, 0), (2, 0), (3, 0)):
                raise CertificateError(f"{where}: array {_show(key)} has unknown .npy version {version}")
            reader = np.lib.format.read_array_header_1_0 if version == (1, 0) else \
                np.lib.format.read_array_header_2_0
            shape, _, dtype = reader(fp)
        if dtype.hasobject:
            raise CertificateError(f"{where}: array {_show(key)} holds pickled Python objects (refused: a "
                                   "certificate must load with allow_pickle=False)")
        nbytes = math.prod(int(s) for s in shape) * dtype.itemsize
        if nbytes > MAX_ARRAY_BYTES:
            raise CertificateError(f"{where}: array {_show(key)} declares shape {tuple(shape)} of {dtype} "
                                   f"({_gib(nbytes)}), more than the limit of {_gib(MAX_ARRAY_BYTES)} per array")
        total += nbytes
        if total > MAX_TOTAL_BYTES:
            raise CertificateError(f"{where}: the arrays declare {_gib(total)} in all, more than the limit of "
                                   f"{_gib(MAX_TOTAL_BYTES)}")
    arrays = {}
    for key, info in members.items():
        with zf.open(info) as fp:
            arrays[key] = np.lib.format.read_array(fp, allow_pickle=False)
    return arrays


def _array(arrays, key, ndim, kinds, where, what):
    a = arrays[key]
    if a.ndim != ndim or a.dtype.kind not in kinds or (a.dtype.kind == "f" and a.dtype.itemsize > 8):
        raise CertificateError(f"{where}: array {key!r} has shape {a.shape} and dtype {a.dtype}, expected {what}")
    return a


def _strings(arrays, key, where) -> tuple:
    return tuple(str(s) for s in _array(arrays, key, 1, "U", where, "a 1-d string array"))


def _floats(arrays, key, ndim, where) -> np.ndarray:
    return _array(arrays, key, ndim, "f", where, f"a {ndim}-d float array").astype(np.float64)


def _decode(arrays: dict, where: str) -> Certificate:
    """Turn the raw arrays into a :class:`Certificate`, checking kinds, shapes and the COO form."""
    fmt = str(_array(arrays, "format", 0, "U", where, "a 0-d string")[()])
    if fmt != FORMAT:
        raise CertificateError(f"{where}: format {_show(fmt)}, expected {FORMAT!r}")
    alphabet = _strings(arrays, "alphabet", where)
    inputs = _strings(arrays, "inputs", where)
    outputs = _strings(arrays, "outputs", where)
    costs = _floats(arrays, "costs", 1, where)
    text = str(_array(arrays, "metadata", 0, "U", where, "a 0-d string")[()])
    try:
        meta = json.loads(text)
    except (json.JSONDecodeError, RecursionError) as err:
        raise CertificateError(f"{where}: metadata is not valid JSON ({str(err)[:120]})") from None
    if not isinstance(meta, dict):
        raise CertificateError(f"{where}: metadata is a JSON {type(meta).__name__}, not a JSON object")
    gamma = _decode_gamma(arrays, len(inputs), where)
    dual_t = None
    if "dual_t" in arrays:
        dual_t = float(_floats(arrays, "dual_t", 0, where))
    dual_plus = _floats(arrays, "dual_plus", 3, where) if "dual_plus" in arrays else None
    dual_minus = _floats(arrays, "dual_minus", 3, where) if "dual_minus" in arrays else None
    return Certificate(alphabet=alphabet, inputs=inputs, outputs=outputs, costs=costs, gamma=gamma,
                       dual_t=dual_t, dual_plus=dual_plus, dual_minus=dual_minus, metadata=meta)


def _decode_gamma(arrays: dict, size: int, where: str):
    coo = [k for k in _COO if k in arrays]
    if "gamma" in arrays:
        if coo:
            raise CertificateError(f"{where}: both a dense gamma and COO arrays ({', '.join(coo)}); "
                                   "a certificate stores one adversary matrix")
        return _floats(arrays, "gamma", 2, where)
    if not coo:
        raise CertificateError(f"{where}: no adversary matrix (gamma or gamma_row/gamma_col/gamma_val)")
    if len(coo) != 3:
        missing = [k for k in _COO if k not in arrays]
        raise CertificateError(f"{where}: gamma_row, gamma_col and gamma_val come together (missing "
                               f"{', '.join(missing)})")
    r = _array(arrays, "gamma_row", 1, "iu", where, "a 1-d integer array")
    c = _array(arrays, "gamma_col", 1, "iu", where, "a 1-d integer array")
    v = _floats(arrays, "gamma_val", 1, where)
    if not len(r) == len(c) == len(v):
        raise CertificateError(f"{where}: gamma_row, gamma_col and gamma_val have lengths {len(r)}, {len(c)} and "
                               f"{len(v)} (they must be equal)")
    for name, idx in (("gamma_row", r), ("gamma_col", c)):
        if len(idx):
            out = np.flatnonzero((idx < 0) | (idx >= size))
            if out.size:
                k = int(out[0])
                raise CertificateError(f"{where}: {name} entry {k + 1} is {int(idx[k])}, outside 0..{size - 1} "
                                       f"(indices must name one of the {size} inputs)")
    r, c = r.astype(np.int64), c.astype(np.int64)
    if len(r):
        keys = r * size + c
        order = np.argsort(keys, kind="stable")
        dup = np.flatnonzero(keys[order][1:] == keys[order][:-1])
        if dup.size:
            a, b = int(order[dup[0]]), int(order[dup[0] + 1])
            raise CertificateError(f"{where}: gamma COO entries {a + 1} and {b + 1} both give (row {int(r[a]) + 1}, "
                                   f"column {int(c[a]) + 1}) (each entry must appear once)")
    return sp.csr_matrix((v, (r, c)), shape=(size, size))
