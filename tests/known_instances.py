"""Small functions with adversary bounds known from outside advbound, built independently of the builders.

Every function here is built with :meth:`PartialFunction.from_pairs` and
``itertools`` only, so the tests do not depend on :mod:`advbound.functions.builders`.
Each :class:`Known` entry records its expected value and where it comes from.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from typing import Callable, Sequence

from advbound.functions.function import PartialFunction

__all__ = ["Known", "boolean", "from_rule", "search_row", "or_of_search_rows", "KNOWN", "TRUTH_TABLE_PAPER"]

TRUTH_TABLE_PAPER = ("Span programs and quantum query complexity: the general adversary bound is nearly tight "
                     "for every boolean function, 2009, arXiv:0904.2759 (table of functions on at most 3 bits, "
                     "where ADV = ADV±; values quoted from memory)")


@dataclasses.dataclass(frozen=True)
class Known:
    """A function, a bound kind, its known value, a relative tolerance and the source of the value."""

    name: str
    function: PartialFunction
    bound: str
    expected: float
    source: str
    rtol: float = 1e-5


def from_rule(alphabet: str, n: int, rule: Callable[[str], object], costs: Sequence[float] | None = None,
              keep: Callable[[str], bool] | None = None, description: str = "") -> PartialFunction:
    """Function on all strings of length ``n`` over ``alphabet`` accepted by ``keep``, output ``rule(x)``."""
    pairs = [("".join(x), rule("".join(x))) for x in itertools.product(alphabet, repeat=n)]
    if keep is not None:
        pairs = [(x, y) for x, y in pairs if keep(x)]
    return PartialFunction.from_pairs(alphabet, pairs, costs=costs, description=description)


def boolean(n: int, predicate: Callable[[tuple[int, ...]], object], costs=None, description="") -> PartialFunction:
    """Total Boolean function on ``n`` bits; ``predicate`` gets a tuple of ints."""
    return from_rule("01", n, lambda x: int(bool(predicate(tuple(int(c) for c in x)))), costs=costs,
                     description=description)


def search_row(m: int) -> PartialFunction:
    """Position-search row of length ``m``: alphabet ``01*``, one non-star symbol, whose value is the output."""
    pairs = []
    for k in range(m):
        for b in "01":
            pairs.append(("*" * k + b + "*" * (m - k - 1), b))
    return PartialFunction.from_pairs("01*", pairs, description=f"position-search row of length {m}")


def or_of_search_rows(rows: int, m: int, T: int) -> PartialFunction:
    """OR of ``rows`` position-search rows of length ``m``, restricted to ``sum_i k_i == T``.

    ``k_i`` is the 1-based position of row ``i``'s non-star symbol (time ``t_i = sqrt(k_i)``, so
    the budget is ``sum_i t_i^2 = T``).
    """
    row = [("*" * k + b + "*" * (m - k - 1), k + 1, int(b)) for k in range(m) for b in "01"]
    pairs = []
    for combo in itertools.product(row, repeat=rows):
        if sum(c[1] for c in combo) == T:
            pairs.append(("".join(c[0] for c in combo), int(any(c[2] for c in combo))))
    return PartialFunction.from_pairs("01*", pairs, description=f"OR of {rows} position-search rows, m={m}, T={T}")


def _or(n, costs=None):
    return boolean(n, any, costs=costs, description=f"OR_{n}")


def _parity(n):
    return boolean(n, lambda x: sum(x) % 2, description=f"PARITY_{n}")


_T = TRUTH_TABLE_PAPER
KNOWN = [
    # functions on <= 3 bits, ADV = ADV± (both kinds listed)
    *[Known(name, fn, b, val, _T) for name, fn, val in [
        ("AND_2", boolean(2, all), math.sqrt(2)),
        ("MAJ_3", boolean(3, lambda x: sum(x) >= 2), 2.0),
        ("PARITY_3", _parity(3), 3.0),
        ("EXACT_2_of_3", boolean(3, lambda x: sum(x) == 2), math.sqrt(7)),
        ("EQUAL_3", boolean(3, lambda x: len(set(x)) == 1), 3 / math.sqrt(2)),
        ("x1 xor (x2 or x3)", boolean(3, lambda x: x[0] ^ (x[1] | x[2])), 1 + math.sqrt(2)),
        ("x1 or (x2 xor x3)", boolean(3, lambda x: x[0] | (x[1] ^ x[2])), math.sqrt(5)),
        ("(x1 and x2 and x3) or (not x2 and not x3)",
         boolean(3, lambda x: (x[0] & x[1] & x[2]) | ((1 - x[1]) & (1 - x[2]))), math.sqrt(3 + math.sqrt(3))),
        ("x1 or (x2 and x3)", boolean(3, lambda x: x[0] | (x[1] & x[2])), math.sqrt(3)),
    ] for b in ("general", "positive")],
    # common knowledge
    *[Known(f"OR_{n}", _or(n), "general", math.sqrt(n), "common knowledge: ADV±(OR_n) = sqrt(n)")
      for n in (1, 2, 3, 4)],
    *[Known(f"PARITY_{n}", _parity(n), "positive", float(n), "common knowledge: ADV(PARITY_n) = n")
      for n in (2, 3, 4)],
    Known("OR_3 costs (1,2,3)", _or(3, costs=(1.0, 2.0, 3.0)), "general", math.sqrt(14),
          "common knowledge (known-times search): ADV±_c(OR_n) = sqrt(sum c_i^2)"),
    Known("OR_2 costs (0.5,2)", _or(2, costs=(0.5, 2.0)), "general", math.sqrt(4.25),
          "common knowledge (known-times search): ADV±_c(OR_n) = sqrt(sum c_i^2)"),
    # composition ADV±(f o g) = ADV±(f) ADV±(g)
    Known("OR_2 o AND_2", boolean(4, lambda x: (x[0] & x[1]) | (x[2] & x[3])), "general", 2.0,
          "Negative weights make adversaries stronger, 2007, arXiv:quant-ph/0611054 (composition): sqrt2*sqrt2"),
    Known("PARITY_2 o OR_2", boolean(4, lambda x: (x[0] | x[1]) ^ (x[2] | x[3])), "general", 2 * math.sqrt(2),
          "Negative weights make adversaries stronger, 2007, arXiv:quant-ph/0611054, and arXiv:0904.2759 "
          "(composition with PARITY_2 = 2): 2*sqrt2"),
]
