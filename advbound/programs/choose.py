"""Which program and solver ``method="auto"`` runs, and why, decided before anything is built.

The rule, in order (the measurements behind it are in docs/solving.md, "Choosing a program"):

1. **minimax** for the positive bound, **rows** for ADV±: the rows of ``f`` are interchangeable (:func:`advbound.functions.rowfamily.family_of`:
   equal blocks with equal costs, a domain closed under permuting them and an output unchanged by
   it).  The S_n-reduced program's size depends on the number of input orbits, not on ``|D|``; it
   runs on CLARABEL.  For ADV the minimax program (:mod:`advbound.programs.minimax`) needs neither
   a representative set nor PSD blocks, only second-order cones, and is much faster.
2. **dense**: otherwise, when the dense program fits in memory
   (:func:`advbound.functions.sizing.solve_estimate` against
   :func:`advbound.functions.sizing.memory_budget`), with the solver of the smaller estimated time
   among those that fit (CLARABEL wins on every instance small enough for it).
3. **factored**: a two-output function whose dense program fits with no solver.
4. **dense** with SCS otherwise; :func:`advbound.programs.solve.solve` then refuses it with the
   memory estimate unless ``allow_large`` is given.

A solver named by the caller is respected: the row-symmetric program is skipped when the caller
asked for a solver other than CLARABEL, and the dense program then runs with that solver.
"""

from __future__ import annotations

import dataclasses

from advbound.functions.function import PartialFunction
from advbound.functions.rowfamily import family_of
from advbound.functions.sizing import format_bytes, formulation_size, memory_budget, solve_estimate

__all__ = ["MethodChoice", "choose_method"]


@dataclasses.dataclass(frozen=True)
class MethodChoice:
    """The program ``method="auto"`` picked: ``method``, ``solver`` (None: the method's own) and ``reason``.

    ``family`` is the :class:`~advbound.functions.rowfamily.RowFamily` found on the way for the
    programs of interchangeable rows (so the solve does not look for it again), else None.
    """

    method: str
    solver: str | None
    reason: str
    family: object = dataclasses.field(default=None, repr=False, compare=False)


def choose_method(f: PartialFunction, bound: str = "general", solver: str | None = None,
                  budget: int | None = None) -> MethodChoice:
    """Pick the program and solver for ``f`` (see the module docstring for the rule).

    Parameters
    ----------
    f : PartialFunction
    bound : {"general", "positive"}
    solver : str, optional
        A solver the caller insists on; ``None`` lets the rule choose.
    budget : int, optional
        Memory available in bytes (default :func:`advbound.functions.sizing.memory_budget`).

    >>> from advbound.functions.builders import position_search_composition, majority_function
    >>> choose_method(position_search_composition("or", 3, 5, 7)).method
    'rows'
    >>> c = choose_method(majority_function(3))
    >>> c.method, c.solver
    ('dense', 'CLARABEL')
    """
    name = None if solver is None else str(solver).upper()
    fam = family_of(f)
    if fam is not None and name in (None, "CLARABEL") and bound == "positive":
        return MethodChoice("minimax", "CLARABEL",
                            f"{fam.n} interchangeable rows and the positive bound: the minimax program on "
                            f"{len(fam.contents)} input orbits (second-order cones) instead of {fam.size} inputs",
                            family=fam)
    if fam is not None and name in (None, "CLARABEL"):
        return MethodChoice("rows", "CLARABEL",
                            f"{fam.n} interchangeable rows: the S_{fam.n}-reduced program on "
                            f"{len(fam.contents)} input orbits instead of {fam.size} inputs", family=fam)
    skipped = (f"rows are interchangeable, but the row-symmetric program runs on CLARABEL only and "
               f"{name} was asked for; " if fam is not None else "")
    if budget is None:
        budget = memory_budget()["available"]
    size = formulation_size(f, bound)
    candidates = [name] if name is not None else ["CLARABEL", "SCS"]
    estimates = {s: solve_estimate(f, bound, s, size=size) for s in candidates}
    fits = {s: e for s, e in estimates.items() if budget is None or e["memory_bytes"] <= budget}
    if fits:
        best = min(fits, key=lambda s: fits[s]["seconds"])
        why = "no row symmetry" if fam is None else ""
        mem = format_bytes(fits[best]["memory_bytes"])
        return MethodChoice("dense", best, f"{skipped}{why + ': ' if why else ''}the dense program "
                                           f"({f.size} inputs, about {mem}) fits in memory")
    need = format_bytes(min(e["memory_bytes"] for e in estimates.values()))
    room = format_bytes(budget)
    if f.is_boolean and name is None:
        return MethodChoice("factored", None, f"{skipped}two outputs and the dense program needs about {need} "
                                              f"with {room} available: the factored first-order solver")
    return MethodChoice("dense", name or "SCS", f"{skipped}the dense program needs about {need} with {room} "
                                                f"available and no other program applies")
