"""Arrays over the domain of a partial function, in its canonical order.

:func:`domain` is the only place that turns a :class:`~advbound.functions.function.PartialFunction`
into arrays; every matrix of every later module is indexed through it.  Row ``i``
of every array is ``f.inputs[i]`` (inputs sorted by alphabet index, see
:mod:`advbound.functions.function`).

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 1)])
>>> d = domain(f)
>>> d.symbols.tolist()
[[0, 0], [0, 1], [1, 0], [1, 1]]
>>> d.delta(0).astype(int).tolist()
[[0, 0, 1, 1], [0, 0, 1, 1], [1, 1, 0, 0], [1, 1, 0, 0]]
"""

from __future__ import annotations

import dataclasses

import numpy as np

from advbound.functions.function import PartialFunction

__all__ = ["Domain", "domain", "symbol_dtype"]


@dataclasses.dataclass(frozen=True, eq=False)
class Domain:
    """Ordered arrays describing a function's domain.

    Attributes
    ----------
    function : PartialFunction
        The function these arrays describe.
    symbols : ndarray of int8, int16 or int32, shape (|D|, N)
        ``symbols[i, j]`` is the alphabet index of ``inputs[i][j]``; the dtype is the
        smallest signed one that holds every index (:func:`symbol_dtype`).
    output_index : ndarray of int, shape (|D|,)
        ``output_index[i]`` indexes ``function.labels``.
    costs : ndarray of float, shape (N,)
        Query costs of the positions.
    """

    function: PartialFunction
    symbols: np.ndarray
    output_index: np.ndarray
    costs: np.ndarray

    @property
    def size(self) -> int:
        """``|D|``."""
        return self.symbols.shape[0]

    @property
    def n(self) -> int:
        """Number of positions ``N``."""
        return self.symbols.shape[1]

    @property
    def labels(self) -> tuple[str, ...]:
        return self.function.labels

    def part(self, label_index: int) -> np.ndarray:
        """Indices (into the canonical order) of the inputs with output ``labels[label_index]``."""
        return np.flatnonzero(self.output_index == label_index)

    def delta(self, j: int) -> np.ndarray:
        """Boolean ``|D| x |D|`` matrix, True where inputs differ at position ``j``."""
        col = self.symbols[:, j]
        return col[:, None] != col[None, :]

    def same_output(self) -> np.ndarray:
        """Boolean ``|D| x |D|`` matrix ``F``: True where outputs are equal."""
        o = self.output_index
        return o[:, None] == o[None, :]

    def live_positions(self) -> np.ndarray:
        """Indices of positions where at least two inputs differ (the others never help a query)."""
        s = self.symbols
        return np.flatnonzero((s != s[:1]).any(axis=0))


def domain(f: PartialFunction) -> Domain:
    """Arrays of ``f`` in canonical order (rows are ``f.inputs``)."""
    sym = _symbol_array(f)
    labels = f.labels
    li = {lab: i for i, lab in enumerate(labels)}
    out = np.array([li[y] for y in f.outputs], dtype=np.int64)
    sym.setflags(write=False)
    out.setflags(write=False)
    costs = np.array(f.costs, dtype=float)
    costs.setflags(write=False)
    return Domain(f, sym, out, costs)


def symbol_dtype(n_symbols: int) -> np.dtype:
    """The smallest signed integer dtype that holds the alphabet indices ``0 .. n_symbols - 1``.

    >>> [symbol_dtype(k).name for k in (3, 128, 129, 40000)]
    ['int8', 'int8', 'int16', 'int32']
    """
    top = max(int(n_symbols) - 1, 0)
    for dt in (np.int8, np.int16, np.int32):
        if top <= np.iinfo(dt).max:
            return np.dtype(dt)
    return np.dtype(np.int64)


#: Text codec whose code units are the alphabet indices, per symbol dtype (see _symbol_array).
_CODECS = {np.dtype(np.int8): ("latin-1", "<i1"), np.dtype(np.int16): ("utf-16-le", "<i2"),
           np.dtype(np.int32): ("utf-32-le", "<i4")}


def _symbol_array(f: PartialFunction) -> np.ndarray:
    """``symbols[i, j]`` = alphabet index of ``f.inputs[i][j]``, built in C-speed chunks.

    Each symbol is translated to the code point equal to its index; the codec of the symbol
    dtype then writes exactly that number as one code unit (indices below 0xD800, so no
    UTF-16 surrogates arise).
    """
    dt = symbol_dtype(len(f.alphabet))
    codec = _CODECS.get(dt)
    if codec is None or len(f.alphabet) > 0xD800 or f.n == 0:
        order = {s: i for i, s in enumerate(f.alphabet)}
        return np.array([[order[c] for c in x] for x in f.inputs], dtype=dt).reshape(f.size, f.n)
    encoding, unit = codec
    to_index = str.maketrans({s: chr(i) for i, s in enumerate(f.alphabet)})
    sym = np.empty((f.size, f.n), dtype=dt)
    step = max(1, (1 << 22) // f.n)  # about 4 M symbols per chunk
    for a in range(0, f.size, step):
        chunk = "".join(f.inputs[a:a + step]).translate(to_index).encode(encoding)
        sym[a:a + step] = np.frombuffer(chunk, dtype=unit).reshape(-1, f.n)
    return sym
