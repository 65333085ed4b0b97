"""The plain result of the exact t-query program and its JSON-ready summary.

This module owns :class:`ExactResult`, the record :func:`advbound.programs.exact.exact_success`,
:func:`advbound.programs.exact.solve_exact` and :func:`advbound.programs.exact.least_queries`
return, and its :meth:`ExactResult.to_dict` (Python scalars, lists and dicts only).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from advbound import status as _status
from advbound.result import SolverStats

__all__ = ["ExactResult"]


@dataclasses.dataclass(frozen=True, eq=False)
class ExactResult:
    """The best worst-case success probability of ``queries``-query algorithms, verified.

    Attributes
    ----------
    message : str
        What happened, in one sentence (first in the repr).
    status : str
        A word from :mod:`advbound.status`.  ``unverified`` when the verified
        interval ``[success_probability, upper_bound]`` is wider than ``verify_tol``.
    queries : int
        ``t``.  For :func:`least_queries`: the least ``t`` found to reach the target (or the last tried).
    success_probability : float or None
        Achieved by an explicit algorithm built from the returned point (see
        :func:`verify_point`); never more than the true optimum.
    upper_bound : float or None
        Verified upper bound on the optimum (repaired Lagrange multipliers), or ``None``.
    objective : float or None
        The solver's claimed optimum (not a verified number).
    target_error : float or None
        The ``ε`` asked of :func:`least_queries`.
    reached : bool or None
        :func:`least_queries` only: whether ``success_probability >= 1 - ε - decision_tol``.
    domain_size, alphabet_size : int
    oracle : str
        The oracle the value refers to (:func:`oracle_description`).
    residuals : dict
        ``psd_violation``, ``equality_residual``, ``drift``, ``raw_success`` (see :class:`PointCheck`).
    program : dict
        Program sizes and symmetry use.
    solver_stats : SolverStats
    history : tuple of dict
        :func:`least_queries`: one summary per ``t`` tried.
    """

    message: str
    status: str
    queries: int
    success_probability: float | None = None
    upper_bound: float | None = None
    objective: float | None = None
    target_error: float | None = None
    reached: bool | None = None
    domain_size: int = 0
    alphabet_size: int = 0
    oracle: str = ""
    residuals: dict = dataclasses.field(default_factory=dict)
    program: dict = dataclasses.field(default_factory=dict)
    solver_stats: SolverStats = dataclasses.field(default_factory=SolverStats)
    history: tuple = ()

    @property
    def success(self) -> bool:
        """True when the status allows the verified numbers to be reported."""
        return self.status in _status.SUCCESS

    @property
    def error(self) -> float | None:
        """``1 - success_probability`` (the verified achievable error)."""
        return None if self.success_probability is None else 1.0 - self.success_probability

    def to_dict(self) -> dict:
        """Python scalars, lists and dicts only (JSON-ready)."""
        def num(v):
            return None if v is None or (isinstance(v, float) and math.isnan(v)) else float(v)
        st = self.solver_stats
        return {
            "kind": "exact",
            "message": self.message,
            "status": self.status,
            "success": self.success,
            "queries": int(self.queries),
            "success_probability": num(self.success_probability),
            "error": num(self.error),
            "upper_bound": num(self.upper_bound),
            "objective": num(self.objective),
            "target_error": num(self.target_error),
            "reached": None if self.reached is None else bool(self.reached),
            "domain_size": int(self.domain_size),
            "alphabet_size": int(self.alphabet_size),
            "oracle": self.oracle,
            "residuals": {k: num(v) for k, v in self.residuals.items()},
            "program": _plain(self.program),
            "solver": {"name": st.name, "version": st.version, "time": float(st.time),
                       "iterations": None if st.iterations is None else int(st.iterations),
                       "tolerances": _plain(st.tolerances), "options": _plain(st.options)},
            "history": [_plain(h) for h in self.history],
        }


def _plain(v):
    if isinstance(v, dict):
        return {str(k): _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_plain(x) for x in v]
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return None if math.isnan(v) else float(v)
    return v if v is None or isinstance(v, str) else str(v)
