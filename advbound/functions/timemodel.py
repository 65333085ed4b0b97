"""Time models and time budgets that restrict a composed function's domain.

A composed function ``g(h_1(x_1), ..., h_n(x_n))`` is often restricted to inputs
whose rows are "cheap enough" together.  A :class:`TimeModel` gives each row
input ``x_i`` a *profile entry* ``k_i`` (a hashable key) and a time ``t_i``; a
:class:`Budget` says which profiles ``(k_1, ..., k_n)`` are allowed.

Position models (the default for position-search rows, whose inputs have exactly
one symbol other than ``*``) use as key the 1-based position ``k`` of that symbol
and the time ``t = k**alpha`` (``alpha = 1/2``: ``t = sqrt(k)``) or an explicit
time per position.  Input-table and callable models give a time per row input;
their key is the time itself.

>>> tm = TimeModel.sqrt()
>>> tm.level("**1*")
(3, 1.7320508075688772)
>>> b = Budget.sum_squares(5)
>>> sorted(b.allowed_profiles([{k: k ** 0.5 for k in range(1, 5)}] * 2))
[(1, 4), (2, 3), (3, 2), (4, 1)]
"""

from __future__ import annotations

import bisect
import dataclasses
import itertools
import math
from typing import Callable, Hashable, Mapping, Sequence

from advbound.errors import InvalidFunctionError

__all__ = ["TimeModel", "Budget", "star_position"]


def star_position(row: str) -> int:
    """The 1-based position of the only symbol other than ``*`` in ``row``.

    Raises
    ------
    InvalidFunctionError
        If ``row`` does not have exactly one symbol other than ``*``.

    >>> star_position("**0")
    3
    """
    if len(row) - row.count("*") != 1:
        raise InvalidFunctionError(
            f"row input {row!r} does not have exactly one symbol other than '*'; "
            "a position time model needs position-search rows (use an input-table time model)")
    return len(row) - len(row.lstrip("*")) + 1


@dataclasses.dataclass(frozen=True)
class TimeModel:
    """How a row input is mapped to a profile entry and a time.

    Build one with :meth:`sqrt`, :meth:`power`, :meth:`positions`, :meth:`inputs`
    or :meth:`from_callable`; do not fill the fields by hand.

    Attributes
    ----------
    kind : str
        ``"power"`` (``t = k**alpha``), ``"positions"`` (``t = times[k-1]``),
        ``"inputs"`` (a time per row input) or ``"callable"``.
    alpha : float
        Exponent of the power model.
    times : tuple of float
        Time per position (positions model).
    table : tuple of (str, float)
        Time per row input, sorted by input (inputs model).
    fn : callable or None
        ``fn(row_input) -> t`` or ``-> (key, t)`` (callable model).
    """

    kind: str
    alpha: float = 0.5
    times: tuple[float, ...] = ()
    table: tuple[tuple[str, float], ...] = ()
    fn: Callable | None = None

    # -- constructors -----------------------------------------------------------------------
    @classmethod
    def sqrt(cls) -> "TimeModel":
        """``t = sqrt(k)``, ``k`` the 1-based position of the non-star symbol."""
        return cls("power", alpha=0.5)

    @classmethod
    def power(cls, alpha: float) -> "TimeModel":
        """``t = k**alpha``, ``k`` the 1-based position of the non-star symbol."""
        if isinstance(alpha, bool) or not isinstance(alpha, (int, float)) or not math.isfinite(alpha):
            raise InvalidFunctionError(f"time exponent alpha must be a finite number, got {alpha!r}")
        return cls("power", alpha=float(alpha))

    @classmethod
    def positions(cls, times: Sequence[float]) -> "TimeModel":
        """``t = times[k-1]``: an explicit time for each position of a position-search row."""
        times = tuple(times)
        if not times:
            raise InvalidFunctionError("a table of times per position needs at least one entry")
        for k, t in enumerate(times, 1):
            _check_time(t, f"time of position {k}")
        return cls("positions", times=tuple(float(t) for t in times))

    @classmethod
    def inputs(cls, table: Mapping[str, float]) -> "TimeModel":
        """A time for each row input (any inner function); the profile entry is the time."""
        if not table:
            raise InvalidFunctionError("a table of times per input needs at least one entry")
        for x, t in table.items():
            _check_time(t, f"time of input {x!r}")
        return cls("inputs", table=tuple(sorted((str(x), float(t)) for x, t in table.items())))

    @classmethod
    def from_callable(cls, fn: Callable) -> "TimeModel":
        """``fn(row_input)`` returns a time ``t`` (key ``t``) or a pair ``(key, t)``."""
        if not callable(fn):
            raise InvalidFunctionError(f"time model function {fn!r} is not callable")
        return cls("callable", fn=fn)

    # -- evaluation -------------------------------------------------------------------------
    @property
    def uses_positions(self) -> bool:
        """True when the profile entry is the position of the non-star symbol."""
        return self.kind in ("power", "positions")

    def level(self, row: str) -> tuple[Hashable, float]:
        """The profile entry and time of one row input."""
        if self.kind == "power":
            k = star_position(row)
            return k, float(k) ** self.alpha
        if self.kind == "positions":
            k = star_position(row)
            if k > len(self.times):
                raise InvalidFunctionError(
                    f"row input {row!r} has its symbol at position {k}, but times are given for "
                    f"{len(self.times)} positions only")
            return k, self.times[k - 1]
        if self.kind == "inputs":
            t = dict(self.table).get(row)
            if t is None:
                raise InvalidFunctionError(f"the table of times per input has no entry for row input {row!r}")
            return t, t
        if self.kind == "callable":
            v = self.fn(row)
            if isinstance(v, tuple):
                if len(v) != 2:
                    raise InvalidFunctionError(f"time model function returned {v!r} for {row!r}; "
                                               "expected a time or a pair (key, time)")
                key, t = v
            else:
                key, t = v, v
            _check_time(t, f"time of row input {row!r}")
            return key, float(t)
        raise InvalidFunctionError(f"unknown time model kind {self.kind!r}")

    def describe(self) -> str:
        """A short human-readable description (``"t = k^0.5"``)."""
        if self.kind == "power":
            return "t = sqrt(k)" if self.alpha == 0.5 else f"t = k^{self.alpha:g}"
        if self.kind == "positions":
            return "t = times[k] = (" + ", ".join(f"{t:g}" for t in self.times) + ")"
        if self.kind == "inputs":
            return f"t from a table of {len(self.table)} row inputs"
        return "t from a user function"


def _check_time(t, what: str) -> None:
    if isinstance(t, bool) or not isinstance(t, (int, float)) or not math.isfinite(t) or t < 0:
        raise InvalidFunctionError(f"{what} is {t!r}; times must be finite and >= 0")


@dataclasses.dataclass(frozen=True)
class Budget:
    """Which time profiles ``(k_1, ..., k_n)`` a composed domain keeps.

    Build one with :meth:`sum_squares` (``sum t_i^2 == T``), :meth:`at_most`
    (``sum t_i^2 <= T``) or :meth:`from_profiles` (an explicit list).  Sums are
    compared with the tolerance ``rtol * max(|T|, 1)``.

    Attributes
    ----------
    kind : str
        ``"sum_squares"``, ``"at_most"`` or ``"profiles"``.
    T : float or None
        The budget of the two sum kinds.
    rtol : float
        Relative tolerance of the sum comparison.
    profiles : tuple of tuple
        The allowed profiles (``"profiles"`` kind), as given.
    permutations : bool
        Also allow every permutation of each listed profile.
    """

    kind: str
    T: float | None = None
    rtol: float = 1e-9
    profiles: tuple[tuple, ...] = ()
    permutations: bool = False

    @classmethod
    def sum_squares(cls, T: float, rtol: float = 1e-9) -> "Budget":
        """Keep inputs with ``sum_i t_i^2 == T`` (within the tolerance)."""
        return cls("sum_squares", T=_check_T(T), rtol=_check_rtol(rtol))

    @classmethod
    def at_most(cls, T: float, rtol: float = 1e-9) -> "Budget":
        """Keep inputs with ``sum_i t_i^2 <= T`` (within the tolerance)."""
        return cls("at_most", T=_check_T(T), rtol=_check_rtol(rtol))

    @classmethod
    def from_profiles(cls, profiles: Sequence[Sequence[Hashable]], permutations: bool = False) -> "Budget":
        """Keep inputs whose profile is listed (or, with ``permutations``, a permutation of one listed)."""
        profiles = tuple(tuple(p) for p in profiles)
        if not profiles:
            raise InvalidFunctionError("the list of allowed profiles is empty")
        lengths = {len(p) for p in profiles}
        if len(lengths) != 1:
            raise InvalidFunctionError(f"allowed profiles have different lengths {sorted(lengths)}")
        return cls("profiles", profiles=profiles, permutations=bool(permutations))

    @property
    def tolerance(self) -> float:
        """Absolute tolerance of the sum comparison."""
        return self.rtol * max(abs(self.T), 1.0) if self.T is not None else 0.0

    def describe(self) -> str:
        """A short human-readable description."""
        if self.kind == "sum_squares":
            return f"sum t_i^2 = {self.T:g}"
        if self.kind == "at_most":
            return f"sum t_i^2 <= {self.T:g}"
        perm = " (and permutations)" if self.permutations else ""
        return f"{len(self.profiles)} listed profile(s){perm}"

    def allowed_profiles(self, levels: Sequence[Mapping[Hashable, float]]) -> set[tuple]:
        """All allowed profiles, given for each row the map ``key -> t`` of keys that occur.

        Enumerates profiles directly (depth-first with pruning on the remaining
        minimum and maximum of ``sum t^2``), never the full product.
        """
        n = len(levels)
        if self.kind == "profiles":
            return self._listed(levels)
        tol = self.tolerance
        rows = [sorted(((t * t, key) for key, t in lv.items()), key=lambda p: p[0]) for lv in levels]
        sq = [[p[0] for p in r] for r in rows]
        # rest_min[i] / rest_max[i]: extreme values of sum_{j >= i} t_j^2
        rest_min = [0.0] * (n + 1)
        rest_max = [0.0] * (n + 1)
        for i in range(n - 1, -1, -1):
            rest_min[i] = rest_min[i + 1] + (sq[i][0] if sq[i] else math.inf)
            rest_max[i] = rest_max[i + 1] + (sq[i][-1] if sq[i] else -math.inf)
        T = self.T
        exact = self.kind == "sum_squares"
        out: set[tuple] = set()

        def walk(i: int, s: float, prefix: tuple) -> None:
            if i == n - 1:
                lo = T - s - tol
                hi = T - s + tol
                a = bisect.bisect_left(sq[i], lo) if exact else 0
                b = bisect.bisect_right(sq[i], hi)
                for v, key in rows[i][a:b]:
                    out.add(prefix + (key,))
                return
            for v, key in rows[i]:
                s2 = s + v
                if s2 + rest_min[i + 1] > T + tol:
                    break  # rows are sorted by t^2: every later entry is worse
                if exact and s2 + rest_max[i + 1] < T - tol:
                    continue
                walk(i + 1, s2, prefix + (key,))

        if n == 0:
            return out
        walk(0, 0.0, ())
        return out

    def _listed(self, levels: Sequence[Mapping[Hashable, float]]) -> set[tuple]:
        n = len(levels)
        out: set[tuple] = set()
        for p in self.profiles:
            if len(p) != n:
                raise InvalidFunctionError(f"allowed profile {p} has {len(p)} entries, expected {n} (one per row)")
            for i, key in enumerate(p):
                if key not in levels[i] and not self.permutations:
                    raise InvalidFunctionError(
                        f"allowed profile {p}: entry {key!r} of row {i + 1} matches no input of that row")
            cands = set(itertools.permutations(p)) if self.permutations else {p}
            fits = {q for q in cands if all(q[i] in levels[i] for i in range(n))}
            if not fits:
                raise InvalidFunctionError(f"allowed profile {p} matches no input (in any order of the rows)")
            out |= fits
        return out


def _check_T(T) -> float:
    if isinstance(T, bool) or not isinstance(T, (int, float)) or not math.isfinite(T):
        raise InvalidFunctionError(f"time budget T must be a finite number, got {T!r}")
    return float(T)


def _check_rtol(rtol) -> float:
    if isinstance(rtol, bool) or not isinstance(rtol, (int, float)) or not (0 <= rtol < 1):
        raise InvalidFunctionError(f"relative tolerance rtol must be in [0, 1), got {rtol!r}")
    return float(rtol)
