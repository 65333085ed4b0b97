"""Validation of PartialFunction (advbound.functions.function): every error path and the canonical order."""

import itertools
import random

import pytest

from advbound.errors import AdvboundWarning, InvalidFunctionError
from advbound.functions.function import Automorphism, PartialFunction


class TestFromPairs:
    """Tests for ``PartialFunction.from_pairs``."""

    def test_wrong_input_length(self):
        """An input of the wrong length is rejected, naming the input and both lengths."""
        with pytest.raises(InvalidFunctionError, match=r"input '011' has length 3, expected 2"):
            PartialFunction.from_pairs("01", [("00", 0), ("011", 1)])

    def test_unknown_symbol(self):
        """A symbol outside the alphabet is rejected, naming symbol and position."""
        with pytest.raises(InvalidFunctionError, match=r"symbol 'x' at position 2, not in alphabet '01'"):
            PartialFunction.from_pairs("01", [("00", 0), ("0x", 1)])

    def test_same_input_two_outputs(self):
        """Listing an input twice with different outputs is an error naming both outputs."""
        with pytest.raises(InvalidFunctionError, match=r"input '01' \(item 3\) is listed with two outputs: '1' and '0'"):
            PartialFunction.from_pairs("01", [("01", 1), ("00", 0), ("01", 0)])

    def test_same_input_same_output_warns(self):
        """Listing an input twice with the same output only warns, and keeps one copy."""
        with pytest.warns(AdvboundWarning, match="1 duplicate input"):
            f = PartialFunction.from_pairs("01", [("01", 1), ("00", 0), ("01", 1)])
        assert f.inputs == ("00", "01")

    def test_empty_domain(self):
        """A function with no input is rejected."""
        with pytest.raises(InvalidFunctionError, match="the domain is empty"):
            PartialFunction.from_pairs("01", [])

    def test_constant_function_allowed(self):
        """A single output value is allowed; is_constant says so (its bound is 0, common knowledge)."""
        f = PartialFunction.from_pairs("01", [("00", 1), ("11", 1)])
        assert f.is_constant and not f.is_boolean and f.labels == ("1",)

    @pytest.mark.parametrize("alphabet, msg", [
        ("", "the alphabet is empty"),
        ("0#", "must be one non-space character other than '#'"),
        (["0", "ab"], "must be one non-space character"),
        ("010", "lists a symbol twice"),
        ("0 ", "must be one non-space character"),
    ])
    def test_bad_alphabet(self, alphabet, msg):
        """Empty alphabets, '#', spaces, multi-character and repeated symbols are rejected."""
        with pytest.raises(InvalidFunctionError, match=msg):
            PartialFunction.from_pairs(alphabet, [("0", 0)])

    def test_canonical_order_follows_alphabet(self):
        """Inputs are sorted by alphabet index, not Unicode order ('*' < '1' < '0' here by choice)."""
        f = PartialFunction.from_pairs("*10", [("00", 0), ("*1", 1), ("10", 1), ("1*", 0)])
        assert f.inputs == ("*1", "1*", "10", "00")

    def test_canonical_order_wide_alphabet(self):
        """With 300 symbols listed in reverse code-point order, inputs sort by alphabet index."""
        alphabet = tuple(chr(0x500 - i) for i in range(300))
        pairs = [(alphabet[i] + alphabet[j], (i + j) % 2) for i, j in [(299, 0), (0, 299), (150, 7), (0, 1)]]
        f = PartialFunction.from_pairs(alphabet, pairs)
        idx = [[alphabet.index(c) for c in x] for x in f.inputs]
        assert idx == [[0, 1], [0, 299], [150, 7], [299, 0]]


class TestDirectConstruction:
    """Tests for the checks run on a directly constructed value."""

    def test_not_canonical(self):
        """Inputs out of canonical order are rejected."""
        with pytest.raises(InvalidFunctionError, match="not in canonical order"):
            PartialFunction(("0", "1"), ("1", "0"), ("a", "b"), (1.0,))

    def test_repeated_input(self):
        """A repeated input is rejected like an out-of-order one."""
        with pytest.raises(InvalidFunctionError, match="not in canonical order"):
            PartialFunction(("0", "1"), ("0", "0"), ("a", "a"), (1.0,))

    def test_unknown_symbol(self):
        """A symbol outside the alphabet is rejected."""
        with pytest.raises(InvalidFunctionError, match=r"input '0x' has symbol 'x'"):
            PartialFunction(("0", "1"), ("00", "0x"), ("a", "b"), (1.0, 1.0))

    def test_length(self):
        """An input whose length differs from the number of costs is rejected."""
        with pytest.raises(InvalidFunctionError, match="has length 1, expected 2"):
            PartialFunction(("0", "1"), ("0",), ("a",), (1.0, 1.0))

    def test_count_mismatch(self):
        """Inputs and outputs must have the same count."""
        with pytest.raises(InvalidFunctionError, match="2 inputs but 1 outputs"):
            PartialFunction(("0", "1"), ("0", "1"), ("a",), (1.0,))

    @pytest.mark.parametrize("cost", [0.0, -1.0, float("inf"), float("nan")])
    def test_bad_cost(self, cost):
        """Costs must be finite and positive."""
        with pytest.raises(InvalidFunctionError, match="costs must be finite and positive"):
            PartialFunction(("0", "1"), ("0", "1"), ("a", "b"), (cost,))

    def test_bad_groups_and_names(self):
        """Groups must partition the positions and names must match their number."""
        with pytest.raises(InvalidFunctionError, match="groups must partition"):
            PartialFunction(("0", "1"), ("00", "11"), ("a", "b"), (1.0, 1.0), groups=((0,),))
        with pytest.raises(InvalidFunctionError, match="1 position names for 2 positions"):
            PartialFunction(("0", "1"), ("00", "11"), ("a", "b"), (1.0, 1.0), position_names=("p",))

    def test_bad_symmetry(self):
        """A symmetry must permute all positions."""
        with pytest.raises(InvalidFunctionError, match="is not a permutation of 2 positions"):
            PartialFunction(("0", "1"), ("00", "11"), ("a", "b"), (1.0, 1.0), symmetries=(Automorphism((0, 0)),))

    def test_order_check_agrees_with_index_lists(self):
        """The fast order check accepts exactly the orders that sorting by alphabet-index lists gives.

        Reference: sorting by the list of alphabet indices, computed here independently.
        """
        rng = random.Random(7)
        alphabet = ("b", "*", "0", "a")
        order = {s: i for i, s in enumerate(alphabet)}
        for _ in range(30):
            xs = {"".join(rng.choice(alphabet) for _ in range(5)) for _ in range(20)}
            good = sorted(xs, key=lambda s: [order[c] for c in s])
            PartialFunction(alphabet, tuple(good), ("0",) * len(good), (1.0,) * 5)
            if len(good) > 1:
                i = rng.randrange(len(good) - 1)
                bad = good[:i] + [good[i + 1], good[i]] + good[i + 2:]
                with pytest.raises(InvalidFunctionError, match="not in canonical order"):
                    PartialFunction(alphabet, tuple(bad), ("0",) * len(bad), (1.0,) * 5)


def test_value_and_counts():
    """value() and output_counts() read the table back (AND on 2 bits, common knowledge)."""
    f = PartialFunction.from_pairs("01", [("".join(b), int(b == ("1", "1"))) for b in itertools.product("01", repeat=2)])
    assert f.value("11") == "1" and f.output_counts() == {"0": 3, "1": 1}
    with pytest.raises(KeyError):
        f.value("2")
