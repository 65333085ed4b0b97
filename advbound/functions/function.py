"""The immutable partial-function value every other module computes on.

A :class:`PartialFunction` is a map ``f: D -> L`` with ``D`` a set of strings of
length ``N`` over a finite alphabet of single-character symbols (``*`` allowed)
and ``L`` a finite set of output labels (strings).  Each position carries a
query cost (default 1).

Canonical order
---------------
Inputs are stored sorted lexicographically by *alphabet index*: the symbol
order is the order of ``alphabet`` (not Unicode order), position 0 is the most
significant.  Output labels are stored sorted (``labels``).  Every matrix in
advbound is indexed in this order.

>>> f = PartialFunction.from_pairs("01", [("11", "1"), ("00", "0"), ("01", "0"), ("10", "0")])
>>> f.inputs
('00', '01', '10', '11')
>>> f.size, f.n, f.labels
(4, 2, ('0', '1'))
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from collections import Counter
from typing import Iterable, Sequence

from advbound.errors import AdvboundWarning, InvalidFunctionError

__all__ = ["PartialFunction", "Automorphism"]


@dataclasses.dataclass(frozen=True)
class Automorphism:
    """A symmetry of a partial function, given as an action on inputs.

    The image ``y`` of an input ``x`` is defined by
    ``y[positions[j]] = alphabet[relabel[j][alphabet.index(x[j])]]``: position
    ``j`` moves to ``positions[j]`` and its symbol is relabelled by the
    permutation ``relabel[j]`` of alphabet indices (``None`` means identity
    everywhere).  ``outputs`` permutes output-label indices (``None``:
    identity).  An automorphism maps the domain onto itself and satisfies
    ``f(y) = labels[outputs[label_index(f(x))]]``.
    """

    positions: tuple[int, ...]
    relabel: tuple[tuple[int, ...], ...] | None = None
    outputs: tuple[int, ...] | None = None

    def apply(self, x: str, alphabet: Sequence[str]) -> str:
        """Return the image of the input string ``x``."""
        out = [""] * len(x)
        for j, ch in enumerate(x):
            s = ch
            if self.relabel is not None:
                s = alphabet[self.relabel[j][alphabet.index(ch)]]
            out[self.positions[j]] = s
        return "".join(out)


@dataclasses.dataclass(frozen=True, eq=False)
class PartialFunction:
    """A partial function on strings over a finite alphabet.

    Build one with :meth:`from_pairs` (which validates and sorts) or with the
    builders in :mod:`advbound.functions.builders`; change one with
    :func:`dataclasses.replace`.

    Attributes
    ----------
    alphabet : tuple of str
        Single-character symbols; their order defines the canonical input order.
    inputs : tuple of str
        The defined inputs, in canonical order, each of length ``n``.
    outputs : tuple of str
        ``outputs[i]`` is the label of ``inputs[i]``.
    costs : tuple of float
        Query cost of each position (all 1 unless a cost-weighted bound is wanted).
    position_names : tuple of str
        A display name per position (default ``x1 .. xN``; composed functions use ``r<i>p<k>``).
    groups : tuple of tuple of int
        Optional partition of positions into blocks (the rows of a composed function).
    symmetries : tuple of Automorphism
        Known automorphism generators handed over by builders (may be empty; never required).
    description : str
        Human-readable description, stored in certificates and results.
    """

    alphabet: tuple[str, ...]
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    costs: tuple[float, ...]
    position_names: tuple[str, ...] = ()
    groups: tuple[tuple[int, ...], ...] = ()
    symmetries: tuple[Automorphism, ...] = ()
    description: str = ""

    def __post_init__(self):
        _check(self)
        if not self.position_names:
            object.__setattr__(self, "position_names", tuple(f"x{j + 1}" for j in range(self.n)))

    # -- construction -------------------------------------------------------------------------
    @classmethod
    def from_pairs(
        cls,
        alphabet: Iterable[str],
        pairs: Iterable[tuple[str, object]],
        costs: Sequence[float] | None = None,
        **fields,
    ) -> "PartialFunction":
        """Validate ``(input, output)`` pairs and return the function in canonical order.

        Output labels are converted with ``str``.  Listing the same input twice
        with the same output only warns; with different outputs it is an error.

        >>> PartialFunction.from_pairs("01*", [("1*", 1), ("*1", 1)]).labels
        ('1',)
        """
        alphabet = _check_alphabet(tuple(alphabet))
        seen: dict[str, str] = {}
        duplicates = 0
        for item_no, (x, y) in enumerate(pairs, 1):
            x, y = str(x), str(y)
            if x in seen:
                if seen[x] != y:
                    raise InvalidFunctionError(
                        f"input {x!r} (item {item_no}) is listed with two outputs: {seen[x]!r} and {y!r}"
                    )
                duplicates += 1
                continue
            seen[x] = y
        if duplicates:
            warnings.warn(f"{duplicates} duplicate input(s) with the same output ignored", AdvboundWarning,
                          stacklevel=2)
        if not seen:
            raise InvalidFunctionError("the domain is empty: no input is defined")
        order = {s: i for i, s in enumerate(alphabet)}
        drop_known = str.maketrans({s: None for s in alphabet})
        to_index = str.maketrans({s: chr(i) for i, s in enumerate(alphabet)})
        n = len(next(iter(seen)))
        for x in seen:
            if len(x) != n:
                raise InvalidFunctionError(f"input {x!r} has length {len(x)}, expected {n} like the first input")
            if x.translate(drop_known):  # some symbol is not in the alphabet: find the first one
                for j, ch in enumerate(x):
                    if ch not in order:
                        raise InvalidFunctionError(
                            f"input {x!r} has symbol {ch!r} at position {j + 1}, not in alphabet {''.join(alphabet)!r}"
                        )
        # translated strings compare like lists of alphabet indices (the canonical order)
        keys = sorted(seen, key=lambda s: s.translate(to_index))
        if costs is None:
            costs = (1.0,) * n
        return cls(alphabet, tuple(keys), tuple(seen[k] for k in keys), tuple(float(c) for c in costs), **fields)

    # -- derived facts ------------------------------------------------------------------------
    @property
    def n(self) -> int:
        """Number of positions (input length)."""
        return len(self.costs)

    @property
    def size(self) -> int:
        """Number of defined inputs ``|D|``."""
        return len(self.inputs)

    @property
    def labels(self) -> tuple[str, ...]:
        """The distinct output labels, sorted."""
        return tuple(sorted(set(self.outputs)))

    @property
    def is_constant(self) -> bool:
        """True when every input has the same output (the adversary bound is then 0)."""
        return len(set(self.outputs)) == 1

    @property
    def is_boolean(self) -> bool:
        """True when exactly two output labels occur (the bipartite reduction applies)."""
        return len(set(self.outputs)) == 2

    def output_counts(self) -> dict[str, int]:
        """Number of inputs per output label, labels sorted."""
        c = Counter(self.outputs)
        return {lab: c[lab] for lab in self.labels}

    def value(self, x: str) -> str:
        """The output on input ``x``; raises ``KeyError`` when ``x`` is outside the domain."""
        i = self._index().get(x)
        if i is None:
            raise KeyError(f"input {x!r} is not in the domain")
        return self.outputs[i]

    def _index(self) -> dict[str, int]:
        cache = self.__dict__.get("_index_cache")
        if cache is None:
            cache = {x: i for i, x in enumerate(self.inputs)}
            object.__setattr__(self, "_index_cache", cache)
        return cache

    def __repr__(self) -> str:
        desc = f" {self.description!r}" if self.description else ""
        return (f"PartialFunction({desc.strip() or 'unnamed'}: n={self.n}, |D|={self.size}, "
                f"alphabet={''.join(self.alphabet)!r}, outputs={self.output_counts()})")

    def to_table(self) -> str:
        """The function as table-file text (see :mod:`advbound.functions.tablefile`)."""
        head = f"# {self.description}\n" if self.description else ""
        return head + "".join(f"{x} {y}\n" for x, y in zip(self.inputs, self.outputs))


def _check_alphabet(alphabet: tuple[str, ...]) -> tuple[str, ...]:
    if not alphabet:
        raise InvalidFunctionError("the alphabet is empty")
    for s in alphabet:
        if not isinstance(s, str) or len(s) != 1 or s.isspace() or s == "#":
            raise InvalidFunctionError(f"alphabet symbol {s!r} must be one non-space character other than '#'")
    if len(set(alphabet)) != len(alphabet):
        raise InvalidFunctionError(f"alphabet {''.join(alphabet)!r} lists a symbol twice")
    return alphabet


def _check(f: PartialFunction) -> None:
    """Validate a directly constructed value (``from_pairs`` has checked most of this already)."""
    _check_alphabet(tuple(f.alphabet))
    if not f.inputs:
        raise InvalidFunctionError("the domain is empty: no input is defined")
    if len(f.inputs) != len(f.outputs):
        raise InvalidFunctionError(f"{len(f.inputs)} inputs but {len(f.outputs)} outputs")
    n = len(f.costs)
    order = {s: i for i, s in enumerate(f.alphabet)}
    # Translating each symbol to the code point of its alphabet index makes plain string
    # comparison the canonical comparison; both translations run in C (10^5 long inputs in
    # well under a second, where a per-character Python loop took seconds).
    to_index = str.maketrans({s: chr(i) for i, s in enumerate(f.alphabet)})
    drop_known = str.maketrans({s: None for s in f.alphabet})
    prev = None
    for x in f.inputs:
        if type(x) is not str:
            raise InvalidFunctionError(f"input {x!r} is not a string")
        if len(x) != n:
            raise InvalidFunctionError(f"input {x!r} has length {len(x)}, expected {n} (one per cost)")
        if x.translate(drop_known):
            bad = next(c for c in x if c not in order)
            raise InvalidFunctionError(f"input {x!r} has symbol {bad!r}, not in alphabet {''.join(f.alphabet)!r}")
        key = x.translate(to_index)
        if prev is not None and key <= prev:
            raise InvalidFunctionError(f"inputs are not in canonical order (or repeat) at {x!r}; use from_pairs")
        prev = key
    for j, c in enumerate(f.costs):
        if not (isinstance(c, (int, float)) and math.isfinite(c) and c > 0):
            raise InvalidFunctionError(f"cost of position {j + 1} is {c!r}; costs must be finite and positive")
    if f.position_names and len(f.position_names) != n:
        raise InvalidFunctionError(f"{len(f.position_names)} position names for {n} positions")
    if f.groups:
        flat = sorted(j for g in f.groups for j in g)
        if flat != list(range(n)):
            raise InvalidFunctionError("groups must partition the positions 0..n-1")
    for a in f.symmetries:
        if sorted(a.positions) != list(range(n)):
            raise InvalidFunctionError(f"automorphism {a.positions} is not a permutation of {n} positions")
