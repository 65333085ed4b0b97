"""The ``[grid]`` table of an instance file and its grid points.

This module owns reading the values of each ``[grid]`` key (a number, a list, or a
``{from, to, step}`` range), the limits on them, the grid points (the cartesian product of
the values, filtered by the optional ``where`` condition, walked lazily by :func:`iter_grid_points`), how a point is named in messages
(:func:`point_label`) and the check of the parameters given for one point.

>>> point_label({"T": 4})
'T=4'
"""

from __future__ import annotations

import itertools
import math
from typing import TYPE_CHECKING, Mapping

from advbound.errors import InvalidInstanceError
from advbound.functions.expressions import _short, condition, evaluate

if TYPE_CHECKING:
    from advbound.functions.instance import InstanceSpec

__all__ = ["grid_points", "iter_grid_points", "grid_size", "point_label", "MAX_GRID_POINTS"]

#: Largest number of grid points an instance file may have (the product of its grid lists).
MAX_GRID_POINTS = 100_000


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
    """The product of the value counts (1 without a grid), without listing them: the number of grid
    points, or an upper bound on it when ``[grid] where`` leaves some out."""
    return math.prod(len(v) for v in spec.grid.values())


def iter_grid_points(spec: InstanceSpec):
    """The grid points one at a time, in :func:`grid_points` order, without building the list.

    With ``[grid] where`` only the points of the product that meet the condition are grid points.
    """
    names = list(spec.grid)
    where = getattr(spec, "where", None)
    for combo in itertools.product(*(spec.grid[k] for k in names)):
        point = dict(zip(names, combo))
        if where is None or condition(where, point, f"{spec.path}: [grid] where (at {point_label(point)})"):
            yield point


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
