"""Instance files: declarative TOML descriptions of (families of) partial functions.

This module owns the ``[instance]`` and ``[grid]`` tables of an instance file, the
small arithmetic-expression language used in them, and turning a spec plus grid
parameters into a :class:`~advbound.function.PartialFunction`.  Every other
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
parentheses and ``min max sqrt log ceil floor abs``.

>>> evaluate("min(T - 2, 5) * 2", {"T": 6})
8
"""

from __future__ import annotations

import ast
import dataclasses
import hashlib
import itertools
import json
import logging
import math
import os
import tomllib
from typing import Any, Mapping, Sequence

from .builders import NAMED_FUNCTIONS, compose, named_function, position_search_row
from .errors import AdvboundError, InvalidInstanceError
from .function import PartialFunction
from .tablefile import read_table
from .timemodel import Budget, TimeModel

__all__ = [
    "FORMAT_VERSION",
    "InstanceSpec",
    "load_instance",
    "parse_instance",
    "grid_points",
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

_FUNCS = {"min": min, "max": max, "sqrt": math.sqrt, "log": math.log, "ceil": math.ceil,
          "floor": math.floor, "abs": abs}
_BINOPS = {ast.Add: lambda a, b: a + b, ast.Sub: lambda a, b: a - b, ast.Mult: lambda a, b: a * b,
           ast.Div: lambda a, b: a / b, ast.FloorDiv: lambda a, b: a // b, ast.Mod: lambda a, b: a % b,
           ast.Pow: lambda a, b: a ** b}
_INSTANCE_KEYS = ("name", "description", "outer", "rows", "inner", "row_length", "time", "budget", "max_ones")


# ---------------------------------------------------------------------------------------------
# Expressions
# ---------------------------------------------------------------------------------------------
def evaluate(expr: Any, params: Mapping[str, float], where: str = "expression") -> int | float:
    """Evaluate a number or an arithmetic expression string over ``params`` (no ``eval``).

    Raises
    ------
    InvalidInstanceError
        ``"<where>: unknown name 'Tx'"`` and the like.

    >>> evaluate("T // 2 + sqrt(16)", {"T": 7})
    7.0
    """
    if isinstance(expr, bool):
        raise InvalidInstanceError(f"{where}: expected a number or an expression, got {expr!r}")
    if isinstance(expr, (int, float)):
        if not math.isfinite(expr):
            raise InvalidInstanceError(f"{where}: {expr!r} is not a finite number")
        return expr
    if not isinstance(expr, str):
        raise InvalidInstanceError(f"{where}: expected a number or an expression, got {expr!r}")
    try:
        tree = ast.parse(expr.strip(), mode="eval")
    except SyntaxError:
        raise InvalidInstanceError(f"{where}: cannot parse expression {expr!r}") from None

    def ev(node):
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant):
            if isinstance(node.value, bool) or not isinstance(node.value, (int, float)):
                raise InvalidInstanceError(f"{where}: {node.value!r} is not a number")
            return node.value
        if isinstance(node, ast.Name):
            if node.id not in params:
                raise InvalidInstanceError(f"{where}: unknown name {node.id!r}")
            return params[node.id]
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.UAdd, ast.USub)):
            v = ev(node.operand)
            return -v if isinstance(node.op, ast.USub) else +v
        if isinstance(node, ast.BinOp) and type(node.op) in _BINOPS:
            a, b = ev(node.left), ev(node.right)
            if isinstance(node.op, ast.Pow) and (abs(b) > 64 or abs(a) > 1e6):
                raise InvalidInstanceError(f"{where}: power {a!r} ** {b!r} is too large")
            return _BINOPS[type(node.op)](a, b)
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and not node.keywords:
            fn = _FUNCS.get(node.func.id)
            if fn is None:
                raise InvalidInstanceError(f"{where}: unknown function {node.func.id!r} "
                                           f"(allowed: {', '.join(_FUNCS)})")
            return fn(*[ev(a) for a in node.args])
        raise InvalidInstanceError(f"{where}: {ast.unparse(node)!r} is not allowed in an expression")

    try:
        value = ev(tree)
    except InvalidInstanceError:
        raise
    except (ZeroDivisionError, ValueError, TypeError, OverflowError) as e:
        raise InvalidInstanceError(f"{where}: cannot evaluate {expr!r}: {e}") from None
    if isinstance(value, complex) or not math.isfinite(value):
        raise InvalidInstanceError(f"{where}: {expr!r} does not evaluate to a finite real number")
    return value


def _as_int(value, where: str, lo: int | None = None) -> int:
    if isinstance(value, float):
        if not value.is_integer():
            raise InvalidInstanceError(f"{where}: must be an integer, got {value!r}")
        value = int(value)
    if lo is not None and value < lo:
        raise InvalidInstanceError(f"{where}: must be >= {lo}, got {value}")
    return value


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


def load_instance(path: str | os.PathLike) -> InstanceSpec:
    """Read and validate an instance file.

    Every grid point is resolved once, so unknown names and bad values are reported here
    (``"f.toml: [instance] row_length: unknown name 'Tx'"``).
    """
    path = os.fspath(path)
    with open(path, "rb") as fh:
        data = fh.read()
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise InvalidInstanceError(f"{path}: not UTF-8 text") from None
    return parse_instance(text, source=path, base_dir=os.path.dirname(os.path.abspath(path)))


def parse_instance(text: str, source: str = "<string>", base_dir: str = ".") -> InstanceSpec:
    """Parse instance-file text; see :func:`load_instance`."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InvalidInstanceError(f"{source}: invalid TOML: {e}") from None
    inst = doc.get("instance")
    if not isinstance(inst, dict):
        raise InvalidInstanceError(f"{source}: missing [instance] table")
    for key in inst:
        if key not in _INSTANCE_KEYS:
            raise InvalidInstanceError(f"{source}: [instance] {key}: unknown key (expected one of "
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
            raise InvalidInstanceError(f"{source}: top-level key {key!r} must be inside a table "
                                       "(did you mean it for [instance]?)")
        tables[key] = value
    name = inst.get("name", os.path.splitext(os.path.basename(source))[0])
    if not isinstance(name, str) or not name:
        raise InvalidInstanceError(f"{source}: [instance] name: must be a non-empty string")
    description = inst.get("description", "")
    if not isinstance(description, str):
        raise InvalidInstanceError(f"{source}: [instance] description: must be a string")
    grid = {key: _grid_values(value, f"{source}: [grid] {key}") for key, value in grid_raw.items()}
    for key in grid:
        if not key.isidentifier() or key in _FUNCS:
            raise InvalidInstanceError(f"{source}: [grid] {key}: not usable as a parameter name")
    spec = InstanceSpec(name=name, path=source, description=description, instance=inst, grid=grid,
                        study=study, tables=tables, base_dir=base_dir)
    for params in grid_points(spec):
        resolved(spec, params)
    return spec


def _grid_values(value, where: str) -> list:
    if isinstance(value, bool):
        raise InvalidInstanceError(f"{where}: expected a number, a list or {{from, to, step}}, got {value!r}")
    if isinstance(value, (int, float)):
        return [value]
    if isinstance(value, list):
        if not value:
            raise InvalidInstanceError(f"{where}: the list of values is empty")
        for v in value:
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise InvalidInstanceError(f"{where}: value {v!r} is not a number")
        return list(value)
    if isinstance(value, dict):
        for k in value:
            if k not in ("from", "to", "step"):
                raise InvalidInstanceError(f"{where}: unknown key {k!r} (expected from, to, step)")
        if "from" not in value or "to" not in value:
            raise InvalidInstanceError(f"{where}: a range needs 'from' and 'to'")
        a, b, s = value["from"], value["to"], value.get("step", 1)
        for nm, v in (("from", a), ("to", b), ("step", s)):
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise InvalidInstanceError(f"{where}: {nm} must be a number, got {v!r}")
        if s <= 0:
            raise InvalidInstanceError(f"{where}: step must be positive, got {s!r}")
        if b < a:
            raise InvalidInstanceError(f"{where}: 'to' ({b!r}) is smaller than 'from' ({a!r})")
        count = int(math.floor((b - a) / s + 1e-9)) + 1
        if count > 100000:
            raise InvalidInstanceError(f"{where}: the range has {count} values (at most 100000)")
        out = [a + i * s for i in range(count)]
        return [int(v) if all(isinstance(x, int) for x in (a, s)) else v for v in out]
    raise InvalidInstanceError(f"{where}: expected a number, a list or {{from, to, step}}, got {value!r}")


def grid_points(spec: InstanceSpec) -> list[dict]:
    """The cartesian product of the grid, in the order the keys are written (last varies fastest).

    ``[{}]`` when the file has no grid.
    """
    names = list(spec.grid)
    return [dict(zip(names, combo)) for combo in itertools.product(*(spec.grid[k] for k in names))]


def _params(spec: InstanceSpec, params: Mapping | None) -> dict:
    params = dict(params or {})
    for key in params:
        if key not in spec.grid:
            known = ", ".join(spec.grid) or "no parameters"
            raise InvalidInstanceError(f"{spec.path}: unknown parameter {key!r} (the grid defines {known})")
        v = params[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise InvalidInstanceError(f"{spec.path}: parameter {key}={v!r} is not a number")
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
    """
    p = _params(spec, params)
    inst = spec.instance
    src = spec.path

    def where(key: str) -> str:
        return f"{src}: [instance] {key}"

    if "outer" not in inst:
        raise InvalidInstanceError(f"{where('outer')}: missing (e.g. outer = \"or\")")
    outer = _resolve_function(spec, inst["outer"], p, "outer", rows=None)
    if "rows" in inst:
        rows = _as_int(evaluate(inst["rows"], p, where("rows")), where("rows"), 1)
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
        inner = [_resolve_inner(spec, v, p, f"inner[{i + 1}]") for i, v in enumerate(inner_raw)]
    else:
        inner = [_resolve_inner(spec, inner_raw, p, "inner")] * rows
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
        max_ones = _as_int(evaluate(inst["max_ones"], p, where("max_ones")), where("max_ones"), 0)
    return {"name": spec.name, "description": spec.description, "rows": rows, "outer": outer,
            "inner": inner, "time": time, "budget": budget, "max_ones": max_ones}


def _table_entry(spec: InstanceSpec, path, where: str) -> dict:
    if not isinstance(path, str) or not path:
        raise InvalidInstanceError(f"{where}: table must be a file name")
    full = path if os.path.isabs(path) else os.path.join(spec.base_dir, path)
    try:
        with open(full, "rb") as fh:
            data = fh.read()
    except OSError:
        raise InvalidInstanceError(f"{where}: cannot read table file {path!r}") from None
    return {"table": path, "sha256": hashlib.sha256(data).hexdigest(), "_full": full}


def _resolve_function(spec, value, p, key, rows) -> dict:
    where = f"{spec.path}: [instance] {key}"
    if isinstance(value, str):
        value = {"function": value}
    if not isinstance(value, dict):
        raise InvalidInstanceError(f"{where}: expected a function name or a table, got {value!r}")
    if "table" in value:
        extra = [k for k in value if k != "table"]
        if extra:
            raise InvalidInstanceError(f"{where}: unknown key {extra[0]!r} next to 'table'")
        entry = _table_entry(spec, value["table"], where)
        try:
            f = read_table(entry["_full"])
        except AdvboundError as e:
            raise InvalidInstanceError(f"{where}: {e}") from None
        del entry["_full"]
        entry["arity"] = f.n
        return entry
    if "function" not in value:
        raise InvalidInstanceError(f"{where}: expected 'function' or 'table'")
    keys = ("function", "k") if key == "outer" else ("function", "n", "k")
    for k in value:
        if k not in keys:
            hint = " (the outer arity is rows)" if k == "n" else ""
            raise InvalidInstanceError(f"{where}: unknown key {k!r}{hint} (expected {', '.join(keys)})")
    name = value["function"]
    if not isinstance(name, str) or name.lower() not in NAMED_FUNCTIONS:
        raise InvalidInstanceError(f"{where}: unknown function {name!r} (expected one of "
                                   f"{', '.join(NAMED_FUNCTIONS)})")
    out = {"function": name.lower()}
    if "k" in value:
        out["k"] = _as_int(evaluate(value["k"], p, f"{where}.k"), f"{where}.k", 0)
    if "n" in value:
        out["n"] = _as_int(evaluate(value["n"], p, f"{where}.n"), f"{where}.n", 1)
    return out


def _resolve_inner(spec, value, p, key) -> dict:
    where = f"{spec.path}: [instance] {key}"
    inst = spec.instance
    if value == "position_search":
        if "row_length" not in inst:
            raise InvalidInstanceError(f"{spec.path}: [instance] row_length: missing (needed by "
                                       "inner = \"position_search\")")
        w = f"{spec.path}: [instance] row_length"
        m = _as_int(evaluate(inst["row_length"], p, w), w, 1)
        return {"position_search": m, "_uses_row_length": True}
    if isinstance(value, dict) and "position_search" in value:
        extra = [k for k in value if k != "position_search"]
        if extra:
            raise InvalidInstanceError(f"{where}: unknown key {extra[0]!r} next to 'position_search'")
        w = f"{where}.position_search"
        return {"position_search": _as_int(evaluate(value["position_search"], p, w), w, 1)}
    if isinstance(value, dict):
        d = _resolve_function(spec, value, p, key, None)
        if "function" in d:
            if "n" not in d:
                raise InvalidInstanceError(f"{where}: an inner {d['function']!r} needs n (its number of bits)")
            try:
                named_function(d["function"], d["n"], d.get("k"))
            except AdvboundError as e:
                raise InvalidInstanceError(f"{where}: {e}") from None
        return d
    raise InvalidInstanceError(f"{where}: expected \"position_search\" or a table, got {value!r}")


def _resolve_time(value, p, where) -> dict:
    if value == "sqrt":
        return {"alpha": 0.5}
    if not isinstance(value, dict) or len(value) != 1:
        raise InvalidInstanceError(f"{where}: expected \"sqrt\", {{alpha = ...}}, {{table = [...]}} "
                                   f"or {{inputs = {{...}}}}, got {value!r}")
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
            tv = float(evaluate(t, p, f"{where}.inputs.{x}"))
            if tv < 0:
                raise InvalidInstanceError(f"{where}.inputs.{x}: times must be >= 0, got {tv!r}")
            out[x] = tv
        return {"inputs": dict(sorted(out.items()))}
    raise InvalidInstanceError(f"{where}: unknown key {k!r} (expected alpha, table or inputs)")


def _resolve_budget(value, p, where, time_raw) -> dict:
    if not isinstance(value, dict):
        raise InvalidInstanceError(f"{where}: expected a table such as {{ sum_squares = \"T\" }}, got {value!r}")
    kinds = [k for k in ("sum_squares", "at_most", "profiles") if k in value]
    if len(kinds) != 1:
        raise InvalidInstanceError(f"{where}: give exactly one of sum_squares, at_most, profiles")
    kind = kinds[0]
    allowed = {"sum_squares": ("sum_squares", "rtol"), "at_most": ("at_most", "rtol"),
               "profiles": ("profiles", "permutations")}[kind]
    for k in value:
        if k not in allowed:
            raise InvalidInstanceError(f"{where}: unknown key {k!r} with {kind} (expected {', '.join(allowed)})")
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
            vals = [_as_int(x, f"{where}.profiles[{i + 1}]", 1) for x in vals]
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


def _function_from(spec: InstanceSpec, d: dict, n_default: int | None) -> PartialFunction:
    if "table" in d:
        path = d["table"]
        return read_table(path if os.path.isabs(path) else os.path.join(spec.base_dir, path))
    if "position_search" in d:
        return position_search_row(d["position_search"])
    return named_function(d["function"], d.get("n", n_default), d.get("k"))


def build_instance(spec: InstanceSpec, params: Mapping | None = None) -> PartialFunction:
    """The partial function described by ``spec`` at grid point ``params``.

    Raises
    ------
    InvalidInstanceError
        If the grid has parameters and ``params`` lacks one (or names an unknown one), or the
        instance cannot be built (the message names the file).
    """
    r = resolved(spec, params)
    try:
        outer = _function_from(spec, r["outer"], r["rows"])
        inners = [_function_from(spec, d, None) for d in r["inner"]]
        tm = time_model_of(spec, params)
        b = r["budget"]
        budget = None
        if b is not None:
            if "sum_squares" in b:
                budget = Budget.sum_squares(b["sum_squares"], b["rtol"])
            elif "at_most" in b:
                budget = Budget.at_most(b["at_most"], b["rtol"])
            else:
                budget = Budget.from_profiles(b["profiles"], b["permutations"])
        p = _params(spec, params)
        tag = " [" + ", ".join(f"{k}={v}" for k, v in p.items()) + "]" if p else ""
        desc = f"{spec.name}: {spec.description}{tag}" if spec.description else None
        f = compose(outer, inners, time_model=tm, budget=budget, max_ones=r["max_ones"], description=desc)
    except InvalidInstanceError:
        raise
    except AdvboundError as e:
        raise InvalidInstanceError(f"{spec.path}: {e}") from None
    if desc is None:  # generated description: derive the tagged copy (runs the checks once more)
        f = dataclasses.replace(f, description=f"{spec.name}: {f.description}{tag}")
    return f


def load_function(path: str | os.PathLike, params: Mapping | None = None) -> PartialFunction:
    """Load a function from an instance file (``.toml``) or a table file (any other suffix).

    For an instance file with a grid and ``params=None``, the FIRST grid point is used.
    """
    path = os.fspath(path)
    if path.endswith(".toml"):
        spec = load_instance(path)
        if params is None:
            params = grid_points(spec)[0]
            if params:
                log.info("%s: using the first grid point %s", path, params)
        return build_instance(spec, params)
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
            raise InvalidInstanceError(f"--set {item!r}: expected NAME=NUMBER")
        try:
            v: int | float = int(value)
        except ValueError:
            try:
                v = float(value)
            except ValueError:
                raise InvalidInstanceError(f"--set {item!r}: {value!r} is not a number") from None
            if not math.isfinite(v):
                raise InvalidInstanceError(f"--set {item!r}: {value!r} is not a finite number")
        out[name] = v
    return out
