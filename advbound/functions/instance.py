"""Instance files: declarative TOML descriptions of (families of) partial functions.

This module owns the ``[instance]`` and ``[grid]`` tables of an instance file, the
small arithmetic-expression language used in them, and turning a spec plus grid
parameters into a :class:`~advbound.functions.function.PartialFunction`.  Every other
top-level table (``[study]``, ``[solve]``, ``[report]``, ...) is passed through
untouched for the modules that own it.  Nothing in a file is executed.

Here live the file reading, the :class:`InstanceSpec` value, spec keys and building; the
parts have their own modules, and every name below is importable from here:

==========================  =============================================================
:mod:`.expressions`         :func:`evaluate` and its limits, :func:`parse_params`
:mod:`.grid`                the ``[grid]`` values and grid points
:mod:`.resolution`          :func:`resolved`: the ``[instance]`` table at one grid point
==========================  =============================================================

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
    where = "T >= 6"                   # optional condition on the points
    # points = [{T = 6, rows = 3}, ...] lists points; zip = [["T", "rows"]] reads lists side by side

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

import dataclasses
import hashlib
import json
import logging
import os
import tomllib
from typing import Mapping

from advbound.errors import AdvboundError, InvalidInstanceError
from advbound.functions.composition import compose
from advbound.functions.expressions import MAX_EXPRESSION_CHARS, MAX_EXPRESSION_DEPTH, MAX_INT_BITS  # noqa: F401
from advbound.functions.expressions import _canon_number, _name, _short, evaluate, parse_params
from advbound.functions.function import PartialFunction
from advbound.functions.grid import (MAX_GRID_POINTS, _params, _source, check_choices,  # noqa: F401
                                     chosen, describe_factors, grid_points, grid_size, iter_grid_points,
                                     parse_choices, parse_grid, point_label)
from advbound.functions.outer import named_function
from advbound.functions.resolution import _budget, _load_table, _time_model, directions, resolved, row_length_cuts
from advbound.functions.searchrows import position_search_row
from advbound.functions.tablefile import read_table, read_text

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
    "row_length_cut",
    "load_function",
    "parse_params",
    "parse_choices",
    "check_choices",
    "chosen",
    "evaluate",
]

log = logging.getLogger("advbound")

#: Version of the instance format; part of every :func:`spec_key`.
FORMAT_VERSION = 1

#: Largest instance file :func:`load_instance` reads (16 MiB).
MAX_INSTANCE_BYTES = 1 << 24
_INSTANCE_KEYS = ("name", "description", "outer", "rows", "inner", "row_length", "time", "budget", "max_ones")


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
    where : str or None
        ``[grid] where``: a condition on the parameters (``"rows <= T / 2 + 2"``); only the points of
        the product that meet it are grid points.
    factors : tuple
        The ``(names, rows)`` factors whose product gives the grid points (see :mod:`.grid`): one per
        plain key, one per ``zip`` group, one for ``points``.  Empty: one factor per ``grid`` key.
    """

    name: str
    path: str
    description: str
    instance: dict
    grid: dict
    study: dict
    tables: dict
    base_dir: str = "."
    where: str | None = None
    factors: tuple = ()

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
    grid, factors, where = parse_grid(grid_raw, source)
    spec = InstanceSpec(name=name, path=source, description=description, instance=inst, grid=grid,
                        study=study, tables=tables, base_dir=base_dir, where=where, factors=factors)
    count = grid_size(spec)
    if count > max_points:
        raise InvalidInstanceError(f"{source}: [grid] has {count:,} points ({describe_factors(factors)} values), "
                                   f"more than {max_points:,}; split the grid or pass max_points")
    if check_points:
        for params in iter_grid_points(spec):
            resolved(spec, params)
    return spec


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
    return _build(spec, r, _params(spec, params), max_inputs)


def _build(spec: InstanceSpec, r: dict, p: dict, max_inputs) -> PartialFunction:
    """The function of the resolved table ``r`` at the checked grid point ``p`` (see :func:`build_instance`)."""
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
        err = InvalidInstanceError(f"{src}: {e}")
        err.fix = _budget_fix(spec, p, str(e))
        raise err from None
    if desc is None:  # generated description: derive the tagged copy (runs the checks once more)
        f = dataclasses.replace(f, description=f"{spec.name}: {f.description}{tag}")
    return f


def _budget_fix(spec: InstanceSpec, p: dict, text: str) -> str | None:
    """``"raise T or lower rows"`` for a budget that allows no profile at grid point ``p`` because every
    input's sum of squared times is above it (the opposite when every sum is below it); else ``None``."""
    budget = spec.instance.get("budget")
    if not p or "allows no time profile" not in text or not isinstance(budget, dict):
        return None
    expr = budget.get("sum_squares", budget.get("at_most"))
    up = True if "the smallest sum" in text else False if "the largest sum" in text else None
    if expr is None or up is None:
        return None
    moves = [directions(expr, p, up)]
    if "rows" in spec.instance:
        moves.append(directions(spec.instance["rows"], p, not up))
    said = list(dict.fromkeys(m for part in moves if part for m in part.split(" or ")))
    return " or ".join(said) or None


def row_length_cut(spec: InstanceSpec, params: Mapping | None = None, *, inputs: int | None = None,
                   max_inputs: int | None | str = "default") -> dict | None:
    """How many inputs a written ``row_length`` leaves out where it cuts allowed time profiles.

    ``None`` when ``[instance] row_length`` cuts no row short of the positions the budget allows (see
    the warning of :func:`resolved`).  Otherwise ``{"rows": [{"row": 1, "positions": [4, 6]}, ...],
    "inputs": n, "allowed": N, "dropped": N - n}``: the cut positions of each row (1-based, first and
    last), the inputs with the written lengths (``inputs``, when already known) and without the cut.
    ``allowed`` and ``dropped`` are ``None`` when the uncut function is too large to build
    (``max_inputs``, as for :func:`build_instance`).
    """
    p = _params(spec, params)
    cuts = row_length_cuts(spec, p)
    if not cuts:
        return None
    r = resolved(spec, p)
    if inputs is None:
        inputs = _build(spec, r, p, max_inputs).size
    wide = dict(r, inner=[dict(d) for d in r["inner"]])
    for i, _, u in cuts:
        wide["inner"][i]["position_search"] = u
    try:
        allowed = _build(spec, wide, p, max_inputs).size
    except AdvboundError:
        allowed = None
    return {"rows": [{"row": i + 1, "positions": [m + 1, u]} for i, m, u in cuts], "inputs": inputs,
            "allowed": allowed, "dropped": None if allowed is None else allowed - inputs}


def load_function(path: str | os.PathLike, params: Mapping | None = None, *,
                  max_inputs: int | None | str = "default") -> PartialFunction:
    """Load a function from an instance file (``.toml``) or a table file (any other suffix).

    For an instance file with a grid and ``params=None``, the FIRST grid point is used, and every grid
    point is checked as :func:`load_instance` does; with ``params`` only that point is resolved, so
    one point of a file can be used while another point of its grid is invalid.
    ``max_inputs`` is passed to :func:`build_instance`.
    """
    path = os.fspath(path)
    if path.endswith(".toml"):
        spec = load_instance(path, check_points=params is None)
        if params is None:
            params = next(iter_grid_points(spec))
            if params:
                log.info("%s: using the first grid point %s", path, params)
        return build_instance(spec, params, max_inputs=max_inputs)
    if params:
        raise InvalidInstanceError(f"{path}: parameters {', '.join(params)} given for a table file")
    return read_table(path)
