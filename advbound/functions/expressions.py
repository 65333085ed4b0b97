"""The arithmetic-expression language of instance files, and ``--set NAME=VALUE`` parameters.

This module owns :func:`evaluate` (numbers or strings over numbers, grid names,
``+ - * / // % **``, parentheses and ``min max sqrt log ceil floor abs``; no ``eval``), its
limits on length, depth and the size of every number, the integer checks built on it, the
one-line renderings of keys and values used in instance-file messages, and
:func:`parse_params`.

>>> evaluate("min(T - 2, 5) * 2", {"T": 6})
8
"""

from __future__ import annotations

import ast
import json
import math
from typing import Any, Mapping, Sequence

from advbound.errors import InvalidInstanceError

__all__ = ["evaluate", "condition", "parse_params", "MAX_EXPRESSION_CHARS", "MAX_EXPRESSION_DEPTH", "MAX_INT_BITS"]

#: Limits of the expression language: longer, deeper or larger is refused with one line.
MAX_EXPRESSION_CHARS = 1000
MAX_EXPRESSION_DEPTH = 60
#: Integers (inputs, intermediate results and the value) above ``2**MAX_INT_BITS`` (about 1.8e308,
#: the float range) are refused, so no power or product can grow without bound.
MAX_INT_BITS = 1024

_FUNCS = {"min": min, "max": max, "sqrt": math.sqrt, "log": math.log, "ceil": math.ceil,
          "floor": math.floor, "abs": abs}
_BINOPS = {ast.Add: lambda a, b: a + b, ast.Sub: lambda a, b: a - b, ast.Mult: lambda a, b: a * b,
           ast.Div: lambda a, b: a / b, ast.FloorDiv: lambda a, b: a // b, ast.Mod: lambda a, b: a % b,
           ast.Pow: lambda a, b: a ** b}


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


_COMPARE = {ast.Lt: lambda a, b: a < b, ast.LtE: lambda a, b: a <= b, ast.Gt: lambda a, b: a > b,
            ast.GtE: lambda a, b: a >= b, ast.Eq: lambda a, b: a == b, ast.NotEq: lambda a, b: a != b}


def condition(expr: Any, params: Mapping[str, float], where: str = "condition") -> bool:
    """Evaluate a condition: comparisons of expressions (``< <= > >= == !=``, chained), ``and``, ``or``, ``not``.

    Each side of a comparison is an expression of :func:`evaluate`, with its limits.

    >>> condition("rows <= T / 2 + 1 and T >= 6", {"rows": 4, "T": 6})
    True
    >>> condition("rows + 1", {"rows": 2}, "f.toml: [grid] where")
    Traceback (most recent call last):
    ...
    advbound.errors.InvalidInstanceError: f.toml: [grid] where: 'rows + 1' is not a condition (write a comparison such as 'rows <= T / 2')
    """
    if not isinstance(expr, str) or len(expr) > MAX_EXPRESSION_CHARS:
        raise InvalidInstanceError(f"{where}: expected a condition string of at most {MAX_EXPRESSION_CHARS} "
                                   f"characters, got {_short(expr)}")
    try:
        tree = ast.parse(expr, mode="eval").body
    except SyntaxError:
        raise InvalidInstanceError(f"{where}: {_short(expr)} is not a valid condition") from None

    def walk(node, depth=0):
        if depth > MAX_EXPRESSION_DEPTH:
            raise InvalidInstanceError(f"{where}: {_short(expr)} is nested too deeply")
        if isinstance(node, ast.BoolOp):
            values = [walk(v, depth + 1) for v in node.values]
            return all(values) if isinstance(node.op, ast.And) else any(values)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.Not):
            return not walk(node.operand, depth + 1)
        if isinstance(node, ast.Compare) and all(type(op) in _COMPARE for op in node.ops):
            sides = [evaluate(ast.unparse(x), params, where) for x in [node.left, *node.comparators]]
            return all(_COMPARE[type(op)](a, b) for op, a, b in zip(node.ops, sides, sides[1:]))
        raise InvalidInstanceError(f"{where}: {_short(expr)} is not a condition (write a comparison such as "
                                   f"'rows <= T / 2')")

    return bool(walk(tree))


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
