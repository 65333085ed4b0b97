"""The domain arrays (advbound.functions.domain), checked against per-character computations done in the test."""

import numpy as np
import pytest

from advbound.functions.domain import domain, symbol_dtype
from advbound.functions.function import PartialFunction


def _reference_symbols(f):
    order = {s: i for i, s in enumerate(f.alphabet)}
    return np.array([[order[c] for c in x] for x in f.inputs])


def test_symbols_match_reference():
    """symbols[i, j] is the alphabet index of inputs[i][j] (alphabet order, not Unicode order)."""
    rng = np.random.default_rng(3)
    alphabet = ("*", "1", "0", "z")
    xs = sorted({"".join(rng.choice(list(alphabet), 7)) for _ in range(300)},
                key=lambda s: [alphabet.index(c) for c in s])
    f = PartialFunction(alphabet, tuple(xs), tuple(str(len(x) % 2) for x in xs), (1.0,) * 7)
    assert np.array_equal(domain(f).symbols, _reference_symbols(f))


def test_symbols_across_chunks():
    """Long inputs are converted in several chunks without mixing rows (chunk of 2**22 characters)."""
    rng = np.random.default_rng(5)
    n = 1 << 16  # 64 inputs per chunk, so 150 inputs span three chunks
    rows = rng.integers(0, 3, size=(150, n))
    for d in range(5):  # distinct rows: the first five symbols spell i in base 3
        rows[:, d] = np.arange(150) // 3 ** d % 3
    rows = rows[np.lexsort(rows[:, :5].T[::-1])]  # the first five columns already decide the order
    codes = np.frombuffer(b"01*", dtype=np.uint8)
    xs = tuple(codes[r].tobytes().decode("ascii") for r in rows)
    f = PartialFunction(("0", "1", "*"), xs, ("0",) * 150, (1.0,) * n)
    assert np.array_equal(domain(f).symbols, rows)


def test_live_positions_and_delta():
    """A position where every input agrees is not live; delta marks differing pairs (derived by hand)."""
    f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1)])
    d = domain(f)
    assert d.live_positions().tolist() == [1]
    assert d.delta(1).tolist() == [[False, True], [True, False]]
    assert not d.delta(0).any()


@pytest.mark.parametrize("n_symbols, dtype", [(200, np.int16), (40000, np.int32)])
def test_wide_alphabets(n_symbols, dtype):
    """Alphabets beyond 127 symbols get a wider dtype and the same indices as the per-character reference."""
    alphabet = tuple(chr(0x4E00 + i) for i in range(n_symbols))
    rng = np.random.default_rng(7)
    rows = np.unique(rng.integers(0, n_symbols, size=(60, 3)), axis=0)  # sorted rows: canonical order
    xs = tuple("".join(alphabet[i] for i in r) for r in rows)
    f = PartialFunction(alphabet, xs, tuple(str(r[0] % 2) for r in rows), (1.0,) * 3)
    sym = domain(f).symbols
    assert symbol_dtype(n_symbols) == dtype and sym.dtype == dtype
    assert np.array_equal(sym, rows) and np.array_equal(sym, _reference_symbols(f))
