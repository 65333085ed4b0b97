"""The row family of an instance file, built from its input orbits without listing its inputs.

For an instance whose rows are interchangeable (a named symmetric outer function such as OR, AND
or a threshold; identical position-search rows; one time model whose time depends on the
position of the non-star symbol; a sum budget or none; optionally ``max_ones``), the S_n-orbits
of the inputs are the multisets of row letters, and :func:`family_from_spec` lists them directly:
the non-decreasing position profiles that meet the budget, times the ways to give some of their
rows the value 1.  ``|D|`` is never enumerated, so an instance of 17.6 million inputs (OR of 12
rows at T = 24, at most one row of value 1) becomes a :class:`~advbound.functions.rowfamily.RowFamily`
of 348 orbits in well under a second.

Anything outside that shape is refused with a one-line message naming the key, and the caller
falls back to building the function (:func:`advbound.functions.instance.build_instance`).

>>> from advbound.functions.instance import parse_instance
>>> spec = parse_instance('''
... [instance]
... outer = "or"
... rows = 3
... inner = "position_search"
... row_length = 5
... time = "sqrt"
... budget = { sum_squares = 7 }
... ''')
>>> fam = family_from_spec(spec)
>>> fam.size, len(fam.contents)        # the 120 inputs of OR of 3 rows at T = 7, in 26 orbits
(120, 26)
"""

from __future__ import annotations

import itertools
from typing import Mapping

from advbound.errors import InvalidInstanceError
from advbound.functions.grid import _source
from advbound.functions.outer import named_function
from advbound.functions.resolution import _budget, _time_model, resolved
from advbound.functions.rowfamily import RowFamily

__all__ = ["family_from_spec", "MAX_ORBITS"]

#: Largest number of input orbits :func:`family_from_spec` lists.
MAX_ORBITS = 2_000_000


def _outer_rule(outer: dict, n: int, src: str):
    """Output label per number of rows of value 1, for a named symmetric outer function."""
    if "function" not in outer:
        raise InvalidInstanceError(f"{src}: outer is a table file; the orbit form needs a named symmetric "
                                   "outer function (or, and, parity, majority, threshold, exact)")
    g = named_function(outer["function"], outer.get("n", n), outer.get("k"))
    if g.n != n:
        raise InvalidInstanceError(f"{src}: outer has {g.n} inputs but the instance has {n} rows")
    value = dict(zip(g.inputs, g.outputs))
    return [value["1" * w + "0" * (n - w)] for w in range(n + 1)]


def _row_length(inner: list, src: str) -> int:
    lengths = {d.get("position_search") for d in inner}
    if None in lengths or len(lengths) != 1:
        raise InvalidInstanceError(f"{src}: inner: the orbit form needs identical position-search rows")
    return int(lengths.pop())


def _times(time, L: int, src: str) -> list[float] | None:
    """``t_k`` for k = 1..L, or None without a time model."""
    if time is None:
        return None
    if isinstance(time, list):
        if any(t != time[0] for t in time):
            raise InvalidInstanceError(f"{src}: time: the orbit form needs the same time model in every row")
        time = time[0]
    model = _time_model(time)
    if not model.uses_positions:
        raise InvalidInstanceError(f"{src}: time: the orbit form needs a time per position (alpha or table)")
    return [model.level("*" * (k - 1) + "0" + "*" * (L - k))[1] for k in range(1, L + 1)]


def _profiles(n: int, L: int, times, budget) -> list[tuple[int, ...]]:
    """Non-decreasing position tuples ``k_1 <= … <= k_n`` that meet the budget (all, without one)."""
    if budget is None or times is None:
        return list(itertools.combinations_with_replacement(range(1, L + 1), n))
    if budget.kind == "profiles":
        raise InvalidInstanceError("budget: the orbit form needs a sum budget (sum_squares or at_most), "
                                   "not a list of profiles")
    sq = [t * t for t in times]
    T, tol, exact = budget.T, budget.tolerance, budget.kind == "sum_squares"
    order = sorted(range(L), key=lambda i: sq[i])
    least = sq[order[0]]
    out: list[tuple[int, ...]] = []

    def walk(start: int, left: int, s: float, prefix: tuple) -> None:
        if left == 0:
            if s <= T + tol and (not exact or s >= T - tol):
                out.append(prefix)
            return
        for k in range(start, L + 1):
            s2 = s + sq[k - 1]
            if s2 + (left - 1) * least > T + tol:
                if all(sq[j - 1] >= sq[k - 1] for j in range(k, L + 1)):
                    break           # times grow with k from here on: every later k is worse
                continue
            walk(k, left - 1, s2, prefix + (k,))
            if len(out) > MAX_ORBITS:
                raise InvalidInstanceError(f"more than {MAX_ORBITS:,} position profiles: too many orbits")

    walk(1, n, 0.0, ())
    return out


def family_from_spec(spec, params: Mapping | None = None) -> RowFamily:
    """The :class:`RowFamily` of ``spec`` at the grid point ``params`` (see the module docstring).

    Raises :class:`~advbound.errors.InvalidInstanceError` when the instance is not of the
    interchangeable-rows shape, naming the key that breaks it.
    """
    r = resolved(spec, params)
    src = _source(spec, dict(params or {}))
    n = int(r["rows"])
    if n < 2:
        raise InvalidInstanceError(f"{src}: rows: the orbit form needs at least 2 rows")
    rule = _outer_rule(r["outer"], n, src)
    L = _row_length(r["inner"], src)
    times = _times(r["time"], L, src)
    budget = _budget(r["budget"]) if r["budget"] is not None else None
    try:
        profiles = _profiles(n, L, times, budget)
    except InvalidInstanceError as err:
        raise InvalidInstanceError(f"{src}: {err}") from None
    max_ones = r["max_ones"]
    contents, outputs = [], []
    for prof in profiles:
        groups = [(k, len(list(g))) for k, g in itertools.groupby(prof)]
        for ones in itertools.product(*(range(m + 1) for _, m in groups)):
            total = sum(ones)
            if max_ones is not None and total > max_ones:
                continue
            letters = []
            for (k, m), j in zip(groups, ones):
                letters += [2 * (k - 1)] * (m - j) + [2 * (k - 1) + 1] * j
            contents.append(tuple(sorted(letters)))
            outputs.append(rule[total])
        if len(contents) > MAX_ORBITS:
            raise InvalidInstanceError(f"{src}: more than {MAX_ORBITS:,} input orbits")
    if not contents:
        raise InvalidInstanceError(f"{src}: budget: no time profile meets the budget")
    letters = tuple("*" * (k - 1) + bit + "*" * (L - k) for k in range(1, L + 1) for bit in "01")
    name = spec.name or "instance"
    desc = f"{name}: {spec.description}" if spec.description else name
    return RowFamily(letters, tuple(contents), tuple(outputs), tuple([1.0] * L), description=desc)
