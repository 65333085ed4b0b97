"""The status vocabulary of every result, with its standard messages.

Only this module knows the solvers' own status words; everything else compares
against the constants below.

>>> from_cvxpy("optimal_inaccurate")
'inaccurate'
>>> OPTIMAL in SUCCESS
True
"""

__all__ = [
    "OPTIMAL",
    "INACCURATE",
    "INFEASIBLE",
    "FAILED",
    "UNVERIFIED",
    "INVALID",
    "SUCCESS",
    "MESSAGES",
    "CVXPY_STATUS_MAP",
    "SCS_STATUS_MAP",
    "CLARABEL_STATUS_MAP",
    "from_cvxpy",
]

#: Solved, and both the lower and the upper bound passed independent verification.
OPTIMAL = "optimal"
#: The solver stopped with a low-accuracy answer; bounds are verified but the gap may be wide.
INACCURATE = "inaccurate"
#: The solver claims the program is infeasible (this indicates a bug: ADV programs are always feasible).
INFEASIBLE = "infeasible"
#: The solver crashed, hit a limit without a usable point, or returned nothing.
FAILED = "failed"
#: A point came back but an independent check failed; its numbers must not be used.
UNVERIFIED = "unverified"
#: The input of a point could not be built (e.g. a row length below 1 at some grid point); fix the instance.
INVALID = "invalid"

#: Statuses whose verified numbers may be reported.
SUCCESS = frozenset({OPTIMAL, INACCURATE})

MESSAGES = {
    OPTIMAL: "solved; lower and upper bounds verified independently of the solver",
    INACCURATE: "solver returned a low-accuracy point; the verified bounds hold but the gap may be large",
    INFEASIBLE: "solver reported infeasibility, which the adversary programs never are; try another solver",
    FAILED: "solver failed to return a usable point; try another solver or looser tolerances",
    UNVERIFIED: "a returned point failed independent verification; its numbers are not bounds",
    INVALID: "the instance could not be built at this point; fix the instance (retrying cannot help)",
}

#: cvxpy's status strings mapped onto ours.  Nothing else inspects solver statuses.
CVXPY_STATUS_MAP = {
    "optimal": OPTIMAL,
    "optimal_inaccurate": INACCURATE,
    "user_limit": INACCURATE,
    "infeasible": INFEASIBLE,
    "infeasible_inaccurate": INFEASIBLE,
    "unbounded": FAILED,
    "unbounded_inaccurate": FAILED,
    "infeasible_or_unbounded": FAILED,
    "solver_error": FAILED,
}


#: Raw SCS and Clarabel status words (when a solver is called without cvxpy) mapped to cvxpy's words;
#: pass the result through :func:`from_cvxpy`.
SCS_STATUS_MAP = {"solved": "optimal", "solved_inaccurate": "optimal_inaccurate", "infeasible": "infeasible",
                  "infeasible_inaccurate": "infeasible_inaccurate", "unbounded": "unbounded",
                  "unbounded_inaccurate": "unbounded_inaccurate"}
CLARABEL_STATUS_MAP = {"Solved": "optimal", "AlmostSolved": "optimal_inaccurate", "MaxIterations": "user_limit",
                       "MaxTime": "user_limit", "PrimalInfeasible": "infeasible",
                       "AlmostPrimalInfeasible": "infeasible_inaccurate", "DualInfeasible": "unbounded",
                          "AlmostDualInfeasible": "unbounded_inaccurate"}


def from_cvxpy(status):
    """Map a cvxpy status string (or None) to an advbound status word."""
    if status is None:
        return FAILED
    return CVXPY_STATUS_MAP.get(str(status), FAILED)
