"""The ``[instance]`` table resolved at a grid point: every expression evaluated, every shorthand expanded.

This module owns :func:`resolved` (the canonical, JSON-able form of the ``[instance]`` table
at one grid point, on which keys and building rest), the checks of each key
(``outer``, ``inner``, ``time``, ``budget``, ...), the shortening of position-search rows to
the positions a budget can use, the table files named in an instance file (read once per
version of the file) and the time models and budgets of a resolved table.
"""

from __future__ import annotations

import functools
import hashlib
import logging
import os
import stat
import warnings
from typing import TYPE_CHECKING, Mapping

from advbound.errors import AdvboundError, AdvboundWarning, InvalidInstanceError
from advbound.functions.expressions import _as_int, _canon_number, _name, _short, evaluate
from advbound.functions.function import PartialFunction
from advbound.functions.grid import _params, _source
from advbound.functions.outer import NAMED_FUNCTIONS, named_function
from advbound.functions.searchrows import usable_row_lengths
from advbound.functions.tablefile import MAX_TABLE_BYTES, decode_text, parse_table
from advbound.functions.timemodel import Budget, TimeModel

if TYPE_CHECKING:
    from advbound.functions.instance import InstanceSpec

__all__ = ["resolved", "row_length_cuts", "fix_hint", "directions"]

log = logging.getLogger("advbound")


# ---------------------------------------------------------------------------------------------
# Resolution: every expression evaluated, every shorthand expanded
# ---------------------------------------------------------------------------------------------
def resolved(spec: InstanceSpec, params: Mapping | None = None) -> dict:
    """The ``[instance]`` table with every expression evaluated for ``params``, in canonical form.

    See :func:`_resolved` for the form.  An integer field that falls below its least value at a grid
    point (``row_length = "T - 2"`` at ``T = 2``) raises an error whose ``fix`` attribute says what
    to change (:func:`fix_hint`); studies store it with the message.
    """
    try:
        return _resolved(spec, params)
    except InvalidInstanceError as err:
        cond = getattr(err, "fix_condition", None)
        if cond is not None and getattr(err, "fix", None) is None:
            err.fix = fix_hint(cond[0], dict(params or {}), cond[1], getattr(spec, "where", None))
        raise


def _resolved(spec: InstanceSpec, params: Mapping | None = None) -> dict:
    """The ``[instance]`` table with every expression evaluated for ``params``, in canonical form.

    Returns plain JSON-able values: ``name``, ``description``, ``rows``, ``outer`` (a table),
    ``inner`` (one table per row), ``time`` (``None``, a table, or one per row), ``budget``
    (``None`` or a table) and ``max_ones`` (``None`` or an int).  Table files appear as
    ``{"table": <path as written>, "sha256": <hash of the file>}``.

    A position-search row longer than any allowed time profile can use is given its usable
    length (:func:`~advbound.functions.builders.usable_row_lengths`): its later positions would be
    ``*`` on every input, so the function is the same without them, and it is never built
    with them (``row_length = "10**8"`` at ``T = 4`` is the row of length ``T - rows + 1``).

    Every message names the file, the grid point (when the grid has parameters) and the key.
    """
    p = _params(spec, params)
    inst = spec.instance
    src = _source(spec, p)

    def where(key: str) -> str:
        return f"{src}: [instance] {key}"

    if "outer" not in inst:
        raise InvalidInstanceError(f"{where('outer')}: missing (e.g. outer = \"or\")")
    outer = _resolve_function(spec, inst["outer"], p, "outer", src)
    if "rows" in inst:
        rows = _int_of(inst["rows"], p, where("rows"), 1)
    elif "arity" in outer:
        rows = outer["arity"]
    else:
        raise InvalidInstanceError(f"{where('rows')}: missing (the number of rows)")
    if "arity" in outer:
        if outer["arity"] != rows:
            raise InvalidInstanceError(f"{where('outer')}: the table has {outer['arity']} positions, but rows = {rows}")
        del outer["arity"]
    if "function" in outer:
        outer["n"] = rows
        try:
            named_function(outer["function"], rows, outer.get("k"))
        except AdvboundError as e:
            raise InvalidInstanceError(f"{where('outer')}: {e}") from None

    inner_raw = inst.get("inner", "position_search")
    if isinstance(inner_raw, list):
        if len(inner_raw) != rows:
            raise InvalidInstanceError(f"{where('inner')}: {len(inner_raw)} entries for {rows} rows")
        inner = [_resolve_inner(spec, v, p, f"inner[{i + 1}]", src) for i, v in enumerate(inner_raw)]
    else:
        inner = [_resolve_inner(spec, inner_raw, p, "inner", src)] * rows
        inner = [dict(d) for d in inner]
    if "row_length" in inst and not any(d.get("_uses_row_length") for d in inner):
        raise InvalidInstanceError(f"{where('row_length')}: only used with inner = \"position_search\"")
    for d in inner:
        d.pop("_uses_row_length", None)
        d.pop("arity", None)
    derived = [d.pop("_derived", False) for d in inner]

    budget = None
    if "budget" in inst:
        budget = _resolve_budget(inst["budget"], p, where("budget"), inst.get("time"))
        for i, q in enumerate(budget.get("profiles", ())):
            if len(q) != rows:
                raise InvalidInstanceError(f"{where('budget')}.profiles: profile {q} has {len(q)} entries, "
                                           f"expected {rows} (one per row)")
    time = None
    if "time" in inst:
        t = inst["time"]
        if isinstance(t, list):
            if len(t) != rows:
                raise InvalidInstanceError(f"{where('time')}: {len(t)} entries for {rows} rows")
            time = [_resolve_time(v, p, f"{where('time')}[{i + 1}]") for i, v in enumerate(t)]
            if all(v == time[0] for v in time):
                time = time[0]
        else:
            time = _resolve_time(t, p, where("time"))
    elif budget is not None:
        time = {"alpha": 0.5}
    max_ones = None
    if "max_ones" in inst:
        max_ones = _int_of(inst["max_ones"], p, where("max_ones"), 0)
    if budget is not None:
        _shorten_rows(inner, time, budget, src)
        if "row_length" in inst:
            _warn_cut_rows(inner, time, budget, src)
    for d, was_derived in zip(inner, derived):
        if was_derived and d.get("position_search") == DERIVED_LENGTH:
            raise InvalidInstanceError(f"{src}: [instance] row_length: missing, and this budget does not bound "
                                       "the positions a row can use; give row_length")
    return {"name": spec.name, "description": spec.description, "rows": rows, "outer": outer,
            "inner": inner, "time": time, "budget": budget, "max_ones": max_ones}


def _int_of(expr, p, where: str, lo: int | None = None) -> int:
    """Evaluate ``expr`` at ``p`` as an integer of at least ``lo``; when it falls below ``lo`` the error
    carries ``fix_condition = (expr, lo)`` for :func:`resolved` to turn into a fix."""
    value = evaluate(expr, p, where)
    try:
        return _as_int(value, where, lo, expr)
    except InvalidInstanceError as err:
        if lo is not None and isinstance(expr, str) and value < lo:
            err.fix_condition = (expr, lo)
        raise


def directions(expr, params: Mapping, up: bool = True) -> str:
    """``"raise T or lower rows"``: how to change each parameter to make ``expr`` larger (``up``) or smaller.

    Found by evaluating ``expr`` with each parameter raised by 1; parameters it does not depend on
    are left out (``""`` when none is left).

    >>> directions("T - rows + 1", {"T": 4, "rows": 5})
    'raise T or lower rows'
    """
    try:
        base = evaluate(expr, params)
    except AdvboundError:
        return ""
    said = []
    for name in params:
        try:
            moved = evaluate(expr, {**params, name: params[name] + 1})
        except AdvboundError:
            continue
        if moved != base:
            said.append(f"{'raise' if (moved > base) == up else 'lower'} {name}")
    return " or ".join(said)


def fix_hint(expr, params: Mapping, lo, where: str | None = None) -> str | None:
    """What to change when ``expr`` is below ``lo`` at the grid point ``params``: the parameters to move
    (:func:`directions`) and the ``[grid] where`` condition that leaves such points out.

    >>> fix_hint("T - 2", {"T": 2, "rows": 3}, 1)
    'raise T, or leave such points out of the grid with [grid] where = "T - 2 >= 1"'
    """
    move = directions(expr, params)
    if not move:
        return None
    cond = f"{expr} >= {lo}"
    keep = (f"add \"and {cond}\" to [grid] where" if where else f"leave such points out of the grid with "
            f"[grid] where = \"{cond}\"")
    return f"{move}, or {keep}"


def _shorten_rows(inner: list[dict], time, budget: dict, src: str) -> None:
    """Cut position-search rows in ``inner`` (in place) to the positions the budget can use."""
    lengths = [d.get("position_search") for d in inner]
    if not any(m is not None for m in lengths):
        return
    try:
        models = [_time_model(t) for t in time] if isinstance(time, list) else [_time_model(time)] * len(inner)
        usable = usable_row_lengths(lengths, models, _budget(budget))
    except AdvboundError as e:
        raise InvalidInstanceError(f"{src}: [instance] budget: {e}") from None
    for i, (d, m, u) in enumerate(zip(inner, lengths, usable)):
        if m is not None and u is not None and u < m:
            d["position_search"] = u
            note = (src, i, m, u)
            if note not in _SHORTENED:  # said once, although every point is resolved several times
                _SHORTENED.add(note)
                log.info("%s: row %d: positions %d..%d can never be used under the budget; building length %d",
                         src, i + 1, u + 1, m, u)


_SHORTENED: set = set()

#: The row length an omitted ``row_length`` starts from before the budget cuts it to the usable length.
DERIVED_LENGTH = 10 ** 9


def _cut_rows(inner: list[dict], time, budget: dict) -> list[tuple[int, int, int]]:
    """``(row index, written length, usable length)`` of each position-search row shorter than the
    positions the budget allows (``[]`` when none is, or when the budget bounds nothing)."""
    lengths = [d.get("position_search") for d in inner]
    if not any(m is not None for m in lengths):
        return []
    try:
        models = [_time_model(t) for t in time] if isinstance(time, list) else [_time_model(time)] * len(inner)
        usable = usable_row_lengths([None if m is None else DERIVED_LENGTH for m in lengths], models, _budget(budget))
    except AdvboundError:
        return []
    return [(i, m, u) for i, (m, u) in enumerate(zip(lengths, usable))
            if m is not None and u is not None and u != DERIVED_LENGTH and u > m]


def row_length_cuts(spec: InstanceSpec, params: Mapping | None = None) -> list[tuple[int, int, int]]:
    """The rows a written ``row_length`` cuts short of the positions the budget allows, at ``params``:
    ``(row index, written length, usable length)`` each (0-based row index); ``[]`` without a
    ``row_length`` or a budget."""
    r = resolved(spec, params)
    if "row_length" not in spec.instance or r["budget"] is None:
        return []
    return _cut_rows(r["inner"], r["time"], r["budget"])


def _warn_cut_rows(inner: list[dict], time, budget: dict, src: str) -> None:
    """Warn (once per file, point and row) when a given ``row_length`` leaves out positions the budget allows."""
    cut = _cut_rows(inner, time, budget)
    note = ("cut", src, tuple(cut))
    if cut and note not in _SHORTENED:
        _SHORTENED.add(note)
        parts = "; ".join(f"row {i + 1}: positions {m + 1}..{u}" for i, m, u in cut)
        warnings.warn(f"{src}: [instance] row_length leaves out positions the budget allows ({parts}); inputs "
                      f"that use them are not in the domain; omit row_length to use every allowed position",
                      AdvboundWarning, stacklevel=2)


def _budget(b: dict) -> Budget:
    """The :class:`Budget` of a resolved ``budget`` table."""
    if "sum_squares" in b:
        return Budget.sum_squares(b["sum_squares"], b["rtol"])
    if "at_most" in b:
        return Budget.at_most(b["at_most"], b["rtol"])
    return Budget.from_profiles(b["profiles"], b["permutations"])


@functools.lru_cache(maxsize=64)
def _table_file(full: str, mtime_ns: int, size: int) -> tuple[str, PartialFunction]:
    """SHA-256 and function of a table file, read once per version of the file."""
    try:
        with open(full, "rb") as fh:
            data = fh.read(MAX_TABLE_BYTES + 1)
    except OSError as e:
        raise AdvboundError(f"{full}: cannot read the table file: {e.strerror or e}") from None
    if len(data) > MAX_TABLE_BYTES:
        raise AdvboundError(f"{full}: larger than the limit of {MAX_TABLE_BYTES >> 20} MiB for table files")
    f = parse_table(decode_text(data, full), source=full)
    return hashlib.sha256(data).hexdigest(), f


def _load_table(spec: InstanceSpec, path, where: str) -> tuple[dict, PartialFunction]:
    """``({"table", "sha256"}, function)`` of a table named in the instance file."""
    if not isinstance(path, str) or not path:
        raise InvalidInstanceError(f"{where}: table must be a file name")
    full = path if os.path.isabs(path) else os.path.join(spec.base_dir, path)
    try:
        st = os.stat(full)
    except OSError:
        raise InvalidInstanceError(f"{where}: cannot read table file {_short(path)}") from None
    if not stat.S_ISREG(st.st_mode):
        raise InvalidInstanceError(f"{where}: table file {_short(path)} is not a regular file")
    if st.st_size > MAX_TABLE_BYTES:
        raise InvalidInstanceError(f"{where}: table file {_short(path)} is larger than the limit of "
                                   f"{MAX_TABLE_BYTES >> 20} MiB")
    try:
        sha, f = _table_file(full, st.st_mtime_ns, st.st_size)
    except AdvboundError as e:
        raise InvalidInstanceError(f"{where}: {e}") from None
    return {"table": path, "sha256": sha}, f


def _resolve_function(spec, value, p, key, src) -> dict:
    where = f"{src}: [instance] {key}"
    if isinstance(value, str):
        value = {"function": value}
    if not isinstance(value, dict):
        raise InvalidInstanceError(f"{where}: expected a function name or a table, got {_short(value)}")
    if "table" in value:
        extra = [k for k in value if k != "table"]
        if extra:
            raise InvalidInstanceError(f"{where}: unknown key {_short(extra[0])} next to 'table'")
        entry, f = _load_table(spec, value["table"], where)
        entry["arity"] = f.n
        return entry
    if "function" not in value:
        raise InvalidInstanceError(f"{where}: expected 'function' or 'table'")
    keys = ("function", "k") if key == "outer" else ("function", "n", "k")
    for k in value:
        if k not in keys:
            hint = " (the outer arity is rows)" if k == "n" else ""
            raise InvalidInstanceError(f"{where}: unknown key {_short(k)}{hint} (expected {', '.join(keys)})")
    name = value["function"]
    if not isinstance(name, str) or name.lower() not in NAMED_FUNCTIONS:
        raise InvalidInstanceError(f"{where}: unknown function {_short(name)} (expected one of "
                                   f"{', '.join(NAMED_FUNCTIONS)})")
    out = {"function": name.lower()}
    if "k" in value:
        out["k"] = _int_of(value["k"], p, f"{where}.k", 0)
    if "n" in value:
        out["n"] = _int_of(value["n"], p, f"{where}.n", 1)
    return out


def _resolve_inner(spec, value, p, key, src) -> dict:
    where = f"{src}: [instance] {key}"
    inst = spec.instance
    if value == "position_search":
        if "row_length" not in inst:
            if "budget" in inst:   # derived by _shorten_rows: the last position an allowed profile uses
                return {"position_search": DERIVED_LENGTH, "_uses_row_length": True, "_derived": True}
            raise InvalidInstanceError(f"{src}: [instance] row_length: missing (needed by "
                                       "inner = \"position_search\" without a budget; with a budget it is "
                                       "derived from the budget)")
        m = _int_of(inst["row_length"], p, f"{src}: [instance] row_length", 1)
        return {"position_search": m, "_uses_row_length": True}
    if isinstance(value, dict) and "position_search" in value:
        extra = [k for k in value if k != "position_search"]
        if extra:
            raise InvalidInstanceError(f"{where}: unknown key {_short(extra[0])} next to 'position_search'")
        return {"position_search": _int_of(value["position_search"], p, f"{where}.position_search", 1)}
    if isinstance(value, dict):
        d = _resolve_function(spec, value, p, key, src)
        if "function" in d:
            if "n" not in d:
                raise InvalidInstanceError(f"{where}: an inner {d['function']!r} needs n (its number of bits)")
            try:
                named_function(d["function"], d["n"], d.get("k"))
            except AdvboundError as e:
                raise InvalidInstanceError(f"{where}: {e}") from None
        return d
    raise InvalidInstanceError(f"{where}: expected \"position_search\" or a table, got {_short(value)}")


def _resolve_time(value, p, where) -> dict:
    if value == "sqrt":
        return {"alpha": 0.5}
    if not isinstance(value, dict) or len(value) != 1:
        raise InvalidInstanceError(f"{where}: expected \"sqrt\", {{alpha = ...}}, {{table = [...]}} "
                                   f"or {{inputs = {{...}}}}, got {_short(value)}")
    (k, v), = value.items()
    if k == "alpha":
        return {"alpha": float(evaluate(v, p, f"{where}.alpha"))}
    if k == "table":
        if not isinstance(v, list) or not v:
            raise InvalidInstanceError(f"{where}.table: expected a non-empty list of times")
        ts = [float(evaluate(x, p, f"{where}.table[{i + 1}]")) for i, x in enumerate(v)]
        for i, t in enumerate(ts):
            if t < 0:
                raise InvalidInstanceError(f"{where}.table[{i + 1}]: times must be >= 0, got {t!r}")
        return {"table": ts}
    if k == "inputs":
        if not isinstance(v, dict) or not v:
            raise InvalidInstanceError(f"{where}.inputs: expected a non-empty table input = time")
        out = {}
        for x, t in v.items():
            tv = float(evaluate(t, p, f"{where}.inputs.{_name(x)}"))
            if tv < 0:
                raise InvalidInstanceError(f"{where}.inputs.{_name(x)}: times must be >= 0, got {tv!r}")
            out[x] = tv
        return {"inputs": dict(sorted(out.items()))}
    raise InvalidInstanceError(f"{where}: unknown key {_short(k)} (expected alpha, table or inputs)")


def _resolve_budget(value, p, where, time_raw) -> dict:
    if not isinstance(value, dict):
        raise InvalidInstanceError(f"{where}: expected a table such as {{ sum_squares = \"T\" }}, got {_short(value)}")
    kinds = [k for k in ("sum_squares", "at_most", "profiles") if k in value]
    if len(kinds) != 1:
        raise InvalidInstanceError(f"{where}: give exactly one of sum_squares, at_most, profiles")
    kind = kinds[0]
    allowed = {"sum_squares": ("sum_squares", "rtol"), "at_most": ("at_most", "rtol"),
               "profiles": ("profiles", "permutations")}[kind]
    for k in value:
        if k not in allowed:
            raise InvalidInstanceError(f"{where}: unknown key {_short(k)} with {kind} (expected {', '.join(allowed)})")
    if kind in ("sum_squares", "at_most"):
        T = _canon_number(evaluate(value[kind], p, f"{where}.{kind}"))
        rtol = evaluate(value.get("rtol", 1e-9), p, f"{where}.rtol")
        if not 0 <= rtol < 1:
            raise InvalidInstanceError(f"{where}.rtol: must be in [0, 1), got {rtol!r}")
        return {kind: T, "rtol": float(rtol)}
    profs = value["profiles"]
    if not isinstance(profs, list) or not profs or not all(isinstance(q, list) and q for q in profs):
        raise InvalidInstanceError(f"{where}.profiles: expected a non-empty list of lists, e.g. [[1, 2, 4]]")
    perm = value.get("permutations", False)
    if not isinstance(perm, bool):
        raise InvalidInstanceError(f"{where}.permutations: must be true or false")
    by_time = isinstance(time_raw, dict) and "inputs" in time_raw
    out = []
    for i, q in enumerate(profs):
        vals = [evaluate(x, p, f"{where}.profiles[{i + 1}]") for x in q]
        if by_time:
            vals = [float(x) for x in vals]
        else:
            vals = [_as_int(x, f"{where}.profiles[{i + 1}]", 1, e) for x, e in zip(vals, q)]
        out.append(sorted(vals) if perm else vals)
    uniq = sorted({tuple(q) for q in out})
    return {"profiles": [list(q) for q in uniq], "permutations": perm}


def _time_model(d) -> TimeModel:
    if "alpha" in d:
        return TimeModel.sqrt() if d["alpha"] == 0.5 else TimeModel.power(d["alpha"])
    if "table" in d:
        return TimeModel.positions(d["table"])
    return TimeModel.inputs(d["inputs"])
