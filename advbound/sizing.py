"""Size of the dense adversary SDP an instance implies, before anything is solved.

Counts follow the program in the design notes (maximise ``sum W`` subject to
``W o F = 0``, ``rho >= 0``, ``sum rho = 1`` and ``-c_j diag(rho) <= W o Delta_j <= c_j diag(rho)``):

* two output labels (bipartite reduced form): variables ``|D0|*|D1| + |D|`` (the
  off-diagonal block of ``W`` and ``rho``), one LMI of size ``|D|`` per live position
  (the lower LMI is implied);
* three or more labels: variables ``#{unordered pairs with different outputs} + |D|``,
  two LMIs (both sides) of size ``|D|`` per live position;
* dead positions (same symbol on every input) give ``W o Delta_j = 0`` and no LMI;
* a constant function has no variable: its bound is 0.

Memory estimate of a dense solve (stated, not measured)::

    memory_bytes = 16 * (variables + sum over LMIs of size**2)

i.e. one float64 copy of every scalar variable and of every LMI matrix, plus an
equal-sized workspace (eigen-decompositions of the cone projections).

>>> from advbound.builders import or_function
>>> s = formulation_size(or_function(3))
>>> s["variables"], s["lmi_count"], s["lmi_sizes"]
(15, 3, {8: 3})
"""

from __future__ import annotations

import numpy as np

from .domain import domain
from .errors import InvalidFunctionError
from .function import PartialFunction

__all__ = ["formulation_size", "inspect_summary", "MEMORY_FORMULA"]

MEMORY_FORMULA = "16 bytes x (variables + sum of LMI size^2)"


def formulation_size(f: PartialFunction, bound: str = "general") -> dict:
    """Number of scalar variables, LMIs and their sizes, and a dense-solve memory estimate.

    Parameters
    ----------
    f : PartialFunction
    bound : {"general", "positive"}
        ADV± or the positive-weight ADV (which adds ``W >= 0`` entrywise).

    Returns
    -------
    dict
        ``bound``, ``form`` (``"constant"``, ``"bipartite"`` or ``"general"``), ``domain_size``,
        ``outputs`` (count per label), ``positions``, ``live_positions``, ``variables``,
        ``lmi_count``, ``lmi_sizes`` (``{size: count}``), ``psd_entries`` (sum of
        ``s(s+1)/2``), ``nonzeros`` (entries of ``W o Delta_j`` that can be nonzero, upper
        triangle, summed over LMIs, plus the diagonals), ``sign_constraints`` (``W >= 0``
        entries, positive bound only), ``memory_bytes`` and ``memory_formula``.
    """
    if bound not in ("general", "positive"):
        raise InvalidFunctionError(f"bound must be 'general' or 'positive', got {bound!r}")
    d = domain(f)
    size = d.size
    counts = f.output_counts()
    parts = [d.part(i) for i in range(len(d.labels))]
    live = d.live_positions()
    part_sizes = np.array([len(p) for p in parts], dtype=object)
    total_pairs = (size * size - int(sum(int(s) * int(s) for s in part_sizes))) // 2
    out = {"bound": bound, "domain_size": size, "outputs": counts, "positions": f.n,
           "live_positions": int(len(live)), "memory_formula": MEMORY_FORMULA}
    if f.is_constant:
        out.update(form="constant", variables=0, lmi_count=0, lmi_sizes={}, psd_entries=0, nonzeros=0,
                   sign_constraints=0, memory_bytes=0)
        return out
    sides = 1 if f.is_boolean else 2
    lmi_count = sides * int(len(live))
    # nonzeros: for position j, pairs with different outputs AND different symbols at j
    nonzeros = 0
    nsym = len(f.alphabet)
    # c[l, a, j] = number of inputs with output label l and symbol a at position j
    c = np.zeros((len(parts), nsym, f.n), dtype=np.int64)
    for li, p in enumerate(parts):
        block = d.symbols[p]
        for a in range(nsym):
            c[li, a] = (block == a).sum(axis=0)
    for j in live:
        cj = c[:, :, j]
        col_tot = cj.sum(axis=0)
        same = (int(col_tot @ col_tot) - int((cj * cj).sum())) // 2
        nonzeros += sides * ((total_pairs - same) + size)
    variables = total_pairs + size
    lmi_sizes = {size: lmi_count} if lmi_count else {}
    out.update(form="bipartite" if f.is_boolean else "general", variables=int(variables), lmi_count=lmi_count,
               lmi_sizes=lmi_sizes, psd_entries=lmi_count * size * (size + 1) // 2, nonzeros=int(nonzeros),
               sign_constraints=int(total_pairs) if bound == "positive" else 0,
               memory_bytes=int(16 * (variables + lmi_count * size * size)))
    return out


def inspect_summary(f: PartialFunction, time_model=None, bound: str = "general", max_profiles: int | None = None) -> dict:
    """Everything ``advbound inspect`` shows, as plain JSON-able data.

    Parameters
    ----------
    f : PartialFunction
    time_model : TimeModel or sequence, optional
        Used for the time-profile histogram of a function with rows; default
        ``TimeModel.sqrt()`` when every row input is a position-search input, otherwise no
        histogram.
    bound : {"general", "positive"}
        Passed to :func:`formulation_size`.
    max_profiles : int, optional
        Keep only the first this many profiles (``profiles_total`` still counts all).

    Returns
    -------
    dict
        ``description``, ``domain_size``, ``positions`` (count), ``alphabet``, ``outputs`` (count per
        label), ``constant``, ``position_names``, ``costs``, ``dead_positions`` (names), ``groups``,
        ``time_model``, ``time_profiles`` (``"k1,k2,..." -> count`` or ``None``), ``profiles_total``,
        ``sum_squares`` (``"value" -> count`` or ``None``) and ``sdp`` (:func:`formulation_size`).

    >>> from advbound.builders import position_search_composition
    >>> s = inspect_summary(position_search_composition("or", 2, None, 4))
    >>> s["domain_size"], s["time_profiles"], s["sum_squares"]
    (12, {'1,3': 4, '2,2': 4, '3,1': 4}, {'4': 12})
    """
    from .builders import dead_positions, time_profiles
    from .timemodel import TimeModel

    dead = dead_positions(f)
    out = {"description": f.description, "domain_size": f.size, "positions": f.n,
           "alphabet": "".join(f.alphabet), "outputs": f.output_counts(), "constant": f.is_constant,
           "position_names": list(f.position_names), "costs": list(f.costs),
           "dead_positions": [f.position_names[j] for j in dead],
           "groups": [list(g) for g in f.groups], "time_model": None, "time_profiles": None,
           "profiles_total": 0, "sum_squares": None}
    if f.groups:
        tm = time_model
        if tm is None:
            tm = TimeModel.sqrt()
        try:
            tp = time_profiles(f, tm)
        except InvalidFunctionError:
            if time_model is not None:
                raise
            tp = None
        if tp is not None:
            models = tm if isinstance(tm, (list, tuple)) else [tm]
            out["time_model"] = "; ".join(sorted({m.describe() for m in models}))
            items = list(tp["profiles"].items())
            out["profiles_total"] = len(items)
            if max_profiles is not None:
                items = items[:max_profiles]
            out["time_profiles"] = {",".join(str(k) for k in p): c for p, c in items}
            out["sum_squares"] = {str(int(s)) if float(s).is_integer() else repr(float(s)): c
                                  for s, c in tp["sum_squares"].items()}
    out["sdp"] = formulation_size(f, bound)
    return out
