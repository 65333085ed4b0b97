"""Outer functions: functions on all strings, the symmetric Boolean functions and their symmetries.

This module owns :func:`from_predicate` (a function given by a predicate on every string),
the symmetric Boolean functions (OR, AND, PARITY, MAJORITY, THRESHOLD_k, EXACT_k) and their
lookup by name (:func:`named_function`), the block-permutation symmetry generators handed
over by the builders (:func:`block_generators`) and the check that a map is an automorphism
of a function (:func:`is_automorphism`).

>>> named_function("or", 3).output_counts()
{'0': 1, '1': 7}
"""

from __future__ import annotations

import itertools
from typing import Callable, Sequence

from advbound.errors import InvalidFunctionError
from advbound.functions.function import Automorphism, PartialFunction
from advbound.functions.sizelimit import _check_int

__all__ = [
    "from_predicate",
    "or_function",
    "and_function",
    "parity_function",
    "majority_function",
    "threshold_function",
    "exact_function",
    "named_function",
    "NAMED_FUNCTIONS",
    "block_generators",
    "is_automorphism",
]

#: Largest domain ``from_predicate`` will enumerate (``|alphabet| ** n``).
MAX_ENUMERATION = 1 << 22


# ---------------------------------------------------------------------------------------------
# Functions on all strings
# ---------------------------------------------------------------------------------------------
def from_predicate(alphabet: Sequence[str], n: int, predicate: Callable[[str], object], *,
                   costs: Sequence[float] | None = None, description: str = "") -> PartialFunction:
    """The function ``x -> predicate(x)`` on the strings of length ``n`` where it is not ``None``.

    Parameters
    ----------
    alphabet : sequence of str
        Single-character symbols, in canonical order.
    n : int
        Input length.
    predicate : callable
        ``predicate(x: str)`` returns an output label (converted with ``str``) or
        ``None`` when ``f`` is undefined on ``x``.
    costs, description
        Passed to the function.

    Examples
    --------
    Inputs of Hamming weight exactly one, labelled by the position of the 1:

    >>> f = from_predicate("01", 4, lambda x: x.index("1") if x.count("1") == 1 else None)
    >>> f.size, f.labels
    (4, ('0', '1', '2', '3'))
    """
    alphabet = tuple(alphabet)
    n = _check_int(n, "n", 1)
    if not callable(predicate):
        raise InvalidFunctionError(f"predicate {predicate!r} is not callable")
    if len(alphabet) ** n > MAX_ENUMERATION:
        raise InvalidFunctionError(f"{len(alphabet)}^{n} strings is more than from_predicate enumerates "
                                   f"({MAX_ENUMERATION}); build the domain directly")
    inputs, outputs = [], []
    for t in itertools.product(alphabet, repeat=n):  # product order is the canonical order
        x = "".join(t)
        y = predicate(x)
        if y is not None:
            inputs.append(x)
            outputs.append(str(y))
    if not inputs:
        raise InvalidFunctionError("the predicate is undefined (None) on every input: the domain is empty")
    costs = (1.0,) * n if costs is None else tuple(float(c) for c in costs)
    if len(costs) != n:
        raise InvalidFunctionError(f"{len(costs)} costs given for {n} positions")
    return PartialFunction(alphabet, tuple(inputs), tuple(outputs), costs, description=description)


def block_generators(blocks: int, length: int) -> tuple[Automorphism, ...]:
    """Position permutations swapping adjacent blocks ``(i, i+1)`` and the cyclic shift of blocks.

    ``blocks`` blocks of ``length`` consecutive positions each; block ``i`` moves to
    block ``i+1`` under the shift.  Empty for one block; for two blocks only the swap.

    >>> [a.positions for a in block_generators(3, 1)]
    [(1, 0, 2), (0, 2, 1), (1, 2, 0)]
    """
    blocks = _check_int(blocks, "blocks", 1)
    length = _check_int(length, "length", 1)
    N = blocks * length
    gens = []
    for i in range(blocks - 1):
        perm = list(range(N))
        for p in range(length):
            perm[i * length + p] = (i + 1) * length + p
            perm[(i + 1) * length + p] = i * length + p
        gens.append(Automorphism(tuple(perm)))
    if blocks >= 3:
        gens.append(Automorphism(tuple((j + length) % N for j in range(N))))
    return tuple(gens)


def _symmetric_boolean(n: int, name: str, rule: Callable[[int], int], description: str) -> PartialFunction:
    n = _check_int(n, "n", 1, 24)
    inputs = tuple("".join(t) for t in itertools.product("01", repeat=n))
    outputs = tuple(str(rule(x.count("1"))) for x in inputs)
    return PartialFunction(("0", "1"), inputs, outputs, (1.0,) * n, symmetries=block_generators(n, 1),
                           description=description)


def or_function(n: int) -> PartialFunction:
    """OR on ``n`` bits (total).

    >>> or_function(3).output_counts()
    {'0': 1, '1': 7}
    """
    return _symmetric_boolean(n, "or", lambda w: int(w >= 1), f"OR on {n} bits")


def and_function(n: int) -> PartialFunction:
    """AND on ``n`` bits (total).

    >>> and_function(3).output_counts()
    {'0': 7, '1': 1}
    """
    return _symmetric_boolean(n, "and", lambda w: int(w == n), f"AND on {n} bits")


def parity_function(n: int) -> PartialFunction:
    """PARITY (XOR) on ``n`` bits (total).

    >>> parity_function(4).output_counts()
    {'0': 8, '1': 8}
    """
    return _symmetric_boolean(n, "parity", lambda w: w % 2, f"PARITY on {n} bits")


def majority_function(n: int) -> PartialFunction:
    """Strict MAJORITY on ``n`` bits: 1 iff more than half of the bits are 1.

    For even ``n`` a tie (weight ``n/2``) gives 0, so ``majority_function(n)`` equals
    ``threshold_function(n, n // 2 + 1)`` for every ``n``.

    >>> majority_function(3).output_counts()
    {'0': 4, '1': 4}
    """
    return _symmetric_boolean(n, "majority", lambda w: int(2 * w > n), f"MAJORITY on {n} bits")


def threshold_function(n: int, k: int) -> PartialFunction:
    """THRESHOLD_k on ``n`` bits: 1 iff the Hamming weight is at least ``k`` (``0 <= k <= n``).

    >>> threshold_function(4, 2).output_counts()
    {'0': 5, '1': 11}
    """
    n = _check_int(n, "n", 1, 24)
    k = _check_int(k, "k", 0, n)
    return _symmetric_boolean(n, "threshold", lambda w: int(w >= k), f"THRESHOLD_{k} on {n} bits")


def exact_function(n: int, k: int) -> PartialFunction:
    """EXACT_k on ``n`` bits: 1 iff the Hamming weight is exactly ``k`` (``0 <= k <= n``).

    >>> exact_function(4, 2).output_counts()
    {'0': 10, '1': 6}
    """
    n = _check_int(n, "n", 1, 24)
    k = _check_int(k, "k", 0, n)
    return _symmetric_boolean(n, "exact", lambda w: int(w == k), f"EXACT_{k} on {n} bits")


#: Names accepted by :func:`named_function`; the value says whether ``k`` is needed.
NAMED_FUNCTIONS = {"or": False, "and": False, "parity": False, "majority": False,
                   "threshold": True, "exact": True}


def named_function(name: str, n: int, k: int | None = None) -> PartialFunction:
    """One of the symmetric Boolean functions by name (``or``, ``and``, ``parity``, ``majority``,
    ``threshold`` and ``exact``, the last two with ``k``).

    >>> named_function("threshold", 3, 2).output_counts()
    {'0': 4, '1': 4}
    """
    key = str(name).lower()
    if key not in NAMED_FUNCTIONS:
        raise InvalidFunctionError(f"unknown function name {name!r}; expected one of {', '.join(NAMED_FUNCTIONS)}")
    if NAMED_FUNCTIONS[key]:
        if k is None:
            raise InvalidFunctionError(f"function {key!r} needs a parameter k")
        return {"threshold": threshold_function, "exact": exact_function}[key](n, k)
    if k is not None:
        raise InvalidFunctionError(f"function {key!r} takes no parameter k (got k={k!r})")
    return {"or": or_function, "and": and_function, "parity": parity_function,
            "majority": majority_function}[key](n)


# ---------------------------------------------------------------------------------------------
# Automorphisms
# ---------------------------------------------------------------------------------------------
def is_automorphism(f: PartialFunction, a: Automorphism) -> bool:
    """Whether ``a`` maps the domain of ``f`` onto itself and preserves ``f`` (up to ``a.outputs``).

    >>> f = or_function(3)
    >>> all(is_automorphism(f, a) for a in f.symmetries)
    True
    """
    if sorted(a.positions) != list(range(f.n)):
        return False
    labels = f.labels
    li = {lab: i for i, lab in enumerate(labels)}
    index = dict(zip(f.inputs, f.outputs))
    images = set()
    for x, y in zip(f.inputs, f.outputs):
        try:
            z = a.apply(x, f.alphabet)
        except (IndexError, ValueError):
            return False
        want = labels[a.outputs[li[y]]] if a.outputs is not None else y
        if index.get(z) != want:
            return False
        images.add(z)
    return len(images) == f.size
