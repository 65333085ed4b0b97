"""Plain result objects returned by solves.

>>> r = SolveResult(status="optimal", message="ok", bound="general", lower=1.0, upper=1.0 + 1e-9,
...                 domain_size=4)
>>> r.success, round(r.gap, 9)
(True, 1e-09)
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

from advbound import status as _status

__all__ = ["SolverStats", "SolveResult"]


@dataclasses.dataclass(frozen=True)
class SolverStats:
    """What ran: solver name and version, wall time (s), iterations, tolerances and options."""

    name: str = ""
    version: str = ""
    time: float = 0.0
    iterations: int | None = None
    tolerances: dict = dataclasses.field(default_factory=dict)
    options: dict = dataclasses.field(default_factory=dict)


@dataclasses.dataclass(frozen=True, eq=False)
class SolveResult:
    """One solve of one adversary program.

    Attributes
    ----------
    message : str
        What happened, in one sentence (first in the repr).
    status : str
        A word from :mod:`advbound.status`.
    bound : str
        ``"general"`` (ADV±) or ``"positive"`` (ADV); costs come from the function.
    lower : float or None
        The verified lower bound ``||Γ|| / max_j ||Γ∘Δ_j|| / c_j`` recomputed from the certificate.
    upper : float or None
        The verified (possibly repaired) dual objective; ``None`` when no dual witness verified.
    objective : float or None
        The solver's own primal objective (a claim, never reported as a bound).
    domain_size : int
    solver_stats : SolverStats
    certificate : Certificate or None
    verification : object or None
        The :class:`~advbound.evidence.verify.VerificationReport` behind ``lower`` and ``upper``.
    method : str
        The program that ran (``"dense"``, ``"rows"``, ...); empty when not known.
    method_reason : str
        Why that program ran (what ``method="auto"`` saw, or that it was asked for).
    """

    message: str
    status: str
    bound: str
    lower: float | None = None
    upper: float | None = None
    objective: float | None = None
    domain_size: int = 0
    solver_stats: SolverStats = dataclasses.field(default_factory=SolverStats)
    certificate: Any = None
    verification: Any = None
    method: str = ""
    method_reason: str = ""

    @property
    def success(self) -> bool:
        """True when the status allows the verified numbers to be reported."""
        return self.status in _status.SUCCESS

    @property
    def gap(self) -> float | None:
        """``upper - lower`` when both are verified, else ``None``."""
        if self.lower is None or self.upper is None:
            return None
        return self.upper - self.lower

    @property
    def relative_gap(self) -> float | None:
        """``(upper - lower) / max(upper, tiny)`` when both are verified."""
        if self.gap is None:
            return None
        return self.gap / max(abs(self.upper), 1e-300)

    def to_dict(self) -> dict:
        """Python scalars only (JSON-ready); the certificate is left out."""
        def num(v):
            return None if v is None or (isinstance(v, float) and math.isnan(v)) else float(v)
        st = self.solver_stats
        return {
            "message": self.message,
            "status": self.status,
            "success": self.success,
            "bound": self.bound,
            "lower": num(self.lower),
            "upper": num(self.upper),
            "gap": num(self.gap),
            "relative_gap": num(self.relative_gap),
            "objective": num(self.objective),
            "domain_size": int(self.domain_size),
            "method": self.method,
            "method_reason": self.method_reason,
            "solver": {"name": st.name, "version": st.version, "time": float(st.time),
                       "iterations": None if st.iterations is None else int(st.iterations),
                       "tolerances": dict(st.tolerances), "options": dict(st.options)},
        }
