"""Shared Hypothesis strategies: random small partial functions and the transformations tests apply to them.

Typical use::

    from hypothesis import given
    from strategies import partial_functions

    @given(partial_functions(max_n=3))
    def test_something(f): ...
"""

from __future__ import annotations

import itertools

from hypothesis import strategies as st

from advbound.functions.function import PartialFunction

__all__ = ["partial_functions", "position_permutations", "symbol_relabellings", "permute_positions",
           "relabel_symbols", "restrict"]


@st.composite
def partial_functions(draw, max_n: int = 3, alphabets=("01", "01*"), max_outputs: int = 2, min_size: int = 2,
                      max_size: int = 10, min_n: int = 1, with_costs: bool = False) -> PartialFunction:
    """A non-constant partial function with at most ``max_size`` inputs on ``min_n..max_n`` positions.

    Outputs are drawn from ``"0", "1", ...`` (``max_outputs`` labels); at least two occur.  With
    ``with_costs`` each position gets a cost from ``{0.5, 1, 2, 3}`` (else all costs are 1).
    """
    alphabet = draw(st.sampled_from(tuple(alphabets)))
    n = draw(st.integers(min_n, max_n))
    universe = ["".join(x) for x in itertools.product(alphabet, repeat=n)]
    k = draw(st.integers(min(min_size, len(universe)), min(max_size, len(universe))))
    inputs = draw(st.lists(st.sampled_from(universe), min_size=k, max_size=k, unique=True))
    labels = [str(i) for i in range(max_outputs)]
    outs = draw(st.lists(st.sampled_from(labels), min_size=k, max_size=k))
    if len(set(outs)) < 2:  # make it non-constant
        outs[0], outs[1] = labels[0], labels[1]
    costs = None
    if with_costs:
        costs = draw(st.lists(st.sampled_from([0.5, 1.0, 2.0, 3.0]), min_size=n, max_size=n))
    return PartialFunction.from_pairs(alphabet, list(zip(inputs, outs)), costs=costs)


def position_permutations(n: int):
    """A permutation of ``range(n)`` as a tuple."""
    return st.permutations(list(range(n))).map(tuple)


def symbol_relabellings(alphabet, n: int):
    """One permutation of alphabet indices per position."""
    return st.lists(st.permutations(list(range(len(alphabet)))).map(tuple), min_size=n, max_size=n)


def permute_positions(f: PartialFunction, perm) -> PartialFunction:
    """``f`` with position ``j`` moved to ``perm[j]`` (same costs, moved along)."""
    def move(x):
        out = [""] * len(x)
        for j, ch in enumerate(x):
            out[perm[j]] = ch
        return "".join(out)
    costs = [0.0] * f.n
    for j, c in enumerate(f.costs):
        costs[perm[j]] = c
    return PartialFunction.from_pairs(f.alphabet, [(move(x), y) for x, y in zip(f.inputs, f.outputs)], costs=costs)


def relabel_symbols(f: PartialFunction, relabel) -> PartialFunction:
    """``f`` with the symbol at position ``j`` replaced by ``alphabet[relabel[j][index]]``."""
    a = f.alphabet
    def move(x):
        return "".join(a[relabel[j][a.index(ch)]] for j, ch in enumerate(x))
    return PartialFunction.from_pairs(a, [(move(x), y) for x, y in zip(f.inputs, f.outputs)], costs=f.costs)


def restrict(f: PartialFunction, keep) -> PartialFunction:
    """``f`` restricted to the inputs whose indices are in ``keep``."""
    keep = set(keep)
    return PartialFunction.from_pairs(f.alphabet, [(x, y) for i, (x, y) in enumerate(zip(f.inputs, f.outputs))
                                                   if i in keep], costs=f.costs)
