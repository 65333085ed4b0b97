"""Row families: functions of ``n`` interchangeable rows, given by their input orbits (contents).

A composition ``g∘(h, …, h)`` with a symmetric outer ``g``, identical rows and a restriction
invariant under row permutations is determined by its *contents* (multisets of row inputs,
the S_n-orbits of inputs) and the output of each.  :func:`family_of` recognises such a
function from its inputs (checking every claim), and :func:`position_search_family` builds
the OR, AND or threshold of position-search rows with ``Σ k_i = T`` from its contents
directly, without ever enumerating the domain.
"""

from __future__ import annotations

import dataclasses
import itertools

from advbound.errors import InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.functions.tableaux import distinct_permutations, multinomial

__all__ = ["RowFamily", "family_of", "position_search_family"]


# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class RowFamily:
    """A row-permutation-invariant function given by its input orbits.

    Attributes
    ----------
    letters : tuple of str
        The row inputs that occur (each of length ``L``), in a fixed order; letters are their indices.
    contents : tuple of tuple of int
        The input orbits: sorted tuples of ``n`` letter indices.
    outputs : tuple of str
        The output label of each content.
    costs : tuple of float
        The query cost of each of the ``L`` positions of a row (the same in every row).
    description : str
    """

    letters: tuple[str, ...]
    contents: tuple[tuple[int, ...], ...]
    outputs: tuple[str, ...]
    costs: tuple[float, ...]
    description: str = ""

    @property
    def n(self) -> int:
        """Number of rows."""
        return len(self.contents[0])

    @property
    def row_length(self) -> int:
        return len(self.letters[0])

    @property
    def labels(self) -> tuple[str, ...]:
        return tuple(sorted(set(self.outputs)))

    def orbit_size(self, content) -> int:
        """Number of inputs with this content, ``n! / Π multiplicities!``."""
        return multinomial(content)

    @property
    def size(self) -> int:
        """``|D|``."""
        return sum(multinomial(c) for c in self.contents)

    def differ(self, p: int, a: int, b: int) -> bool:
        """Do letters ``a`` and ``b`` differ at position ``p`` of a row?"""
        return self.letters[a][p] != self.letters[b][p]

    def inputs(self):
        """Every input string with its output (for expansion and dense checks)."""
        for c, y in zip(self.contents, self.outputs):
            for w in distinct_permutations(c):
                yield "".join(self.letters[a] for a in w), y


def family_of(f: PartialFunction) -> RowFamily | None:
    """The row family of ``f`` when its rows (``f.groups``) are interchangeable, else ``None``.

    Interchangeable means: ``f.groups`` are ``n ≥ 2`` consecutive blocks of one length with equal
    costs, the domain is closed under permuting them (each content occurs in all of its
    ``n!/Π mult!`` arrangements), and the output depends only on the content.  All of this is
    checked on the inputs, not taken from the builder.
    """
    groups = f.groups
    if len(groups) < 2:
        return None
    L = len(groups[0])
    if any(tuple(g) != tuple(range(i * L, (i + 1) * L)) for i, g in enumerate(groups)) or len(groups) * L != f.n:
        return None
    costs = tuple(f.costs[:L])
    if any(tuple(f.costs[i * L:(i + 1) * L]) != costs for i in range(len(groups))):
        return None
    rows_of = [tuple(x[i * L:(i + 1) * L] for i in range(len(groups))) for x in f.inputs]
    letters = tuple(sorted({r for rows in rows_of for r in rows}))
    index = {s: i for i, s in enumerate(letters)}
    seen: dict[tuple, list] = {}
    for rows, y in zip(rows_of, f.outputs):
        c = tuple(sorted(index[r] for r in rows))
        seen.setdefault(c, []).append(y)
    for c, ys in seen.items():
        if len(ys) != multinomial(c) or len(set(ys)) != 1:
            return None
    contents = tuple(sorted(seen))
    return RowFamily(letters, contents, tuple(seen[c][0] for c in contents), costs,
                     description=f.description)


def position_search_family(outer: str, n: int, T: int, max_ones: int | None = None) -> RowFamily:
    """OR, AND or a threshold of ``n`` position-search rows with times ``t = √k`` and ``Σ k_i = T``.

    Built from its contents directly (|D| is never enumerated), with rows of length ``T − n + 1``
    (the largest position a row can use).  ``outer`` is ``"or"``, ``"and"`` or ``"threshold:K"``.

    >>> fam = position_search_family("or", 3, 5)
    >>> fam.size, len(fam.contents)
    (48, 12)
    """
    if n < 2 or T < n:
        raise InvalidFunctionError(f"position_search_family: need 2 <= n <= T, got n = {n}, T = {T}")
    name = outer.lower()
    if name == "or":
        rule = lambda ones: ones >= 1  # noqa: E731
    elif name == "and":
        rule = lambda ones: ones == n  # noqa: E731
    elif name.startswith("threshold:"):
        k = int(name.split(":", 1)[1])
        rule = lambda ones: ones >= k  # noqa: E731
    else:
        raise InvalidFunctionError(f"position_search_family: outer {outer!r} is unknown; use or, and, threshold:K")
    L = T - n + 1
    letters = tuple("*" * (k - 1) + bit + "*" * (L - k) for k in range(1, L + 1) for bit in "01")
    contents, outputs = [], []
    for parts in _sums(n, T, T):
        for bits in itertools.product((0, 1), repeat=n):
            ones = sum(bits)
            if max_ones is not None and ones > max_ones:
                continue
            contents.append(tuple(sorted(2 * (k - 1) + b for k, b in zip(parts, bits))))
    contents = sorted(set(contents))
    outputs = [str(int(rule(sum(a % 2 for a in c)))) for c in contents]
    desc = f"{outer.upper()}_{n} of position-search rows, sum of k = {T}" + (
        f", at most {max_ones} row(s) of value 1" if max_ones is not None else "")
    return RowFamily(letters, tuple(contents), tuple(outputs), (1.0,) * L, description=desc)


def _sums(n, T, largest):
    """Multisets of ``n`` positive integers summing to ``T`` (non-increasing tuples)."""
    if n == 0:
        if T == 0:
            yield ()
        return
    for k in range(min(largest, T - n + 1), 0, -1):
        for rest in _sums(n - 1, T - k, k):
            yield (k,) + rest


