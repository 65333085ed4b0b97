"""Composition ``g(h_1(x_1), ..., h_n(x_n))`` under a time budget, and the main family built with it.

This module owns :func:`compose` (the restricted domain enumerated directly, counted before
it is built) and :func:`position_search_composition`, the main family: an outer function of
``n`` position-search rows with ``sum_i t_i^2 = T``.  Composed functions number their
positions row by row and name them ``r<i>p<k>`` (1-based); their ``groups`` are the rows.

>>> position_search_composition("or", 2, None, 4).output_counts()
{'0': 3, '1': 9}
"""

from __future__ import annotations

import logging
import math
from collections import Counter
from typing import Hashable, Sequence

from advbound.errors import InvalidFunctionError
from advbound.functions.function import Automorphism, PartialFunction
from advbound.functions.outer import block_generators, is_automorphism, named_function
from advbound.functions.searchrows import position_search_row
from advbound.functions.sizelimit import _check_int, check_domain_size
from advbound.functions.tablefile import sort_symbols
from advbound.functions.timemodel import Budget, TimeModel

__all__ = ["compose", "position_search_composition"]

log = logging.getLogger("advbound")


# ---------------------------------------------------------------------------------------------
# Composition
# ---------------------------------------------------------------------------------------------
def _same_function(a: PartialFunction, b: PartialFunction) -> bool:
    return a is b or (a.alphabet == b.alphabet and a.inputs == b.inputs and a.outputs == b.outputs
                      and a.costs == b.costs)


def _outer_is_symmetric(outer: PartialFunction) -> bool:
    """Whether every permutation of positions preserves the outer domain and values."""
    if outer.n < 2:
        return False
    return all(is_automorphism(outer, a) for a in block_generators(outer.n, 1))


def compose(outer: PartialFunction, inners: PartialFunction | Sequence[PartialFunction], *,
            time_model: TimeModel | Sequence[TimeModel] | None = None, budget: Budget | None = None,
            max_ones: int | None = None, description: str | None = None,
            max_inputs: int | None | str = "default") -> PartialFunction:
    """The composition ``g(h_1(x_1), ..., h_n(x_n))``, optionally restricted by a time budget.

    Parameters
    ----------
    outer : PartialFunction
        ``g`` on ``n`` positions; the inner output labels must be symbols of its alphabet.
        Where ``g`` is undefined on the inner outputs, the composition is undefined.
    inners : PartialFunction or sequence of PartialFunction
        One inner function for every row, or a sequence of ``n`` (possibly different) ones.
    time_model : TimeModel or sequence of TimeModel, optional
        Maps each row input to a profile entry and a time (one model for all rows or one per
        row).  Default when a budget is given: :meth:`TimeModel.sqrt`.
    budget : Budget, optional
        Keeps only the inputs whose profile ``(k_1, ..., k_n)`` is allowed.
    max_ones : int, optional
        Keep only inputs with at most this many rows whose inner value is ``'1'``.
    description : str, optional
        Default: generated from the parts.
    max_inputs : int, None or "default"
        Refuse (before building) a composition with more inputs than this, or one that would
        not fit in the available memory; see :func:`check_domain_size`.

    Returns
    -------
    PartialFunction
        Positions numbered row by row and named ``r<i>p<k>`` (1-based); ``groups`` are the
        rows; costs are the inner costs concatenated.  The alphabet is the inner alphabet when
        all rows share one, otherwise the union ordered by
        :func:`~advbound.functions.tablefile.sort_symbols` (digits, other symbols, ``*`` last).  When the
        outer function is symmetric, the inner functions and time models are identical and
        the restriction is invariant under permuting rows, the row swaps ``(i, i+1)`` and the
        cyclic row shift are handed over as ``symmetries``.

    Notes
    -----
    The restricted domain is enumerated directly: the allowed profiles first (see
    :meth:`Budget.allowed_profiles`), then a depth-first walk over the rows that only
    visits row inputs consistent with an allowed profile, with the outer domain and with
    ``max_ones``.  The walk visits rows in canonical order, so no sorting is needed.  The
    same walk, counting instead of building (memoised on the state it depends on), gives
    the exact number of inputs first, so an oversized domain is refused before it exists.

    Examples
    --------
    OR of two rows of length 3 with ``k_1 + k_2 = 4`` (profiles (1,3), (2,2), (3,1)):

    >>> from advbound.functions.outer import or_function
    >>> f = compose(or_function(2), position_search_row(3), budget=Budget.sum_squares(4))
    >>> f.size, f.position_names[:4], f.groups
    (12, ('r1p1', 'r1p2', 'r1p3', 'r2p1'), ((0, 1, 2), (3, 4, 5)))
    """
    n, inners, models, max_ones = _checked_parts(outer, inners, time_model, budget, max_ones)
    alphabet, rows, levels = _rows_of(inners, models, budget)
    allowed = budget.allowed_profiles(levels) if budget is not None else None
    if allowed is not None and not allowed:
        raise InvalidFunctionError(_no_profile_message(budget, levels))
    children = _profile_tree(allowed, n)
    n_positions = sum(h.n for h in inners)
    outer_map, outer_prefixes = _checked_size(outer, rows, children, max_ones, n_positions, max_inputs)
    inputs, outputs = _walk_composed(rows, children, outer_map, outer_prefixes, max_ones)
    if not inputs:
        raise InvalidFunctionError("the composition is defined on no input (the restrictions exclude all)")

    costs, names, groups = _layout(inners)
    symmetries = _composed_symmetries(outer, inners, models, budget, allowed)
    if description is None:
        description = _composed_description(outer, inners, models, budget, max_ones)
    log.info("composed %d inputs on %d positions", len(inputs), len(costs))
    return PartialFunction(alphabet, tuple(inputs), tuple(outputs), costs, position_names=names,
                           groups=groups, symmetries=symmetries, description=description)


def _checked_parts(outer, inners, time_model, budget, max_ones) -> tuple:
    """The arguments of :func:`compose`, checked: ``(n, inners, models, max_ones)``.

    ``inners`` becomes a tuple of ``n`` functions and ``models`` a tuple of ``n`` time models
    (``None`` each without a budget and a time model); misuse raises one line.
    """
    if not isinstance(outer, PartialFunction):
        raise InvalidFunctionError(f"outer must be a PartialFunction, got {type(outer).__name__}")
    n = outer.n
    if n < 1:
        raise InvalidFunctionError("outer function has no positions")
    if isinstance(inners, PartialFunction):
        inners = (inners,) * n
    inners = tuple(inners)
    if len(inners) != n:
        raise InvalidFunctionError(f"{len(inners)} inner functions given for an outer function on {n} positions")
    for i, h in enumerate(inners):
        if not isinstance(h, PartialFunction):
            raise InvalidFunctionError(f"inner function of row {i + 1} is a {type(h).__name__}, "
                                       "not a PartialFunction")
        for lab in h.labels:
            if lab not in outer.alphabet:
                raise InvalidFunctionError(
                    f"inner function of row {i + 1} has output label {lab!r}, which is not a symbol of the "
                    f"outer alphabet {''.join(outer.alphabet)!r}")
    if budget is not None and not isinstance(budget, Budget):
        raise InvalidFunctionError(f"budget must be a Budget, got {type(budget).__name__}")
    if time_model is None:
        models = (TimeModel.sqrt(),) * n if budget is not None else (None,) * n
    elif isinstance(time_model, TimeModel):
        models = (time_model,) * n
    else:
        models = tuple(time_model)
        if len(models) != n or not all(isinstance(t, TimeModel) for t in models):
            raise InvalidFunctionError(f"time_model must be a TimeModel or a sequence of {n} TimeModels")
    if max_ones is not None:
        max_ones = _check_int(max_ones, "max_ones", 0)
    return n, inners, models, max_ones


def _rows_of(inners, models, budget) -> tuple:
    """The composed alphabet and each row's inputs in composed canonical order, with their times.

    Returns ``(alphabet, rows, levels)``: ``rows[i]`` lists ``(string, inner output, profile key,
    is_one)`` for row ``i`` (the key is ``None`` without a budget); ``levels[i]`` maps each
    profile key of row ``i`` to its time.
    """
    # composed alphabet and each row's inputs in composed canonical order
    if all(h.alphabet == inners[0].alphabet for h in inners):
        alphabet = inners[0].alphabet
    else:
        alphabet = sort_symbols(s for h in inners for s in h.alphabet)
    order = {s: i for i, s in enumerate(alphabet)}
    rows = []  # per row: list of (string, inner output, profile key, is_one)
    levels = []  # per row: key -> t
    for i, h in enumerate(inners):
        pairs = sorted(zip(h.inputs, h.outputs), key=lambda p: [order[c] for c in p[0]])
        lv: dict[Hashable, float] = {}
        entries = []
        for x, y in pairs:
            key = None
            if budget is not None:
                try:
                    key, t = models[i].level(x)
                except InvalidFunctionError as e:
                    raise InvalidFunctionError(f"row {i + 1}: {e}") from None
                if lv.setdefault(key, t) != t:
                    raise InvalidFunctionError(
                        f"row {i + 1}: profile entry {key!r} has two times, {lv[key]!r} and {t!r}")
            entries.append((x, y, key, y == "1"))
        rows.append(entries)
        levels.append(lv)
    return alphabet, rows, levels


def _profile_tree(allowed: set[tuple] | None, n: int) -> list[dict[tuple, frozenset]] | None:
    """``children[d][prefix]``: the keys row ``d`` may take after an allowed prefix of length ``d``.

    ``None`` when every profile is allowed (no budget).
    """
    if allowed is None:
        return None
    raw: list[dict[tuple, set]] = [{} for _ in range(n)]
    for p in allowed:
        for d in range(n):
            raw[d].setdefault(p[:d], set()).add(p[d])
    return [{kp: frozenset(v) for kp, v in level.items()} for level in raw]


def _checked_size(outer, rows, children, max_ones, n_positions, max_inputs) -> tuple[dict, list[set]]:
    """Count the composed inputs first and refuse an empty or oversized domain.

    Returns ``(outer_map, outer_prefixes)``: the outer function as ``input -> output`` and, for
    each ``d``, the set of prefixes of length ``d`` of its inputs.  A total outer function is
    counted (and an oversized domain refused) before those are built.
    """
    n = outer.n
    total = None
    if outer.size == len(outer.alphabet) ** n:  # total outer: every row output combination is defined
        total = _count_composed(rows, children, None, None, max_ones)
        check_domain_size(total, n_positions, max_inputs, what="the composition")
    outer_map = dict(zip(outer.inputs, outer.outputs))
    outer_prefixes = [{x[:d] for x in outer.inputs} for d in range(n)]
    if total is None:
        total = _count_composed(rows, children, outer_map, outer_prefixes, max_ones)
    if total == 0:
        raise InvalidFunctionError("the composition is defined on no input (the restrictions exclude all)")
    check_domain_size(total, n_positions, max_inputs, what="the composition")
    return outer_map, outer_prefixes


def _walk_composed(rows, children, outer_map, outer_prefixes, max_ones) -> tuple[list[str], list[str]]:
    """The composed inputs and their outputs, in canonical order: the depth-first walk of :func:`compose`.

    Only row inputs consistent with an allowed profile (``children``), with the outer domain
    and with ``max_ones`` are visited; the last row is emitted in bulk, from a cache.
    """
    n = len(rows)
    inputs: list[str] = []
    outputs: list[str] = []
    last = rows[-1]
    last_cache: dict = {}

    def leaves(keys, allow_one: bool, op: str):
        """Last-row strings and composed labels for one (allowed keys, ones left, outer prefix)."""
        ck = (keys, allow_one, op)
        got = last_cache.get(ck)
        if got is None:
            rs, labs = [], []
            for r, o, key, one in last:
                if (keys is None or key in keys) and (allow_one or not one):
                    lab = outer_map.get(op + o)
                    if lab is not None:
                        rs.append(r)
                        labs.append(lab)
            got = last_cache[ck] = (rs, labs)
        return got

    row_cache: dict = {}

    def row_entries(i: int, keys):
        """Row ``i`` entries (canonical order) whose key is in ``keys`` (``None``: all)."""
        if keys is None:
            return rows[i]
        got = row_cache.get((i, keys))
        if got is None:
            got = row_cache[(i, keys)] = [e for e in rows[i] if e[2] in keys]
        return got

    def walk(i: int, s: str, kp: tuple, op: str, ones: int) -> None:
        # rows i .. n-1 remain; row n-1 is emitted from the loop over row n-2 (no call per leaf)
        onxt = outer_prefixes[i + 1]
        second_last = i == n - 2
        nxt_children = children[i + 1] if children is not None else None
        for r, o, key, one in row_entries(i, children[i][kp] if children is not None else None):
            kp2 = kp + (key,) if children is not None else kp
            op2 = op + o
            if op2 not in onxt:
                continue
            ones2 = ones + one
            if max_ones is not None and ones2 > max_ones:
                continue
            if second_last:
                rs, labs = leaves(nxt_children[kp2] if nxt_children is not None else None,
                                  max_ones is None or ones2 < max_ones, op2)
                if rs:
                    s2 = s + r
                    inputs.extend([s2 + x for x in rs])
                    outputs.extend(labs)
            else:
                walk(i + 1, s + r, kp2, op2, ones2)

    if n == 1:
        rs, labs = leaves(children[0][()] if children is not None else None, max_ones is None or max_ones > 0, "")
        inputs.extend(rs)
        outputs.extend(labs)
    else:
        walk(0, "", (), "", 0)
    return inputs, outputs


def _layout(inners) -> tuple[tuple, tuple, tuple]:
    """``(costs, position names, groups)`` of the composition: positions numbered row by row."""
    costs = tuple(c for h in inners for c in h.costs)
    names = tuple(f"r{i + 1}p{k + 1}" for i, h in enumerate(inners) for k in range(h.n))
    groups, start = [], 0
    for h in inners:
        groups.append(tuple(range(start, start + h.n)))
        start += h.n
    return costs, names, tuple(groups)


def _composed_symmetries(outer, inners, models, budget, allowed) -> tuple[Automorphism, ...]:
    """The row swaps and the cyclic row shift, when the composition is invariant under them (else none)."""
    n = outer.n
    symmetries: tuple[Automorphism, ...] = ()
    if (n >= 2 and all(_same_function(h, inners[0]) for h in inners)
            and all(t == models[0] for t in models) and _outer_is_symmetric(outer)
            and (budget is None or budget.kind != "profiles" or _closed_under_permutations(allowed, n))):
        symmetries = block_generators(n, inners[0].n)
    return symmetries


def _composed_description(outer, inners, models, budget, max_ones) -> str:
    """The description generated from the parts when :func:`compose` is given none."""
    n = outer.n
    parts = [outer.description or f"outer function on {n} positions"]
    if all(_same_function(h, inners[0]) for h in inners):
        parts.append(f"of {n} x ({inners[0].description or 'inner function'})")
    else:
        parts.append("of (" + "; ".join(h.description or "inner function" for h in inners) + ")")
    if budget is not None:
        tdesc = models[0].describe() if all(t == models[0] for t in models) else "per-row times"
        parts.append(f"restricted to {budget.describe()}, {tdesc}")
    if max_ones is not None:
        parts.append(f"at most {max_ones} row(s) with value 1")
    return ", ".join(parts[:1]) + " " + ", ".join(parts[1:])


def _count_composed(rows, children, outer_map, outer_prefixes, max_ones) -> int:
    """Number of inputs the walk of :func:`compose` emits, without building any string.

    Row entries are grouped by what the walk looks at (profile key, inner output); the count
    is memoised on (row, key prefix, outer prefix, ones so far).  ``outer_map=None`` means the
    outer function is total, so the outer prefix never matters and is left out of the state.
    """
    n = len(rows)
    groups = [sorted(Counter((key, o) for _r, o, key, _one in entries).items(), key=repr) for entries in rows]
    memo: dict = {}

    def count(i: int, kp: tuple, op: str, ones: int) -> int:
        ck = (i, kp, op, ones)
        got = memo.get(ck)
        if got is not None:
            return got
        keys = children[i][kp] if children is not None else None
        total = 0
        for (key, o), mult in groups[i]:
            if keys is not None and key not in keys:
                continue
            op2 = op + o if outer_map is not None else ""
            ones2 = ones + (o == "1") if max_ones is not None else 0
            if max_ones is not None and ones2 > max_ones:
                continue
            if i == n - 1:
                if outer_map is None or op2 in outer_map:
                    total += mult
            elif outer_map is None or op2 in outer_prefixes[i + 1]:
                total += mult * count(i + 1, kp + (key,) if children is not None else kp, op2, ones2)
        memo[ck] = total
        return total

    return count(0, (), "", 0)


def _closed_under_permutations(profiles: set[tuple], n: int) -> bool:
    gens = [a.positions for a in block_generators(n, 1)]
    for p in profiles:
        for g in gens:
            q = [None] * n
            for j in range(n):
                q[g[j]] = p[j]
            if tuple(q) not in profiles:
                return False
    return True


def _no_profile_message(budget: Budget, levels) -> str:
    """Why a budget allows no profile: a sum below the smallest possible one, or an exact sum no times meet."""
    msg = f"the budget ({budget.describe()}) allows no time profile"
    if budget.kind == "profiles":
        return msg
    sq = [sorted(float(v) ** 2 for v in lv.values()) for lv in levels]
    if all(sq):
        lo, hi = sum(r[0] for r in sq), sum(r[-1] for r in sq)
        if lo > budget.T + budget.tolerance:
            return msg + f": the smallest sum of t_i^2 any input has is {lo:g}, above {budget.T:g}"
        if budget.kind == "at_most" or hi < budget.T - budget.tolerance:
            return msg + (f": the largest sum of t_i^2 any input has is {hi:g}, below {budget.T:g}"
                          if hi < budget.T - budget.tolerance else "")
    return msg + (f"; no combination of squared times adds up to {budget.T:g} within rtol {budget.rtol:g}, as "
                  f"irrational times (t = k^α with α ≠ 1/2) almost never do: use budget = {{ at_most = \"T\" }} "
                  f"(Σ t_i² ≤ T), or widen the equality with an explicit rtol "
                  f"(e.g. budget = {{ sum_squares = \"T\", rtol = 0.05 }})")


def position_search_composition(outer: str | PartialFunction, n: int, m: int | None, T: float, *,
                                time: str | float = "sqrt", budget: str = "exact", max_ones: int | None = None,
                                k: int | None = None, rtol: float = 1e-9,
                                max_inputs: int | None | str = "default") -> PartialFunction:
    """The main family: ``outer`` of ``n`` position-search rows of length ``m`` under a time budget.

    Parameters
    ----------
    outer : str or PartialFunction
        A name for :func:`named_function` (``"or"``, ``"threshold"`` with ``k``, ...) or a function on
        ``n`` bits.
    n : int
        Number of rows.
    m : int or None
        Row length; ``None`` means the longest useful one, the largest ``k`` with
        ``t(k)^2 + (n - 1) <= T`` (``T - n + 1`` for square-root times).
    T : float
        The budget on ``sum_i t_i^2``.
    time : "sqrt" or float
        ``t = sqrt(k)`` or ``t = k**time``.
    budget : "exact" or "at_most"
        ``sum t_i^2 == T`` or ``<= T`` (tolerance ``rtol * max(|T|, 1)``).
    max_ones : int, optional
        At most this many rows with value 1.
    k : int, optional
        Parameter of ``threshold``/``exact``.
    max_inputs : int, None or "default"
        Size limit, see :func:`check_domain_size`.

    Examples
    --------
    >>> from math import comb
    >>> position_search_composition("or", 4, None, 10).size == comb(9, 3) * 2 ** 4
    True
    """
    n = _check_int(n, "n", 1)
    tm = TimeModel.sqrt() if time == "sqrt" else TimeModel.power(time)
    if budget == "exact":
        b = Budget.sum_squares(T, rtol)
    elif budget == "at_most":
        b = Budget.at_most(T, rtol)
    else:
        raise InvalidFunctionError(f"budget must be 'exact' or 'at_most', got {budget!r}")
    if m is None:
        if tm.alpha <= 0:
            raise InvalidFunctionError("give the row length m explicitly when the time exponent is <= 0")
        room = b.T - (n - 1) + b.tolerance  # each other row needs t^2 >= 1
        if room < 1:
            raise InvalidFunctionError(f"T = {T} leaves no room for {n} rows (each needs t^2 >= 1)")
        m = int(math.floor(room ** (1.0 / (2.0 * tm.alpha)) + 1e-9))
        while m > 1 and float(m) ** (2 * tm.alpha) > room:
            m -= 1
    m = _check_int(m, "row length m", 1)
    g = named_function(outer, n, k) if isinstance(outer, str) else outer
    if g.n != n:
        raise InvalidFunctionError(f"outer function has {g.n} positions, expected n = {n}")
    return compose(g, position_search_row(m, max_inputs=max_inputs), time_model=tm, budget=b, max_ones=max_ones,
                   max_inputs=max_inputs)
