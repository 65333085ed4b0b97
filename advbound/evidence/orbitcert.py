"""Orbit certificates: an S_n-invariant adversary matrix and dual given by orbits, and their file format.

A function of ``n`` interchangeable rows (:mod:`advbound.functions.rowfamily`) is given by its
*letters* (the row inputs), its *contents* (the S_n-orbits of inputs: sorted tuples of ``n`` letter
indices; every arrangement of a content is an input) and one output per content.  An invariant
Γ is one number per *pair orbit* (the sorted multiset of letter pairs ``{(x_i, z_i)}``), so an
orbit certificate needs no |D|² entries.  It holds:

================  =========================================================================
``letters``       the row inputs, distinct strings of one length ``L`` over ``alphabet``
``contents``      ``(R, n)`` letter indices, each row sorted, rows distinct
``outputs``       one label per content (at least two distinct labels)
``costs``         ``L`` finite costs > 0, the same in every row
``pair_keys``     ``(K, n, 2)`` letter pairs per pair orbit, sorted, distinct; the first inputs
                  form a content, the second inputs a content with another output, and the
                  first has the smaller label
``gamma``         ``K`` finite values (≥ 0 for the positive bound)
``rho``           ``R`` finite values ≥ 0, not all 0: the invariant test vector ``δ = √ρ``
``dual_sizes``    optional: the size of each dual matrix, one per cone of the reduced program
``dual_values``   optional: the dual matrices, row-major, one after the other
``query_weights`` optional, positive bound only: ``(R, A, L)`` finite weights ≥ 0, one per (content,
                  letter, position), 0 for letters the content does not hold, a positive total per
                  content: the minimax witness of an upper bound (:mod:`advbound.evidence.minimaxcheck`)
``metadata``      a JSON object, as for dense certificates (``bound``, claims, solver, ...)
================  =========================================================================

:func:`check_orbit_acceptance` is the acceptance rule; :func:`load_orbit_certificate` applies it to
every file it reads, after the same archive checks as dense certificates (no pickles, no unknown
arrays, sizes read from the headers first).  :func:`load_any_certificate` reads either kind.
"""

from __future__ import annotations

import dataclasses
import json
import os

import numpy as np

from advbound.errors import CertificateError
from advbound.evidence.certificate import (FORMAT, _REQUIRED, _OPTIONAL, _check_alphabet,
                                           _check_costs, _check_metadata, _decode, _read_archive, _show,
                                           check_acceptance)

__all__ = ["ORBIT_FORMAT", "OrbitCertificate", "certificate_from_basis", "check_orbit_acceptance", "save_orbit_certificate",
           "load_orbit_certificate", "load_any_certificate", "save_any_certificate"]

ORBIT_FORMAT = "advbound-orbit-certificate/1"
_ORBIT_REQUIRED = ("format", "alphabet", "letters", "contents", "outputs", "costs", "pair_keys", "gamma", "rho",
                   "metadata")
_ORBIT_OPTIONAL = ("dual_sizes", "dual_values", "query_weights")


@dataclasses.dataclass(frozen=True, eq=False)
class OrbitCertificate:
    """An invariant adversary matrix (and optional reduced dual) of a row family, by orbits.

    Constructing one checks nothing; :func:`check_orbit_acceptance` decides whether it is a
    certificate at all.
    """

    alphabet: tuple[str, ...]
    letters: tuple[str, ...]
    contents: np.ndarray
    outputs: tuple[str, ...]
    costs: np.ndarray
    pair_keys: np.ndarray
    gamma: np.ndarray
    rho: np.ndarray
    duals: tuple | None = None
    metadata: dict = dataclasses.field(default_factory=dict)
    query_weights: np.ndarray | None = None

    @property
    def bound(self) -> str:
        return self.metadata.get("bound", "general") if isinstance(self.metadata, dict) else "general"

    @property
    def size(self) -> int:
        """``|D|``: the number of arrangements of every content."""
        from advbound.functions.tableaux import multinomial
        return sum(multinomial(tuple(c)) for c in np.asarray(self.contents).tolist())

    def function_view(self):
        """The function as ``alphabet``, ``inputs``, ``outputs`` and ``costs`` (|D| strings; no Γ)."""
        import types

        pairs = list(self.family().inputs())
        n = np.asarray(self.contents).shape[1]
        return types.SimpleNamespace(alphabet=tuple(self.alphabet), inputs=tuple(x for x, _ in pairs),
                                     outputs=tuple(y for _, y in pairs), costs=np.tile(self.costs, n))

    def family(self):
        """The :class:`~advbound.functions.rowfamily.RowFamily` the certificate describes."""
        from advbound.functions.rowfamily import RowFamily
        return RowFamily(tuple(self.letters), tuple(tuple(int(a) for a in c) for c in self.contents),
                         tuple(self.outputs), tuple(float(c) for c in self.costs),
                         description=str(self.metadata.get("description", "")))


# ---------------------------------------------------------------------------------------------
# The acceptance rule
# ---------------------------------------------------------------------------------------------

def certificate_from_basis(basis, gamma, rho, duals, metadata: dict) -> OrbitCertificate:
    """The :class:`OrbitCertificate` of Γ per pair orbit of ``basis`` (a
    :class:`~advbound.functions.rowbasis.RowBasis`), the test vector ``rho`` and the dual matrices
    ``duals`` (``None`` for none)."""
    fam = basis.family
    alphabet = tuple(sorted(set("".join(fam.letters))))
    keys = np.array(basis.pair_keys, dtype=np.int64).reshape(basis.n_weights, fam.n, 2)
    return OrbitCertificate(alphabet=alphabet, letters=tuple(fam.letters),
                            contents=np.array(fam.contents, dtype=np.int64), outputs=tuple(fam.outputs),
                            costs=np.asarray(fam.costs, dtype=float), pair_keys=keys,
                            gamma=np.asarray(gamma, dtype=float), rho=np.asarray(rho, dtype=float),
                            duals=None if duals is None else tuple(np.asarray(z, dtype=float) for z in duals),
                            metadata=dict(metadata))

def check_orbit_acceptance(cert: OrbitCertificate, where: str = "orbit certificate") -> None:
    """Raise :class:`CertificateError` unless ``cert`` satisfies the rule in the module docstring.

    Messages name the first defect, with 1-based indices (``content 3``, ``pair orbit 7``).
    """
    def fail(msg):
        return CertificateError(f"{where}: {msg}")

    _check_metadata(cert.metadata, fail)
    alphabet = _check_alphabet(cert.alphabet, fail)
    costs = _check_costs(cert.costs, fail)
    letters = _check_letters(cert.letters, alphabet, costs.size, fail)
    contents = _check_contents(cert.contents, len(letters), fail)
    outputs = _check_orbit_outputs(cert.outputs, len(contents), fail)
    _check_pair_keys(cert.pair_keys, contents, outputs, len(letters), fail)
    k = np.asarray(cert.pair_keys).shape[0]
    gamma = _finite_vector(cert.gamma, k, "gamma", "pair orbit", fail)
    if cert.bound == "positive" and np.any(gamma < 0):
        i = int(np.flatnonzero(gamma < 0)[0])
        raise fail(f"gamma of pair orbit {i + 1} is {gamma[i]!r}, negative in a positive-bound certificate")
    rho = _finite_vector(cert.rho, len(contents), "rho", "content", fail)
    if np.any(rho < 0) or not np.any(rho > 0):
        raise fail("rho must be >= 0 with at least one positive entry (it is the test vector of ||Gamma||)")
    if cert.duals is not None:
        for i, z in enumerate(cert.duals, 1):
            z = np.asarray(z)
            if z.ndim != 2 or z.shape[0] != z.shape[1] or z.dtype.kind != "f" or not np.all(np.isfinite(z)):
                raise fail(f"dual matrix {i} has shape {z.shape} and dtype {z.dtype} (finite square floats needed)")
    if cert.query_weights is not None:
        from advbound.evidence.minimaxcheck import check_weights

        if cert.duals is not None:
            raise fail("the certificate holds both dual matrices and query_weights (an upper-bound witness is one "
                       "or the other)")
        if cert.bound != "positive":
            raise fail("query_weights bound only the positive adversary bound, but the certificate's bound is "
                       f"{_show(cert.bound)}")
        check_weights(cert.family(), cert.query_weights, fail)


def _check_letters(letters, alphabet, length, fail) -> tuple:
    if isinstance(letters, str) or not isinstance(letters, (tuple, list)) or not letters:
        raise fail("letters must be a non-empty sequence of row inputs")
    allowed, seen = set(alphabet), {}
    for i, s in enumerate(letters, 1):
        if not isinstance(s, str) or len(s) != length:
            raise fail(f"letter {i} is {_show(s)} (every letter is a row input of length {length}, one per cost)")
        bad = [c for c in s if c not in allowed]
        if bad:
            raise fail(f"letter {i} is {_show(s)}, with {_show(bad[0])} outside the alphabet")
        if s in seen:
            raise fail(f"letters {seen[s]} and {i} are both {_show(s)} (letters must be distinct)")
        seen[s] = i
    return tuple(letters)


def _check_contents(contents, n_letters, fail) -> np.ndarray:
    c = np.asarray(contents)
    if c.ndim != 2 or c.dtype.kind not in "iu" or c.shape[0] == 0 or c.shape[1] < 2:
        raise fail(f"contents must be a (R, n) integer array with R >= 1 and n >= 2 rows, got shape {c.shape} "
                   f"and dtype {c.dtype}")
    c = c.astype(np.int64)
    bad = np.argwhere((c < 0) | (c >= n_letters))
    if bad.size:
        i, j = bad[0]
        raise fail(f"content {i + 1} names letter {int(c[i, j])}, outside 0..{n_letters - 1}")
    unsorted = np.flatnonzero(np.any(np.diff(c, axis=1) < 0, axis=1))
    if unsorted.size:
        raise fail(f"content {int(unsorted[0]) + 1} is not sorted (a content is a multiset, stored sorted)")
    seen: dict = {}
    for i, row in enumerate(map(tuple, c.tolist()), 1):
        if row in seen:
            raise fail(f"contents {seen[row]} and {i} are the same multiset of letters (contents must be distinct)")
        seen[row] = i
    return c


def _check_orbit_outputs(outputs, r, fail) -> tuple:
    if isinstance(outputs, str) or not isinstance(outputs, (tuple, list)) or len(outputs) != r:
        raise fail(f"there must be one output per content ({r}), got {len(outputs) if hasattr(outputs, '__len__') else '?'}")
    if not all(isinstance(y, str) for y in outputs):
        raise fail("outputs must be strings")
    if len(set(outputs)) < 2:
        raise fail("every content has the same output: the function is constant and has no adversary bound")
    return tuple(outputs)


def _check_pair_keys(keys, contents, outputs, n_letters, fail) -> None:
    k = np.asarray(keys)
    n = contents.shape[1]
    if k.ndim != 3 or k.shape[1:] != (n, 2) or k.dtype.kind not in "iu":
        raise fail(f"pair_keys must be a (K, {n}, 2) integer array, got shape {k.shape} and dtype {k.dtype}")
    k = k.astype(np.int64)
    bad = np.argwhere((k < 0) | (k >= n_letters))
    if bad.size:
        raise fail(f"pair orbit {int(bad[0][0]) + 1} names letter {int(k[tuple(bad[0])])}, outside 0..{n_letters - 1}")
    index = {tuple(c): i for i, c in enumerate(contents.tolist())}
    rank = {y: i for i, y in enumerate(sorted(set(outputs)))}
    seen: dict = {}
    for i, key in enumerate(k.tolist(), 1):
        pairs = [tuple(p) for p in key]
        if pairs != sorted(pairs):
            raise fail(f"pair orbit {i} is not sorted (a pair orbit is a multiset of letter pairs, stored sorted)")
        cx, cz = index.get(tuple(sorted(a for a, _ in pairs))), index.get(tuple(sorted(b for _, b in pairs)))
        if cx is None or cz is None:
            side = "first" if cx is None else "second"
            raise fail(f"the {side} inputs of pair orbit {i} form no content of the certificate")
        if outputs[cx] == outputs[cz]:
            raise fail(f"pair orbit {i} joins two inputs with the same output {_show(outputs[cx])} "
                       f"(Γ is 0 there by definition)")
        if rank[outputs[cx]] > rank[outputs[cz]]:
            raise fail(f"pair orbit {i} starts from the larger output label (store each orbit once, from the "
                       f"smaller label)")
        t = tuple(pairs)
        if t in seen:
            raise fail(f"pair orbits {seen[t]} and {i} are the same orbit (each orbit is stored once)")
        seen[t] = i


def _finite_vector(v, size, name, what, fail) -> np.ndarray:
    a = np.asarray(v)
    if a.ndim != 1 or a.shape[0] != size or a.dtype.kind not in "fiu":
        raise fail(f"{name} must hold one number per {what} ({size}), got shape {a.shape} and dtype {a.dtype}")
    a = a.astype(np.float64)
    bad = np.flatnonzero(~np.isfinite(a))
    if bad.size:
        raise fail(f"{name} of {what} {int(bad[0]) + 1} is {a[bad[0]]!r} (entries must be finite)")
    return a


# ---------------------------------------------------------------------------------------------
# Files
# ---------------------------------------------------------------------------------------------
def save_orbit_certificate(cert: OrbitCertificate, path) -> None:
    """Write ``cert`` as a pickle-free compressed ``.npz``; refuse (write nothing) if it breaks the rule."""
    check_orbit_acceptance(cert, f"{path} (not written)")
    arrays = {
        "format": np.array(ORBIT_FORMAT),
        "alphabet": np.array(list(cert.alphabet), dtype=str),
        "letters": np.array(list(cert.letters), dtype=str),
        "contents": np.asarray(cert.contents, dtype=np.int64),
        "outputs": np.array(list(cert.outputs), dtype=str),
        "costs": np.asarray(cert.costs, dtype=np.float64),
        "pair_keys": np.asarray(cert.pair_keys, dtype=np.int64),
        "gamma": np.asarray(cert.gamma, dtype=np.float64),
        "rho": np.asarray(cert.rho, dtype=np.float64),
        "metadata": np.array(json.dumps(cert.metadata, sort_keys=True)),
    }
    if cert.duals is not None:
        arrays["dual_sizes"] = np.array([np.asarray(z).shape[0] for z in cert.duals], dtype=np.int64)
        arrays["dual_values"] = np.concatenate([np.asarray(z, dtype=np.float64).ravel() for z in cert.duals]) \
            if cert.duals else np.zeros(0)
    if cert.query_weights is not None:
        arrays["query_weights"] = np.asarray(cert.query_weights, dtype=np.float64)
    with open(path, "wb") as fh:
        np.savez_compressed(fh, **arrays)


def load_orbit_certificate(path) -> OrbitCertificate:
    """Read an orbit certificate file and apply :func:`check_orbit_acceptance`."""
    cert = load_any_certificate(path)
    if not isinstance(cert, OrbitCertificate):
        raise CertificateError(f"{os.fspath(path)}: a dense certificate ({FORMAT!r}), not an orbit certificate")
    return cert


def load_any_certificate(path):
    """Read a dense (:class:`Certificate`) or orbit (:class:`OrbitCertificate`) certificate, checked."""
    where = os.fspath(path) if isinstance(path, (str, os.PathLike)) else str(path)
    arrays = _read_archive(path, where, required=("format",),
                           optional=tuple(dict.fromkeys(_REQUIRED + _OPTIONAL + _ORBIT_REQUIRED + _ORBIT_OPTIONAL)))
    fmt = arrays["format"]
    fmt = str(fmt[()]) if fmt.ndim == 0 and fmt.dtype.kind == "U" else None
    if fmt == ORBIT_FORMAT:
        _only(arrays, _ORBIT_REQUIRED, _ORBIT_OPTIONAL, where)
        cert = _decode_orbit(arrays, where)
        check_orbit_acceptance(cert, where)
        return cert
    _only(arrays, _REQUIRED, _OPTIONAL, where)
    cert = _decode(arrays, where)
    check_acceptance(cert, where)
    return cert


def _only(arrays, required, optional, where) -> None:
    extra = [k for k in arrays if k not in required + optional]
    if extra:
        raise CertificateError(f"{where}: unknown array {_show(extra[0])} for this kind of certificate")
    missing = [k for k in required if k not in arrays]
    if missing:
        raise CertificateError(f"{where}: missing array(s) {', '.join(missing)}")


def _get(arrays, key, ndim, kinds, where, what):
    a = arrays[key]
    if a.ndim != ndim or a.dtype.kind not in kinds or (a.dtype.kind == "f" and a.dtype.itemsize > 8):
        raise CertificateError(f"{where}: array {key!r} has shape {a.shape} and dtype {a.dtype}, expected {what}")
    return a


def _decode_orbit(arrays: dict, where: str) -> OrbitCertificate:
    strings = {k: tuple(str(s) for s in _get(arrays, k, 1, "U", where, "a 1-d string array"))
               for k in ("alphabet", "letters", "outputs")}
    text = str(_get(arrays, "metadata", 0, "U", where, "a 0-d string")[()])
    try:
        meta = json.loads(text)
    except (json.JSONDecodeError, RecursionError) as err:
        raise CertificateError(f"{where}: metadata is not valid JSON ({str(err)[:120]})") from None
    duals = None
    if ("dual_sizes" in arrays) != ("dual_values" in arrays):
        raise CertificateError(f"{where}: dual_sizes and dual_values come together")
    if "dual_sizes" in arrays:
        sizes = _get(arrays, "dual_sizes", 1, "iu", where, "a 1-d integer array").astype(np.int64)
        values = _get(arrays, "dual_values", 1, "f", where, "a 1-d float array").astype(np.float64)
        if np.any(sizes < 1) or int(np.sum(sizes.astype(object) ** 2)) != values.size:
            raise CertificateError(f"{where}: dual_sizes (sum of squares {int(np.sum(sizes.astype(object) ** 2))}) "
                                   f"do not match the {values.size} dual_values")
        ends = np.concatenate([[0], np.cumsum(sizes * sizes)])
        duals = tuple(values[a:b].reshape(s, s) for a, b, s in zip(ends[:-1], ends[1:], sizes))
    return OrbitCertificate(alphabet=strings["alphabet"], letters=strings["letters"],
                            contents=_get(arrays, "contents", 2, "iu", where, "a 2-d integer array"),
                            outputs=strings["outputs"],
                            costs=_get(arrays, "costs", 1, "f", where, "a 1-d float array").astype(np.float64),
                            pair_keys=_get(arrays, "pair_keys", 3, "iu", where, "a 3-d integer array"),
                            gamma=_get(arrays, "gamma", 1, "f", where, "a 1-d float array").astype(np.float64),
                            rho=_get(arrays, "rho", 1, "f", where, "a 1-d float array").astype(np.float64),
                            duals=duals, metadata=meta,
                            query_weights=(_get(arrays, "query_weights", 3, "f", where, "a 3-d float array")
                                           .astype(np.float64) if "query_weights" in arrays else None))


def save_any_certificate(cert, path) -> None:
    """Write a dense or an orbit certificate, each in its own format."""
    from advbound.evidence.certificate import save_certificate

    if isinstance(cert, OrbitCertificate):
        save_orbit_certificate(cert, path)
    else:
        save_certificate(cert, path)
