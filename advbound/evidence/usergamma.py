"""A researcher's own adversary matrix: read it, evaluate its bound, improve it locally.

This module owns turning a user-supplied Γ (a Python callable ``Γ(x, y)`` or an entries
file) into a matrix over a function's canonical input order, the report of what
that matrix proves, and a local improvement.  For *any* real symmetric Γ that
vanishes on pairs with equal outputs, ``||Γ|| / max_j ||Γ∘Δ_j|| / c_j`` is a lower bound
on ADV±_c(f) (common knowledge: "Negative weights make adversaries stronger", 2007,
arXiv:quant-ph/0611054); the input is symmetrised and zeroed on equal-output pairs
first, and the report says how much that changed.  Typical call::

    g = gamma_from_callable(f, load_callable("mygamma.py:gamma"))
    rep = evaluate_gamma(f, g)          # rep.ratio, rep.binding, rep.zeroed_entries, ...

Sizes: up to :data:`DENSE_LIMIT` inputs the norms come from dense LAPACK
eigensolvers (accurate to floating-point rounding).  Above it Γ is kept sparse and

* ``||Γ||`` is bounded *below* by a Rayleigh quotient (any vector gives a lower bound),
  with the rounding allowance of :func:`advbound.evidence.iterative.norm_lower`;
* each ``||Γ∘Δ_j||`` is bounded *above* by the smaller of the Schur test on ``|Γ∘Δ_j|``
  (``||M|| <= || |M| ||``; :func:`advbound.evidence.iterative.norm_upper_nonnegative`, tight for
  non-negative Γ, possibly loose with negative entries) and dense norms of its connected
  components (:func:`advbound.evidence.iterative.norm_upper_blocks`, when they are small enough);
* so ``certified_ratio = lower / max_j (upper_j / c_j)`` is a lower bound on ADV±_c, while
  ``ratio`` uses ``scipy.sparse.linalg.eigsh`` *estimates* of every norm and is labelled an
  estimate.  Without :mod:`advbound.evidence.iterative` a scipy fallback does the same (Lanczos vector's
  Rayleigh quotient; Schur test with the Perron vector of ``|M|`` floored at ``1e-12·max``;
  both widened by a relative ``1e-10`` against rounding).

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1)])
>>> rep = evaluate_gamma(f, np.array([[0, 1, 1], [1, 0, 0], [1, 0, 0]]))
>>> round(rep.ratio, 12), rep.binding                 # √2 for OR_2 on weight <= 1
(1.414213562373, (0, 1))
"""

from __future__ import annotations

import dataclasses
import importlib
import importlib.util
import logging
import math
import numbers
import os
import zipfile

import numpy as np
import scipy.sparse as sp

from advbound import quantities as q
from advbound.errors import AdvboundError

__all__ = [
    "GammaError",
    "GammaReport",
    "ImproveResult",
    "load_callable",
    "gamma_from_callable",
    "gamma_from_entries",
    "evaluate_gamma",
    "improve_gamma",
    "DENSE_LIMIT",
]

log = logging.getLogger("advbound")

#: Above this many inputs Γ is kept sparse and norms come from iterative solvers.
DENSE_LIMIT = 2500
_ROUND = 1e-10
#: ``max |Γ| x |D|`` above this would overflow sums of squares; the bound is unchanged by scaling Γ.
MAGNITUDE_LIMIT = 1e150
#: Longest line of a text entries file (characters).
_MAX_LINE = 1 << 20


class GammaError(AdvboundError, ValueError):
    """A user-supplied adversary matrix (callable or entries file) is unusable."""


@dataclasses.dataclass(frozen=True)
class GammaReport:
    """What a user-supplied Γ proves (after symmetrising and zeroing equal-output pairs).

    Attributes
    ----------
    message : str
        One sentence with the bound and how it was computed.
    ratio : float
        ``||Γ|| / max_j ||Γ∘Δ_j||/c_j`` (an estimate when ``method == "sparse"``).
    certified_ratio : float or None
        A lower bound on ADV±_c computed with certified one-sided bounds (sparse path);
        equal to ``ratio`` on the dense path.
    norm : float
        ``||Γ||``.
    constraint_norms : tuple of float
        ``||Γ∘Δ_j||`` per position.
    constraint_upper : tuple of float
        Certified upper bounds on ``||Γ∘Δ_j||`` (the norms themselves on the dense path).
    costs : tuple of float
    binding : tuple of int
        Positions with ``||Γ∘Δ_j||/c_j`` within ``binding_rtol`` (relative) of the maximum.
    binding_names : tuple of str
    was_symmetric : bool
    asymmetry : float
        ``max |Γ - Γᵀ|`` of the input.
    zeroed_entries : int
        Non-zero input entries on equal-output pairs (set to 0).
    zeroed_max : float
        Their largest modulus.
    zeroed_mass : float
        Their Frobenius norm.
    size, n : int
    method : str
        ``"dense"`` or ``"sparse"``.
    bound_methods : tuple of str
        How each bound was obtained (sparse path: the ``||Γ||`` lower bound, then one per position).
    """

    message: str
    ratio: float
    certified_ratio: float | None
    norm: float
    constraint_norms: tuple
    constraint_upper: tuple
    costs: tuple
    binding: tuple
    binding_names: tuple
    was_symmetric: bool
    asymmetry: float
    zeroed_entries: int
    zeroed_max: float
    zeroed_mass: float
    size: int
    n: int
    method: str
    bound_methods: tuple = ()

    def to_dict(self) -> dict:
        """Python scalars only (JSON-ready)."""
        d = dataclasses.asdict(self)
        for k in ("constraint_norms", "constraint_upper", "costs"):
            d[k] = [float(v) for v in d[k]]
        d["binding"] = [int(v) for v in self.binding]
        d["binding_names"] = list(self.binding_names)
        d["bound_methods"] = list(self.bound_methods)
        return d


@dataclasses.dataclass(frozen=True, eq=False)
class ImproveResult:
    """Outcome of :func:`improve_gamma`: the original and the improved ratio and matrix."""

    original_ratio: float
    improved_ratio: float
    gamma: np.ndarray
    iterations: int
    accepted_steps: int
    report: GammaReport


# ---------------------------------------------------------------------------------------------
# Reading Γ
# ---------------------------------------------------------------------------------------------
def _import_file(spec: str, path: str):
    """Execute the Python file ``path`` as a fresh module."""
    if os.path.isdir(path):
        raise GammaError(f"--callable {spec!r}: {path!r} is a folder, not a .py file")
    if not os.path.exists(path):
        raise GammaError(f"--callable {spec!r}: no such file {path!r}")
    if not os.path.isfile(path):
        raise GammaError(f"--callable {spec!r}: {path!r} is not a regular file")
    if not path.endswith(".py"):
        raise GammaError(f"--callable {spec!r}: {path!r} is not a Python source file (.py)")
    name = "advbound_user_gamma_" + os.path.splitext(os.path.basename(path))[0]
    s = importlib.util.spec_from_file_location(name, path)
    if s is None or s.loader is None:  # pragma: no cover - .py files always have a loader
        raise GammaError(f"--callable {spec!r}: cannot load {path!r} as a Python module")
    module = importlib.util.module_from_spec(s)
    try:
        s.loader.exec_module(module)
    except SystemExit as err:
        raise GammaError(f"--callable {spec!r}: importing {path} called sys.exit({_short(err.code)})") from None
    except Exception as err:
        raise GammaError(f"--callable {spec!r}: importing {path} raised {type(err).__name__}: {err}") from None
    return module


def _import_name(spec: str, mod_name: str):
    """Import the dotted module ``mod_name``; a name that is really a file or folder gets its own message."""
    if mod_name.startswith("."):
        raise GammaError(f"--callable {spec!r}: relative module names are not supported; give path/to/mod.py:func "
                         f"or package.module:func")
    try:
        return importlib.import_module(mod_name)
    except ImportError as err:
        if os.path.isdir(mod_name):
            raise GammaError(f"--callable {spec!r}: {mod_name!r} is a folder, not a module; give "
                             f"path/to/mod.py:func or an importable package.module:func") from None
        if os.path.exists(mod_name):
            raise GammaError(f"--callable {spec!r}: {mod_name!r} is a file but not a Python source file (.py)") \
                from None
        raise GammaError(f"--callable {spec!r}: cannot import module {mod_name!r} ({err})") from None
    except SystemExit as err:
        raise GammaError(f"--callable {spec!r}: importing {mod_name} called sys.exit({_short(err.code)})") from None
    except Exception as err:
        raise GammaError(f"--callable {spec!r}: importing {mod_name} raised "
                         f"{type(err).__name__}: {err}") from None


def load_callable(spec: str):
    """Import ``"path/to/mod.py:func"`` or ``"package.module:func"`` and return the function.

    Raises
    ------
    GammaError
        One line for a malformed spec, a missing file, a folder, a file that is not ``.py``,
        a module that cannot be imported (or raises, or calls ``sys.exit``, while imported),
        a missing attribute or one that is not callable.
    """
    mod_name, sep, func_name = str(spec).rpartition(":")
    if not sep or not mod_name or not func_name:
        raise GammaError(f"--callable {spec!r}: expected MODULE:FUNCTION (path/to/mod.py:func or pkg.mod:func)")
    if mod_name.endswith(".py") or os.sep in mod_name or "/" in mod_name:
        module = _import_file(spec, mod_name)
    else:
        module = _import_name(spec, mod_name)
    func = getattr(module, func_name, None)
    if func is None:
        raise GammaError(f"--callable {spec!r}: module {mod_name!r} has no function {func_name!r}")
    if not callable(func):
        raise GammaError(f"--callable {spec!r}: {func_name!r} is not callable")
    return func


def _short(value, limit: int = 60) -> str:
    """``repr(value)`` cut to ``limit`` characters (and safe for huge integers)."""
    try:
        r = repr(value)
    except Exception:  # noqa: BLE001 - a user object whose repr fails
        r = f"<{type(value).__name__}>"
    return r if len(r) <= limit else r[:limit - 3] + "..."


def gamma_from_callable(f, func, *, name: str | None = None, allow_large: bool = False) -> np.ndarray:
    """Dense ``Γ[x, y] = func(x, y)`` over all ordered pairs of inputs (``|D|²`` calls), unmodified.

    Parameters
    ----------
    f : PartialFunction
    func : callable
    name : str, optional
        How messages name the callable (default its qualified name).
    allow_large : bool
        The dense matrix and the ``|D|²`` calls are sized first
        (:func:`advbound.functions.sizing.gamma_estimate`); more memory than this machine has
        available is refused unless this is true.

    Raises
    ------
    GammaError
        When ``func`` raises, calls ``sys.exit``, or returns something that is not a finite
        real number (the message names the pair and the value).
    advbound.functions.sizing.TooLargeError
        When the dense matrix would not fit in memory.
    """
    from advbound.functions.sizing import check_memory, gamma_estimate

    inputs = f.inputs
    size = len(inputs)
    check_memory(gamma_estimate(size, f.n), allow_large=allow_large)
    label = name or getattr(func, "__qualname__", None) or _short(func)
    g = np.empty((size, size))
    for i, x in enumerate(inputs):
        for k, y in enumerate(inputs):
            try:
                val = func(x, y)
            except SystemExit as err:
                raise GammaError(f"gamma callable {label} called sys.exit({_short(err.code)}) at pair "
                                 f"({x!r}, {y!r})") from None
            except Exception as err:
                raise GammaError(f"gamma({x!r}, {y!r}) raised {type(err).__name__}: {err}") from None
            if isinstance(val, bool) or not isinstance(val, numbers.Real):
                raise GammaError(f"gamma({x!r}, {y!r}) returned {_short(val)} ({type(val).__name__}), "
                                 f"not a real number")
            try:
                val = float(val)
            except (OverflowError, ValueError, TypeError, ArithmeticError) as err:
                raise GammaError(f"gamma({x!r}, {y!r}) returned {_short(val)}, which is not representable as a "
                                 f"float ({err})") from None
            if not math.isfinite(val):
                raise GammaError(f"gamma({x!r}, {y!r}) returned {val!r}, not a finite number")
            g[i, k] = val
    return g


def gamma_from_entries(f, path):
    """Read Γ from ``.npz`` (``gamma`` dense, or ``gamma_row``/``gamma_col``/``gamma_val``; optional
    ``inputs`` naming the order of rows) or a text table of ``x y value`` lines (``#`` comments).

    COO and text entries listed in one order only are mirrored; entries listed in both
    orders are kept as given (and symmetrised by :func:`evaluate_gamma`).  Returns a dense
    ndarray up to :data:`DENSE_LIMIT` inputs, else a CSR matrix.
    """
    path = os.fspath(path)
    index = {x: i for i, x in enumerate(f.inputs)}
    size = len(f.inputs)
    if path.endswith(".npz"):
        return _entries_npz(path, f, index, size)
    rows, cols, vals = [], [], []
    seen = {}
    if os.path.isdir(path):
        raise GammaError(f"{path}: is a folder, not an entries file")
    with open(path, "rb") as fh:
        for lineno, line in _text_lines(path, fh):
            body = line.split("#", 1)[0].strip()
            if not body:
                continue
            parts = body.split()
            if len(parts) != 3:
                raise GammaError(f"{path}:{lineno}: expected 'x y value', got {body!r}")
            x, y, v = parts
            for s in (x, y):
                if s not in index:
                    raise GammaError(f"{path}:{lineno}: input {s!r} is not in the domain of the function")
            try:
                val = float(v)
            except ValueError:
                raise GammaError(f"{path}:{lineno}: value {v!r} is not a number") from None
            if not math.isfinite(val):
                raise GammaError(f"{path}:{lineno}: value {v!r} is not finite")
            key = (index[x], index[y])
            if key in seen:
                raise GammaError(f"{path}:{lineno}: pair ({x}, {y}) already given on line {seen[key]}")
            seen[key] = lineno
            rows.append(key[0]); cols.append(key[1]); vals.append(val)
    return _assemble(np.array(rows, dtype=np.int64), np.array(cols, dtype=np.int64), np.array(vals), size)


def _text_lines(path, fh):
    """``(line number, line)`` of a UTF-8 text file opened in binary mode (a byte-order mark is accepted),
    lines capped in length."""
    lineno = 0
    while True:
        lineno += 1
        raw = fh.readline(_MAX_LINE)
        if not raw:
            return
        if len(raw) >= _MAX_LINE and not raw.endswith(b"\n"):
            raise GammaError(f"{path}:{lineno}: line longer than {_MAX_LINE} bytes; entries files are "
                             f"'x y value' lines")
        if lineno == 1 and raw.startswith(b"\xef\xbb\xbf"):
            raw = raw[3:]
        try:
            line = raw.decode("utf-8")
        except UnicodeDecodeError as err:
            raise GammaError(f"{path}:{lineno}: not UTF-8 text (byte 0x{raw[err.start]:02x} at column "
                             f"{err.start + 1}); entries files are 'x y value' lines") from None
        yield lineno, line


def _npz_header(path, z, key):
    """``(shape, dtype)`` of array ``key`` of an open ``.npz``, read without decompressing the data."""
    try:
        with z.zip.open(f"{key}.npy") as fh:
            version = np.lib.format.read_magic(fh)
            if version == (1, 0):
                shape, _, dtype = np.lib.format.read_array_header_1_0(fh)
            else:
                shape, _, dtype = np.lib.format.read_array_header_2_0(fh)
    except (OSError, ValueError, KeyError, zipfile.BadZipFile, EOFError) as err:
        raise GammaError(f"{path}: array {key!r} is unreadable ({err})") from None
    return shape, dtype


def _npz_array(path, z, key, *, ndim, kinds, max_len=None):
    """Load array ``key`` after checking its rank, kind and length from the header."""
    shape, dtype = _npz_header(path, z, key)
    if len(shape) != ndim:
        raise GammaError(f"{path}: {key} has shape {shape}, expected a {ndim}-dimensional array")
    if dtype.kind not in kinds:
        raise GammaError(f"{path}: {key} has dtype {dtype}, expected {' or '.join(_KIND_NAMES[k] for k in kinds)}")
    if max_len is not None and any(n > max_len for n in shape):
        raise GammaError(f"{path}: {key} has shape {shape}, larger than the {max_len} allowed")
    try:
        return z[key]
    except (OSError, ValueError, zipfile.BadZipFile, EOFError) as err:
        raise GammaError(f"{path}: array {key!r} is unreadable ({err})") from None


_KIND_NAMES = {"i": "signed integers", "u": "unsigned integers", "f": "floats", "U": "strings"}


def _entries_npz(path, f, index, size):
    try:
        z = np.load(path, allow_pickle=False)
    except (OSError, ValueError, EOFError, zipfile.BadZipFile) as err:
        if isinstance(err, IsADirectoryError) or os.path.isdir(path):
            raise GammaError(f"{path}: is a folder, not an .npz file") from None
        if isinstance(err, FileNotFoundError):
            raise
        raise GammaError(f"{path}: not a readable .npz file ({err})") from None
    if not isinstance(z, np.lib.npyio.NpzFile):
        raise GammaError(f"{path}: a single .npy array, not an .npz archive with a 'gamma' array")
    with z:
        names = set(z.files)
        perm = None
        if "inputs" in names:
            order = [str(s) for s in _npz_array(path, z, "inputs", ndim=1, kinds="U", max_len=size)]
            first = {}
            for i, s in enumerate(order):
                if s not in index:
                    raise GammaError(f"{path}: inputs[{i}] = {s!r} is not in the domain of the function")
                if s in first:
                    raise GammaError(f"{path}: inputs[{i}] = {s!r} repeats inputs[{first[s]}]")
                first[s] = i
            perm = np.array([index[s] for s in order], dtype=np.int64)
        m = size if perm is None else len(perm)
        if "gamma" in names:
            shape, _ = _npz_header(path, z, "gamma")
            if tuple(shape) != (m, m):
                raise GammaError(f"{path}: gamma has shape {tuple(shape)}, expected {(m, m)}")
            g = np.array(_npz_array(path, z, "gamma", ndim=2, kinds="fiu"), dtype=float)
            if not np.isfinite(g).all():
                raise GammaError(f"{path}: gamma has NaN or infinite entries")
            if perm is None:
                return g
            r, c = np.nonzero(g)
            return _assemble(perm[r], perm[c], g[r, c], size, mirror=False)
        if {"gamma_row", "gamma_col", "gamma_val"} <= names:
            r, c = (_npz_array(path, z, k, ndim=1, kinds="iu", max_len=m * m) for k in ("gamma_row", "gamma_col"))
            v = _npz_array(path, z, "gamma_val", ndim=1, kinds="fiu", max_len=m * m)
            if not (len(r) == len(c) == len(v)):
                raise GammaError(f"{path}: gamma_row, gamma_col, gamma_val have different lengths")
            r, c = r.astype(np.int64), c.astype(np.int64)
            bad = np.flatnonzero((r < 0) | (r >= m) | (c < 0) | (c >= m))
            if bad.size:
                raise GammaError(f"{path}: entry {int(bad[0])} has index ({int(r[bad[0]])}, {int(c[bad[0]])}) "
                                 f"outside the {m} inputs")
            v = v.astype(float)
            if not np.isfinite(v).all():
                raise GammaError(f"{path}: gamma_val has NaN or infinite entries")
            if perm is not None:
                r, c = perm[r], perm[c]
            return _assemble(r, c, v, size)
    raise GammaError(f"{path}: no 'gamma' array and no gamma_row/gamma_col/gamma_val triplets")


def _assemble(r, c, v, size, mirror=True):
    """Matrix from triplets; an off-diagonal entry whose transpose is absent is mirrored."""
    if mirror and len(r):
        present = set(zip(r.tolist(), c.tolist()))
        extra = [(b, a, w) for a, b, w in zip(r.tolist(), c.tolist(), v.tolist()) if a != b and (b, a) not in present]
        if extra:
            er, ec, ev = zip(*extra)
            r = np.concatenate([r, np.array(er, dtype=np.int64)])
            c = np.concatenate([c, np.array(ec, dtype=np.int64)])
            v = np.concatenate([v, np.array(ev, dtype=float)])
    m = sp.coo_matrix((v, (r, c)), shape=(size, size)).tocsr()
    return m.toarray() if size <= DENSE_LIMIT else m


# ---------------------------------------------------------------------------------------------
# Evaluating Γ
# ---------------------------------------------------------------------------------------------
def _arrays(f):
    order = {s: i for i, s in enumerate(f.alphabet)}
    sym = np.array([[order[ch] for ch in x] for x in f.inputs], dtype=np.int16).reshape(len(f.inputs), f.n)
    labels = {lab: i for i, lab in enumerate(f.labels)}
    out = np.array([labels[y] for y in f.outputs], dtype=np.int64)
    return sym, out, np.asarray(f.costs, dtype=float)


def _prepare(f, gamma):
    """Symmetrised, zeroed Γ and the facts about what changed."""
    sym, out, costs = _arrays(f)
    size = len(f.inputs)
    if sp.issparse(gamma):
        g = gamma.tocsr().astype(float)
        if g.shape != (size, size):
            raise GammaError(f"Γ has shape {g.shape}, expected {(size, size)} for |D| = {size}")
        d = (g - g.T).tocoo()
        asym = float(np.max(np.abs(d.data), initial=0.0))
        c = g.tocoo()
        eq = out[c.row] == out[c.col]
        vals = c.data[eq & (c.data != 0)]
    else:
        g = np.asarray(gamma, dtype=float)
        if g.shape != (size, size):
            raise GammaError(f"Γ has shape {g.shape}, expected {(size, size)} for |D| = {size}")
        if not np.isfinite(g).all():
            raise GammaError("Γ has NaN or infinite entries")
        asym = float(np.max(np.abs(g - g.T), initial=0.0))
        eqm = out[:, None] == out[None, :]
        vals = g[eqm & (g != 0)]
    _check_magnitude(f, g)
    g0 = q.zero_equal_outputs(g, out)
    if sp.issparse(g0):
        g0.eliminate_zeros()
    facts = dict(asymmetry=asym, was_symmetric=asym == 0.0, zeroed_entries=int(vals.size),
                 zeroed_max=float(np.max(np.abs(vals), initial=0.0)), zeroed_mass=float(np.sqrt(np.sum(vals**2))))
    return g0, sym, out, costs, facts


def _check_magnitude(f, g) -> None:
    """Refuse entries so large that norms or sums of squares would overflow (naming the largest one)."""
    size = max(len(f.inputs), 1)
    limit = MAGNITUDE_LIMIT / size
    if sp.issparse(g):
        c = g.tocoo()
        if not c.nnz:
            return
        k = int(np.argmax(np.abs(c.data)))
        i, j, val = int(c.row[k]), int(c.col[k]), float(c.data[k])
    else:
        if not g.size:
            return
        i, j = (int(t) for t in np.unravel_index(int(np.argmax(np.abs(g))), g.shape))
        val = float(g[i, j])
    if abs(val) > limit:
        x, y = f.inputs[i], f.inputs[j]
        raise GammaError(f"Γ({x!r}, {y!r}) = {val:.3g}: with |D| = {size} entries above {limit:.3g} in modulus make "
                         f"the norms overflow; divide Γ by a constant (the bound does not change)")


def evaluate_gamma(f, gamma, *, binding_rtol: float = 1e-9, dense_limit: int = DENSE_LIMIT) -> GammaReport:
    """Report the adversary bound a user-supplied Γ proves for ``f``.

    Parameters
    ----------
    f : PartialFunction
    gamma : ndarray or scipy sparse matrix, shape (|D|, |D|)
        In ``f``'s canonical input order; symmetrised (averaged with its transpose) and zeroed
        on equal-output pairs before anything is computed.
    binding_rtol : float
        A position binds when its ``||Γ∘Δ_j||/c_j`` is within this (relative) of the maximum.
    dense_limit : int
        Largest ``|D|`` handled with dense eigensolvers.
    """
    g0, sym, out, costs, facts = _prepare(f, gamma)
    size, n = len(f.inputs), f.n
    if size <= dense_limit:
        dense = g0.toarray() if sp.issparse(g0) else g0
        norm = q.spectral_norm(dense)
        norms = q.constraint_norms(dense, sym)
        upper = norms
        method = "dense"
        bound_methods = ("dense LAPACK",)
    else:
        gs = g0 if sp.issparse(g0) else sp.csr_matrix(g0)
        norm, norms, upper, bound_methods = _sparse_norms(gs, sym)
        method = "sparse"
    vals = [norm, *np.asarray(norms, dtype=float), *np.asarray(upper, dtype=float)]
    if not all(math.isfinite(float(v)) for v in vals):  # pragma: no cover - excluded by _check_magnitude
        raise GammaError("the norms of Γ are not finite numbers; divide Γ by a constant (the bound does not change)")
    ratios = norms / costs
    worst = float(ratios.max(initial=0.0))
    ratio = norm / worst if worst > 0 else 0.0
    if method == "dense":
        certified = ratio
    else:
        wu = float((upper / costs).max(initial=0.0))
        certified = norm / wu if wu > 0 else 0.0
    binding = tuple(int(j) for j in np.flatnonzero(ratios >= worst * (1 - binding_rtol))) if worst > 0 else ()
    names = tuple(f.position_names[j] for j in binding)
    if method == "dense":
        msg = (f"ratio {ratio:.10g} = ||Γ|| / max_j ||Γ∘Δ_j||/c_j: a lower bound on ADV±_c (dense eigensolvers, "
               f"floating point)")
    else:
        msg = (f"certified lower bound {certified:.10g} on ADV±_c (Rayleigh quotient / Schur-test bounds); "
               f"estimated ratio {ratio:.10g} (Lanczos estimates)")
    return GammaReport(message=msg, ratio=float(ratio), certified_ratio=float(certified), norm=float(norm),
                       constraint_norms=tuple(float(v) for v in norms),
                       constraint_upper=tuple(float(v) for v in upper), costs=tuple(float(c) for c in costs),
                       binding=binding, binding_names=names, size=size, n=n, method=method,
                       bound_methods=bound_methods, **facts)


def _sparse_norms(g, sym):
    """(lower bound on ||Γ||, eigsh estimates of ||Γ∘Δ_j||, certified upper bounds, methods used).

    Uses :mod:`advbound.evidence.iterative` when it is installed (deterministic Rayleigh lower bound with
    a rounding allowance; the smaller of the component-wise dense norm and the Schur test on
    ``|M|``), else the scipy fallback described in the module docstring.
    """
    from scipy.sparse.linalg import eigsh

    try:
        from advbound.evidence import iterative as it
    except ImportError:  # pragma: no cover - the module ships with advbound
        it = None
    size = g.shape[0]
    v0 = np.ones(size) / math.sqrt(size)
    npos = sym.shape[1]
    if g.nnz == 0:
        return 0.0, np.zeros(npos), np.zeros(npos), ("zero",) * (npos + 1)
    if it is not None:
        lo = it.norm_lower(g)
        norm, methods = lo.value, [f"norm: {lo.method}"]
    else:
        _, x = eigsh(g, k=1, which="LM", v0=v0)
        x = x[:, 0]
        norm = abs(float(x @ (g @ x))) / float(x @ x) * (1 - _ROUND)
        methods = ["norm: rayleigh (scipy)"]
    est, upper = [], []
    for j in range(npos):
        m = q.masked(g, sym, j)
        if m.nnz == 0:
            est.append(0.0); upper.append(0.0); methods.append("zero")
            continue
        w = eigsh(m, k=1, which="LM", v0=v0, return_eigenvectors=False)
        est.append(float(abs(w[0])))
        a = abs(m)
        if it is not None:
            cands = [it.norm_upper_nonnegative(a)]
            try:
                cands.append(it.norm_upper_blocks(m))
            except ValueError:
                pass
            b = min(cands, key=lambda c: c.value)
            upper.append(b.value); methods.append(b.method)
        else:
            _, p = eigsh(a, k=1, which="LA", v0=v0)
            p = np.abs(p[:, 0])
            p = np.maximum(p, 1e-12 * p.max())
            upper.append(float(np.max((a @ p) / p)) * (1 + _ROUND)); methods.append("schur-test (scipy)")
    return norm, np.array(est), np.array(upper), tuple(methods)


# ---------------------------------------------------------------------------------------------
# Improving Γ
# ---------------------------------------------------------------------------------------------
def improve_gamma(f, gamma, *, iterations: int = 100, step: float = 0.05, sharpness: float = 200.0,
                  dense_limit: int = 1500) -> ImproveResult:
    """Projected gradient ascent of ``log ratio`` on the support of Γ (dense inputs only).

    The objective is ``log|λ| - softmax_j log(||Γ∘Δ_j||/c_j)`` (log-sum-exp with
    ``sharpness``), ``λ`` the eigenvalue of largest modulus; its gradient uses the top
    eigenvectors (``d|λ| = σ uuᵀ``, ``d||M_j|| = σ_j (w_jw_jᵀ)∘Δ_j``), restricted to the
    non-zero pattern of the (symmetrised, zeroed) input and symmetrised.  A step of
    relative size ``step`` (in Frobenius norm) is accepted when the exact ratio grows,
    otherwise the step is halved.  The best matrix seen is returned, so the improved
    ratio is never below the original.
    """
    g0, sym, out, costs, _ = _prepare(f, gamma)
    size = len(f.inputs)
    if size > dense_limit:
        raise GammaError(f"--improve handles at most {dense_limit} inputs, got {size}")
    g = g0.toarray() if sp.issparse(g0) else np.array(g0)
    mask = g != 0
    masks = [sym[:, j][:, None] != sym[:, j][None, :] for j in range(sym.shape[1])]

    def ratio_of(m):
        nj = np.array([q.spectral_norm(np.where(mk, m, 0.0)) for mk in masks])
        w = float((nj / costs).max(initial=0.0))
        return (q.spectral_norm(m) / w if w > 0 else 0.0), nj

    def top(m):
        w, u = np.linalg.eigh(m)
        k = -1 if abs(w[-1]) >= abs(w[0]) else 0
        return w[k], u[:, k]

    best, _ = ratio_of(g)
    original = best
    accepted = 0
    it = 0
    for it in range(1, iterations + 1):
        if step < 1e-8 or not mask.any():
            break
        lam, u = top(g)
        grad = np.sign(lam) * np.outer(u, u) / abs(lam)
        parts = []
        for j, mk in enumerate(masks):
            mj = np.where(mk, g, 0.0)
            if not mj.any():
                parts.append((-np.inf, None))
                continue
            lj, wj = top(mj)
            parts.append((math.log(abs(lj) / costs[j]), (lj, wj, mk)))
        logs = np.array([p[0] for p in parts])
        wts = np.exp(sharpness * (logs - logs.max()))
        wts /= wts.sum()
        for wt, (_, data) in zip(wts, parts):
            if data is None or wt < 1e-12:
                continue
            lj, wj, mk = data
            grad -= wt * np.sign(lj) * np.where(mk, np.outer(wj, wj), 0.0) / abs(lj)
        grad = np.where(mask, (grad + grad.T) / 2, 0.0)
        gn = np.linalg.norm(grad)
        if gn == 0:
            break
        cand = g + step * np.linalg.norm(g) / gn * grad
        r, _ = ratio_of(cand)
        if r > best:
            g, best = cand, r
            accepted += 1
            step *= 1.2
        else:
            step /= 2
    rep = evaluate_gamma(f, g)
    log.info("improve_gamma: %.10g -> %.10g in %d iterations", original, rep.ratio, it)
    return ImproveResult(original_ratio=float(original), improved_ratio=float(rep.ratio), gamma=g,
                         iterations=it, accepted_steps=accepted, report=rep)

