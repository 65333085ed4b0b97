"""Position-search rows, the row lengths a time budget can use, and the time profiles of a domain.

This module owns the position-search row (:func:`position_search_row`), the shortening of
such rows to the positions a budget can use (:func:`usable_row_lengths`), and two facts about
a built domain: the positions that never vary (:func:`dead_positions`) and the histogram of
time profiles of a function with rows (:func:`time_profiles`).

>>> position_search_row(2).inputs
('0*', '1*', '*0', '*1')
"""

from __future__ import annotations

import math
from collections import Counter
from typing import Sequence

from advbound.errors import InvalidFunctionError
from advbound.functions.domain import domain
from advbound.functions.function import Automorphism, PartialFunction
from advbound.functions.sizelimit import _check_int, check_domain_size
from advbound.functions.timemodel import Budget, TimeModel

__all__ = ["position_search_row", "usable_row_lengths", "dead_positions", "time_profiles"]


# ---------------------------------------------------------------------------------------------
# Rows
# ---------------------------------------------------------------------------------------------
def position_search_row(m: int, *, max_inputs: int | None | str = "default") -> PartialFunction:
    """A position-search row of length ``m``: alphabet ``('0', '1', '*')``, defined exactly on
    the ``2m`` strings with one symbol other than ``*``; the value is that symbol.

    The 0/1 flip on every position (with the outputs swapped) is handed over as a symmetry.
    A row too large to hold (see :func:`check_domain_size`, ``max_inputs``) is refused before
    any string is made.

    >>> f = position_search_row(3)
    >>> f.size, f.inputs[:3], f.output_counts()
    (6, ('0**', '1**', '*0*'), {'0': 3, '1': 3})
    """
    m = _check_int(m, "row length m", 1)
    check_domain_size(2 * m, m, max_inputs, what=f"a position-search row of length {m:,}")
    inputs, outputs = [], []
    for k in range(m):  # non-star earlier means lexicographically smaller: this is canonical order
        for v in "01":
            inputs.append("*" * k + v + "*" * (m - k - 1))
            outputs.append(v)
    flip = Automorphism(tuple(range(m)), relabel=((1, 0, 2),) * m, outputs=(1, 0))
    return PartialFunction(("0", "1", "*"), tuple(inputs), tuple(outputs), (1.0,) * m, symmetries=(flip,),
                           description=f"position search row of length {m}")


def usable_row_lengths(lengths: Sequence[int | None], models: Sequence[TimeModel],
                       budget: Budget) -> list[int | None]:
    """The row lengths that suffice for a composition of position-search rows under ``budget``.

    ``lengths[i]`` is the length of row ``i`` when it is a position-search row (``None`` for
    any other row) and ``models[i]`` its time model.  A position ``k`` of row ``i`` can only be
    non-star if some allowed profile has ``k_i = k``; every later position of that row is
    ``*`` on the whole domain (dead), so shortening the row to its last usable position gives
    the same domain without the dead trailing positions.  The result never cuts a usable
    position: it uses only the budget and lower bounds on the other rows' times (the outer
    function and ``max_ones`` are ignored), and leaves a row unchanged when nothing is known.

    Rows of :meth:`TimeModel.power` (exponent > 0) and :meth:`TimeModel.positions` models are
    shortened under a sum budget; rows with integer position keys under a listed-profiles
    budget.  A row with no usable position is shortened to length 1 (the budget then
    allows no profile, which :func:`~advbound.functions.composition.compose` reports).

    Examples
    --------
    Three rows with ``k_1 + k_2 + k_3 = 4`` need length ``4 - 2 = 2``, however long they are:

    >>> usable_row_lengths([10 ** 8] * 3, [TimeModel.sqrt()] * 3, Budget.sum_squares(4))
    [2, 2, 2]
    """
    lengths = list(lengths)
    models = list(models)
    if len(models) != len(lengths):
        raise InvalidFunctionError(f"{len(models)} time models for {len(lengths)} rows")
    out = list(lengths)
    if budget.kind == "profiles":
        for i, (m, tm) in enumerate(zip(lengths, models)):
            if m is None or not tm.uses_positions:
                continue
            keys = ([v for p in budget.profiles for v in p] if budget.permutations
                    else [p[i] for p in budget.profiles if len(p) == len(lengths)])
            if keys and all(isinstance(v, int) and not isinstance(v, bool) for v in keys):
                if tm.kind == "positions" and m > len(tm.times):
                    continue  # keep the row: compose reports the positions without a time
                out[i] = min(m, max(max(keys), 1))
        return out
    floor = [_min_square(tm, m) for m, tm in zip(lengths, models)]
    slack = 1e-9 * max(abs(budget.T), 1.0)
    for i, (m, tm) in enumerate(zip(lengths, models)):
        if m is None:
            continue
        room = budget.T + budget.tolerance + slack - (sum(floor) - floor[i])
        k = _last_usable(tm, m, room)
        if k is not None:
            out[i] = min(m, max(k, 1))
    return out


def _min_square(tm: TimeModel, m: int | None) -> float:
    """A lower bound on ``t^2`` over the inputs of a row (0 when nothing better is known)."""
    if tm.kind == "power":
        if m is None or tm.alpha >= 0:
            return 1.0 if m is not None else 0.0
        return (float(m) ** tm.alpha) ** 2
    if tm.kind == "positions":
        ts = tm.times[:m] if m is not None else tm.times
        return min(ts) ** 2
    if tm.kind == "inputs":
        return min(t for _x, t in tm.table) ** 2
    return 0.0


def _last_usable(tm: TimeModel, m: int, room: float) -> int | None:
    """The last position ``k <= m`` of a row with ``t(k)^2 <= room``; ``None``: cannot tell."""
    if tm.kind == "positions":
        if m > len(tm.times):
            return None  # compose reports the positions without a time
        return max((k for k in range(1, m + 1) if tm.times[k - 1] ** 2 <= room), default=0)
    if tm.kind != "power" or tm.alpha <= 0:
        return None
    if room < 1:
        return 0
    a = tm.alpha
    try:
        guess = math.floor(room ** (1.0 / (2.0 * a)))
    except OverflowError:
        return None
    if guess >= m:
        return m
    # the float guess may be one off; t^2 is computed as compose computes it
    fits = [k for k in (guess - 1, guess, guess + 1) if 1 <= k and (float(k) ** a) ** 2 <= room]
    return max(fits, default=0)


# ---------------------------------------------------------------------------------------------
# Facts about a domain
# ---------------------------------------------------------------------------------------------
def dead_positions(f: PartialFunction) -> tuple[int, ...]:
    """Positions (0-based) whose symbol is the same on every input; no query there helps.

    >>> from advbound.functions.composition import compose
    >>> from advbound.functions.outer import or_function
    >>> f = compose(or_function(2), position_search_row(4), budget=Budget.sum_squares(4))
    >>> [f.position_names[j] for j in dead_positions(f)]
    ['r1p4', 'r2p4']
    """
    live = set(domain(f).live_positions().tolist())
    return tuple(j for j in range(f.n) if j not in live)


def _row_strings(f: PartialFunction, g: tuple[int, ...]) -> list[str]:
    if list(g) == list(range(g[0], g[-1] + 1)):
        a, b = g[0], g[-1] + 1
        return [x[a:b] for x in f.inputs]
    return ["".join(x[j] for j in g) for x in f.inputs]


def time_profiles(f: PartialFunction, time_model: TimeModel | Sequence[TimeModel] | None = None,
                  ndigits: int = 9) -> dict:
    """Histogram of time profiles over the domain of a function with rows (``f.groups``).

    Parameters
    ----------
    f : PartialFunction
        A function with ``groups`` (e.g. built by :func:`~advbound.functions.composition.compose`).
    time_model : TimeModel or sequence, optional
        Default :meth:`TimeModel.sqrt` for every row.
    ndigits : int
        Sums ``sum t_i^2`` are rounded to this many decimals before counting.

    Returns
    -------
    dict
        ``"profiles"``: ``{(k_1, ..., k_n): count}`` sorted by profile;
        ``"sum_squares"``: ``{sum t_i^2: count}`` sorted by value.

    Examples
    --------
    >>> from advbound.functions.composition import compose
    >>> from advbound.functions.outer import or_function
    >>> f = compose(or_function(2), position_search_row(3), budget=Budget.sum_squares(4))
    >>> time_profiles(f)["profiles"]
    {(1, 3): 4, (2, 2): 4, (3, 1): 4}
    """
    if not f.groups:
        raise InvalidFunctionError("the function has no rows (groups); time profiles need a composed function")
    models = _models(time_model, len(f.groups))
    keycols, tmaps = [], []
    for i, g in enumerate(f.groups):
        strs = _row_strings(f, g)
        lev = {}
        for r in set(strs):
            try:
                lev[r] = models[i].level(r)
            except InvalidFunctionError as e:
                raise InvalidFunctionError(f"row {i + 1}: {e}") from None
        tmap = {}
        for key, t in lev.values():
            tmap[key] = t
        keymap = {r: v[0] for r, v in lev.items()}
        keycols.append(list(map(keymap.__getitem__, strs)))
        tmaps.append(tmap)
    counts = Counter(zip(*keycols))
    sums: Counter = Counter()
    for p, c in counts.items():
        s = round(sum(tmaps[i][key] ** 2 for i, key in enumerate(p)), ndigits)
        sums[s] += c
    return {"profiles": dict(sorted(counts.items(), key=lambda kv: _sort_key(kv[0]))),
            "sum_squares": dict(sorted(sums.items()))}


def _sort_key(p):
    return tuple((0, v) if isinstance(v, (int, float)) else (1, str(v)) for v in p)


def _models(time_model, n) -> tuple:
    if time_model is None:
        return (TimeModel.sqrt(),) * n
    if isinstance(time_model, TimeModel):
        return (time_model,) * n
    models = tuple(time_model)
    if len(models) != n or not all(isinstance(t, TimeModel) for t in models):
        raise InvalidFunctionError(f"time_model must be a TimeModel or a sequence of {n} TimeModels")
    return models
