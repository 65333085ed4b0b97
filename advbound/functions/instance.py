"""Instance files: declarative TOML descriptions of (families of) partial functions.

This module owns the ``[instance]`` and ``[grid]`` tables of an instance file, the
small arithmetic-expression language used in them, and turning a spec plus grid
parameters into a :class:`~advbound.functions.function.PartialFunction`.  Every other
top-level table (``[study]``, ``[solve]``, ``[report]``, ...) is passed through
untouched for the modules that own it.  Nothing in a file is executed.

Typical use::

    spec = load_instance("instances/or3_sum_T.toml")
    for params in grid_points(spec):          # [{'T': 4}, {'T': 5}, ...]
        f = build_instance(spec, params)

Schema (see ``docs/instances.md`` for the full description)::

    [instance]
    name = "or3-sum-T"                 # default: the file name without suffix
    description = "..."
    outer = "or"                       # or/and/parity/majority, {function = "threshold", k = 2},
                                       # or {table = "tables/maj3.tbl"}
    rows = 3                           # number of rows n (default: arity of a table outer)
    inner = "position_search"          # default; or {position_search = "T - 2"}, {table = "..."},
                                       # {function = "or", n = 2}, or a list with one entry per row
    row_length = "T - 2"               # length of the "position_search" rows
    time = "sqrt"                      # or {alpha = 0.5}, {table = [1, 1.5, ...]}, {inputs = {...}}
    budget = { sum_squares = "T" }     # or {at_most = "T"}, {profiles = [[1, 2, 4]], permutations = true}
    max_ones = 1                       # optional

    [grid]
    T = { from = 4, to = 12 }          # or a list [4, 6, 8], or one value

Expressions are numbers or strings over numbers, grid names, ``+ - * / // % **``,
parentheses and ``min max sqrt log ceil floor abs``; they are bounded in length, depth and
the size of every number (:func:`evaluate`), so none can hang or overflow.

Hostile input gets one line naming the file, the grid point (``f.toml [grid point T=2]``)
and the key.  Files are UTF-8 (a byte-order mark is accepted) and size-limited; grids are
walked lazily (:func:`iter_grid_points`) and limited to :data:`MAX_GRID_POINTS` points;
position-search rows are cut to the positions the budget can use, and a domain too large
for ``max_inputs`` or for the memory available is refused before it is built.

>>> evaluate("min(T - 2, 5) * 2", {"T": 6})
8
"""

from __future__ import annotations

import ast
import dataclasses
import functools
import hashlib
import itertools
import json
import logging
import math
import os
import stat
import tomllib
from typing import Any, Mapping, Sequence

from advbound.functions.builders import NAMED_FUNCTIONS, compose, named_function, position_search_row, usable_row_lengths
from advbound.errors import AdvboundError, InvalidInstanceError
from advbound.functions.function import PartialFunction
from advbound.functions.tablefile import MAX_TABLE_BYTES, decode_text, parse_table, read_table, read_text
from advbound.functions.timemodel import Budget, TimeModel

__all__ = [
    "FORMAT_VERSION",
    "InstanceSpec",
    "load_instance",
    "parse_instance",
    "grid_points",
    "iter_grid_points",
    "grid_size",
    "point_label",
    "resolved",
    "spec_key",
    "build_instance",
    "time_model_of",
    "load_function",
    "parse_params",
    "evaluate",
]

log = logging.getLogger("advbound")

#: Version of the instance format; part of every :func:`spec_key`.
FORMAT_VERSION = 1

#: Largest instance file :func:`load_instance` reads (16 MiB).
MAX_INSTANCE_BYTES = 1 << 24
#: Largest number of grid points an instance file may have (the product of its grid lists).
MAX_GRID_POINTS = 100_000

_FUNCS = {"min": min, "max": max, "sqrt": math.sqrt, "log": math.log, "ceil": math.ceil,
          "floor": math.floor, "abs": abs}
_BINOPS = {ast.Add: lambda a, b: a + b, ast.Sub: lambda a, b: a - b, ast.Mult: lambda a, b: a * b,
           ast.Div: lambda a, b: a / b, ast.FloorDiv: lambda a, b: a // b, ast.Mod: lambda a, b: a % b,
           ast.Pow: lambda a, b: a ** b}
_INSTANCE_KEYS = ("name", "description", "outer", "rows", "inner", "row_length", "time", "budget", "max_ones")


# ---------------------------------------------------------------------------------------------
# Expressions
# ---------------------------------------------------------------------------------------------
#: Limits of the expression language: longer, deeper or larger is refused with one line.
MAX_EXPRESSION_CHARS = 1000
MAX_EXPRESSION_DEPTH = 60
#: Integers (inputs, intermediate results and the value) above ``2**MAX_INT_BITS`` (about 1.8e308,
#: the float range) are refused, so no power or product can grow without bound.
MAX_INT_BITS = 1024


def _check_number(v, where: str, expr):
    """``v`` if it is a finite real number of bounded size; otherwise one line naming ``where``."""
    if isinstance(v, bool):
        raise InvalidInstanceError(f"{where}: {expr!r} gives a truth value, not a number")
    if isinstance(v, int):
        if v.bit_length() > MAX_INT_BITS:
            raise InvalidInstanceError(f"{where}: {_short(expr)} is too large (an integer of more than "
                                       f"{MAX_INT_BITS} bits, beyond about 1.8e308)")
        return v
    if isinstance(v, float):
        if not math.isfinite(v):
            raise InvalidInstanceError(f"{where}: {_short(expr)} does not evaluate to a finite number "
                                       "(overflow or not a number)")
        return v
    raise InvalidInstanceError(f"{where}: {_short(expr)} does not evaluate to a real number")


def _short(expr) -> str:
    """``repr(expr)``, cut when long, so that a message stays one readable line."""
    text = repr(expr)
    return text if len(text) <= 80 else text[:60] + f"...({len(text)} characters)"


def _name(key) -> str:
    """A key as written in messages: plain when it is short and printable, else quoted and cut."""
    return key if isinstance(key, str) and key.isprintable() and 0 < len(key) <= 60 else _short(key)


def _written(expr) -> str:
    """An expression as it would be written in the file (``"T - 2"``, ``4``), cut when long."""
    text = json.dumps(expr, ensure_ascii=False) if isinstance(expr, str) else repr(expr)
    return text if len(text) <= 80 else text[:60] + f"...({len(text)} characters)"


def _depth(tree: ast.AST) -> int:
    """Nesting depth of an AST, computed without recursion."""
    deepest, stack = 0, [(tree, 1)]
    while stack:
        node, d = stack.pop()
        deepest = max(deepest, d)
        stack.extend((child, d + 1) for child in ast.iter_child_nodes(node))
    return deepest


def _power(a, b, where: str, expr):
    """``a ** b``, refused before it is computed when ``|a| ** b`` would exceed ``2**MAX_INT_BITS``."""
    if a != 0 and abs(a) != 1 and b * math.log2(abs(a)) > MAX_INT_BITS:
        raise InvalidInstanceError(f"{where}: power {_short(a)} ** {_short(b)} in {_short(expr)} is too large "
                                   f"(beyond 2**{MAX_INT_BITS})")
    v = a ** b
    if isinstance(v, complex):
        raise InvalidInstanceError(f"{where}: power {_short(a)} ** {_short(b)} in {_short(expr)} is not a real number")
    return v


def evaluate(expr: Any, params: Mapping[str, float], where: str = "expression") -> int | float:
    """Evaluate a number or an arithmetic expression string over ``params`` (no ``eval``).

    Expressions are at most :data:`MAX_EXPRESSION_CHARS` characters and
    :data:`MAX_EXPRESSION_DEPTH` levels deep, and every number met (literal, parameter,
    intermediate or final) must be finite and at most ``2**MAX_INT_BITS`` in size: a power
    that would be larger is refused before it is computed.  Evaluation therefore always
    ends quickly, with a number or with one line.

    Raises
    ------
    InvalidInstanceError
        ``"<where>: unknown name 'Tx'"`` and the like.

    >>> evaluate("T // 2 + sqrt(16)", {"T": 7})
    7.0
    >>> evaluate("(10**6)**64", {}, "f.toml: [instance] rows")
    Traceback (most recent call last):
    ...
    advbound.errors.InvalidInstanceError: f.toml: [instance] rows: power 1000000 ** 64 in '(10**6)**64' is too large (beyond 2**1024)
    """
    if isinstance(expr, bool):
        raise InvalidInstanceError(f"{where}: expected a number or an expression, got {expr!r}")
    if isinstance(expr, (int, float)):
        return _check_number(expr, where, expr)
    if not isinstance(expr, str):
        raise InvalidInstanceError(f"{where}: expected a number or an expression, got {_short(expr)}")
    if len(expr) > MAX_EXPRESSION_CHARS:
        raise InvalidInstanceError(f"{where}: the expression has {len(expr)} characters "
                                   f"(at most {MAX_EXPRESSION_CHARS})")
    try:
        tree = ast.parse(expr.strip(), mode="eval")
    except (SyntaxError, ValueError):
        raise InvalidInstanceError(f"{where}: cannot parse expression {_short(expr)}") from None
    except (RecursionError, MemoryError):
        raise InvalidInstanceError(f"{where}: expression {_short(expr)} is nested too deeply "
                                   f"(at most {MAX_EXPRESSION_DEPTH} levels)") from None
    if _depth(tree) > MAX_EXPRESSION_DEPTH:
        raise InvalidInstanceError(f"{where}: expression {_short(expr)} is nested too deeply "
                                   f"(at most {MAX_EXPRESSION_DEPTH} levels)")

    def ev(node):
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant):
            if isinstance(node.value, bool) or not isinstance(node.value, (int, float)):
                raise InvalidInstanceError(f"{where}: {_short(node.value)} is not a number")
            return _check_number(node.value, where, expr)
        if isinstance(node, ast.Name):
            if node.id not in params:
                raise InvalidInstanceError(f"{where}: unknown name {node.id!r}")
            return _check_number(params[node.id], where, node.id)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.UAdd, ast.USub)):
            v = ev(node.operand)
            return -v if isinstance(node.op, ast.USub) else +v
        if isinstance(node, ast.BinOp) and type(node.op) in _BINOPS:
            a, b = ev(node.left), ev(node.right)
            if isinstance(node.op, ast.Pow):
                return _check_number(_power(a, b, where, expr), where, expr)
            return _check_number(_BINOPS[type(node.op)](a, b), where, expr)
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and not node.keywords:
            fn = _FUNCS.get(node.func.id)
            if fn is None:
                raise InvalidInstanceError(f"{where}: unknown function {node.func.id!r} "
                                           f"(allowed: {', '.join(_FUNCS)})")
            return _check_number(fn(*[ev(a) for a in node.args]), where, expr)
        raise InvalidInstanceError(f"{where}: {_short(ast.unparse(node))} is not allowed in an expression")

    try:
        value = ev(tree)
    except InvalidInstanceError:
        raise
    except (ZeroDivisionError, ValueError, TypeError, OverflowError) as e:
        raise InvalidInstanceError(f"{where}: cannot evaluate {_short(expr)}: {e}") from None
    except (RecursionError, MemoryError):
        raise InvalidInstanceError(f"{where}: expression {_short(expr)} is too complex to evaluate") from None
    return _check_number(value, where, expr)


def _as_int(value, where: str, lo: int | None = None, expr=None) -> int:
    """``value`` as an int (integral floats allowed) of at least ``lo``.

    With the written ``expr`` (a string), the message quotes it:
    ``f.toml [grid point T=2]: [instance] row_length = "T - 2" evaluates to 0, must be >= 1``.
    """
    said = f"{where} = {_written(expr)} evaluates to {value!r}" if isinstance(expr, str) else None
    if isinstance(value, float):
        if not value.is_integer():
            raise InvalidInstanceError(f"{said}, must be an integer" if said else
                                       f"{where}: must be an integer, got {value!r}")
        value = int(value)
    if lo is not None and value < lo:
        raise InvalidInstanceError(f"{said}, must be >= {lo}" if said else f"{where}: must be >= {lo}, got {value}")
    return value


def _int_of(expr, p, where: str, lo: int | None = None) -> int:
    """Evaluate ``expr`` and check it is an integer of at least ``lo`` (one line naming ``where``)."""
    return _as_int(evaluate(expr, p, where), where, lo, expr)


def _canon_number(v):
    """Integral floats become ints so that 7 and 7.0 give the same key."""
    if isinstance(v, float) and v.is_integer() and abs(v) < 2 ** 53:
        return int(v)
    return v


# ---------------------------------------------------------------------------------------------
# The spec
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class InstanceSpec:
    """A loaded instance file.

    Attributes
    ----------
    name : str
        ``[instance] name`` (default: the file name without its suffix).
    path : str
        The file as given to :func:`load_instance` (``"<string>"`` for :func:`parse_instance`).
    description : str
        ``[instance] description`` (default ``""``).
    instance : dict
        The raw ``[instance]`` table, as written.
    grid : dict
        ``name -> list of values`` for each ``[grid]`` entry, in the order written.
    study : dict
        The raw ``[study]`` table, or ``{}``; owned by the study module.
    tables : dict
        Every other top-level table (``[solve]``, ``[report]``, ...), untouched.
    base_dir : str
        Directory that relative table paths are resolved against.
    """

    name: str
    path: str
    description: str
    instance: dict
    grid: dict
    study: dict
    tables: dict
    base_dir: str = "."

    @property
    def parameters(self) -> tuple[str, ...]:
        """The grid parameter names, in order."""
        return tuple(self.grid)


def load_instance(path: str | os.PathLike, *, max_points: int = MAX_GRID_POINTS,
                  check_points: bool = True) -> InstanceSpec:
    """Read and validate an instance file.

    The file must be UTF-8 text (a byte-order mark is accepted) of at most
    :data:`MAX_INSTANCE_BYTES`.  Every grid point is resolved once, so unknown names and bad
    values are reported here (``"f.toml: [instance] row_length: unknown name 'Tx'"``; with
    a grid, the point is named: ``"f.toml [grid point T=2]: [instance] row_length = ..."``).
    ``check_points=False`` skips that (a study stores a bad point as invalid and goes on).
    """
    path = os.fspath(path)
    text = read_text(path, max_bytes=MAX_INSTANCE_BYTES, error=InvalidInstanceError, what="instance file",
                     override="advbound.functions.instance.MAX_INSTANCE_BYTES", binary_ok=True)
    return parse_instance(text, source=path, base_dir=os.path.dirname(os.path.abspath(path)),
                          max_points=max_points, check_points=check_points)


def parse_instance(text: str, source: str = "<string>", base_dir: str = ".", *,
                   max_points: int = MAX_GRID_POINTS, check_points: bool = True) -> InstanceSpec:
    """Parse instance-file text; see :func:`load_instance`.

    A grid of more than ``max_points`` points (default :data:`MAX_GRID_POINTS`) is refused.
    """
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InvalidInstanceError(f"{source}: invalid TOML: {e}") from None
    except (RecursionError, MemoryError):
        raise InvalidInstanceError(f"{source}: invalid TOML: arrays or tables nested too deeply") from None
    inst = doc.get("instance")
    if not isinstance(inst, dict):
        raise InvalidInstanceError(f"{source}: missing [instance] table")
    for key in inst:
        if key not in _INSTANCE_KEYS:
            raise InvalidInstanceError(f"{source}: [instance] {_name(key)}: unknown key (expected one of "
                                       f"{', '.join(_INSTANCE_KEYS)})")
    grid_raw = doc.get("grid", {})
    if not isinstance(grid_raw, dict):
        raise InvalidInstanceError(f"{source}: grid must be a table [grid]")
    study = doc.get("study", {})
    if not isinstance(study, dict):
        raise InvalidInstanceError(f"{source}: study must be a table [study]")
    tables = {}
    for key, value in doc.items():
        if key in ("instance", "grid", "study"):
            continue
        if not isinstance(value, dict):
            raise InvalidInstanceError(f"{source}: top-level key {_short(key)} must be inside a table "
                                       "(did you mean it for [instance]?)")
        tables[key] = value
    name = inst.get("name", os.path.splitext(os.path.basename(source))[0])
    if not isinstance(name, str) or not name:
        raise InvalidInstanceError(f"{source}: [instance] name: must be a non-empty string")
    description = inst.get("description", "")
    if not isinstance(description, str):
        raise InvalidInstanceError(f"{source}: [instance] description: must be a string")
    for key in grid_raw:
        if not key.isidentifier() or key in _FUNCS:
            raise InvalidInstanceError(f"{source}: [grid] {_name(key)}: not usable as a parameter name")
    grid = {key: _grid_values(value, f"{source}: [grid] {key}") for key, value in grid_raw.items()}
    spec = InstanceSpec(name=name, path=source, description=description, instance=inst, grid=grid,
                        study=study, tables=tables, base_dir=base_dir)
    count = grid_size(spec)
    if count > max_points:
        sizes = " x ".join(f"{k}: {len(v)}" for k, v in grid.items())
        raise InvalidInstanceError(f"{source}: [grid] has {count:,} points ({sizes} values), more than "
                                   f"{max_points:,}; split the grid or pass max_points")
    if check_points:
        for params in iter_grid_points(spec):
            resolved(spec, params)
    return spec


def _grid_values(value, where: str) -> list:
    if isinstance(value, bool):
        raise InvalidInstanceError(f"{where}: expected a number, a list or {{from, to, step}}, got {value!r}")
    if isinstance(value, (int, float)):
        return [evaluate(value, {}, where)]
    if isinstance(value, list):
        if not value:
            raise InvalidInstanceError(f"{where}: the list of values is empty")
        if len(value) > _MAX_GRID_VALUES:
            raise InvalidInstanceError(f"{where}: the list has {len(value)} values (at most {_MAX_GRID_VALUES})")
        for i, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise InvalidInstanceError(f"{where}: value {_short(v)} is not a number")
            evaluate(v, {}, f"{where}[{i + 1}]")
        return list(value)
    if isinstance(value, dict):
        for k in value:
            if k not in ("from", "to", "step"):
                raise InvalidInstanceError(f"{where}: unknown key {_short(k)} (expected from, to, step)")
        if "from" not in value or "to" not in value:
            raise InvalidInstanceError(f"{where}: a range needs 'from' and 'to'")
        a, b, s = value["from"], value["to"], value.get("step", 1)
        for nm, v in (("from", a), ("to", b), ("step", s)):
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise InvalidInstanceError(f"{where}: {nm} must be a number, got {_short(v)}")
            evaluate(v, {}, f"{where}.{nm}")
        if s <= 0:
            raise InvalidInstanceError(f"{where}: step must be positive, got {s!r}")
        if b < a:
            raise InvalidInstanceError(f"{where}: 'to' ({b!r}) is smaller than 'from' ({a!r})")
        try:
            count = int(math.floor((b - a) / s + 1e-9)) + 1
        except OverflowError:
            count = math.inf
        if count > _MAX_GRID_VALUES:
            shown = f"{count:,}" if count < 10 ** 15 else f"about {float(count):.3g}"
            raise InvalidInstanceError(f"{where}: the range has {shown} values (at most {_MAX_GRID_VALUES})")
        out = [a + i * s for i in range(count)]
        return [int(v) if all(isinstance(x, int) for x in (a, s)) else v for v in out]
    raise InvalidInstanceError(f"{where}: expected a number, a list or {{from, to, step}}, got {_short(value)}")


#: Largest number of values of one grid key.
_MAX_GRID_VALUES = 100_000


def grid_size(spec: InstanceSpec) -> int:
    """Number of grid points (the product of the value counts; 1 without a grid), without listing them."""
    return math.prod(len(v) for v in spec.grid.values())


def iter_grid_points(spec: InstanceSpec):
    """The grid points one at a time, in :func:`grid_points` order, without building the list."""
    names = list(spec.grid)
    for combo in itertools.product(*(spec.grid[k] for k in names)):
        yield dict(zip(names, combo))


def grid_points(spec: InstanceSpec, *, max_points: int = MAX_GRID_POINTS) -> list[dict]:
    """The cartesian product of the grid, in the order the keys are written (last varies fastest).

    ``[{}]`` when the file has no grid.  Use :func:`iter_grid_points` to walk a grid without
    holding it; a grid of more than ``max_points`` points is refused here.
    """
    count = grid_size(spec)
    if count > max_points:
        raise InvalidInstanceError(f"{spec.path}: [grid] has {count:,} points, more than {max_points:,}")
    return list(iter_grid_points(spec))


def point_label(params: Mapping) -> str:
    """``"T=4, rows=2"``: a grid point as written in messages and descriptions.

    >>> point_label({"T": 4, "rows": 2})
    'T=4, rows=2'
    """
    return ", ".join(f"{k}={v}" for k, v in params.items())


def _source(spec: InstanceSpec, p: Mapping) -> str:
    """``"f.toml"``, or ``"f.toml [grid point T=4]"`` when the grid has parameters."""
    return f"{spec.path} [grid point {point_label(p)}]" if p else spec.path


def _params(spec: InstanceSpec, params: Mapping | None) -> dict:
    params = dict(params or {})
    for key in params:
        if key not in spec.grid:
            known = ", ".join(spec.grid) or "no parameters"
            raise InvalidInstanceError(f"{spec.path}: unknown parameter {_short(key)} (the grid defines {known})")
        v = params[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise InvalidInstanceError(f"{spec.path}: parameter {key}={_short(v)} is not a number")
        evaluate(v, {}, f"{spec.path}: parameter {key}")
    missing = [k for k in spec.grid if k not in params]
    if missing:
        raise InvalidInstanceError(f"{spec.path}: missing value for grid parameter(s) {', '.join(missing)}")
    return {k: params[k] for k in spec.grid}


# ---------------------------------------------------------------------------------------------
# Resolution: every expression evaluated, every shorthand expanded
# ---------------------------------------------------------------------------------------------
def resolved(spec: InstanceSpec, params: Mapping | None = None) -> dict:
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
    return {"name": spec.name, "description": spec.description, "rows": rows, "outer": outer,
            "inner": inner, "time": time, "budget": budget, "max_ones": max_ones}


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
            raise InvalidInstanceError(f"{src}: [instance] row_length: missing (needed by "
                                       "inner = \"position_search\")")
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


# ---------------------------------------------------------------------------------------------
# Keys and building
# ---------------------------------------------------------------------------------------------
def _canonical(obj):
    if isinstance(obj, dict):
        return {k: _canonical(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_canonical(v) for v in obj]
    return _canon_number(obj)


def spec_key(spec: InstanceSpec, params: Mapping | None = None) -> str:
    """SHA-256 (hex) of the canonical JSON of :func:`resolved` and :data:`FORMAT_VERSION`.

    Name and description are left out, and table files count by content (their hash), not
    by path, so equivalent instances written differently (``"sqrt"`` vs ``{alpha = 0.5}``,
    ``7`` vs ``"T"`` at ``T = 7``, a shared inner vs a per-row list) get the same key.
    """
    r = resolved(spec, params)
    math_part = {k: v for k, v in r.items() if k not in ("name", "description")}

    def strip_paths(obj):
        if isinstance(obj, dict):
            return {k: strip_paths(v) for k, v in obj.items() if not (k == "table" and "sha256" in obj)}
        if isinstance(obj, list):
            return [strip_paths(v) for v in obj]
        return obj

    doc = {"format": FORMAT_VERSION, "instance": _canonical(strip_paths(math_part))}
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def _time_model(d) -> TimeModel:
    if "alpha" in d:
        return TimeModel.sqrt() if d["alpha"] == 0.5 else TimeModel.power(d["alpha"])
    if "table" in d:
        return TimeModel.positions(d["table"])
    return TimeModel.inputs(d["inputs"])


def time_model_of(spec: InstanceSpec, params: Mapping | None = None):
    """The time model of the instance at ``params`` (one or a list per row), or ``None``."""
    t = resolved(spec, params)["time"]
    if t is None:
        return None
    if isinstance(t, list):
        return [_time_model(d) for d in t]
    return _time_model(t)


def _function_from(spec: InstanceSpec, d: dict, n_default: int | None, max_inputs) -> PartialFunction:
    if "table" in d:
        return _load_table(spec, d["table"], f"{spec.path}: table {_short(d['table'])}")[1]
    if "position_search" in d:
        return position_search_row(d["position_search"], max_inputs=max_inputs)
    return named_function(d["function"], d.get("n", n_default), d.get("k"))


def build_instance(spec: InstanceSpec, params: Mapping | None = None, *,
                   max_inputs: int | None | str = "default") -> PartialFunction:
    """The partial function described by ``spec`` at grid point ``params``.

    Parameters
    ----------
    spec : InstanceSpec
        A loaded instance file.
    params : mapping, optional
        The grid point (every grid parameter, nothing else).
    max_inputs : int, None or "default"
        Refuse, before building, a function with more inputs than this or one that would not
        fit in memory (see :func:`advbound.functions.builders.check_domain_size`; the default is
        :data:`advbound.functions.builders.MAX_INPUTS` or the environment variable ``ADVBOUND_MAX_INPUTS``).

    Raises
    ------
    InvalidInstanceError
        If the grid has parameters and ``params`` lacks one (or names an unknown one), or the
        instance cannot be built; the message names the file and the grid point.
    """
    r = resolved(spec, params)
    p = _params(spec, params)
    src = _source(spec, p)
    tag = f" [{point_label(p)}]" if p else ""
    try:
        outer = _function_from(spec, r["outer"], r["rows"], max_inputs)
        inners = [_function_from(spec, d, None, max_inputs) for d in r["inner"]]
        t = r["time"]
        tm = None if t is None else [_time_model(d) for d in t] if isinstance(t, list) else _time_model(t)
        budget = _budget(r["budget"]) if r["budget"] is not None else None
        desc = f"{spec.name}: {spec.description}{tag}" if spec.description else None
        f = compose(outer, inners, time_model=tm, budget=budget, max_ones=r["max_ones"], description=desc,
                    max_inputs=max_inputs)
    except InvalidInstanceError:
        raise
    except AdvboundError as e:
        raise InvalidInstanceError(f"{src}: {e}") from None
    if desc is None:  # generated description: derive the tagged copy (runs the checks once more)
        f = dataclasses.replace(f, description=f"{spec.name}: {f.description}{tag}")
    return f


def load_function(path: str | os.PathLike, params: Mapping | None = None, *,
                  max_inputs: int | None | str = "default") -> PartialFunction:
    """Load a function from an instance file (``.toml``) or a table file (any other suffix).

    For an instance file with a grid and ``params=None``, the FIRST grid point is used.
    ``max_inputs`` is passed to :func:`build_instance`.
    """
    path = os.fspath(path)
    if path.endswith(".toml"):
        spec = load_instance(path)
        if params is None:
            params = next(iter_grid_points(spec))
            if params:
                log.info("%s: using the first grid point %s", path, params)
        return build_instance(spec, params, max_inputs=max_inputs)
    if params:
        raise InvalidInstanceError(f"{path}: parameters {', '.join(params)} given for a table file")
    return read_table(path)


def parse_params(items: Sequence[str] | None) -> dict:
    """``["T=7", "alpha=0.5"]`` -> ``{"T": 7, "alpha": 0.5}`` (for ``--set NAME=VALUE``).

    >>> parse_params(["T=7", "a=0.5"])
    {'T': 7, 'a': 0.5}
    """
    out: dict = {}
    for item in items or ():
        name, sep, value = str(item).partition("=")
        name, value = name.strip(), value.strip()
        if not sep or not name.isidentifier():
            raise InvalidInstanceError(f"--set {_short(item)}: expected NAME=NUMBER")
        try:
            v: int | float = int(value)
        except ValueError:
            try:
                v = float(value)
            except ValueError:
                raise InvalidInstanceError(f"--set {_short(item)}: {_short(value)} is not a number") from None
            if not math.isfinite(v):
                raise InvalidInstanceError(f"--set {_short(item)}: {_short(value)} is not a finite number")
        out[name] = v
    return out
