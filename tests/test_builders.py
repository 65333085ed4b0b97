"""Builders (advbound.functions.builders): closed-form domain sizes, brute-force enumeration, symmetries, errors."""

import itertools
import math
import time

import pytest

from advbound.functions.builders import (
                                         and_function, block_generators, compose, dead_positions, exact_function, from_predicate,
                                         is_automorphism, majority_function, named_function, or_function, parity_function,
                                         position_search_composition, position_search_row, threshold_function, time_profiles,
                                         check_domain_size, usable_row_lengths,
                                         )
from advbound.errors import InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.functions.timemodel import Budget, TimeModel


# ---------------------------------------------------------------------------------------------
# independent reference implementations (written for the tests, not shared with the library)
# ---------------------------------------------------------------------------------------------
def compositions_bounded(T, n, m):
    """Number of (k_1..k_n) with 1 <= k_i <= m and sum k_i = T (inclusion-exclusion; common knowledge)."""
    return sum((-1) ** j * math.comb(n, j) * math.comb(T - j * m - 1, n - 1)
               for j in range(n + 1) if T - j * m - 1 >= n - 1)


def brute_force(n, m, keep, outer=lambda bits: int("1" in bits)):
    """All strings of {0,1,*}^(n*m) whose rows each have one non-star and pass ``keep(ks, bits)``."""
    out = {}
    for t in itertools.product("01*", repeat=n * m):
        x = "".join(t)
        ks, bits = [], []
        for i in range(n):
            row = x[i * m:(i + 1) * m]
            marks = [p for p, c in enumerate(row) if c != "*"]
            if len(marks) != 1:
                break
            ks.append(marks[0] + 1)
            bits.append(row[marks[0]])
        else:
            if keep(ks, bits):
                out[x] = str(outer("".join(bits)))
    return out


def as_dict(f):
    return dict(zip(f.inputs, f.outputs))


def independent_automorphism_check(f, a):
    """True iff ``a`` maps the domain onto itself and keeps values (checked without the library helper)."""
    table = as_dict(f)
    labels = f.labels
    image = {}
    for x, y in table.items():
        z = [None] * f.n
        for j, ch in enumerate(x):
            s = ch if a.relabel is None else f.alphabet[a.relabel[j][f.alphabet.index(ch)]]
            z[a.positions[j]] = s
        z = "".join(z)
        image[z] = labels[a.outputs[labels.index(y)]] if a.outputs else y
    return image == table


# ---------------------------------------------------------------------------------------------
class TestSymmetricFunctions:
    """Tests for the symmetric Boolean builders."""

    @pytest.mark.parametrize("n", [1, 2, 3, 4, 5])
    def test_against_weight_rules(self, n):
        """OR/AND/PARITY/MAJ/THRESHOLD/EXACT agree with their weight rules on all 2^n inputs (common knowledge)."""
        rules = {
            "or": (or_function(n), lambda w: w >= 1),
            "and": (and_function(n), lambda w: w == n),
            "parity": (parity_function(n), lambda w: w % 2 == 1),
            "majority": (majority_function(n), lambda w: w > n / 2),
            "threshold": (threshold_function(n, (n + 1) // 2), lambda w: w >= (n + 1) // 2),
            "exact": (exact_function(n, n // 2), lambda w: w == n // 2),
        }
        for name, (f, rule) in rules.items():
            assert f.size == 2 ** n, name
            want = {"".join(b): str(int(rule(b.count("1")))) for b in itertools.product("01", repeat=n)}
            assert as_dict(f) == want, name

    def test_counts_closed_form(self):
        """Output counts: THRESHOLD_k has sum_{w>=k} C(n,w) ones, EXACT_k has C(n,k) (common knowledge)."""
        n = 6
        for k in range(n + 1):
            assert threshold_function(n, k).output_counts().get("1", 0) == sum(math.comb(n, w) for w in range(k, n + 1))
            assert exact_function(n, k).output_counts()["1"] == math.comb(n, k)

    def test_majority_even_tie_is_zero(self):
        """Documented tie rule: strict majority, so MAJ_4 equals THRESHOLD_3."""
        assert as_dict(majority_function(4)) == as_dict(threshold_function(4, 3))

    def test_symmetries_are_automorphisms(self):
        """Every handed generator of a symmetric function maps the domain onto itself and keeps f."""
        for f in (or_function(4), parity_function(3), exact_function(5, 2)):
            assert len(f.symmetries) == f.n  # n-1 transpositions and the n-cycle
            assert all(independent_automorphism_check(f, a) for a in f.symmetries)

    def test_constant_threshold_allowed(self):
        """THRESHOLD_0 is the constant 1 (a constant function is a valid value)."""
        assert threshold_function(3, 0).is_constant

    @pytest.mark.parametrize("call, msg", [
        (lambda: or_function(0), "n must be between 1 and 24, got 0"),
        (lambda: or_function(2.5), "n must be an integer"),
        (lambda: threshold_function(3, 4), "k must be between 0 and 3, got 4"),
        (lambda: exact_function(3, -1), "k must be between 0 and 3"),
        (lambda: named_function("xor", 3), "unknown function name 'xor'"),
        (lambda: named_function("threshold", 3), "needs a parameter k"),
        (lambda: named_function("or", 3, 1), "takes no parameter k"),
    ])
    def test_argument_errors(self, call, msg):
        """Bad arguments raise InvalidFunctionError naming the parameter."""
        with pytest.raises(InvalidFunctionError, match=msg):
            call()


class TestFromPredicate:
    """Tests for ``from_predicate``."""

    def test_matches_from_pairs(self):
        """The predicate builder gives the same function as listing the pairs by hand."""
        pred = lambda x: None if x.count("*") != 1 else x.replace("*", "")[0]
        f = from_predicate("01*", 3, pred)
        pairs = [("".join(t), pred("".join(t))) for t in itertools.product("01*", repeat=3)]
        g = PartialFunction.from_pairs("01*", [(x, y) for x, y in pairs if y is not None])
        assert (f.inputs, f.outputs) == (g.inputs, g.outputs)
        assert f.size == 3 * 4  # star position times the 2 x 2 other symbols

    @pytest.mark.parametrize("args, msg", [
        (("01", 0, lambda x: 0), "n must be >= 1"),
        (("01", 2, 5), "is not callable"),
        (("01", 2, lambda x: None), "the domain is empty"),
        (("01*", 30, lambda x: 0), "more than from_predicate enumerates"),
    ])
    def test_errors(self, args, msg):
        """Bad arguments and an empty result raise InvalidFunctionError."""
        with pytest.raises(InvalidFunctionError, match=msg):
            from_predicate(*args)


class TestPositionSearchRow:
    """Tests for ``position_search_row``."""

    @pytest.mark.parametrize("m", [1, 2, 5])
    def test_definition(self, m):
        """Defined exactly on the 2m strings with one non-star; the value is that symbol (definition)."""
        f = position_search_row(m)
        want = {}
        for t in itertools.product("01*", repeat=m):
            x = "".join(t)
            if m - x.count("*") == 1:
                want[x] = x.replace("*", "")
        assert as_dict(f) == want and f.size == 2 * m
        assert all(independent_automorphism_check(f, a) for a in f.symmetries)

    def test_bad_length(self):
        """A row length below 1 is rejected."""
        with pytest.raises(InvalidFunctionError, match="row length m must be >= 1"):
            position_search_row(0)


class TestCompose:
    """Tests for ``compose`` and ``position_search_composition``."""

    @pytest.mark.parametrize("n, m, T", [(2, 3, 4), (3, 3, 5), (3, 2, 4), (2, 4, 5)])
    def test_sum_budget_brute_force(self, n, m, T):
        """Domain and values equal brute force over {0,1,*}^(n m) filtered by sum k_i = T (predicate in the test)."""
        f = compose(or_function(n), position_search_row(m), budget=Budget.sum_squares(T))
        assert as_dict(f) == brute_force(n, m, lambda ks, bits: sum(ks) == T)
        assert f.size == compositions_bounded(T, n, m) * 2 ** n

    @pytest.mark.parametrize("n, T", [(2, 7), (3, 9), (4, 10), (5, 9)])
    def test_closed_form_unbounded_rows(self, n, T):
        """With m = T-n+1 the size is C(T-1, n-1) 2^n (compositions of T into n parts; common knowledge)."""
        f = position_search_composition("or", n, None, T)
        assert f.size == math.comb(T - 1, n - 1) * 2 ** n
        assert f.n == n * (T - n + 1)
        assert f.output_counts()["0"] == math.comb(T - 1, n - 1)  # OR is 0 only on the all-zero bits

    @pytest.mark.parametrize("n, T, w", [(3, 7, 0), (3, 7, 1), (4, 8, 2), (4, 9, 1)])
    def test_max_ones_closed_form(self, n, T, w):
        """max_ones = w gives C(T-1, n-1) * sum_{w' <= w} C(n, w') inputs (derived: bits chosen per profile)."""
        f = position_search_composition("or", n, None, T, max_ones=w)
        assert f.size == math.comb(T - 1, n - 1) * sum(math.comb(n, v) for v in range(w + 1))

    def test_max_ones_brute_force(self):
        """max_ones agrees with brute force counting the rows with value 1."""
        f = compose(or_function(3), position_search_row(3), budget=Budget.sum_squares(5), max_ones=1)
        assert as_dict(f) == brute_force(3, 3, lambda ks, bits: sum(ks) == 5 and bits.count("1") <= 1)

    def test_no_budget_is_full_product(self):
        """Without a budget the domain is the full product: (2m)^n inputs."""
        f = compose(and_function(2), position_search_row(3))
        assert as_dict(f) == brute_force(2, 3, lambda ks, bits: True, outer=lambda b: int(b == "11"))

    def test_at_most_brute_force(self):
        """sum t_i^2 <= T agrees with brute force."""
        f = compose(or_function(3), position_search_row(3), budget=Budget.at_most(5))
        assert as_dict(f) == brute_force(3, 3, lambda ks, bits: sum(ks) <= 5)

    def test_power_times_brute_force(self):
        """t = k^1 keeps sum k_i^2 = T exactly (here T = 6: profiles (1,1,2) and permutations)."""
        f = position_search_composition("or", 3, 3, 6, time=1.0)
        assert as_dict(f) == brute_force(3, 3, lambda ks, bits: sum(k * k for k in ks) == 6)

    def test_position_table_times(self):
        """An explicit time table per position: t^2 = (1, 2, 4), budget <= 5."""
        tm = TimeModel.positions([1.0, math.sqrt(2), 2.0])
        f = compose(or_function(2), position_search_row(3), time_model=tm, budget=Budget.at_most(5))
        sq = {1: 1, 2: 2, 3: 4}
        assert as_dict(f) == brute_force(2, 3, lambda ks, bits: sq[ks[0]] + sq[ks[1]] <= 5 + 1e-9)

    def test_sum_tolerance(self):
        """The exact budget uses a relative tolerance: sqrt(2)^2 + sqrt(3)^2 == 5 despite rounding."""
        f = compose(or_function(2), position_search_row(4), time_model=TimeModel.positions([1, 2 ** .5, 3 ** .5, 2]),
                    budget=Budget.sum_squares(5))
        assert time_profiles(f, TimeModel.positions([1, 2 ** .5, 3 ** .5, 2]))["profiles"] == {
            (1, 4): 4, (2, 3): 4, (3, 2): 4, (4, 1): 4}

    def test_profiles_budget(self):
        """Listed profiles with and without permutations agree with brute force."""
        f = compose(or_function(3), position_search_row(3), budget=Budget.from_profiles([(1, 2, 3)]))
        assert as_dict(f) == brute_force(3, 3, lambda ks, bits: ks == [1, 2, 3])
        g = compose(or_function(3), position_search_row(3), budget=Budget.from_profiles([(1, 2, 3)], permutations=True))
        assert as_dict(g) == brute_force(3, 3, lambda ks, bits: sorted(ks) == [1, 2, 3])
        assert not f.symmetries and len(g.symmetries) == 3

    def test_different_inners_and_alphabets(self):
        """Rows may differ; the alphabet is the union ('0','1', others, '*' last) and order stays canonical."""
        h2 = PartialFunction.from_pairs("ab", [("aa", 0), ("ab", 1), ("bb", 1)])
        f = compose(or_function(2), [position_search_row(2), h2])
        assert f.alphabet == ("0", "1", "a", "b", "*")
        want = {}
        for r1, y1 in zip(position_search_row(2).inputs, "0101"):
            for r2, y2 in (("aa", "0"), ("ab", "1"), ("bb", "1")):
                want[r1 + r2] = str(int("1" in y1 + y2))
        assert as_dict(f) == want
        order = {s: i for i, s in enumerate(f.alphabet)}
        assert list(f.inputs) == sorted(f.inputs, key=lambda s: [order[c] for c in s])
        assert f.groups == ((0, 1), (2, 3)) and f.position_names == ("r1p1", "r1p2", "r2p1", "r2p2")
        assert not f.symmetries  # different inner functions

    def test_costs_concatenated(self):
        """Costs are the inner costs, row after row."""
        h = PartialFunction.from_pairs("01", [("0", 0), ("1", 1)], costs=[2.5])
        f = compose(or_function(3), [h, position_search_row(2), h])
        assert f.costs == (2.5, 1.0, 1.0, 2.5)

    def test_partial_outer(self):
        """Where the outer function is undefined, so is the composition."""
        g = PartialFunction.from_pairs("01", [("00", 0), ("11", 1)])  # promise: equal bits
        f = compose(g, position_search_row(2))
        assert all(x.replace("*", "")[0] == x.replace("*", "")[1] for x in f.inputs) and f.size == 8

    def test_input_table_time_model(self):
        """A per-input time table works for non-position-search rows (OR_2 rows, times 1/2/2/3)."""
        inner = or_function(2)
        tm = TimeModel.inputs({"00": 1, "01": 2, "10": 2, "11": 3})
        f = compose(and_function(2), inner, time_model=tm, budget=Budget.sum_squares(5))
        t = {"00": 1, "01": 2, "10": 2, "11": 3}
        want = {a + b: str(int(("1" in a) and ("1" in b))) for a in t for b in t if t[a] ** 2 + t[b] ** 2 == 5}
        assert as_dict(f) == want

    def test_callable_time_model(self):
        """A callable model returning (key, t) with t = m - k + 1 keeps (4-k_1)^2 + (4-k_2)^2 = 5 (brute force)."""
        def far_is_cheap(r):
            k = len(r) - len(r.lstrip("*")) + 1  # 1-based position of the non-star
            return k, 4 - k

        tm = TimeModel.from_callable(far_is_cheap)
        f = compose(or_function(2), position_search_row(3), time_model=tm, budget=Budget.sum_squares(5))
        assert as_dict(f) == brute_force(2, 3, lambda ks, bits: (4 - ks[0]) ** 2 + (4 - ks[1]) ** 2 == 5)
        assert time_profiles(f, tm)["profiles"] == {(2, 3): 4, (3, 2): 4}

    @pytest.mark.parametrize("call, msg", [
        (lambda: compose(or_function(2), [position_search_row(2)]), "1 inner functions given for an outer function on 2"),
        (lambda: compose(or_function(2), PartialFunction.from_pairs("01", [("0", "a"), ("1", "b")])),
         "output label 'a', which is not a symbol of the outer alphabet '01'"),
        (lambda: compose(or_function(2), or_function(2), budget=Budget.sum_squares(3)),
         "row 1: row input '00' does not have exactly one symbol other than"),
        (lambda: compose(or_function(2), position_search_row(2), budget=Budget.sum_squares(10)), "allows no time profile"),
        (lambda: compose(or_function(2), position_search_row(2), budget=Budget.from_profiles([(1, 5)])),
         "entry 5 of row 2 matches no input"),
        (lambda: compose(or_function(2), position_search_row(2), budget=3), "budget must be a Budget"),
        (lambda: compose("or", position_search_row(2)), "outer must be a PartialFunction"),
        (lambda: compose(or_function(2), position_search_row(2), max_ones=-1), "max_ones must be >= 0"),
        (lambda: compose(or_function(2), position_search_row(3), time_model=TimeModel.positions([1, 1]),
                         budget=Budget.at_most(9)), "times are given for 2 positions only"),
        (lambda: position_search_composition("or", 3, None, 2), "leaves no room for 3 rows"),
        (lambda: position_search_composition("or", 3, None, 5, budget="sum"), "budget must be 'exact' or 'at_most'"),
        (lambda: Budget.sum_squares(float("nan")), "T must be a finite number"),
        (lambda: Budget.from_profiles([]), "list of allowed profiles is empty"),
        (lambda: TimeModel.positions([1, -1]), "times must be finite and >= 0"),
    ])
    def test_errors(self, call, msg):
        """Misuse raises InvalidFunctionError with a message naming the problem."""
        with pytest.raises(InvalidFunctionError, match=msg):
            call()

    def test_empty_restriction(self):
        """max_ones = 0 on AND of rows with a promise that excludes all-zero bits leaves nothing: an error."""
        g = PartialFunction.from_pairs("01", [("11", 1), ("01", 0), ("10", 0)])
        with pytest.raises(InvalidFunctionError, match="defined on no input"):
            compose(g, position_search_row(2), max_ones=0)


class TestSymmetries:
    """Row-permutation generators handed over by ``compose``."""

    @pytest.mark.parametrize("outer", ["or", "and", "parity", "majority"])
    def test_generators_are_automorphisms(self, outer):
        """Each handed generator maps the domain onto itself and preserves f (checked independently)."""
        f = position_search_composition(outer, 3, None, 6, max_ones=2)
        assert len(f.symmetries) == 3
        for a in f.symmetries:
            assert independent_automorphism_check(f, a)
            assert is_automorphism(f, a)

    def test_four_rows(self):
        """Four rows: three adjacent swaps and the 4-cycle, all automorphisms."""
        f = position_search_composition("threshold", 4, None, 7, k=2)
        assert [independent_automorphism_check(f, a) for a in f.symmetries] == [True] * 4

    def test_none_for_asymmetric_outer(self):
        """x1 AND NOT x2 is not symmetric: no generators are handed over."""
        g = from_predicate("01", 2, lambda x: int(x == "10"))
        f = compose(g, position_search_row(3), budget=Budget.sum_squares(4))
        assert f.symmetries == ()
        swap = block_generators(2, 3)[0]
        assert not independent_automorphism_check(f, swap) and not is_automorphism(f, swap)

    def test_none_for_unequal_row_times(self):
        """Different time models per row break the row symmetry: none handed over."""
        f = compose(or_function(2), position_search_row(3), time_model=[TimeModel.sqrt(), TimeModel.power(1.0)],
                    budget=Budget.at_most(4))
        assert f.symmetries == ()


class TestDomainFacts:
    """Tests for ``dead_positions`` and ``time_profiles``."""

    def test_dead_positions(self):
        """With k_1 + k_2 = 4 and rows of length 5, k <= 3, so positions 4 and 5 of each row are dead."""
        f = compose(or_function(2), position_search_row(5), budget=Budget.sum_squares(4))
        assert [f.position_names[j] for j in dead_positions(f)] == ["r1p4", "r1p5", "r2p4", "r2p5"]

    def test_time_profiles(self):
        """Each profile carries 2^n inputs and all sums equal T (derived from the definition)."""
        f = position_search_composition("or", 3, None, 6)
        tp = time_profiles(f)
        assert len(tp["profiles"]) == math.comb(5, 2) and set(tp["profiles"].values()) == {8}
        assert tp["sum_squares"] == {6.0: f.size}

    def test_time_profiles_need_rows(self):
        """A function without rows has no time profiles."""
        with pytest.raises(InvalidFunctionError, match="has no rows"):
            time_profiles(or_function(2))


@pytest.mark.slow
def test_large_build_is_fast():
    """OR of 4 rows with k_1+..+k_4 = 40 has C(39,3) 2^4 = 146224 inputs and builds in seconds."""
    t0 = time.perf_counter()
    f = position_search_composition("or", 4, None, 40)
    elapsed = time.perf_counter() - t0
    assert f.size == math.comb(39, 3) * 16
    assert elapsed < 15.0


class TestSizeLimits:
    """Tests for the up-front size checks and the usable row lengths."""

    def test_count_is_exact(self):
        """compose counts before building: max_inputs = |D| builds, |D| - 1 is refused (OR3, T = 7:
        C(6,2) 2^3 = 120 inputs, compositions of 7 into 3 parts times a bit per row)."""
        row = position_search_row(5)
        f = compose(or_function(3), row, budget=Budget.sum_squares(7), max_inputs=120)
        assert f.size == 120
        with pytest.raises(InvalidFunctionError, match=r"the composition would have 120 inputs on 15 positions"):
            compose(or_function(3), row, budget=Budget.sum_squares(7), max_inputs=119)
        # at most one row of value 1: C(6,2) (1 + 3) = 60 inputs
        assert compose(or_function(3), row, budget=Budget.sum_squares(7), max_ones=1, max_inputs=60).size == 60
        with pytest.raises(InvalidFunctionError, match=r"would have 60 inputs"):
            compose(or_function(3), row, budget=Budget.sum_squares(7), max_ones=1, max_inputs=59)

    def test_count_with_partial_outer_and_max_ones(self):
        """The count respects a partial outer function and max_ones (size compared with the built domain)."""
        outer = PartialFunction.from_pairs("01", [("000", 0), ("011", 1), ("101", 1), ("110", 0)])
        f = compose(outer, position_search_row(3), budget=Budget.at_most(6), max_ones=2)
        compose(outer, position_search_row(3), budget=Budget.at_most(6), max_ones=2, max_inputs=f.size)
        with pytest.raises(InvalidFunctionError, match=rf"would have {f.size} inputs"):
            compose(outer, position_search_row(3), budget=Budget.at_most(6), max_ones=2, max_inputs=f.size - 1)

    def test_row_refused_before_building(self):
        """A row of length 10**9 is refused at once (2 * 10**9 inputs), naming max_inputs."""
        with pytest.raises(InvalidFunctionError, match=r"length 1,000,000,000 would have 2,000,000,000 inputs.*"
                                                       r"more than max_inputs = 5,000,000"):
            position_search_row(10 ** 9)
        assert position_search_row(3, max_inputs=6).size == 6

    def test_check_domain_size_off(self):
        """max_inputs=None disables both checks; a bad max_inputs is an error."""
        check_domain_size(10 ** 12, 10 ** 6, max_inputs=None)
        with pytest.raises(InvalidFunctionError, match="max_inputs must be >= 1"):
            check_domain_size(1, 1, max_inputs=0)

    @pytest.mark.parametrize("n, T, alpha, want", [
        (3, 4, 0.5, 2), (3, 12, 0.5, 10), (2, 5, 0.5, 4),  # k <= T - (n - 1)
        (3, 6, 1.0, 2), (2, 17, 1.0, 4),                    # k^2 <= T - (n - 1)
    ])
    def test_usable_lengths_power(self, n, T, alpha, want):
        """t = k^alpha under sum t_i^2 = T: the last usable k solves k^(2 alpha) <= T - (n - 1) (derived)."""
        assert usable_row_lengths([10 ** 6] * n, [TimeModel.power(alpha)] * n, Budget.sum_squares(T)) == [want] * n
        assert usable_row_lengths([want] * n, [TimeModel.power(alpha)] * n, Budget.at_most(T)) == [want] * n

    def test_usable_lengths_agree_with_dead_positions(self):
        """Cutting to the usable length removes exactly the trailing dead positions of the long row."""
        for T in range(3, 9):
            full = compose(or_function(2), position_search_row(8), budget=Budget.sum_squares(T))
            (m, _), dead = usable_row_lengths([8, 8], [TimeModel.sqrt()] * 2, Budget.sum_squares(T)), dead_positions(full)
            assert len(dead) == 2 * (8 - m)
            cut = compose(or_function(2), position_search_row(m), budget=Budget.sum_squares(T))
            keep = [j for j in range(16) if j not in dead]
            assert cut.inputs == tuple("".join(x[j] for j in keep) for x in full.inputs)

    def test_usable_lengths_tables_and_profiles(self):
        """Position time tables use the last fitting time; listed profiles the largest listed position."""
        tm = TimeModel.positions([1, 2 ** 0.5, 2, 8 ** 0.5])  # t^2 = 1, 2, 4, 8
        assert usable_row_lengths([4, 4, 2], [tm] * 3, Budget.at_most(4)) == [2, 2, 2]
        assert usable_row_lengths([4, 4, 2], [tm] * 3, Budget.at_most(8)) == [3, 3, 2]
        prof = Budget.from_profiles([(1, 2, 3)])
        assert usable_row_lengths([9, 9, 9], [TimeModel.sqrt()] * 3, prof) == [1, 2, 3]
        perm = Budget.from_profiles([(1, 2, 3)], permutations=True)
        assert usable_row_lengths([9, 9, None], [TimeModel.sqrt()] * 3, perm) == [3, 3, None]
        # nothing known: a decreasing time or an input table leaves the row as it is
        assert usable_row_lengths([9], [TimeModel.power(-1.0)], Budget.at_most(1)) == [9]


from hypothesis import given, settings, strategies as st  # noqa: E402


@settings(max_examples=25, deadline=None)
@given(n=st.integers(1, 3), m=st.integers(1, 3), T=st.integers(1, 9), w=st.one_of(st.none(), st.integers(0, 3)),
       outer=st.sampled_from(["or", "and", "parity", "majority"]), at_most=st.booleans())
def test_compose_property_brute_force(n, m, T, w, outer, at_most):
    """For random small parameters, compose equals brute-force filtering of {0,1,*}^(n m) (or raises on empty)."""
    rules = {"or": lambda b: int("1" in b), "and": lambda b: int("0" not in b),
             "parity": lambda b: b.count("1") % 2, "majority": lambda b: int(2 * b.count("1") > len(b))}
    keep = lambda ks, bits: (sum(ks) <= T if at_most else sum(ks) == T) and (w is None or bits.count("1") <= w)
    want = brute_force(n, m, keep, outer=rules[outer])
    budget = Budget.at_most(T) if at_most else Budget.sum_squares(T)
    if not want:
        with pytest.raises(InvalidFunctionError):
            compose(named_function(outer, n), position_search_row(m), budget=budget, max_ones=w)
        return
    f = compose(named_function(outer, n), position_search_row(m), budget=budget, max_ones=w)
    assert as_dict(f) == want
    order = {s: i for i, s in enumerate(f.alphabet)}
    assert list(f.inputs) == sorted(f.inputs, key=lambda s: [order[c] for c in s])
