"""Certificates: the adversary matrix and dual witness behind a reported bound, and their file format.

A :class:`Certificate` holds everything needed to re-check a bound without the
solver: the inputs (as strings), their outputs, the query costs, the adversary
matrix Γ and, where available, the dual witness.  :func:`save_certificate` writes
a NumPy ``.npz`` archive with no pickled objects (it loads with
``allow_pickle=False``); :func:`load_certificate` reads it back.

Arrays in the file (all plain NumPy dtypes):

``format``
    0-d string, ``"advbound-certificate/1"``.
``alphabet``
    1-d string array, one symbol per entry, in the order defining the canonical input order.
``inputs``
    1-d string array of length ``|D|``: the domain, in canonical order.
``outputs``
    1-d string array of length ``|D|``: the output label of each input.
``costs``
    1-d float64 array of length ``N``: the query cost of each position.
``gamma``
    float64 ``(|D|, |D|)``, the symmetric adversary matrix Γ; or, when stored sparse,
    ``gamma_row``, ``gamma_col`` (int64) and ``gamma_val`` (float64), the COO triplets of *all*
    non-zero entries (both ``(x, y)`` and ``(y, x)``).
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
"""

from __future__ import annotations

import dataclasses
import json
import zipfile

import numpy as np
import scipy.sparse as sp

from .errors import CertificateError

__all__ = ["Certificate", "save_certificate", "load_certificate", "FORMAT"]

FORMAT = "advbound-certificate/1"


@dataclasses.dataclass(frozen=True, eq=False)
class Certificate:
    """Adversary matrix, optional dual witness and the domain they are indexed by.

    ``gamma`` is a dense ndarray or a scipy sparse matrix; ``metadata`` is a
    JSON-serialisable dict.
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
        """int8 ``(|D|, N)`` alphabet indices of the inputs."""
        order = {s: i for i, s in enumerate(self.alphabet)}
        n = len(self.costs)
        return np.array([[order[c] for c in x] for x in self.inputs], dtype=np.int8).reshape(len(self.inputs), n)

    @property
    def output_index(self) -> np.ndarray:
        """Index of each input's output into the sorted labels."""
        labels = sorted(set(self.outputs))
        li = {lab: i for i, lab in enumerate(labels)}
        return np.array([li[y] for y in self.outputs], dtype=np.int64)


def save_certificate(cert: Certificate, path) -> None:
    """Write ``cert`` to ``path`` as an uncompressed-pickle-free ``.npz`` archive."""
    arrays = {
        "format": np.array(FORMAT),
        "alphabet": np.array(list(cert.alphabet), dtype=str),
        "inputs": np.array(list(cert.inputs), dtype=str),
        "outputs": np.array(list(cert.outputs), dtype=str),
        "costs": np.asarray(cert.costs, dtype=np.float64),
        "metadata": np.array(json.dumps(cert.metadata, sort_keys=True)),
    }
    if sp.issparse(cert.gamma):
        g = cert.gamma.tocoo()
        arrays.update(gamma_row=g.row.astype(np.int64), gamma_col=g.col.astype(np.int64),
                      gamma_val=g.data.astype(np.float64))
    else:
        arrays["gamma"] = np.asarray(cert.gamma, dtype=np.float64)
    if cert.dual_t is not None:
        arrays["dual_t"] = np.array(float(cert.dual_t))
    if cert.dual_plus is not None:
        arrays["dual_plus"] = np.asarray(cert.dual_plus, dtype=np.float64)
    if cert.dual_minus is not None:
        arrays["dual_minus"] = np.asarray(cert.dual_minus, dtype=np.float64)
    with open(path, "wb") as fh:
        np.savez_compressed(fh, **arrays)


def load_certificate(path) -> Certificate:
    """Read a certificate written by :func:`save_certificate`; raises :class:`CertificateError` if malformed."""
    try:
        z = np.load(path, allow_pickle=False)
    except (OSError, ValueError, zipfile.BadZipFile) as err:
        raise CertificateError(f"{path}: not a readable .npz certificate ({err})") from None
    with z:
        names = set(z.files)
        need = {"format", "alphabet", "inputs", "outputs", "costs", "metadata"}
        missing = sorted(need - names)
        if missing:
            raise CertificateError(f"{path}: missing array(s) {', '.join(missing)}")
        if str(z["format"]) != FORMAT:
            raise CertificateError(f"{path}: format {str(z['format'])!r}, expected {FORMAT!r}")
        inputs = tuple(str(s) for s in z["inputs"])
        size = len(inputs)
        if "gamma" in names:
            gamma = np.array(z["gamma"], dtype=np.float64)
            if gamma.shape != (size, size):
                raise CertificateError(f"{path}: gamma has shape {gamma.shape}, expected {(size, size)}")
        elif {"gamma_row", "gamma_col", "gamma_val"} <= names:
            r, c, v = z["gamma_row"], z["gamma_col"], z["gamma_val"]
            if not (len(r) == len(c) == len(v)) or (len(r) and (max(r.max(), c.max()) >= size or min(r.min(), c.min()) < 0)):
                raise CertificateError(f"{path}: gamma COO arrays are inconsistent with {size} inputs")
            gamma = sp.coo_matrix((v, (r, c)), shape=(size, size)).tocsr()
        else:
            raise CertificateError(f"{path}: no adversary matrix (gamma or gamma_row/gamma_col/gamma_val)")
        try:
            meta = json.loads(str(z["metadata"]))
        except json.JSONDecodeError as err:
            raise CertificateError(f"{path}: metadata is not JSON ({err})") from None
        costs = np.array(z["costs"], dtype=np.float64)
        outputs = tuple(str(s) for s in z["outputs"])
        if len(outputs) != size:
            raise CertificateError(f"{path}: {len(outputs)} outputs for {size} inputs")
        if any(len(x) != len(costs) for x in inputs):
            raise CertificateError(f"{path}: an input's length differs from the {len(costs)} costs")
        return Certificate(
            alphabet=tuple(str(s) for s in z["alphabet"]),
            inputs=inputs,
            outputs=outputs,
            costs=costs,
            gamma=gamma,
            dual_t=float(z["dual_t"]) if "dual_t" in names else None,
            dual_plus=np.array(z["dual_plus"]) if "dual_plus" in names else None,
            dual_minus=np.array(z["dual_minus"]) if "dual_minus" in names else None,
            metadata=meta,
        )
