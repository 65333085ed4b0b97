"""The ``[grid]`` table of an instance file and its grid points.

This module owns reading the ``[grid]`` table (:func:`parse_grid`): the values of each key (a
number, a list, or a ``{from, to, step}`` range), ``zip`` groups of keys that vary together, an
explicit ``points`` list, and the limits on them; the grid points (the cartesian product of those
factors, filtered by the optional ``where`` condition, walked lazily by :func:`iter_grid_points`
and counted without listing by :func:`grid_size`); how a point is named in messages
(:func:`point_label`); the check of the parameters given for one point; and the choice of a subset
of the grid by ``--set NAME=V1,V2`` (:func:`parse_choices`, :func:`check_choices`,
:func:`chosen`).

A grid is a product of *factors*: a factor is a tuple of parameter names and the tuple of their
value rows.  A plain key is a factor of one name; a ``zip`` group is one factor of several names
whose lists are read side by side; a ``points`` list is one factor of the names its points give.

>>> point_label({"T": 4})
'T=4'
"""

from __future__ import annotations

import itertools
import json
import math
from typing import TYPE_CHECKING, Iterable, Mapping, Sequence

from advbound.errors import InvalidInstanceError
from advbound.functions.expressions import _FUNCS, _name, _short, condition, evaluate, parse_params

if TYPE_CHECKING:
    from advbound.functions.instance import InstanceSpec

__all__ = ["grid_points", "iter_grid_points", "grid_size", "point_label", "parse_grid", "grid_factors",
           "parse_choices", "check_choices", "chosen", "MAX_GRID_POINTS", "GRID_WORDS"]

#: Largest number of grid points an instance file may have (the product of its grid lists).
MAX_GRID_POINTS = 100_000

#: Keys of ``[grid]`` that are not parameters.
GRID_WORDS = ("where", "zip", "points")

#: Largest number of values of one grid key (and of entries of ``points``).
_MAX_GRID_VALUES = 100_000


def _number(v, where: str):
    """``v`` if it is a finite number of bounded size (not a truth value); else one line naming ``where``."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise InvalidInstanceError(f"{where}: value {_short(v)} is not a number")
    evaluate(v, {}, where)
    return v


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


# ---------------------------------------------------------------------------------------------
# Reading [grid]
# ---------------------------------------------------------------------------------------------
def _check_name(key, where: str, inside: bool = False) -> None:
    if not isinstance(key, str) or not key.isidentifier() or key in _FUNCS or key in GRID_WORDS:
        if inside:
            raise InvalidInstanceError(f"{where}: {_short(key)} is not usable as a parameter name")
        raise InvalidInstanceError(f"{where} {_name(key)}: not usable as a parameter name")


def _zip_groups(value, source: str) -> list[list[str]]:
    """``zip = [["T", "rows"], ...]`` (or one group ``zip = ["T", "rows"]``) as a list of name lists."""
    where = f"{source}: [grid] zip"
    if isinstance(value, list) and value and all(isinstance(v, str) for v in value):
        value = [value]
    if not isinstance(value, list) or not value or not all(isinstance(g, list) for g in value):
        raise InvalidInstanceError(f"{where}: expected a list of key lists such as [[\"T\", \"rows\"]], "
                                   f"got {_short(value)}")
    seen: dict[str, int] = {}
    for i, group in enumerate(value, 1):
        if len(group) < 2 or not all(isinstance(k, str) for k in group):
            raise InvalidInstanceError(f"{where}[{i}]: a group needs two or more key names, got {_short(group)}")
        for k in group:
            if k in seen:
                raise InvalidInstanceError(f"{where}[{i}]: key {_name(k)} is already in "
                                           + ("this group" if seen[k] == i else f"group {seen[k]}"))
            seen[k] = i
    return value


def _zip_factor(group: list[str], axes: dict, source: str, index: int) -> tuple:
    """The factor of one zip group: its names and the rows read side by side from their lists."""
    where = f"{source}: [grid] zip[{index}] {json.dumps(group)}"
    for k in group:
        if k not in axes:
            raise InvalidInstanceError(f"{where}: {_name(k)} is not a [grid] key with a list of values"
                                       + (f" (the keys are {', '.join(axes)})" if axes else ""))
    lengths = [len(axes[k]) for k in group]
    if len(set(lengths)) != 1:
        said = ", ".join(f"{k}: {n}" for k, n in zip(group, lengths))
        raise InvalidInstanceError(f"{where}: zipped keys need lists of equal length ({said} values)")
    rows = tuple(zip(*(axes[k] for k in group)))
    _no_repeats(rows, tuple(group), where, "entry")
    return tuple(group), rows


def _no_repeats(rows: Sequence[tuple], names: tuple, where: str, what: str) -> None:
    first: dict = {}
    for i, row in enumerate(rows, 1):
        if row in first:
            label = point_label(dict(zip(names, row)))
            raise InvalidInstanceError(f"{where}: {what} {i} repeats {what} {first[row]} ({label})")
        first[row] = i


def _points_factor(value, axes: dict, source: str) -> tuple:
    """The factor of ``points = [{T = 6, rows = 3}, ...]``: the names of the first point, one row per point."""
    where = f"{source}: [grid] points"
    if not isinstance(value, list) or not value:
        raise InvalidInstanceError(f"{where}: expected a non-empty list of tables such as "
                                   f"[{{T = 6, rows = 3}}, {{T = 8, rows = 4}}], got {_short(value)}")
    if len(value) > _MAX_GRID_VALUES:
        raise InvalidInstanceError(f"{where}: the list has {len(value)} points (at most {_MAX_GRID_VALUES})")
    names: tuple = ()
    rows = []
    for i, pt in enumerate(value, 1):
        at = f"{where}[{i}]"
        if not isinstance(pt, dict) or not pt:
            raise InvalidInstanceError(f"{at}: expected a table of parameter values such as {{T = 6, rows = 3}}, "
                                       f"got {_short(pt)}")
        if i == 1:
            for k in pt:
                _check_name(k, at, inside=True)
                if k in axes:
                    raise InvalidInstanceError(f"{at}: {k} is also a [grid] key; give its values in one place")
            names = tuple(pt)
        extra = [k for k in pt if k not in names]
        if extra:
            raise InvalidInstanceError(f"{at}: unknown key {_short(extra[0])} (the points give "
                                       f"{', '.join(names)}, as points[1] does)")
        missing = [k for k in names if k not in pt]
        if missing:
            raise InvalidInstanceError(f"{at}: missing {', '.join(missing)} (every point gives {', '.join(names)})")
        rows.append(tuple(_number(pt[k], f"{at}.{k}") for k in names))
    _no_repeats(rows, names, where, "point")
    return names, tuple(rows)


def parse_grid(raw: Mapping, source: str) -> tuple[dict, tuple, str | None]:
    """Read a ``[grid]`` table: ``(grid, factors, where)``.

    ``grid`` maps each parameter to its distinct values (first-seen order), ``factors`` is the tuple
    of ``(names, rows)`` whose product gives the grid points, ``where`` the condition or ``None``.
    Parameters are in the order their keys are written; the keys of ``points`` come at its place,
    in the order of the first point.  A zip group varies as one key, at the place of its first key.
    """
    raw = dict(raw)
    where = raw.pop("where", None)
    if where is not None and not isinstance(where, str):
        raise InvalidInstanceError(f"{source}: [grid] where: must be a condition string such as 'rows <= T / 2'")
    groups = _zip_groups(raw["zip"], source) if "zip" in raw else []
    axes = {}
    for key, value in raw.items():
        if key in GRID_WORDS:
            continue
        _check_name(key, f"{source}: [grid]")
        axes[key] = _grid_values(value, f"{source}: [grid] {key}")
    zipped = {k: i for i, g in enumerate(groups) for k in g}
    zip_factors = [_zip_factor(g, axes, source, i + 1) for i, g in enumerate(groups)]
    factors, placed, grid = [], set(), {}
    for key in raw:
        if key == "points":
            names, rows = _points_factor(raw["points"], axes, source)
            factors.append((names, rows))
            for j, k in enumerate(names):
                grid[k] = list(dict.fromkeys(r[j] for r in rows))
            continue
        if key not in axes:
            continue
        grid[key] = axes[key] if key not in zipped else list(dict.fromkeys(axes[key]))
        if key not in zipped:
            factors.append(((key,), tuple((v,) for v in axes[key])))
        elif zipped[key] not in placed:
            placed.add(zipped[key])
            factors.append(zip_factors[zipped[key]])
    return grid, tuple(factors), where


def grid_factors(spec: InstanceSpec) -> tuple:
    """The factors of ``spec``'s grid (one per key when the spec was made without them)."""
    factors = getattr(spec, "factors", None)
    if factors:
        return factors
    return tuple(((k,), tuple((v,) for v in vals)) for k, vals in spec.grid.items())


def describe_factors(factors) -> str:
    """``"T: 4 x rows+T: 3 values"``: the factor sizes, for the message refusing a huge grid."""
    return " x ".join(f"{'+'.join(names)}: {len(rows)}" for names, rows in factors)


# ---------------------------------------------------------------------------------------------
# Grid points
# ---------------------------------------------------------------------------------------------
def grid_size(spec: InstanceSpec) -> int:
    """The product of the factor sizes (1 without a grid), without listing them: the number of grid
    points, or an upper bound on it when ``[grid] where`` leaves some out."""
    return math.prod(len(rows) for _, rows in grid_factors(spec))


def iter_grid_points(spec: InstanceSpec):
    """The grid points one at a time, in :func:`grid_points` order, without building the list.

    With ``[grid] where`` only the points of the product that meet the condition are grid points.
    """
    names = list(spec.grid)
    factors = grid_factors(spec)
    where = getattr(spec, "where", None)
    for combo in itertools.product(*(rows for _, rows in factors)):
        values = {}
        for (fn, _), row in zip(factors, combo):
            values.update(zip(fn, row))
        point = {k: values[k] for k in names}
        if where is None or condition(where, point, f"{spec.path}: [grid] where (at {point_label(point)})"):
            yield point


def grid_points(spec: InstanceSpec, *, max_points: int = MAX_GRID_POINTS) -> list[dict]:
    """The grid points: the product of the factors in the order the keys are written (last varies
    fastest), filtered by ``where``.

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
# A subset of the grid: --set NAME=V1,V2
# ---------------------------------------------------------------------------------------------
def parse_choices(items: Iterable[str] | None) -> dict[str, list]:
    """``["T=4,5", "rows=2"]`` -> ``{"T": [4, 5], "rows": [2]}`` (``--set`` of ``advbound study``).

    Each value is read as :func:`~advbound.functions.expressions.parse_params` reads one; a name
    given twice collects the values of both.

    >>> parse_choices(["T=4,5", "rows=2", "T=6"])
    {'T': [4, 5, 6], 'rows': [2]}
    """
    out: dict[str, list] = {}
    for item in items or ():
        name, sep, values = str(item).partition("=")
        parts = values.split(",") if sep else [values]
        if sep and not all(v.strip() for v in parts):
            raise InvalidInstanceError(f"--set {_short(item)}: expected NAME=NUMBER or NAME=NUMBER,NUMBER,...")
        for v in parts:
            for k, x in parse_params([f"{name}={v}" if sep else str(item)]).items():
                vals = out.setdefault(k, [])
                if x not in vals:
                    vals.append(x)
    return out


def check_choices(spec: InstanceSpec, choices: Mapping[str, Sequence]) -> None:
    """Refuse ``choices`` naming a parameter the grid lacks, or a value no grid point has (one line each)."""
    for name, values in choices.items():
        if name not in spec.grid:
            known = ", ".join(spec.grid) or "no parameters"
            raise InvalidInstanceError(f"{spec.path}: --set {_name(name)}: not a grid parameter (the grid has "
                                       f"{known})")
        grid_values = spec.grid[name]
        for v in values:
            if v not in grid_values:
                raise InvalidInstanceError(f"{spec.path}: --set {name}={v}: not a value of the grid ({name} takes "
                                           f"{', '.join(str(x) for x in grid_values)})")


def chosen(point: Mapping, choices: Mapping[str, Sequence] | None) -> bool:
    """Whether ``point`` has one of the chosen values of every parameter in ``choices``.

    >>> chosen({"T": 4, "rows": 2}, {"T": [4, 5]}), chosen({"T": 6, "rows": 2}, {"T": [4, 5]})
    (True, False)
    """
    return not choices or all(point.get(k) in vals for k, vals in choices.items())
