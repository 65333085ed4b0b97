#!/usr/bin/env python3
"""Standalone re-check of an advbound certificate: acceptance rule, exact lower bound, verdict.

Needs only numpy and the Python standard library; it does not import advbound and shares
no code with it.  It re-implements the recipe of docs/evidence.md ("The rigorous recipe"),
so on the same machine it prints the same rational as ``advbound verify --rigorous``.

Usage::

    python tools/recheck_certificate.py CERT.npz [--denominator Q] [--safety S]
                                                 [--method auto|exact|cholesky] [--json]

Steps:

1. **Acceptance.**  Before any computation the file must satisfy the acceptance rule
   (docs/evidence.md, "The standalone re-checker"): a zip ``.npz`` of plain arrays, with
   declared sizes inspected before reading, that describes a well-defined partial
   function (distinct inputs of one length over the alphabet, one output per input, one
   finite positive cost per position) and an adversary matrix Γ that is finite,
   exactly symmetric and exactly zero on equal-output pairs (non-negative for a
   positive-bound certificate).  Anything else is refused: one line on stderr, exit 2.
2. **Lower bound.**  With ``Γq = N/Q`` the rounded adversary matrix,
   ``R = |vᵀNv| / (Q vᵀv) <= ||Γq||`` and ``||Γq∘Δ_j|| < m_j/(Q T)`` for every position
   ``j`` (by proving ``m_j I ∓ T N∘Δ_j`` positive definite), hence
   ``L = R / max_j (m_j/(Q T c_j))`` is a lower bound on the general adversary bound with
   costs c (on the positive one for a positive-bound certificate).
3. **Claims.**  ``metadata.claimed_lower`` may not exceed ``L·(1+s)·(1+CLAIM_RTOL)``.
4. **Dual witness** (when stored): PSD-ness and the pair constraints within stated
   tolerances, a repaired witness whose objective is the recomputed upper bound, and
   ``dual_t``, ``claimed_upper`` and ``L`` compared with it.

Prints ``lower_exact p/q`` first, then ``lower_float``, one ``check NAME ok|FAIL detail`` line
per check, ``verified true|false`` and ``verdict VERIFIED|NOT VERIFIED``.  Exit status 0 when
every check passed, 1 when a check failed, 2 for a refused file or bad usage, 3 for an
internal error.
"""
import argparse
import ast
import hashlib
import json
import math
import sys
import zipfile
import zlib
from fractions import Fraction

import numpy as np

FORMAT = "advbound-certificate/1"
ORBIT_FORMAT = "advbound-orbit-certificate/1"
BITS, VBITS, KBITS = 28, 26, 30          # denominator bits, eigenvector bits, bits of K
U = Fraction(1, 2**53)                    # unit roundoff of IEEE double
EPS = float(np.finfo(np.float64).eps)

# ---- limits (checked on the array headers, before any array is read) -------------------------
MAX_MEMBERS = 32                          # arrays in the archive
MAX_HEADER = 65536                        # bytes of one .npy header
MAX_ARRAY_BYTES = 2**31                   # declared size of one array
MAX_TOTAL_BYTES = 2**32                   # declared size of all arrays together
MAX_INPUTS = 4000                         # |D| for the dense check (any method)
MAX_EXACT = 400                           # |D| for --method exact (pure-Python elimination)
AUTO_EXACT = 120                          # --method auto: exact up to this |D|, cholesky above
MIN_SCALE, MAX_SCALE = 2.0**-900, 2.0**52  # accepted range of max|Γ|

# ---- tolerances ----------------------------------------------------------------------------
CLAIM_RTOL = 1e-6     # claimed_lower <= L (1+s)(1+CLAIM_RTOL)
PSD_TOL = 1e-4        # stored X_j^±: λ_min >= -PSD_TOL · max(1, max ||X||)
PAIR_TOL = 1e-4       # stored witness: pair-constraint residual at most PAIR_TOL
EIG_MARGIN = 8.0      # eigensolver margin: shift by EIG_MARGIN·|D|·eps·||A|| beyond -λ_min
DUAL_T_RTOL = 1e-5    # dual_t >= (witness objective)(1 - DUAL_T_RTOL)
UPPER_RTOL = 1e-6     # L <= upper (1+UPPER_RTOL); claimed_upper >= upper (1-UPPER_RTOL)

NAMES = {"format", "alphabet", "inputs", "outputs", "costs", "metadata", "gamma", "gamma_row",
         "gamma_col", "gamma_val", "dual_t", "dual_plus", "dual_minus"}
ORBIT_NAMES = {"format", "alphabet", "letters", "contents", "outputs", "costs", "pair_keys", "gamma", "rho",
               "metadata", "dual_sizes", "dual_values", "query_weights"}
ORBIT_REQUIRED = ("format", "alphabet", "letters", "contents", "outputs", "costs", "pair_keys", "gamma", "rho",
                  "metadata")
REQUIRED = ("format", "alphabet", "inputs", "outputs", "costs", "metadata")
COO = ("gamma_row", "gamma_col", "gamma_val")


class Refused(Exception):
    """The file does not satisfy the acceptance rule (or the usage is wrong): exit 2."""


# =============================================================================================
# Reading: headers first, then arrays
# =============================================================================================
def read_npy_header(fh, name):
    """Return (dtype, shape) from a .npy member's header without reading its data."""
    if fh.read(6) != b"\x93NUMPY":
        raise Refused(f"member {name!r} is not a .npy array")
    ver = fh.read(2)
    if len(ver) != 2 or ver[0] not in (1, 2, 3):
        raise Refused(f"array {name!r} has an unknown .npy version")
    width = 2 if ver[0] == 1 else 4
    hlen = int.from_bytes(fh.read(width), "little")
    if hlen > MAX_HEADER:
        raise Refused(f"array {name!r} has a {hlen}-byte header (limit {MAX_HEADER})")
    raw = fh.read(hlen)
    try:
        head = ast.literal_eval(raw.decode("utf-8" if ver[0] == 3 else "latin-1"))
    except (ValueError, SyntaxError, UnicodeDecodeError, MemoryError, RecursionError):
        raise Refused(f"array {name!r} has an unreadable header") from None
    if not isinstance(head, dict) or set(head) != {"descr", "fortran_order", "shape"}:
        raise Refused(f"array {name!r} has an unreadable header")
    descr, shape = head["descr"], head["shape"]
    if not isinstance(descr, str):
        raise Refused(f"array {name!r} has a structured dtype (only plain arrays are accepted)")
    try:
        dtype = np.dtype(descr)
    except TypeError:
        raise Refused(f"array {name!r} has an unknown dtype {descr!r}") from None
    if dtype.hasobject:
        raise Refused(f"array {name!r} holds Python objects (pickled data is refused)")
    if dtype.fields is not None or dtype.subdtype is not None:
        raise Refused(f"array {name!r} has a structured dtype (only plain arrays are accepted)")
    if (not isinstance(shape, tuple) or len(shape) > 3
            or not all(isinstance(s, int) and not isinstance(s, bool) and s >= 0 for s in shape)):
        raise Refused(f"array {name!r} has an invalid shape {shape!r}")
    return dtype, shape


def inspect_archive(path):
    """Return {name: (dtype, shape, nbytes)} for every array, refusing anything oversized or odd."""
    try:
        if not zipfile.is_zipfile(path):
            raise Refused("not a zip (.npz) archive")
        with zipfile.ZipFile(path) as zf:
            infos = zf.infolist()
            if len(infos) > MAX_MEMBERS:
                raise Refused(f"{len(infos)} members in the archive (limit {MAX_MEMBERS})")
            heads, total = {}, 0
            for info in infos:
                if not info.filename.endswith(".npy"):
                    raise Refused(f"member {info.filename!r} is not a .npy array")
                name = info.filename[:-4]
                if name in heads:
                    raise Refused(f"array {name!r} appears twice")
                if name not in NAMES | ORBIT_NAMES:
                    raise Refused(f"unknown array {name!r} (the formats have {', '.join(sorted(NAMES | ORBIT_NAMES))})")
                with zf.open(info) as fh:
                    dtype, shape = read_npy_header(fh, name)
                nbytes = math.prod(shape) * dtype.itemsize
                if nbytes > MAX_ARRAY_BYTES:
                    raise Refused(f"array {name!r} declares {nbytes} bytes (limit {MAX_ARRAY_BYTES})")
                total += nbytes
                heads[name] = (dtype, shape, nbytes)
            if total > MAX_TOTAL_BYTES:
                raise Refused(f"arrays declare {total} bytes in all (limit {MAX_TOTAL_BYTES})")
            return heads
    except (zipfile.BadZipFile, zlib.error, EOFError, NotImplementedError, RuntimeError) as err:
        raise Refused(f"damaged zip archive ({err})") from None


def load_arrays(path, heads):
    """Read every array with allow_pickle=False; each must match its inspected header."""
    out = {}
    try:
        with np.load(path, allow_pickle=False) as z:
            for name, (dtype, shape, _) in heads.items():
                a = z[name]
                if a.dtype != dtype or a.shape != tuple(shape):
                    raise Refused(f"array {name!r} does not match its header")
                out[name] = a
    except (ValueError, EOFError, zipfile.BadZipFile, zlib.error, NotImplementedError) as err:
        raise Refused(f"an array cannot be read ({err})") from None
    return out


# =============================================================================================
# The acceptance rule
# =============================================================================================
def need_kind(a, name, kinds, what, ndim=None):
    if a.dtype.kind not in kinds:
        raise Refused(f"{name} has dtype {a.dtype}, expected {what}")
    if ndim is not None and a.ndim != ndim:
        raise Refused(f"{name} is {a.ndim}-d, expected {ndim}-d")


def check_structure(heads):
    """Rules that the headers alone decide: required arrays, one Γ form, dual arrays paired, sizes."""
    missing = [n for n in REQUIRED if n not in heads]
    if missing:
        raise Refused(f"missing array(s) {', '.join(missing)}")
    has_dense = "gamma" in heads
    coo = [n for n in COO if n in heads]
    if has_dense and coo:
        raise Refused("both gamma and gamma_row/gamma_col/gamma_val are present (one form only)")
    if not has_dense and len(coo) != 3:
        if coo:
            raise Refused(f"COO form incomplete: missing {', '.join(n for n in COO if n not in heads)}")
        raise Refused("no adversary matrix (gamma or gamma_row/gamma_col/gamma_val)")
    if "dual_minus" in heads and "dual_plus" not in heads:
        raise Refused("dual_minus without dual_plus")
    shape = heads["inputs"][1]
    if len(shape) == 1 and shape[0] > MAX_INPUTS:
        raise Refused(f"{shape[0]} inputs: the dense check handles at most {MAX_INPUTS}")


def check_alphabet(a):
    """alphabet: a non-empty 1-d string array of distinct single characters."""
    alph = a["alphabet"]
    need_kind(alph, "alphabet", "U", "strings", ndim=1)
    alphabet = [str(s) for s in alph]
    if not alphabet:
        raise Refused("alphabet is empty")
    seen = {}
    for i, s in enumerate(alphabet):
        if len(s) != 1:
            raise Refused(f"alphabet[{i}] is {s!r}, not a single character")
        if s in seen:
            raise Refused(f"alphabet[{seen[s]}] and alphabet[{i}] are both {s!r} (symbols must be distinct)")
        seen[s] = i
    return alphabet


def check_costs(a, n, of, rule):
    """costs: n finite floats > 0 (``of`` and ``rule`` word the count message)."""
    c = a["costs"]
    need_kind(c, "costs", "f", "floats", ndim=1)
    if c.shape[0] != n:
        raise Refused(f"{c.shape[0]} costs for {of} {n} ({rule})")
    costs = c.astype(np.float64)
    for j, v in enumerate(costs):
        if not (math.isfinite(v) and v > 0):
            raise Refused(f"costs[{j}] = {float(v)!r} (costs must be finite and > 0)")
    return costs


def check_function(a):
    """Alphabet, inputs, outputs and costs; returns (inputs, symbols, output labels, costs)."""
    fmt = a["format"]
    if fmt.dtype.kind != "U" or fmt.ndim != 0 or str(fmt) != FORMAT:
        shown = str(fmt)[:60] if fmt.dtype.kind == "U" and fmt.ndim == 0 else f"a {fmt.dtype} array"
        raise Refused(f"format is {shown!r}, expected {FORMAT!r}")
    alphabet = check_alphabet(a)
    inp = a["inputs"]
    need_kind(inp, "inputs", "U", "strings", ndim=1)
    inputs = [str(s) for s in inp]
    if not inputs:
        raise Refused("inputs is empty")
    n = len(inputs[0])
    if n == 0:
        raise Refused("inputs[0] is the empty string (inputs need at least one position)")
    where = {}
    for i, x in enumerate(inputs):
        if len(x) != n:
            raise Refused(f"inputs[{i}] = {x[:40]!r} has length {len(x)}, inputs[0] has length {n}")
        if x in where:
            raise Refused(f"inputs[{where[x]}] and inputs[{i}] are both {x[:40]!r} (inputs must be distinct)")
        where[x] = i
    symbols = np.array(inputs, dtype=f"U{n}").view(np.uint32).reshape(len(inputs), n)
    codes = np.array([ord(s) for s in alphabet], dtype=np.uint32)
    bad = ~np.isin(symbols, codes)
    if bad.any():
        i, j = (int(k) for k in np.argwhere(bad)[0])
        raise Refused(f"inputs[{i}] = {inputs[i][:40]!r}: symbol {inputs[i][j]!r} at position {j + 1} "
                      "is not in the alphabet")
    outp = a["outputs"]
    need_kind(outp, "outputs", "U", "strings", ndim=1)
    outputs = [str(s) for s in outp]
    if len(outputs) != len(inputs):
        raise Refused(f"{len(outputs)} outputs for {len(inputs)} inputs (one output per input)")
    labels = {y: k for k, y in enumerate(sorted(set(outputs)))}
    out = np.array([labels[y] for y in outputs], dtype=np.int64)
    costs = check_costs(a, n, "inputs of length", "one cost per position")
    return inputs, outputs, symbols, out, costs


def check_metadata(a):
    """metadata: a JSON object; bound general|positive; claimed bounds finite numbers or null; spec_key hex."""
    m = a["metadata"]
    if m.dtype.kind != "U" or m.ndim != 0:
        raise Refused("metadata is not a 0-d string")
    try:
        meta = json.loads(str(m))
    except (ValueError, RecursionError) as err:
        raise Refused(f"metadata is not JSON ({str(err)[:80]})") from None
    if not isinstance(meta, dict):
        raise Refused("metadata is not a JSON object")
    bound = meta.get("bound", "general")
    if bound is None:
        bound = "general"
    if bound not in ("general", "positive"):
        raise Refused(f"metadata bound is {str(bound)[:40]!r}, expected 'general' or 'positive'")
    for key in ("claimed_lower", "claimed_upper"):
        v = meta.get(key)
        if v is not None and (isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v)):
            raise Refused(f"metadata {key} is {str(v)[:40]!r}, not a finite number")
    if "spec_key" in meta:
        v = meta["spec_key"]
        if not (isinstance(v, str) and len(v) == 64 and all(ch in "0123456789abcdef" for ch in v)):
            raise Refused(f"metadata spec_key is {str(v)[:70]!r}, not a 64-digit hex SHA-256")
    return meta, bound


def dense_gamma(a, size):
    """Γ as a dense float64 array, from either form; the COO form must be consistent."""
    if "gamma" in a:
        g = a["gamma"]
        need_kind(g, "gamma", "f", "floats")
        if g.shape != (size, size):
            raise Refused(f"gamma has shape {g.shape}, expected {(size, size)}")
        g = g.astype(np.float64)
        if not np.isfinite(g).all():
            i, j = (int(k) for k in np.argwhere(~np.isfinite(g))[0])
            raise Refused(f"gamma[{i},{j}] = {float(g[i, j])!r} (Γ must be finite)")
        return g, "dense"
    r, c, v = a["gamma_row"], a["gamma_col"], a["gamma_val"]
    need_kind(r, "gamma_row", "iu", "integers", ndim=1)
    need_kind(c, "gamma_col", "iu", "integers", ndim=1)
    need_kind(v, "gamma_val", "f", "floats", ndim=1)
    if not len(r) == len(c) == len(v):
        raise Refused(f"gamma_row, gamma_col, gamma_val have lengths {len(r)}, {len(c)}, {len(v)} (must be equal)")
    for name, idx in (("gamma_row", r), ("gamma_col", c)):
        bad = np.flatnonzero((idx < 0) | (idx >= size))
        if bad.size:
            k = int(bad[0])
            raise Refused(f"{name}[{k}] = {int(idx[k])} is outside 0..{size - 1}")
    v = v.astype(np.float64)
    bad = np.flatnonzero(~np.isfinite(v))
    if bad.size:
        k = int(bad[0])
        raise Refused(f"gamma_val[{k}] = {float(v[k])!r} (Γ must be finite)")
    r, c = r.astype(np.int64), c.astype(np.int64)
    key = r * size + c
    order = np.argsort(key, kind="stable")
    dup = np.flatnonzero(key[order][1:] == key[order][:-1])
    if dup.size:
        k1, k2 = int(order[dup[0]]), int(order[dup[0] + 1])
        raise Refused(f"COO entries {k1} and {k2} both give gamma[{int(r[k1])},{int(c[k1])}] (no duplicates)")
    g = np.zeros((size, size))
    g[r, c] = v
    return g, "coo"


def check_gamma(g, inputs, outputs, out, bound):
    """Γ exactly symmetric, exactly zero on equal-output pairs, and >= 0 for the positive bound."""
    asym = g != g.T
    if asym.any():
        i, j = (int(k) for k in np.argwhere(asym)[0])
        raise Refused(f"gamma[{i},{j}] = {float(g[i, j])!r} but gamma[{j},{i}] = {float(g[j, i])!r} "
                      "(Γ must be exactly symmetric)")
    bad = (out[:, None] == out[None, :]) & (g != 0)
    if bad.any():
        i, j = (int(k) for k in np.argwhere(bad)[0])
        raise Refused(f"gamma[{i},{j}] = {float(g[i, j])!r} on inputs {inputs[i][:40]!r} and {inputs[j][:40]!r}, "
                      f"which both have output {outputs[i][:40]!r} (Γ must be 0 on equal-output pairs)")
    if bound == "positive" and (g < 0).any():
        i, j = (int(k) for k in np.argwhere(g < 0)[0])
        raise Refused(f"gamma[{i},{j}] = {float(g[i, j])!r} in a positive-bound certificate (Γ must be >= 0)")
    top = float(np.max(np.abs(g)))
    if top and not MIN_SCALE <= top < MAX_SCALE:
        raise Refused(f"max|Γ| = {top!r} is outside [2^-900, 2^52) (rescale Γ: the bound does not change)")


def check_dual_arrays(a, n, size):
    """dual_t a finite 0-d float; dual_plus/dual_minus finite float stacks of shape (N, |D|, |D|).

    Returns None without a witness (a lone dual_t is checked but proves nothing), else (t or None, X+, X-).
    """
    t = None
    if "dual_t" in a:
        t = a["dual_t"]
        need_kind(t, "dual_t", "f", "a float", ndim=0)
        t = float(t)
        if not math.isfinite(t):
            raise Refused(f"dual_t = {t!r} (must be finite)")
    if "dual_plus" not in a:
        return None
    stacks = []
    for name in ("dual_plus", "dual_minus"):
        if name not in a:
            stacks.append(None)
            continue
        x = a[name]
        need_kind(x, name, "f", "floats")
        if x.shape != (n, size, size):
            raise Refused(f"{name} has shape {x.shape}, expected {(n, size, size)}")
        x = x.astype(np.float64)
        if not np.isfinite(x).all():
            j, i, k = (int(v) for v in np.argwhere(~np.isfinite(x))[0])
            raise Refused(f"{name}[{j},{i},{k}] = {float(x[j, i, k])!r} (must be finite)")
        stacks.append(x)
    return t, stacks[0], stacks[1]


def accept(path):
    """Apply the whole acceptance rule; return the certificate's parts or raise Refused."""
    heads = inspect_archive(path)
    if "letters" in heads or "contents" in heads or "pair_keys" in heads:
        return accept_orbits(path, heads)
    extra = sorted(set(heads) - NAMES)
    if extra:
        raise Refused(f"unknown array {extra[0]!r} for a dense certificate")
    check_structure(heads)
    a = load_arrays(path, heads)
    inputs, outputs, symbols, out, costs = check_function(a)
    meta, bound = check_metadata(a)
    g, form = dense_gamma(a, len(inputs))
    check_gamma(g, inputs, outputs, out, bound)
    dual = check_dual_arrays(a, len(costs), len(inputs))
    return dict(inputs=inputs, outputs=outputs, symbols=symbols, out=out, costs=costs, meta=meta,
                bound=bound, gamma=g, form=form, dual=dual)


# =============================================================================================
# Orbit certificates: their own rule, then expansion to the dense form
# =============================================================================================
def multiset_count(row):
    """Number of distinct arrangements of the tuple ``row``."""
    k = math.factorial(len(row))
    for v in set(row):
        k //= math.factorial(row.count(v))
    return k


def arrangements(row):
    """The distinct arrangements of ``row`` (a sorted tuple), in lexicographic order."""
    row = sorted(row)
    out = [tuple(row)]
    while True:   # next permutation
        i = len(row) - 2
        while i >= 0 and row[i] >= row[i + 1]:
            i -= 1
        if i < 0:
            return out
        j = len(row) - 1
        while row[j] <= row[i]:
            j -= 1
        row[i], row[j] = row[j], row[i]
        row[i + 1:] = reversed(row[i + 1:])
        out.append(tuple(row))


def accept_orbits(path, heads):
    """The orbit format (docs/evidence.md, "Orbit certificates"), expanded to the dense parts.

    The file must describe a function of interchangeable rows: distinct letters (row inputs) of
    one length over the alphabet, distinct sorted contents over them, one output per content
    (every arrangement of a content is an input with that output), one cost per row position;
    and Γ: one finite value per distinct, sorted pair orbit whose first inputs form a content with
    a smaller output label than the content its second inputs form.  The test vector and the
    dual matrices are not needed here: this tool proves its own lower bound from the expanded Γ
    and does not check the reduced dual.
    """
    extra = sorted(set(heads) - ORBIT_NAMES)
    if extra:
        raise Refused(f"unknown array {extra[0]!r} for an orbit certificate")
    missing = [n for n in ORBIT_REQUIRED if n not in heads]
    if missing:
        raise Refused(f"missing array(s) {', '.join(missing)}")
    a = load_arrays(path, heads)
    fmt = a["format"]
    if fmt.dtype.kind != "U" or fmt.ndim != 0 or str(fmt) != ORBIT_FORMAT:
        raise Refused(f"format is {str(fmt)[:60]!r}, expected {ORBIT_FORMAT!r}")
    alphabet = check_alphabet(a)
    lt = a["letters"]
    need_kind(lt, "letters", "U", "strings", ndim=1)
    letters = [str(s) for s in lt]
    if not letters:
        raise Refused("letters is empty")
    width = len(letters[0])
    for i, s in enumerate(letters):
        if len(s) != width or width == 0:
            raise Refused(f"letters[{i}] = {s[:40]!r} has length {len(s)}, letters[0] has length {width}")
        if any(ch not in alphabet for ch in s):
            raise Refused(f"letters[{i}] = {s[:40]!r} has a symbol outside the alphabet")
    if len(set(letters)) != len(letters):
        raise Refused("letters must be distinct")
    ct = a["contents"]
    need_kind(ct, "contents", "iu", "integers", ndim=2)
    contents = [tuple(int(v) for v in row) for row in ct]
    if not contents or len(contents[0]) < 2:
        raise Refused(f"contents has shape {ct.shape}: at least one content of at least 2 rows")
    rows = len(contents[0])
    for i, c in enumerate(contents):
        if any(v < 0 or v >= len(letters) for v in c):
            raise Refused(f"contents[{i}] names a letter outside 0..{len(letters) - 1}")
        if list(c) != sorted(c):
            raise Refused(f"contents[{i}] is not sorted")
    if len(set(contents)) != len(contents):
        raise Refused("contents must be distinct")
    op = a["outputs"]
    need_kind(op, "outputs", "U", "strings", ndim=1)
    outputs = [str(s) for s in op]
    if len(outputs) != len(contents):
        raise Refused(f"{len(outputs)} outputs for {len(contents)} contents (one output per content)")
    if len(set(outputs)) < 2:
        raise Refused("every content has the same output (a constant function has no adversary bound)")
    size = sum(multiset_count(c) for c in contents)
    if size > MAX_INPUTS:
        raise Refused(f"{size} inputs: the dense check handles at most {MAX_INPUTS}")
    row_costs = check_costs(a, width, "letters of length", "one cost per row position")
    meta, bound = check_metadata(a)
    pk = a["pair_keys"]
    need_kind(pk, "pair_keys", "iu", "integers", ndim=3)
    if pk.shape[1:] != (rows, 2):
        raise Refused(f"pair_keys has shape {pk.shape}, expected (K, {rows}, 2)")
    gv = a["gamma"]
    need_kind(gv, "gamma", "f", "floats", ndim=1)
    if gv.shape[0] != pk.shape[0]:
        raise Refused(f"{gv.shape[0]} gamma values for {pk.shape[0]} pair orbits")
    gv = gv.astype(np.float64)
    index = {cc: i for i, cc in enumerate(contents)}
    rank = {y: k for k, y in enumerate(sorted(set(outputs)))}
    value = {}
    for i, key in enumerate(pk):
        pairs = [(int(x), int(z)) for x, z in key]
        if pairs != sorted(pairs) or any(not (0 <= v < len(letters)) for pr in pairs for v in pr):
            raise Refused(f"pair_keys[{i}] is not a sorted list of letter pairs")
        cx, cz = index.get(tuple(sorted(x for x, _ in pairs))), index.get(tuple(sorted(z for _, z in pairs)))
        if cx is None or cz is None:
            raise Refused(f"pair_keys[{i}]: its inputs do not form contents of the certificate")
        if rank[outputs[cx]] >= rank[outputs[cz]]:
            raise Refused(f"pair_keys[{i}] does not go from a smaller to a larger output label")
        if tuple(pairs) in value:
            raise Refused(f"pair_keys[{i}] repeats an earlier pair orbit")
        if not math.isfinite(gv[i]):
            raise Refused(f"gamma[{i}] = {float(gv[i])!r} (Γ must be finite)")
        value[tuple(pairs)] = float(gv[i])
    rv = a["rho"]
    need_kind(rv, "rho", "f", "floats", ndim=1)
    if rv.shape[0] != len(contents) or not np.isfinite(rv).all() or (rv < 0).any() or not (rv > 0).any():
        raise Refused(f"rho must hold {len(contents)} finite values >= 0, not all 0 (one per content)")
    if ("dual_sizes" in a) != ("dual_values" in a):
        raise Refused("dual_sizes and dual_values come together")
    if "dual_sizes" in a:
        ds, dv = a["dual_sizes"], a["dual_values"]
        need_kind(ds, "dual_sizes", "iu", "integers", ndim=1)
        need_kind(dv, "dual_values", "f", "floats", ndim=1)
        if (ds < 1).any() or sum(int(s) ** 2 for s in ds) != dv.shape[0] or not np.isfinite(dv).all():
            raise Refused("dual_sizes and dual_values do not describe finite square matrices")
    weights = None
    if "query_weights" in a:
        weights = check_query_weights(a, contents, len(letters), width, bound)
    words, outs = [], []
    for cc, y in zip(contents, outputs):
        for w in arrangements(cc):
            words.append(w)
            outs.append(y)
    order = sorted(range(size), key=lambda i: "".join(letters[v] for v in words[i]))
    words = [words[i] for i in order]
    outputs_d = [outs[i] for i in order]
    inputs = ["".join(letters[v] for v in w) for w in words]
    g = np.zeros((size, size))
    for i in range(size):
        for j in range(size):
            if rank[outputs_d[i]] < rank[outputs_d[j]]:
                v = value.get(tuple(sorted(zip(words[i], words[j]))), 0.0)
                g[i, j] = g[j, i] = v
    n = rows * width
    symbols = np.array(inputs, dtype=f"U{n}").view(np.uint32).reshape(size, n)
    out = np.array([rank[y] for y in outputs_d], dtype=np.int64)
    check_gamma(g, inputs, outputs_d, out, bound)
    query = None
    if weights is not None:   # p_x(row r, position q) = weights[content of x, letter of row r, q]
        cindex = {cc: k for k, cc in enumerate(contents)}
        query = np.array([np.concatenate([weights[cindex[tuple(sorted(w))], v] for v in w])
                          for w in words], dtype=np.float64)
    return dict(inputs=inputs, outputs=outputs_d, symbols=symbols, out=out, costs=np.tile(row_costs, rows),
                meta=meta, bound=bound, gamma=g, form="orbits", dual=None, orbit=True, query=query)


def check_query_weights(a, contents, n_letters, width, bound):
    """The minimax witness: (contents, letters, positions) finite weights >= 0, zero for letters a
    content does not hold, a positive total per content; positive bound only, never with a dual."""
    qw = a["query_weights"]
    need_kind(qw, "query_weights", "f", "floats", ndim=3)
    if bound != "positive":
        raise Refused("query_weights bound only the positive adversary bound")
    if "dual_sizes" in a:
        raise Refused("the file holds both dual matrices and query_weights")
    if qw.shape != (len(contents), n_letters, width):
        raise Refused(f"query_weights has shape {qw.shape}, expected {(len(contents), n_letters, width)}")
    qw = qw.astype(np.float64)
    if not np.isfinite(qw).all() or (qw < 0).any():
        raise Refused("query_weights must be finite and >= 0")
    for k, cc in enumerate(contents):
        held = set(cc)
        for v in range(n_letters):
            if v not in held and (qw[k, v] != 0).any():
                raise Refused(f"query_weights[{k}] is non-zero for letter {v}, which content {k} does not hold")
        if not sum(qw[k, v].sum() for v in cc) > 0:
            raise Refused(f"query_weights[{k}] are all 0 for the rows of content {k}")
    return qw


def minimax_upper(cert):
    """max_x S_x / min over differing-output pairs of sum_i [x_i != y_i] sqrt(p_x(i) p_y(i)) / c_i, densely."""
    p, symbols, out, costs = cert["query"], cert["symbols"], cert["out"], cert["costs"]
    root = np.sqrt(p)
    best = math.inf
    for x in range(len(out)):
        ys = np.flatnonzero(out > out[x])
        if ys.size:
            d = symbols[ys] != symbols[x][None, :]
            sums = (d * root[ys] * root[x][None, :] / costs[None, :]).sum(axis=1)
            best = min(best, float(sums.min()))
    load = float(p.sum(axis=1).max())
    # a float sum of at most n terms: allow its rounding before dividing
    floor = best * (1 - 4 * p.shape[1] * EPS)
    return load / floor if floor > 0 else None


# =============================================================================================
# Exact lower bound
# =============================================================================================
def pd_exact(off, m):
    """Is m·I + off positive definite?  Fraction-free elimination: pivots are the leading principal minors."""
    a = [[int(x) for x in row] for row in off]
    for k in range(len(a)):
        a[k][k] = int(m)
    prev = 1
    for k in range(len(a)):
        p = a[k][k]
        if p <= 0:
            return False
        for i in range(k + 1, len(a)):
            for j in range(k + 1, len(a)):
                a[i][j] = (p * a[i][j] - a[i][k] * a[k][j]) // prev     # exact (Sylvester's identity)
        prev = p
    return True


def pd_cholesky(off, m):
    """Is m·I + off positive definite?  Float Cholesky with a rigorous shift (docs/evidence.md)."""
    n, d = len(off), int(m)
    if d > 2**1000:
        return False                                        # the diagonal does not fit a double
    g = (n + 1) * U / (1 - (n + 1) * U)
    target = Fraction(d) - g / (1 - g) * n * d              # shift alpha > gamma/(1-gamma) * n * d
    dshift = float(target)
    if Fraction(dshift) >= target:                          # round the shifted diagonal down
        dshift = math.nextafter(dshift, -math.inf)
    b = np.array(off, dtype=np.float64)
    b[np.diag_indices(n)] = dshift
    for k in range(n):
        if not b[k, k] > 0:
            return False
        r = math.sqrt(b[k, k])
        row = b[k, k + 1:] / r
        nz = np.abs(row[row != 0])
        if not (2.0**-500 <= r <= 2.0**500) or (nz.size and (nz.min() < 2.0**-500 or nz.max() > 2.0**500)):
            return False                                  # outside the range where the bound is proved
        b[k + 1:, k + 1:] -= row[:, None] * row[None, :]
    return True


def max_abs_eig(m):
    w = np.linalg.eigvalsh(m)
    return float(max(abs(w[0]), abs(w[-1])))


def exact_matvec(nm, v):
    """N v in Python integers (int64 products on 13-bit halves of v when they cannot overflow)."""
    big = int(np.max(np.abs(nm), initial=0))
    if big * 2**14 * max(1, len(v)) < 2**62:
        va = np.array(v, dtype=np.int64)
        lo = va % 2**13
        hi = (va - lo) // 2**13
        return [int(a) * 2**13 + int(b) for a, b in zip(nm @ hi, nm @ lo)]
    return [sum(int(nm[i, k]) * v[k] for k in np.flatnonzero(nm[i])) for i in range(len(v))]


def delta(symbols, j):
    """Δ_j: the pairs (x, y) with x_j != y_j."""
    col = symbols[:, j]
    return col[:, None] != col[None, :]


def lower_bound(cert, denominator, safety, method):
    """Steps 2-6 of the recipe.  Returns (proved, L or None, detail, Q)."""
    g, symbols, costs = cert["gamma"], cert["symbols"], cert["costs"]
    size = len(g)
    top = float(np.max(np.abs(g)))
    if top == 0:
        return False, None, "Γ is zero: nothing to certify", 1
    q = int(denominator) if denominator else 2 ** max(0, BITS - math.frexp(top)[1])
    if top * q >= 2.0**52:
        raise Refused(f"--denominator {q} is too large for this Γ (Q·max|Γ| must stay below 2^52)")
    nm = np.rint(g * q).astype(np.int64)
    if not nm.any():
        return False, None, f"Γ rounds to zero with denominator {q}", q
    gq = nm / q
    w, vecs = np.linalg.eigh(gq)
    u = vecs[:, -1] if abs(w[-1]) >= abs(w[0]) else vecs[:, 0]
    v = [int(x) for x in np.rint(u * (2.0**VBITS / np.max(np.abs(u))))]
    rq = Fraction(abs(sum(a * b for a, b in zip(v, exact_matvec(nm, v)))), q * sum(a * a for a in v))
    if rq == 0:
        return False, None, "the Rayleigh quotient of the rounded Γ is zero", q
    n = len(costs)
    y = (1.0 + safety) * max(max_abs_eig(np.where(delta(symbols, j), gq, 0.0)) / costs[j] for j in range(n))
    if not (math.isfinite(y) and y > 0):
        return False, None, f"the constraint scale {y!r} is not a positive double (costs too small?)", q
    p = KBITS - math.frexp(y)[1]
    k = Fraction(math.ceil(math.ldexp(y, p))) / Fraction(2) ** p
    if method == "auto":
        method = "exact" if size <= AUTO_EXACT else "cholesky"
    prove = pd_exact if method == "exact" else pd_cholesky
    both_signs = len(set(cert["out"].tolist())) > 2   # two outputs: N∘Δ_j is bipartite, one sign suffices
    t = 2 ** max(0, KBITS - 2 - int(np.max(np.abs(nm))).bit_length())   # finer grid for the bounds
    failed, scales = [], []
    for j in range(n):
        m = math.ceil(q * t * k * Fraction(float(costs[j])))   # bound m / (q t) on ||Γq∘Δ_j||
        scales.append(Fraction(m, q * t) / Fraction(float(costs[j])))
        nj = np.where(delta(symbols, j), nm, 0) * t
        if m <= 0:
            failed.append(j)
        elif nj.any() and not all(prove(sign * nj, m) for sign in ((-1, 1) if both_signs else (-1,))):
            failed.append(j)
    if failed:
        where = ", ".join(str(j + 1) for j in failed[:10]) + (" ..." if len(failed) > 10 else "")
        return False, None, f"positive definiteness not proved at position(s) {where} ({method})", q
    signs = "m_j I ± T N∘Δ_j" if both_signs else "m_j I - T N∘Δ_j (two outputs: one sign suffices)"
    return True, rq / max(scales), f"every {signs} proved positive definite ({method}; Q = {q}, s = {safety:g})", q


def floor_float(x):
    """The largest double <= the rational x."""
    f = float(x)
    return math.nextafter(f, -math.inf) if Fraction(f) > x else f


# =============================================================================================
# Dual witness (upper bound, float check)
# =============================================================================================
def check_dual(cert, lower, checks):
    """PSD-ness and pair constraints of the stored witness, repair, objective; returns the upper bound."""
    t_file, xp, xm = cert["dual"]
    symbols, out, costs, bound = cert["symbols"], cert["out"], cert["costs"], cert["bound"]
    n, size = xp.shape[0], xp.shape[1]
    xp = (xp + xp.transpose(0, 2, 1)) / 2.0
    xm = None if xm is None else (xm + xm.transpose(0, 2, 1)) / 2.0
    mats = [("+", j, xp[j]) for j in range(n)] + ([] if xm is None else [("-", j, xm[j]) for j in range(n)])
    eig = [np.linalg.eigvalsh(x) for _, _, x in mats]
    scale = max([1.0] + [max(abs(w[0]), abs(w[-1])) for w in eig])
    k_min = int(np.argmin([w[0] for w in eig]))
    lam = float(eig[k_min][0])
    sgn, jj, _ = mats[k_min]
    ok = lam >= -PSD_TOL * scale
    checks.append(("dual_psd", ok, f"smallest eigenvalue {lam:.3g} (X_{jj + 1}{sgn}), tolerance "
                   f"-{PSD_TOL:g}·{scale:.3g}"))

    diff = out[:, None] != out[None, :]
    s = np.zeros((size, size))
    pos_order = sorted(range(n), key=lambda j: (costs[j], j))
    chosen = np.full((size, size), -1, dtype=np.int32)
    for j in pos_order:
        dj = delta(symbols, j)
        s += np.where(dj, xp[j] if xm is None else xp[j] - xm[j], 0.0)
        chosen[(chosen < 0) & dj] = j
    resid = np.where(diff, 1.0 - s, 0.0)
    if bound == "positive":
        resid = np.clip(resid, 0.0, None)
    worst = float(np.max(np.abs(resid), initial=0.0))
    rel = "= 1" if bound == "general" else ">= 1"
    checks.append(("dual_pairs", worst <= PAIR_TOL, f"max pair-constraint violation {worst:.3g} "
                   f"(sum over x_j != y_j of (X_j+ - X_j-)[x,y] {rel} on differing-output pairs; "
                   f"tolerance {PAIR_TOL:g})"))

    def diag_objective(plus, minus, shifts):
        d = np.einsum("jxx->jx", plus) + (0.0 if minus is None else np.einsum("jxx->jx", minus))
        return float(np.max(costs @ (d + shifts[:, None])))

    t_raw = diag_objective(xp, xm, np.zeros(n))
    # repair: each pair's residual goes to X_j+ at the cheapest position where x and y differ
    rep = xp.copy()
    for j in range(n):
        rep[j] += np.where(chosen == j, resid, 0.0)
    shifts = np.zeros(n)
    for sgn_, stack in (("+", rep), ("-", xm)):
        if stack is None:
            continue
        for j in range(n):
            w = np.linalg.eigvalsh(stack[j])
            margin = EIG_MARGIN * size * EPS * max(abs(w[0]), abs(w[-1]))
            shifts[j] += max(0.0, margin - float(w[0]))
    upper = diag_objective(rep, xm, shifts)
    if t_file is not None:
        ok = t_file >= t_raw * (1 - DUAL_T_RTOL)
        checks.append(("dual_t", ok, f"dual_t {t_file:.10g} vs witness objective {t_raw:.10g} "
                       f"(must not be below it by more than {DUAL_T_RTOL:g} relative)"))
    if lower is not None:
        ok = float(lower) <= upper * (1 + UPPER_RTOL)
        checks.append(("bounds_ordered", ok, f"lower {float(lower):.10g} <= upper {upper:.10g} "
                       f"(tolerance {UPPER_RTOL:g} relative)"))
    return upper


# =============================================================================================
# Verdict
# =============================================================================================
def recheck(path, denominator=None, safety=1e-6, method="auto"):
    """Accept, compute and compare; returns a result dict (raises Refused for a refused file)."""
    cert = accept(path)
    size = len(cert["inputs"])
    if method == "exact" and size > MAX_EXACT:
        raise Refused(f"--method exact handles at most {MAX_EXACT} inputs (this file has {size}); "
                      "use --method cholesky")
    n = len(cert["costs"])
    checks = [("well_formed", True, f"acceptance rule holds: |D| = {size}, {n} positions, "
               f"{len(set(cert['outputs']))} outputs, bound {cert['bound']}, gamma {cert['form']}"
               + (", dual witness stored" if cert["dual"] else "")
               + ("; an orbit certificate, expanded here (its reduced dual is not checked by this tool)"
                  if cert.get("orbit") else ""))]
    proved, lower, detail, q = lower_bound(cert, denominator, safety, method)
    checks.append(("constraints", proved, detail))
    meta = cert["meta"]
    claimed = meta.get("claimed_lower")
    if claimed is not None and lower is not None:
        limit = lower * (1 + Fraction(safety)) * (1 + Fraction(CLAIM_RTOL))
        ok = Fraction(claimed) <= limit
        checks.append(("claimed_lower", ok, f"claimed {claimed:.10g} vs exact {float(lower):.10g} "
                       f"(at most L·(1+s)·(1+{CLAIM_RTOL:g}) = {float(limit):.10g})"))
    upper = None
    if cert["dual"] is not None:
        upper = check_dual(cert, lower, checks)
    if cert.get("query") is not None:
        upper = minimax_upper(cert)
        ok = upper is not None and (lower is None or upper >= float(lower) * (1 - UPPER_RTOL))
        checks.append(("minimax_witness", ok, "upper bound max_x S_x / (least pair sum) of the query weights, "
                       f"over every pair of the expanded domain: {upper}"))
    cu = meta.get("claimed_upper")
    if cu is not None:
        floor = [] if lower is None else [float(lower) * (1 - UPPER_RTOL)]
        if upper is not None:
            floor.append(upper * (1 - UPPER_RTOL))
            how = f"recomputed upper {upper:.10g}"
        else:
            how = "no dual witness stored, so only compared with the lower bound"
        ok = all(cu >= f for f in floor)
        checks.append(("claimed_upper", ok, f"claimed {cu:.10g}; {how} (tolerance {UPPER_RTOL:g} relative)"))
    verified = all(ok for _, ok, _ in checks)
    with open(path, "rb") as fh:
        sha = hashlib.sha256(fh.read()).hexdigest()
    return {"file": str(path), "sha256": sha, "bound": cert["bound"],
            "lower_exact": None if lower is None else f"{lower.numerator}/{lower.denominator}",
            "lower_float": None if lower is None else floor_float(lower),
            "upper_float": upper, "denominator": q, "safety": safety,
            "checks": [{"name": nm, "ok": bool(ok), "detail": d} for nm, ok, d in checks],
            "verified": verified, "verdict": "VERIFIED" if verified else "NOT VERIFIED",
            "exit": 0 if verified else 1}


def print_text(res):
    print(f"lower_exact {res['lower_exact'] or 'none (not proved)'}")
    if res["lower_float"] is not None:
        print(f"lower_float {res['lower_float']:.12g}")
    if res["upper_float"] is not None:
        print(f"upper_float {res['upper_float']:.12g}")
    print(f"file {res['file']} sha256 {res['sha256']}")
    for c in res["checks"]:
        print(f"check {c['name']} {'ok' if c['ok'] else 'FAIL'} {c['detail']}")
    print(f"verified {'true' if res['verified'] else 'false'}")
    print(f"verdict {res['verdict']}")


class Parser(argparse.ArgumentParser):
    def error(self, message):
        raise Refused(f"usage: {message}")


def parse(argv):
    ap = Parser(description=__doc__.splitlines()[0])
    ap.add_argument("certificate")
    ap.add_argument("--denominator", type=int, help="Q (default: a power of two with Q·max|Γ| about 2^28)")
    ap.add_argument("--safety", type=float, default=1e-6, help="safety scaling s > 0 (default 1e-6)")
    ap.add_argument("--method", choices=("auto", "exact", "cholesky"), default="auto",
                    help=f"positive-definiteness proof (auto: exact up to {AUTO_EXACT} inputs)")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    a = ap.parse_args(argv)
    if a.denominator is not None and a.denominator < 1:
        raise Refused(f"usage: --denominator must be a positive integer, got {a.denominator}")
    if not (math.isfinite(a.safety) and 0 < a.safety <= 1):
        raise Refused(f"usage: --safety must be in (0, 1], got {a.safety!r}")
    return a


def main(argv=None):
    argv = sys.argv[1:] if argv is None else argv
    as_json = "--json" in argv
    name = next((s for s in argv if not s.startswith("-")), "")
    try:
        a = parse(argv)
        name = a.certificate
        res = recheck(a.certificate, a.denominator, a.safety, a.method)
    except Refused as err:
        msg = str(err) if str(err).startswith("usage:") else f"{name}: {err}"
        return report_error(msg, 2, as_json)
    except OSError as err:
        return report_error(f"{name}: cannot read ({err.strerror or err})", 2, as_json)
    except MemoryError:
        return report_error(f"{name}: out of memory", 2, as_json)
    except Exception as err:          # a bug here, never a user mistake
        return report_error(f"internal error: {type(err).__name__}: {err}", 3, as_json)
    try:
        if as_json:
            print(json.dumps(res))
        else:
            print_text(res)
        sys.stdout.flush()
    except BrokenPipeError:
        sys.stdout = None
    return res["exit"]


def report_error(msg, code, as_json):
    try:
        if as_json:
            print(json.dumps({"error": msg, "exit": code}))
        else:
            print(f"recheck: {msg}", file=sys.stderr)
    except BrokenPipeError:
        pass
    return code


if __name__ == "__main__":
    sys.exit(main())
