"""Pure constructors of partial functions: symmetric Boolean functions, position-search
rows, composition with time budgets, and facts about composed domains.

Every builder checks its arguments first, returns a fresh immutable
:class:`~advbound.functions.function.PartialFunction` and has no other effect.  Composed
functions number their positions row by row and name them ``r<i>p<k>`` (1-based);
their ``groups`` are the rows.  Builders hand over known symmetry generators in
``PartialFunction.symmetries``.

The main family: OR of ``n`` position-search rows of length ``m``, restricted to
``sum_i t_i^2 = T`` with ``t_i = sqrt(k_i)``, i.e. ``sum_i k_i = T``.  Its domain
has ``C(T-1, n-1) * 2**n`` inputs when ``m >= T-n+1`` (compositions of ``T`` into
``n`` positive parts, times a bit per row):

>>> f = position_search_composition("or", 3, None, 7)
>>> f.size == 15 * 8, f.n, f.output_counts()
(True, 15, {'0': 15, '1': 105})
"""

from __future__ import annotations

import itertools
import logging
import math
import os
from collections import Counter
from typing import Callable, Hashable, Sequence

from advbound.functions.domain import domain
from advbound.errors import InvalidFunctionError
from advbound.functions.function import Automorphism, PartialFunction
from advbound.functions.tablefile import sort_symbols
from advbound.functions.timemodel import Budget, TimeModel

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
    "position_search_row",
    "compose",
    "position_search_composition",
    "dead_positions",
    "time_profiles",
    "is_automorphism",
    "block_generators",
    "usable_row_lengths",
    "check_domain_size",
    "MAX_INPUTS",
]

log = logging.getLogger("advbound")

#: Largest domain ``from_predicate`` will enumerate (``|alphabet| ** n``).
MAX_ENUMERATION = 1 << 22

#: Default ``max_inputs`` of the builders that can make large domains (:func:`compose`,
#: :func:`position_search_row`, :func:`position_search_composition`): the largest number of
#: inputs they materialise.  The environment variable ``ADVBOUND_MAX_INPUTS`` replaces it
#: (a number, or ``none`` for no limit); an explicit ``max_inputs=`` argument wins over both.
MAX_INPUTS = 5_000_000

#: Bytes per input assumed by the memory estimate, on top of one byte per position
#: (a Python ``str`` header and its slot in the inputs tuple; the output labels are shared).
_BYTES_PER_INPUT = 64


def _env_max_inputs() -> int | None:
    raw = os.environ.get("ADVBOUND_MAX_INPUTS")
    if raw is None or not raw.strip():
        return MAX_INPUTS
    if raw.strip().lower() == "none":
        return None
    try:
        v = int(raw.strip().replace("_", ""))
    except ValueError:
        raise InvalidFunctionError(f"ADVBOUND_MAX_INPUTS={raw!r}: expected a whole number or 'none'") from None
    if v < 1:
        raise InvalidFunctionError(f"ADVBOUND_MAX_INPUTS={raw!r}: must be >= 1 (or 'none')")
    return v


def _resolve_max_inputs(max_inputs) -> int | None:
    if isinstance(max_inputs, str) and max_inputs == "default":
        return _env_max_inputs()
    if max_inputs is None:
        return None
    return _check_int(max_inputs, "max_inputs", 1)


def _available_memory() -> int | None:
    """Bytes of memory available to a new allocation (``MemAvailable``), or ``None`` when unknown."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def _fmt_bytes(b: float) -> str:
    for unit, k in (("TB", 1 << 40), ("GB", 1 << 30), ("MB", 1 << 20), ("kB", 1 << 10)):
        if b >= k:
            v = b / k
            return f"{v:,.0f} {unit}" if v >= 1000 else f"{v:.3g} {unit}"
    return f"{int(b)} bytes"


def check_domain_size(count: int, n_positions: int, max_inputs: int | None | str = "default",
                      what: str = "the function") -> None:
    """Refuse, before anything is built, a domain of ``count`` inputs on ``n_positions`` positions
    that is too large.

    Too large means more than ``max_inputs`` inputs (default :data:`MAX_INPUTS`, or the
    environment variable ``ADVBOUND_MAX_INPUTS``), or an estimated
    ``count * (n_positions + 64)`` bytes beyond the memory this machine has available.
    ``max_inputs=None`` turns both checks off.

    Raises
    ------
    InvalidFunctionError
        One line with the count, the memory estimate and how to raise the limit.

    >>> check_domain_size(10 ** 9, 30, max_inputs=1000)
    Traceback (most recent call last):
    ...
    advbound.errors.InvalidFunctionError: the function would have 1,000,000,000 inputs on 30 positions (about 87.5 GB), more than max_inputs = 1,000; raise the limit with max_inputs=N or the environment variable ADVBOUND_MAX_INPUTS=N (none: no limit)
    """
    limit = _resolve_max_inputs(max_inputs)
    if limit is None:
        return
    need = count * (n_positions + _BYTES_PER_INPUT)
    head = f"{what} would have {count:,} inputs on {n_positions:,} positions (about {_fmt_bytes(need)})"
    how = "max_inputs=N or the environment variable ADVBOUND_MAX_INPUTS=N (none: no limit)"
    if count > limit:
        raise InvalidFunctionError(f"{head}, more than max_inputs = {limit:,}; raise the limit with {how}")
    avail = _available_memory()
    if avail is not None and need > avail:
        raise InvalidFunctionError(f"{head}, more than the {_fmt_bytes(avail)} of memory available; "
                                   "to try anyway, pass max_inputs=None or set ADVBOUND_MAX_INPUTS=none")


def _check_int(value, name: str, lo: int = 0, hi: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise InvalidFunctionError(f"{name} must be an integer, got {value!r}")
    if value < lo or (hi is not None and value > hi):
        rng = f">= {lo}" if hi is None else f"between {lo} and {hi}"
        raise InvalidFunctionError(f"{name} must be {rng}, got {value}")
    return value


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

    >>> f = compose(or_function(2), position_search_row(3), budget=Budget.sum_squares(4))
    >>> f.size, f.position_names[:4], f.groups
    (12, ('r1p1', 'r1p2', 'r1p3', 'r2p1'), ((0, 1, 2), (3, 4, 5)))
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

    allowed = budget.allowed_profiles(levels) if budget is not None else None
    if allowed is not None and not allowed:
        raise InvalidFunctionError(f"the budget ({budget.describe()}) allows no time profile")
    # children[d][prefix] = the keys row d may take after an allowed prefix of length d
    children: list[dict[tuple, frozenset]] | None = None
    if allowed is not None:
        raw: list[dict[tuple, set]] = [{} for _ in range(n)]
        for p in allowed:
            for d in range(n):
                raw[d].setdefault(p[:d], set()).add(p[d])
        children = [{kp: frozenset(v) for kp, v in level.items()} for level in raw]
    n_positions = sum(h.n for h in inners)
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
    if not inputs:
        raise InvalidFunctionError("the composition is defined on no input (the restrictions exclude all)")

    costs = tuple(c for h in inners for c in h.costs)
    names = tuple(f"r{i + 1}p{k + 1}" for i, h in enumerate(inners) for k in range(h.n))
    groups, start = [], 0
    for h in inners:
        groups.append(tuple(range(start, start + h.n)))
        start += h.n

    symmetries: tuple[Automorphism, ...] = ()
    if (n >= 2 and all(_same_function(h, inners[0]) for h in inners)
            and all(t == models[0] for t in models) and _outer_is_symmetric(outer)
            and (budget is None or budget.kind != "profiles" or _closed_under_permutations(allowed, n))):
        symmetries = block_generators(n, inners[0].n)

    if description is None:
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
        description = ", ".join(parts[:1]) + " " + ", ".join(parts[1:])
    log.info("composed %d inputs on %d positions", len(inputs), len(costs))
    return PartialFunction(alphabet, tuple(inputs), tuple(outputs), costs, position_names=names,
                           groups=tuple(groups), symmetries=symmetries, description=description)


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
    allows no profile, which :func:`compose` reports).

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


# ---------------------------------------------------------------------------------------------
# Facts about a domain
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


def dead_positions(f: PartialFunction) -> tuple[int, ...]:
    """Positions (0-based) whose symbol is the same on every input; no query there helps.

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
        A function with ``groups`` (e.g. built by :func:`compose`).
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
