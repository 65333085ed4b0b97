"""Partitions, Young tableaux and the symmetrisers of a Young diagram, acting on words.

The combinatorics of row permutations, used by the row-symmetric program (:mod:`advbound.programs.rowsym`):
partitions of ``m``, semistandard tableaux of a shape and content (their number is a
Kostka number, the multiplicity in Young's rule), the hook length formula for ``f^λ``, and
the row symmetriser ``a_λ`` and column antisymmetriser ``b_λ`` applied to sparse vectors
indexed by words (dicts ``word -> coefficient``).  Pure Python and numpy-free.
"""

from __future__ import annotations

import itertools
import math
from collections import Counter, defaultdict

__all__ = ["partitions", "standard_tableaux_count", "semistandard_tableaux", "Shape", "row_symmetrise",
           "column_antisymmetrise", "multinomial", "distinct_permutations"]


# ---------------------------------------------------------------------------------------------
def partitions(m: int, largest: int | None = None):
    """Partitions of ``m`` as non-increasing tuples, largest first.

    >>> list(partitions(4))
    [(4,), (3, 1), (2, 2), (2, 1, 1), (1, 1, 1, 1)]
    """
    largest = m if largest is None else largest
    if m == 0:
        yield ()
        return
    for k in range(min(m, largest), 0, -1):
        for rest in partitions(m - k, k):
            yield (k,) + rest


def standard_tableaux_count(shape) -> int:
    """``f^λ``, the dimension of the irreducible ``S^λ``, by the hook length formula.

    >>> standard_tableaux_count((2, 1)), standard_tableaux_count((3, 2))
    (2, 5)
    """
    conj = [sum(1 for r in shape if r > j) for j in range(shape[0])] if shape else []
    hooks = 1
    for i, r in enumerate(shape):
        for j in range(r):
            hooks *= (r - j - 1) + (conj[j] - i - 1) + 1
    return math.factorial(sum(shape)) // hooks


def _horizontal_strips(inner, size, outer):
    """Shapes ``ν`` with ``inner ⊆ ν ⊆ outer`` and ``ν/inner`` a horizontal strip of ``size`` boxes."""
    rows = len(outer)
    cur = list(inner) + [0] * (rows - len(inner))

    def rec(i, left, acc):
        if i == rows:
            if left == 0:
                yield tuple(acc)
            return
        hi = outer[i] if i == 0 else min(outer[i], cur[i - 1])
        for add in range(min(left, hi - cur[i]), -1, -1):
            yield from rec(i + 1, left - add, acc + [cur[i] + add])

    yield from rec(0, size, [])


def semistandard_tableaux(shape, content) -> list[tuple[tuple, ...]]:
    """Semistandard tableaux of ``shape`` with ``content = [(letter, count), …]`` in increasing letter order.

    Each tableau is a tuple of rows.  Their number is the Kostka number ``K_{shape, counts}``.

    >>> semistandard_tableaux((2, 1), [(0, 1), (1, 1), (2, 1)])
    [((0, 1), (2,)), ((0, 2), (1,))]
    """
    shape = tuple(shape)
    out = []

    def rec(i, cur, fill):
        if i == len(content):
            if tuple(x for x in cur if x) == shape:
                out.append(tuple(tuple(r) for r in fill))
            return
        letter, cnt = content[i]
        for nxt in _horizontal_strips(cur, cnt, shape):
            new = [list(r) for r in fill]
            for r, (lo, hi) in enumerate(zip(cur, nxt)):
                new[r].extend([letter] * (hi - lo))
            rec(i + 1, nxt, new)

    rec(0, (0,) * len(shape), [[] for _ in shape])
    return out


class Shape:
    """Coordinates of the rows and columns of a Young diagram (boxes numbered row by row)."""

    def __init__(self, shape):
        self.shape = tuple(shape)
        self.rows, k = [], 0
        for r in shape:
            self.rows.append(list(range(k, k + r)))
            k += r
        self.cols = [[self.rows[i][j] for i in range(len(shape)) if shape[i] > j]
                     for j in range(shape[0] if shape else 0)]

    def word(self, tableau) -> tuple:
        w = [0] * sum(self.shape)
        for coords, letters in zip(self.rows, tableau):
            for c, letter in zip(coords, letters):
                w[c] = letter
        return tuple(w)


def _rearrange(vec: dict, blocks, choices) -> dict:
    """``Σ`` over independent rearrangements of the coordinate ``blocks`` of every word in ``vec``.

    ``choices(letters)`` lists ``(new letters, weight)`` for one block, or ``None`` when the whole
    term vanishes; the weights of the blocks multiply.
    """
    out = defaultdict(int)
    for w, c in vec.items():
        parts = []
        for coords in blocks:
            opts = choices([w[i] for i in coords])
            if opts is None:
                break
            parts.append(opts)
        else:
            for combo in itertools.product(*parts):
                nw, coef = list(w), c
                for coords, (p, weight) in zip(blocks, combo):
                    for i, letter in zip(coords, p):
                        nw[i] = letter
                    coef *= weight
                out[tuple(nw)] += coef
    return {k: v for k, v in out.items() if v}


def distinct_permutations(items) -> list[tuple]:
    """The distinct arrangements of ``items``, in lexicographic order, without listing all ``k!``.

    >>> distinct_permutations((1, 0, 0))
    [(0, 0, 1), (0, 1, 0), (1, 0, 0)]
    """
    row = sorted(items)
    out = [tuple(row)]
    while True:
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


_ROW_CHOICES: dict[tuple, list] = {}


def _row_choices(letters):
    """Distinct arrangements of one row, each standing for its stabiliser's many permutations."""
    key = tuple(sorted(letters))
    if key not in _ROW_CHOICES:
        stab = math.prod(math.factorial(v) for v in Counter(key).values())
        _ROW_CHOICES[key] = [(p, stab) for p in distinct_permutations(key)]
    return _ROW_CHOICES[key]


_SIGNED: dict[int, list] = {}


def _column_choices(letters):
    """Signed permutations of one column; ``None`` (the term vanishes) on a repeated letter."""
    if len(set(letters)) < len(letters):
        return None
    h = len(letters)
    if h not in _SIGNED:
        _SIGNED[h] = [(p, _sign(p)) for p in itertools.permutations(range(h))]
    return [(tuple(letters[k] for k in p), s) for p, s in _SIGNED[h]]


def row_symmetrise(vec: dict, sh: Shape) -> dict:
    """``a_λ v``: the sum over all permutations inside the rows."""
    return _rearrange(vec, sh.rows, _row_choices)


def column_antisymmetrise(vec: dict, sh: Shape) -> dict:
    """``b_λ v``: the signed sum over permutations inside the columns (zero on a repeated letter)."""
    return _rearrange(vec, sh.cols, _column_choices)


def _sign(p) -> int:
    p, s = list(p), 1
    for i in range(len(p)):
        while p[i] != i:
            j = p[i]
            p[i], p[j] = p[j], p[i]
            s = -s
    return s


def multinomial(seq) -> int:
    """Number of distinct arrangements of ``seq``: ``len(seq)! / Π multiplicities!``.

    >>> multinomial((0, 0, 1))
    3
    """
    return math.factorial(len(seq)) // math.prod(math.factorial(v) for v in Counter(seq).values())
