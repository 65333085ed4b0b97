"""Carry a solved Γ of position-search rows to a larger instance, pair orbit by pair orbit.

An orbit certificate of OR (or any symmetric outer) of ``n`` position-search rows gives Γ on each
pair orbit: a multiset of row pairs ``((k_x, b_x), (k_z, b_z))`` (the position and the value of the
non-star symbol of the row in each input).  :func:`lifted_gamma` turns it into a row-invariant
callable ``Γ(x, z)`` on the inputs of another instance with the same number of rows, by a rule that
maps each pair orbit of the target to one of the source:

``same``
    the pair orbit itself, when the source has it; 0 otherwise.  At the source's own size this
    reproduces the certificate's Γ exactly.
``shift``
    for a target whose position sums exceed the source's by ``d``, lower the positions by ``d``:
    one unit at a time, from the agreeing row (same symbol in both inputs) with the largest position
    above 1, both inputs at once; when no such row is left, from the largest position of each input
    separately.  The rows are taken in a canonical order, so the rule depends on the multiset of
    row pairs only (the callable is row-invariant, as ``--orbits`` checks).  Pairs that cannot be
    lowered, or that land outside the source, get 0.

Any Γ gives a lower bound, so every lifted bound is proved (``advbound gamma --orbits`` checks it
like any other callable); how much of the target's optimum it keeps is what the rule is judged by.
"""

from __future__ import annotations

import numpy as np

from advbound.errors import InvalidFunctionError

__all__ = ["lifted_gamma", "LIFT_RULES"]

#: The rules :func:`lifted_gamma` knows.
LIFT_RULES = ("same", "shift")


def _symbol(row: str) -> tuple[int, str] | None:
    """``(position, symbol)`` of the one non-star symbol of a position-search row (1-based), else None."""
    found = [(i + 1, ch) for i, ch in enumerate(row) if ch != "*"]
    return found[0] if len(found) == 1 else None


def _source_table(cert) -> tuple[dict, int]:
    """``{sorted row pairs: Γ}`` of the certificate and its position sum (the same for every input)."""
    symbols = [_symbol(w) for w in cert.letters]
    if any(s is None for s in symbols):
        raise InvalidFunctionError("lifting needs a certificate of position-search rows (one non-star symbol per "
                                   "row input)")
    sums = {sum(symbols[a][0] for a in c) for c in np.asarray(cert.contents)}
    if len(sums) != 1:
        raise InvalidFunctionError("lifting needs a certificate whose inputs all have the same position sum "
                                   f"(found {len(sums)} different sums)")
    table = {}
    for key, g in zip(np.asarray(cert.pair_keys), np.asarray(cert.gamma, dtype=float)):
        pairs = tuple(sorted((symbols[int(a)], symbols[int(b)]) for a, b in key))
        table[pairs] = float(g)
        table[tuple(sorted((z, x) for x, z in pairs))] = float(g)
    return table, sums.pop()


def _shift(rows: list, d: int) -> list | None:
    """Lower the position sums of both sides by ``d`` (see the module docstring); None when impossible."""
    rows = [[list(x), list(z)] for x, z in sorted(rows)]
    for _ in range(d):
        agree = [r for r in rows if r[0] == r[1] and r[0][0] > 1]
        if agree:
            r = max(agree, key=lambda r: r[0][0])
            r[0][0] -= 1
            r[1][0] -= 1
            continue
        for side in (0, 1):
            cand = [r for r in rows if r[side][0] > 1]
            if not cand:
                return None
            max(cand, key=lambda r: r[side][0])[side][0] -= 1
    return rows


def lifted_gamma(cert, rule: str = "shift"):
    """A row-invariant callable ``Γ(x, z)`` on a larger instance from the orbit certificate ``cert``.

    The callable takes its number of rows from the certificate (attribute ``rows``; the target must
    have as many, which the caller checks); its inputs are strings of position-search rows of any
    length.
    """
    if rule not in LIFT_RULES:
        raise InvalidFunctionError(f"lift rule {rule!r} is unknown; use one of {', '.join(LIFT_RULES)}")
    table, source_sum = _source_table(cert)
    n = int(np.asarray(cert.contents).shape[1])

    def gamma(x: str, z: str) -> float:
        if len(x) % n or len(z) != len(x):
            raise InvalidFunctionError(f"lifted Γ: inputs of length {len(x)} do not split into {n} rows")
        L = len(x) // n
        rows = [(_symbol(x[i * L:(i + 1) * L]), _symbol(z[i * L:(i + 1) * L])) for i in range(n)]
        if any(a is None or b is None for a, b in rows):
            raise InvalidFunctionError("lifted Γ: the target's rows are not position-search rows")
        d = sum(a[0] for a, _ in rows) - source_sum
        if d != sum(b[0] for _, b in rows) - source_sum:
            return 0.0
        if rule == "shift" and d > 0:
            rows = _shift(rows, d)
            if rows is None:
                return 0.0
        key = tuple(sorted((tuple(a), tuple(b)) for a, b in rows))
        return table.get(key, 0.0)

    gamma.__qualname__ = f"lifted[{rule}]"
    gamma.rows = n
    return gamma
