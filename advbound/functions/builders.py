"""Pure constructors of partial functions: symmetric Boolean functions, position-search
rows, composition with time budgets, and facts about composed domains.

Every builder checks its arguments first, returns a fresh immutable
:class:`~advbound.functions.function.PartialFunction` and has no other effect.  Composed
functions number their positions row by row and name them ``r<i>p<k>`` (1-based);
their ``groups`` are the rows.  Builders hand over known symmetry generators in
``PartialFunction.symmetries``.

The main family: OR of ``n`` position-search rows of length ``m``, restricted to
``sum_i t_i^2 = T`` with ``t_i = sqrt(k_i)``, i.e. ``sum_i k_i = T``.  Its domain
has ``C(T-1, n-1) * 2**n`` inputs when ``m >= T-n+1`` (compositions of ``T`` into
``n`` positive parts, times a bit per row):

>>> f = position_search_composition("or", 3, None, 7)
>>> f.size == 15 * 8, f.n, f.output_counts()
(True, 15, {'0': 15, '1': 105})

This module is the one place the builders are imported from; each job lives in its own module:

=============================  ==========================================================
:mod:`.outer`                  functions on all strings, symmetric Boolean functions, symmetries
:mod:`.searchrows`             position-search rows, usable row lengths, time profiles
:mod:`.composition`            :func:`compose` and :func:`position_search_composition`
:mod:`.sizelimit`              :data:`MAX_INPUTS` and :func:`check_domain_size`
=============================  ==========================================================
"""

from __future__ import annotations

from advbound.functions.composition import compose, position_search_composition
from advbound.functions.outer import MAX_ENUMERATION  # noqa: F401 - kept importable from here
from advbound.functions.outer import (NAMED_FUNCTIONS, and_function, block_generators, exact_function, from_predicate,
                                      is_automorphism, majority_function, named_function, or_function, parity_function,
                                      threshold_function)
from advbound.functions.searchrows import dead_positions, position_search_row, time_profiles, usable_row_lengths
from advbound.functions.sizelimit import MAX_INPUTS, check_domain_size

__all__ = [
    "from_predicate",
    "or_function",
    "and_function",
    "parity_function",
    "majority_function",
    "threshold_function",
    "exact_function",
    "named_function",
    "NAMED_FUNCTIONS",
    "position_search_row",
    "compose",
    "position_search_composition",
    "dead_positions",
    "time_profiles",
    "is_automorphism",
    "block_generators",
    "usable_row_lengths",
    "check_domain_size",
    "MAX_INPUTS",
]
