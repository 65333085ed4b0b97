"""Reading a researcher's own adversary matrix Γ: from a Python callable or from an entries file.

This module owns turning a user-supplied Γ into a matrix over a function's canonical input
order: importing ``"path/to/mod.py:func"`` or ``"package.module:func"``
(:func:`load_callable`), calling it on every ordered pair of inputs
(:func:`gamma_from_callable`, optionally with free constants ``func(x, y, **params)`` checked by
:func:`check_params`), and reading ``.npz`` arrays or ``x y value`` text tables
(:func:`gamma_from_entries`), with one-line :class:`GammaError` messages for anything
unusable.  What the matrix proves is :mod:`advbound.evidence.usergamma`'s job.

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1)])
>>> gamma_from_callable(f, lambda x, y: float(x != y)).tolist()
[[0.0, 1.0, 1.0], [1.0, 0.0, 1.0], [1.0, 1.0, 0.0]]
"""

from __future__ import annotations

import importlib
import importlib.util
import inspect
import keyword
import math
import numbers
import os
import zipfile

import numpy as np
import scipy.sparse as sp

from advbound.errors import AdvboundError

__all__ = ["GammaError", "load_callable", "check_params", "call_gamma", "gamma_from_callable", "gamma_from_entries",
           "position_profiles", "DENSE_LIMIT"]

#: Above this many inputs Γ is kept sparse and norms come from iterative solvers.
DENSE_LIMIT = 2500
#: Longest line of a text entries file (characters).
_MAX_LINE = 1 << 20


class GammaError(AdvboundError, ValueError):
    """A user-supplied adversary matrix (callable or entries file) is unusable."""


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


def _accepted_names(func):
    """The keyword parameters ``func`` takes after ``x, y``: (names, takes ``**kwargs``), or None if unknown."""
    try:
        sig = inspect.signature(func)
    except (TypeError, ValueError):  # builtins and some C callables have no signature
        return None
    names, var_kw, positional = [], False, 0
    for prm in sig.parameters.values():
        if prm.kind is prm.VAR_KEYWORD:
            var_kw = True
        elif prm.kind is prm.POSITIONAL_ONLY:
            positional += 1
        elif prm.kind is prm.POSITIONAL_OR_KEYWORD:
            positional += 1
            if positional > 2:
                names.append(prm.name)
        elif prm.kind is prm.KEYWORD_ONLY:
            names.append(prm.name)
    return names, var_kw


def check_params(func, params, *, name: str | None = None) -> dict:
    """Check the free constants ``params`` for ``func(x, y, **params)``; return them as ``{name: float}``.

    Raises
    ------
    GammaError
        One line for a name that is not a Python identifier, a value that is not a finite real
        number, or a name ``func`` does not accept (naming the parameter and the callable).
    """
    label = name or getattr(func, "__qualname__", None) or _short(func)
    out = {}
    for key, val in dict(params or {}).items():
        if not isinstance(key, str) or not key.isidentifier() or keyword.iskeyword(key):
            raise GammaError(f"parameter name {_short(key)} is not a Python identifier")
        if isinstance(val, bool) or not isinstance(val, numbers.Real):
            raise GammaError(f"parameter {key} = {_short(val)} ({type(val).__name__}) is not a real number")
        try:
            val = float(val)
        except (OverflowError, ValueError, TypeError, ArithmeticError):
            raise GammaError(f"parameter {key} = {_short(val)} is not representable as a float") from None
        if not math.isfinite(val):
            raise GammaError(f"parameter {key} = {val!r} is not a finite number")
        out[key] = val
    accepted = _accepted_names(func) if out else None
    if accepted is not None and not accepted[1]:
        names = accepted[0]
        for key in out:
            if key not in names:
                has = f"its parameters after x, y: {', '.join(names)}" if names else "it takes no parameters " \
                                                                                      "after x, y"
                raise GammaError(f"gamma callable {label} does not accept a parameter {key!r} ({has})")
    return out


def gamma_from_callable(f, func, *, name: str | None = None, allow_large: bool = False,
                        params: dict | None = None, vectorised: bool = False) -> np.ndarray:
    """Dense ``Γ[x, y] = func(x, y, **params)`` over all ordered pairs of inputs (``|D|²`` calls), unmodified.

    With ``vectorised=True`` ``func`` is called once per input ``x`` instead, as
    ``func(X, Y, **params)`` with two ``(|D|, N)`` arrays of one-character strings (row ``i`` of ``X``
    is ``x``, row ``i`` of ``Y`` the ``i``-th input), and returns the ``|D|`` values
    ``Γ[x, y_i]``: ``|D|`` calls, each free to use numpy on whole arrays
    (:func:`position_profiles` turns such arrays into positions and values of position-search rows).

    Parameters
    ----------
    f : PartialFunction
    func : callable
    name : str, optional
        How messages name the callable (default its qualified name).
    params : dict, optional
        Free constants passed as keyword arguments (checked by :func:`check_params` first).
    allow_large : bool
        The dense matrix and the ``|D|²`` calls are sized first
        (:func:`advbound.functions.sizing.gamma_estimate`); more memory than this machine has
        available is refused unless this is true.

    Raises
    ------
    GammaError
        When ``func`` raises, calls ``sys.exit``, or returns something that is not a finite
        real number (the message names the pair and the value).  Also for ``params`` that
        :func:`check_params` refuses.
    advbound.functions.sizing.TooLargeError
        When the dense matrix would not fit in memory.
    """
    from advbound.functions.sizing import check_memory, gamma_estimate

    inputs = f.inputs
    size = len(inputs)
    check_memory(gamma_estimate(size, f.n), allow_large=allow_large)
    label = name or getattr(func, "__qualname__", None) or _short(func)
    kw = check_params(func, params, name=name)
    g = np.empty((size, size))
    if vectorised:
        Y = np.array([list(y) for y in inputs], dtype="<U1").reshape(size, f.n)
        for i, x in enumerate(inputs):
            g[i] = _call_rows(func, np.broadcast_to(Y[i], Y.shape), Y, kw, label, x)
        return g
    for i, x in enumerate(inputs):
        for k, y in enumerate(inputs):
            g[i, k] = call_gamma(func, x, y, kw, label)
    return g


def _call_rows(func, X, Y, kw: dict, label: str, x: str) -> np.ndarray:
    """One vectorised call: ``func(X, Y, **kw)`` as ``len(Y)`` finite floats, else a one-line GammaError."""
    try:
        val = func(X, Y, **kw)
    except SystemExit as err:
        raise GammaError(f"gamma callable {label} called sys.exit({_short(err.code)}) at input {x!r}") from None
    except Exception as err:
        raise GammaError(f"vectorised gamma at input {x!r} raised {type(err).__name__}: {err}") from None
    try:
        out = np.asarray(val, dtype=float)
    except (TypeError, ValueError, OverflowError) as err:
        raise GammaError(f"vectorised gamma at input {x!r} returned {_short(val)}, not an array of numbers "
                         f"({err})") from None
    if out.shape != (len(Y),):
        raise GammaError(f"vectorised gamma at input {x!r} returned shape {out.shape}, expected ({len(Y)},) "
                         f"(one value per row of Y)")
    bad = np.flatnonzero(~np.isfinite(out))
    if bad.size:
        y = "".join(Y[bad[0]])
        raise GammaError(f"vectorised gamma at pair ({x!r}, {y!r}) returned {out[bad[0]]!r}, not a finite number")
    return out


def position_profiles(X: np.ndarray, rows: int) -> tuple[np.ndarray, np.ndarray]:
    """``(positions, values)`` of arrays of inputs of ``rows`` position-search rows (for vectorised Γ).

    ``X`` is an ``(m, N)`` array of one-character strings (``N = rows · L``); ``positions[j, r]`` is the
    1-based position of the non-star symbol of row ``r`` of input ``j`` and ``values[j, r]`` that symbol
    (0 or 1).  Rows without exactly one non-star symbol give position 0.

    >>> X = np.array([list("0**" + "**1")])
    >>> position_profiles(X, 2)
    (array([[1, 3]]), array([[0, 1]]))
    """
    m, N = X.shape
    L = N // rows
    R = X.reshape(m, rows, L)
    nonstar = R != "*"
    pos = np.where(nonstar.sum(axis=2) == 1, nonstar.argmax(axis=2) + 1, 0)
    val = np.take_along_axis(R, np.maximum(pos - 1, 0)[:, :, None], axis=2)[:, :, 0] == "1"
    return pos, val.astype(int)


def call_gamma(func, x: str, y: str, kw: dict, label: str) -> float:
    """``func(x, y, **kw)`` as a finite float, or a one-line :class:`GammaError` naming the pair."""
    try:
        val = func(x, y, **kw)
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
    return val


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
