"""How large a domain a builder may materialise, and the integer checks the builders share.

This module owns the size limit of the builders (:data:`MAX_INPUTS`, the environment
variable ``ADVBOUND_MAX_INPUTS`` and the memory estimate of :func:`check_domain_size`) and
``_check_int``, the one-line check of an integer argument used by every builder module.
"""

from __future__ import annotations

import os

from advbound.errors import InvalidFunctionError

__all__ = ["check_domain_size", "MAX_INPUTS"]

#: Default ``max_inputs`` of the builders that can make large domains
#: (:func:`~advbound.functions.composition.compose`, :func:`~advbound.functions.searchrows.position_search_row`,
#: :func:`~advbound.functions.composition.position_search_composition`): the largest number of
#: inputs they materialise.  The environment variable ``ADVBOUND_MAX_INPUTS`` replaces it
#: (a number, or ``none`` for no limit); an explicit ``max_inputs=`` argument wins over both.
MAX_INPUTS = 5_000_000

#: Bytes per input assumed by the memory estimate, on top of one byte per position
#: (a Python ``str`` header and its slot in the inputs tuple; the output labels are shared).
_BYTES_PER_INPUT = 64


def _env_max_inputs() -> int | None:
    raw = os.environ.get("ADVBOUND_MAX_INPUTS")
    if raw is None or not raw.strip():
        return MAX_INPUTS
    if raw.strip().lower() == "none":
        return None
    try:
        v = int(raw.strip().replace("_", ""))
    except ValueError:
        raise InvalidFunctionError(f"ADVBOUND_MAX_INPUTS={raw!r}: expected a whole number or 'none'") from None
    if v < 1:
        raise InvalidFunctionError(f"ADVBOUND_MAX_INPUTS={raw!r}: must be >= 1 (or 'none')")
    return v


def _resolve_max_inputs(max_inputs) -> int | None:
    if isinstance(max_inputs, str) and max_inputs == "default":
        return _env_max_inputs()
    if max_inputs is None:
        return None
    return _check_int(max_inputs, "max_inputs", 1)


def _available_memory() -> int | None:
    """Bytes of memory available to a new allocation (``MemAvailable``), or ``None`` when unknown."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def _fmt_bytes(b: float) -> str:
    for unit, k in (("TB", 1 << 40), ("GB", 1 << 30), ("MB", 1 << 20), ("kB", 1 << 10)):
        if b >= k:
            v = b / k
            return f"{v:,.0f} {unit}" if v >= 1000 else f"{v:.3g} {unit}"
    return f"{int(b)} bytes"


def check_domain_size(count: int, n_positions: int, max_inputs: int | None | str = "default",
                      what: str = "the function") -> None:
    """Refuse, before anything is built, a domain of ``count`` inputs on ``n_positions`` positions
    that is too large.

    Too large means more than ``max_inputs`` inputs (default :data:`MAX_INPUTS`, or the
    environment variable ``ADVBOUND_MAX_INPUTS``), or an estimated
    ``count * (n_positions + 64)`` bytes beyond the memory this machine has available.
    ``max_inputs=None`` turns both checks off.

    Raises
    ------
    InvalidFunctionError
        One line with the count, the memory estimate and how to raise the limit.

    >>> check_domain_size(10 ** 9, 30, max_inputs=1000)
    Traceback (most recent call last):
    ...
    advbound.errors.InvalidFunctionError: the function would have 1,000,000,000 inputs on 30 positions (about 87.5 GB), more than max_inputs = 1,000; raise the limit with max_inputs=N or the environment variable ADVBOUND_MAX_INPUTS=N (none: no limit)
    """
    limit = _resolve_max_inputs(max_inputs)
    if limit is None:
        return
    need = count * (n_positions + _BYTES_PER_INPUT)
    head = f"{what} would have {count:,} inputs on {n_positions:,} positions (about {_fmt_bytes(need)})"
    how = "max_inputs=N or the environment variable ADVBOUND_MAX_INPUTS=N (none: no limit)"
    if count > limit:
        raise InvalidFunctionError(f"{head}, more than max_inputs = {limit:,}; raise the limit with {how}")
    avail = _available_memory()
    if avail is not None and need > avail:
        raise InvalidFunctionError(f"{head}, more than the {_fmt_bytes(avail)} of memory available; "
                                   "to try anyway, pass max_inputs=None or set ADVBOUND_MAX_INPUTS=none")


def _check_int(value, name: str, lo: int = 0, hi: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise InvalidFunctionError(f"{name} must be an integer, got {value!r}")
    if value < lo or (hi is not None and value > hi):
        rng = f">= {lo}" if hi is None else f"between {lo} and {hi}"
        raise InvalidFunctionError(f"{name} must be {rng}, got {value}")
    return value

