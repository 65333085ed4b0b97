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

Before anything is built, :func:`solve_estimate`, :func:`exact_estimate` and
:func:`gamma_estimate` give the memory and a rough time of a whole run with a given
solver, and :func:`check_memory` refuses work whose estimate exceeds
:func:`memory_budget` (what this machine has available) unless ``allow_large``.
The formulas (stated with each estimate) were fitted to peak resident memory and
wall time measured on one 2-core machine; memory is within tens of percent on the
sizes tried, time only an order of magnitude:

* SCS (first-order): the dense memory above plus ``128 bytes x nonzeros`` of the
  sparse constraint matrix; time ``300 iterations x sum over LMIs of 3e-9 s x size^3``
  (one eigen-decomposition per cone and iteration);
* CLARABEL (interior point): each PSD cone of size ``s`` keeps a dense scaling block
  of ``(s(s+1)/2)^2`` float64 entries, so ``+ 8 bytes x sum of (s(s+1)/2)^2``
  (ADV± of PARITY_7, 7 LMIs of size 128: 3.6 GB estimated, 3.7 GB measured); time
  ``10 iterations x sum over LMIs of 5.5e-11 s x size^5``;
* the exact t-query program (:mod:`advbound.programs.exact`): the Gram blocks act on the span
  ``U_k`` of characters of at most ``k`` live positions, ``dim U_k <= min(|D|,
  sum_{i<=k} C(N, i)(q-1)^i)``; its maps are dense, so the interior-point system has
  ``K = 2 x variables + equality rows`` rows and ``8 K^2`` bytes (majority_6 at t = 3:
  K = 8745, 0.6 GB estimated, 0.7 GB measured), time ``6e-11 s x K^3``; automorphisms
  shrink this by an amount known only after the group is computed, so with symmetry
  only the part they cannot shrink is checked.

>>> from advbound.functions.builders import or_function
>>> s = formulation_size(or_function(3))
>>> s["variables"], s["lmi_count"], s["lmi_sizes"]
(15, 3, {8: 3})
"""

from __future__ import annotations

import logging
import math
import os

import numpy as np

from advbound.functions.domain import domain
from advbound.errors import AdvboundError, InvalidFunctionError
from advbound.functions.function import PartialFunction

__all__ = ["formulation_size", "inspect_summary", "MEMORY_FORMULA", "TooLargeError", "memory_budget",
           "solve_estimate", "exact_estimate", "gamma_estimate", "check_memory", "format_bytes",
           "format_seconds", "MEMORY_LIMIT_ENV"]

log = logging.getLogger("advbound")

MEMORY_FORMULA = "16 bytes x (variables + sum of LMI size^2)"

#: Environment variable capping the memory budget (bytes, or a number with K, M, G or T).
MEMORY_LIMIT_ENV = "ADVBOUND_MEMORY_LIMIT"

_SCS_NNZ_BYTES = 128
_SCS_ITERATIONS, _SCS_EIG_SECONDS = 300, 3e-9
_IPM_ITERATIONS, _IPM_SECONDS = 10, 5.5e-11
_EXACT_SECONDS = 6e-11
#: Python calls per second assumed for a user's Γ callable, and dense copies of Γ held at once.
_CALLS_PER_SECOND, _GAMMA_COPIES = 1e6, 6


class TooLargeError(AdvboundError, ValueError):
    """Work refused before it starts: its memory estimate exceeds what this machine has available."""


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

    >>> from advbound.functions.builders import position_search_composition
    >>> s = inspect_summary(position_search_composition("or", 2, None, 4))
    >>> s["domain_size"], s["time_profiles"], s["sum_squares"]
    (12, {'1,3': 4, '2,2': 4, '3,1': 4}, {'4': 12})
    """
    from advbound.functions.builders import dead_positions, time_profiles
    from advbound.functions.timemodel import TimeModel

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


# ---------------------------------------------------------------------------------------------
# Memory budget and resource estimates
# ---------------------------------------------------------------------------------------------
def _parse_bytes(text: str) -> int:
    t = str(text).strip().upper().removesuffix("B")
    mult = {"K": 1 << 10, "M": 1 << 20, "G": 1 << 30, "T": 1 << 40}
    k = 1
    if t and t[-1] in mult:
        k, t = mult[t[-1]], t[:-1]
    try:
        v = float(t)
    except ValueError:
        raise InvalidFunctionError(f"{MEMORY_LIMIT_ENV}={text!r}: expected bytes, e.g. 8G or 500M") from None
    if not (math.isfinite(v) and v > 0):
        raise InvalidFunctionError(f"{MEMORY_LIMIT_ENV}={text!r}: must be a positive size")
    return int(v * k)


def _meminfo() -> dict:
    try:
        with open("/proc/meminfo", encoding="ascii", errors="replace") as fh:
            rows = [line.split() for line in fh]
    except OSError:
        return {}
    return {r[0].rstrip(":"): int(r[1]) * 1024 for r in rows if len(r) >= 2 and r[1].isdigit()}


def _cgroup_room() -> int | None:
    """Bytes left under a cgroup v2 memory limit, if one is set."""
    try:
        with open("/sys/fs/cgroup/memory.max", encoding="ascii") as fh:
            limit = fh.read().strip()
        if limit == "max":
            return None
        with open("/sys/fs/cgroup/memory.current", encoding="ascii") as fh:
            used = int(fh.read().strip())
        return max(int(limit) - used, 0)
    except (OSError, ValueError):
        return None


def memory_budget() -> dict:
    """Memory this process may use, in bytes, and where the figure comes from.

    The budget is the smallest of: ``MemAvailable`` in ``/proc/meminfo`` (else
    ``os.sysconf`` available pages), the room left under a cgroup v2 limit, and
    ``$ADVBOUND_MEMORY_LIMIT`` when set.

    Returns
    -------
    dict
        ``available`` (bytes or None when nothing could be read), ``total`` (bytes or None)
        and ``source``.
    """
    info = _meminfo()
    total = info.get("MemTotal")
    avail, source = info.get("MemAvailable"), "MemAvailable in /proc/meminfo"
    if avail is None:
        try:
            avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
            total = total or os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
            source = "os.sysconf available pages"
        except (ValueError, OSError, AttributeError):
            avail = None
    room = _cgroup_room()
    if room is not None and (avail is None or room < avail):
        avail, source = room, "cgroup memory.max"
    env = os.environ.get(MEMORY_LIMIT_ENV)
    if env:
        cap = _parse_bytes(env)
        if avail is None or cap < avail:
            avail, source = cap, f"${MEMORY_LIMIT_ENV}"
    return {"available": None if avail is None else int(avail), "total": None if total is None else int(total),
            "source": source}


def format_bytes(b) -> str:
    """``1536`` -> ``'1.5 kB'``; binary units.

    >>> format_bytes(3 * 2**30), format_bytes(10)
    ('3.0 GB', '10 B')
    """
    b = float(b)
    for unit, k in (("PB", 1 << 50), ("TB", 1 << 40), ("GB", 1 << 30), ("MB", 1 << 20), ("kB", 1 << 10)):
        if b >= k:
            return f"{b / k:.1f} {unit}"
    return f"{int(b)} B"


def format_seconds(s) -> str:
    """A rough duration: ``90`` -> ``'2 min'``.

    >>> format_seconds(0.2), format_seconds(90), format_seconds(7200), format_seconds(1e9)
    ('< 1 s', '2 min', '2 h', '32 years')
    """
    s = float(s)
    if s < 1:
        return "< 1 s"
    for unit, k in (("years", 365 * 86400), ("days", 86400), ("h", 3600), ("min", 60)):
        if s >= k:
            return f"{s / k:.0f} {unit}"
    return f"{s:.0f} s"


def solve_estimate(f: PartialFunction, bound: str = "general", solver: str = "SCS", size: dict | None = None) -> dict:
    """Memory and rough time of a dense ``solve`` of ``f`` with ``solver`` (formulas in the module docstring).

    Parameters
    ----------
    f : PartialFunction
    bound : {"general", "positive"}
    solver : str
        ``"SCS"`` (first-order) or ``"CLARABEL"`` (interior point); other names are sized as
        interior-point solvers.
    size : dict, optional
        :func:`formulation_size` of ``f`` if already computed.

    Returns
    -------
    dict
        ``what``, ``solver``, ``memory_bytes``, ``seconds``, ``memory_formula``, ``time_formula``.

    >>> from advbound.functions.builders import parity_function
    >>> e = solve_estimate(parity_function(7), solver="CLARABEL")
    >>> round(e["memory_bytes"] / 2**30, 1)          # 7 cones of size 128; measured 3.7 GB
    3.6
    """
    z = size if size is not None else formulation_size(f, bound)
    name = str(solver).upper()
    sizes = {int(k): int(v) for k, v in z["lmi_sizes"].items()}
    base = int(z["memory_bytes"]) + _SCS_NNZ_BYTES * int(z["nonzeros"])
    what = f"the dense {'ADV±' if bound == 'general' else 'ADV'} program ({z['domain_size']} inputs)"
    if name == "SCS":
        mem = base
        secs = _SCS_ITERATIONS * sum(c * _SCS_EIG_SECONDS * s ** 3 for s, c in sizes.items())
        mf = f"{MEMORY_FORMULA} + {_SCS_NNZ_BYTES} bytes x nonzeros"
        tf = f"{_SCS_ITERATIONS} iterations x sum of {_SCS_EIG_SECONDS:g} s x size^3"
    else:
        mem = base + sum(c * 8 * (s * (s + 1) // 2) ** 2 for s, c in sizes.items())
        secs = _IPM_ITERATIONS * sum(c * _IPM_SECONDS * float(s) ** 5 for s, c in sizes.items())
        mf = f"{MEMORY_FORMULA} + {_SCS_NNZ_BYTES} bytes x nonzeros + 8 bytes x sum of (size(size+1)/2)^2"
        tf = f"{_IPM_ITERATIONS} iterations x sum of {_IPM_SECONDS:g} s x size^5"
    return {"what": what, "solver": name, "memory_bytes": int(mem), "seconds": float(secs),
            "memory_formula": mf, "time_formula": tf}


def _face_dims(size: int, live: int, q: int, queries: int) -> list[int]:
    """Upper bounds ``min(|D|, sum_{i<=k} C(live, i)(q-1)^i)`` on ``dim U_k``, ``k = 0..queries``."""
    dims, acc = [], 0
    for k in range(queries + 1):
        if k <= live:
            acc += math.comb(live, k) * (q - 1) ** k
        dims.append(min(size, acc))
    return dims


def exact_estimate(f: PartialFunction, queries: int, use_symmetry: bool = True) -> dict:
    """Memory and rough time of the exact ``queries``-query program of ``f`` (:mod:`advbound.programs.exact`).

    The variable and equality counts are those of the program without symmetry (exactly
    for a total function; ``dim U_k`` is an upper bound otherwise).  Automorphisms can
    shrink the program by far more than any closed formula predicts, so with
    ``use_symmetry`` the memory used for refusing is only the part no reduction
    avoids: the phase matrices ``E`` (``16 bytes x branches x |D|^2``) and the face
    bases ``V_k`` (``8 bytes x |D| x sum_k dim U_k``); the full figure is kept as
    ``memory_bytes_without_symmetry``.

    Returns
    -------
    dict
        As :func:`solve_estimate`, plus ``variables``, ``equalities``, ``face_dims`` and
        ``memory_bytes_without_symmetry``.

    >>> from advbound.functions.builders import majority_function
    >>> e = exact_estimate(majority_function(6), 3, use_symmetry=False)
    >>> e["variables"], e["equalities"], e["face_dims"]          # formulate_exact gives the same
    (3780, 1185, [1, 7, 22, 42])
    """
    d = domain(f)
    size, q, m = d.size, len(f.alphabet), len(d.labels)
    live = int(len(d.live_positions()))
    dims = _face_dims(size, live, q, queries)

    def svec(n):
        return n * (n + 1) // 2

    # query branches per position: b = 1..q-1; b and -b share one complex block (real embedding:
    # n^2 real parameters), b = q/2 (q even) is real
    n_complex, n_real = (q - 1) // 2, (1 if q % 2 == 0 else 0)
    variables = 0
    for k in range(1, queries + 1):
        n = dims[k - 1]
        variables += svec(n) + live * (n_real * svec(n) + n_complex * n * n)
    variables += m * svec(dims[queries])
    equalities = sum(svec(n) for n in dims)
    K = 2 * variables + equalities
    branches = 1 + live * (q - 1)
    fixed = 16 * branches * size * size + 8 * size * sum(dims)
    full = 8 * K * K + fixed
    secs = _EXACT_SECONDS * float(K) ** 3
    if use_symmetry:
        what = (f"the exact {queries}-query program ({size} inputs; the part symmetry cannot shrink, "
                f"{format_bytes(full)} without symmetry)")
    else:
        what = f"the exact {queries}-query program without symmetry ({size} inputs)"
    return {"what": what, "solver": None, "memory_bytes": int(fixed if use_symmetry else full),
            "seconds": float(secs), "memory_bytes_without_symmetry": int(full),
            "memory_formula": "8 bytes x K^2 + 16 bytes x branches x |D|^2 + 8 bytes x |D| x sum dim U_k, "
                              "K = 2 x variables + equalities (without symmetry)",
            "time_formula": f"{_EXACT_SECONDS:g} s x K^3 (without symmetry)", "variables": int(variables),
            "equalities": int(equalities), "face_dims": dims}


def gamma_estimate(size: int, positions: int, dense_limit: int = 2500) -> dict:
    """Memory and rough time of evaluating a user's Γ callable on a domain of ``size`` inputs.

    The callable is called ``size^2`` times and Γ is held densely (about
    ``6`` float64 copies at once); up to ``dense_limit`` inputs each of the
    ``positions + 1`` norms is a dense eigen-decomposition.
    """
    mem = _GAMMA_COPIES * 8 * size * size
    secs = size * size / _CALLS_PER_SECOND
    if size <= dense_limit:
        secs += (positions + 1) * _SCS_EIG_SECONDS * float(size) ** 3
    return {"what": f"a dense Γ from a callable ({size} inputs, {size * size} calls)", "solver": None,
            "memory_bytes": int(mem), "seconds": float(secs),
            "memory_formula": f"{_GAMMA_COPIES} x 8 bytes x |D|^2",
            "time_formula": f"|D|^2 calls at {_CALLS_PER_SECOND:g}/s + (N+1) x {_SCS_EIG_SECONDS:g} s x |D|^3"}


def check_memory(estimate: dict, *, allow_large: bool = False, budget: int | None = None,
                 flag: str = "--allow-large", hint: str = "") -> None:
    """Refuse ``estimate`` (from one of the ``*_estimate`` functions) when it exceeds the memory budget.

    Parameters
    ----------
    estimate : dict
        Needs ``what``, ``memory_bytes`` and ``seconds``.
    allow_large : bool
        Only log the estimate, never refuse.
    budget : int, optional
        Bytes available (default :func:`memory_budget`).
    flag : str
        How the override is spelled in the message (``allow_large=True`` in the library).
    hint : str
        Extra advice appended to the message (e.g. another method).

    Raises
    ------
    TooLargeError
        One line with the estimate, the budget and the override.
    """
    mem = int(estimate["memory_bytes"])
    if budget is None:
        b = memory_budget()
        budget, source = b["available"], b["source"]
    else:
        source = "the given budget"
    if budget is None:
        return
    where = estimate.get("solver")
    with_ = f" with {where}" if where else ""
    log.info("%s%s: about %s, %s (budget %s)", estimate["what"], with_, format_bytes(mem),
             format_seconds(estimate["seconds"]), format_bytes(budget))
    if mem <= budget or allow_large:
        return
    more = f"; {hint}" if hint else ""
    raise TooLargeError(f"{estimate['what']}{with_} needs about {format_bytes(mem)} of memory (rough time "
                        f"{format_seconds(estimate['seconds'])}) but {format_bytes(budget)} is available "
                        f"({source}); pass {flag} (allow_large=True) to try anyway{more}")
