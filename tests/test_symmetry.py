"""Tests for advbound.functions.symmetry: automorphism groups, orbits, stabilisers, averaging."""

import math

import numpy as np
import pytest

from advbound.functions.builders import (compose, is_automorphism, majority_function, or_function, parity_function,
                                         position_search_row)
from advbound.errors import InvalidFunctionError
from advbound.functions.function import Automorphism, PartialFunction
from advbound.functions.symmetry import (average_gamma, average_weights, automorphism_group, orbits_of_inputs,
                                         orbits_of_pairs, position_orbits, stabilizer)
from advbound.functions.tablefile import parse_table
from advbound.functions.timemodel import Budget


def _closure(G):
    """All group elements, by breadth-first closure over the generators (small groups only)."""
    seen = {G.identity().key(): G.identity()}
    frontier = [G.identity()]
    while frontier:
        nxt = []
        for g in frontier:
            for s in G.elements:
                h = s.compose(g)
                if h.key() not in seen:
                    seen[h.key()] = h
                    nxt.append(h)
        frontier = nxt
    return list(seen.values())


def _rows(T, rows=3):
    return compose(or_function(rows), [position_search_row(T - rows + 1)] * rows, budget=Budget.sum_squares(T))


class TestAutomorphismGroup:
    """Tests for ``automorphism_group``."""

    @pytest.mark.parametrize("n", [2, 3, 4, 5])
    def test_or_is_symmetric_group(self, n):
        """OR_n has group S_n, order n!.

        Derivation: 0^n is the only 0-input, so every relabelling must fix symbol 0 at every
        position (hence is the identity on {0,1}); the outputs cannot be swapped (1 versus
        2^n - 1 inputs); every permutation of positions preserves OR.
        """
        G = automorphism_group(or_function(n))
        assert G.order == math.factorial(n)
        assert position_orbits(G).tolist() == [0] * n

    @pytest.mark.parametrize("n", [2, 3, 4])
    def test_parity_group(self, n):
        """PARITY_n has order n!·2^n; the output-preserving elements are n!·2^(n-1).

        Derivation: every position permutation composed with every set of bit flips is a
        symmetry (an odd number of flips swaps the outputs, an even number keeps them), and
        a symmetry of a Boolean function is at most such a pair (n! · 2^n in all); the
        output-preserving ones (even flips) are half of them.
        """
        G = automorphism_group(parity_function(n))
        assert G.order == math.factorial(n) * 2 ** n
        elems = _closure(G)
        assert len(elems) == G.order
        keep = [e for e in elems if np.array_equal(e.outputs, np.arange(2))]
        assert len(keep) == math.factorial(n) * 2 ** (n - 1)

    @pytest.mark.parametrize("m", [3, 4, 5])
    def test_position_search_row_group(self, m):
        """A position-search row of length m >= 3 has order 2·m!.

        Derivation: all positions have cost 1 and any permutation of positions maps
        one-non-star strings to one-non-star strings with the same value (m!); at each
        position ``*`` occurs in 2m - 2 inputs and 0, 1 in one each, so a relabelling fixes
        ``*`` and may swap 0 and 1; swapping at one position only would change the value of
        two inputs but not of the others, so the swap is global, together with swapping
        the outputs (factor 2).
        """
        assert automorphism_group(position_search_row(m)).order == 2 * math.factorial(m)

    @pytest.mark.parametrize("T", [6, 7])
    def test_or_of_rows_with_time_budget(self, T):
        """OR of 3 position-search rows with k_1 + k_2 + k_3 = T has order 6 (rows permuted).

        Derivation: rows can be permuted (OR and the budget are symmetric); a non-trivial
        permutation inside a row changes some k_i and so the sum (leaves the domain); a bit
        flip in a row changes OR on some inputs but not on others (no output relabelling
        fits); so the group is S_3.
        """
        G = automorphism_group(_rows(T))
        assert G.order == 6
        m = T - 2
        assert position_orbits(G).tolist() == list(range(m)) * 3

    def test_majority(self):
        """MAJ_3 has order 12: S_3 times the global flip that swaps the outputs (derived as for PARITY)."""
        assert automorphism_group(majority_function(3)).order == 12

    @pytest.mark.parametrize("f", [or_function(4), parity_function(3), position_search_row(4), _rows(6)],
                             ids=["or4", "parity3", "psrow4", "rows6"])
    def test_generators_preserve_f(self, f):
        """Every returned generator is a symmetry by the builders' independent check ``is_automorphism``."""
        G = automorphism_group(f)
        assert G.generators
        assert all(is_automorphism(f, a) for a in G.generators)

    def test_costs_are_coloured(self):
        """OR_3 with costs (1, 1, 2) keeps only the swap of the two cost-1 positions (order 2, derived)."""
        f = PartialFunction.from_pairs("01", [(format(i, "03b"), int(i > 0)) for i in range(8)],
                                       costs=(1, 1, 2))
        G = automorphism_group(f)
        assert G.order == 2
        assert position_orbits(G).tolist() == [0, 0, 1]

    def test_table_file_gives_same_group(self):
        """The same function read back from table-file text (no known generators) has the same group order."""
        f = _rows(6)
        g = parse_table(f.to_table())
        assert g.symmetries == ()
        assert automorphism_group(g).order == automorphism_group(f).order == 6

    def test_known_generators_only(self):
        """With nauty off, the builder's generators of OR_4 (adjacent swaps and a cycle) generate S_4, order 24."""
        G = automorphism_group(or_function(4), nauty=False)
        assert G.source == "known" and G.order == 24

    def test_bad_known_generator_raises(self):
        """A handed-over generator that is no symmetry raises InvalidFunctionError naming its index."""
        f = or_function(2)
        bad = Automorphism((0, 1), relabel=((1, 0), (0, 1)))
        g = PartialFunction(f.alphabet, f.inputs, f.outputs, f.costs, symmetries=(bad,))
        with pytest.raises(InvalidFunctionError, match=r"symmetries\[0\]"):
            automorphism_group(g)

    def test_trivial_group(self):
        """A function with no symmetry has order 1 and singleton orbits (x1 decides, x2 only on one input)."""
        f = PartialFunction.from_pairs("01", [("00", 0), ("01", 0), ("10", 1)])
        G = automorphism_group(f)
        assert G.order == 1
        assert orbits_of_inputs(G).tolist() == [0, 1, 2]


class TestOrbits:
    """Tests for the orbit functions and stabilisers."""

    def test_or_pair_orbits(self):
        """OR_3: the differing-output pairs {0^3, y} fall into 3 orbits, by the weight of y (derived)."""
        f = or_function(3)
        G = automorphism_group(f)
        out = np.array([int(y) for y in f.outputs])
        mask = out[:, None] != out[None, :]
        lab = orbits_of_pairs(G, symmetric=True, mask=mask)
        assert lab.max() + 1 == 3
        weights = [x.count("1") for x in f.inputs]
        for y in range(1, 8):
            assert lab[0, y] == lab[y, 0] == weights[y] - 1

    def test_pair_orbit_invariance(self):
        """Pair orbit labels are constant along every generator's action."""
        G = automorphism_group(_rows(6))
        lab = orbits_of_pairs(G)
        for p in G.input_permutations:
            assert np.array_equal(lab[np.ix_(p, p)], lab)

    def test_input_orbits_of_or(self):
        """OR_4: input orbits are the Hamming-weight classes (5 of them), since the group is S_4."""
        f = or_function(4)
        lab = orbits_of_inputs(automorphism_group(f))
        w = np.array([x.count("1") for x in f.inputs])
        assert lab.max() + 1 == 5
        for k in range(5):
            assert np.unique(lab[w == k]).size == 1

    def test_stabilizer_order(self):
        """The stabiliser of a position of OR_4 is S_3 (order |G|/4 = 6), and it fixes that position."""
        G = automorphism_group(or_function(4))
        H = stabilizer(G, 0)
        assert H.order == 6
        assert all(e.positions[0] == 0 for e in H.elements)
        assert len(_closure(H)) == 6


class TestAveraging:
    """Tests for ``average_gamma`` and ``average_weights``."""

    def test_average_is_invariant_and_idempotent(self):
        """The group average is fixed by every generator, and averaging twice changes nothing."""
        f = _rows(6)
        G = automorphism_group(f)
        rng = np.random.default_rng(1)
        a = rng.standard_normal((f.size, f.size))
        a = a + a.T
        b = average_gamma(G, a)
        for p in G.input_permutations:
            c = np.empty_like(b)
            c[np.ix_(p, p)] = b
            assert np.allclose(c, b)
        assert np.allclose(average_gamma(G, b), b)

    def test_average_matches_explicit_sum(self):
        """For OR_3 the orbit mean equals (1/|G|) Σ_g P_g Γ P_gᵀ over the 6 enumerated elements."""
        f = or_function(3)
        G = automorphism_group(f)
        rng = np.random.default_rng(2)
        a = rng.standard_normal((8, 8))
        total = np.zeros((8, 8))
        for e in _closure(G):
            c = np.empty_like(a)
            c[np.ix_(e.inputs, e.inputs)] = a
            total += c
        assert np.allclose(total / G.order, average_gamma(G, a))

    def test_average_weights_keeps_density(self):
        """Averaging ρ over input orbits keeps Σρ = 1."""
        f = or_function(3)
        G = automorphism_group(f)
        rho = np.random.default_rng(3).random(8)
        rho /= rho.sum()
        _, r = average_weights(G, np.zeros((8, 8)), rho)
        assert r.sum() == pytest.approx(1.0)
