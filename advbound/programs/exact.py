"""The exact t-query optimum: its semidefinite program solved, and the answer verified.

This module owns the public entry points :func:`exact_success` and :func:`least_queries`
and the solve-and-verify path behind them: :func:`solve_exact` hands a described program
to the solver, checks the returned point independently with numpy and turns the solver's
multipliers into a verified upper bound.  The program, whose optimum is the best
worst-case success probability of a ``t``-query quantum algorithm for a partial function
(the characterisation of "Quantum query complexity and semi-definite programming", 2003),
lives in sibling modules:

* :mod:`advbound.programs.exact_program`: the oracle and the formulation
  (:func:`formulate_exact`, :class:`ExactProgram`, :func:`phase_matrices`,
  :func:`oracle_description`), with its symmetry reduction in
  :mod:`advbound.programs.exact_symmetry`;
* :mod:`advbound.programs.exact_verify`: the numpy checks (:func:`verify_point`,
  :func:`verify_dual`, :class:`PointCheck`);
* :mod:`advbound.programs.exact_result`: the plain :class:`ExactResult`.

Those names are importable from here as well.

Typical call::

    from advbound.programs.exact import exact_success, least_queries
    r = exact_success(f, queries=2, solver="CLARABEL")
    r.success_probability, r.upper_bound, r.status

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 0)])  # PARITY_2
>>> r = exact_success(f, queries=1)
>>> r.status, round(r.success_probability, 4), round(r.upper_bound, 4)
('optimal', 1.0, 1.0)

Verification
------------
:func:`verify_point` re-checks the returned matrices with numpy only.  Negative
eigenvalues are clipped, and the mismatch ``R_k = M_k - Σ_ℓ Γ_{k+1,ℓ}`` between
consecutive layers is turned into an explicit algorithm: the states realising
``M_k`` are rotated onto those realising the next layer by the best unitary
(orthogonal Procrustes), and the distances ``δ_k(x)`` add up to ``e_x``.  That
algorithm succeeds on ``x`` with probability at least
``(sqrt(P_{f(x)}[x, x]) - e_x)^2``; the minimum over ``x`` is
``success_probability``, achievable whatever the solver's accuracy.
``upper_bound`` comes from the solver's Lagrange multipliers, repaired to be
exactly dual feasible (``Y_{k-1} ⪰ Y_k ∘ conj E_ℓ``, ``Y_t ⪰ diag(μ on f^{-1}(z))``)
by adding ``α_k Π_k + λ_k I`` (``Π_k`` projects onto the complement of ``U_k``);
it bounds every ``t``-query algorithm.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time
import warnings

import numpy as np

from advbound import status as _status
from advbound.errors import InvalidFunctionError, SolverError
from advbound.functions.domain import domain as _domain
from advbound.functions.function import PartialFunction
from advbound.programs.exact_program import (ExactProgram, _Handles, formulate_exact, oracle_description,
                                             phase_matrices)
from advbound.programs.exact_result import ExactResult
from advbound.programs.exact_symmetry import _orbit_labels
from advbound.programs.exact_verify import PointCheck, verify_dual, verify_point
from advbound.result import SolverStats

__all__ = [
    "ExactProgram",
    "ExactResult",
    "PointCheck",
    "formulate_exact",
    "solve_exact",
    "exact_success",
    "least_queries",
    "verify_point",
    "verify_dual",
    "phase_matrices",
    "oracle_description",
    "SUPPORTED_SOLVERS",
]

log = logging.getLogger("advbound")

SUPPORTED_SOLVERS = ("CLARABEL", "SCS")


# ---------------------------------------------------------------------------------------------
# Solving
# ---------------------------------------------------------------------------------------------
def _solver_kwargs(name: str, tol: float, max_iters: int | None, options: dict) -> dict:
    kw = {}
    if name == "SCS":
        kw.update(eps_abs=tol, eps_rel=tol, max_iters=100_000 if max_iters is None else int(max_iters))
    else:
        kw.update(tol_gap_abs=tol, tol_gap_rel=tol, tol_feas=tol)
        if max_iters is not None:
            kw["max_iter"] = int(max_iters)
    kw.update(options)
    return kw


def _version(name: str) -> str:
    try:
        mod = __import__(name.lower())
        return str(getattr(mod, "__version__", ""))
    except ImportError:  # pragma: no cover
        return ""


def solve_exact(program: ExactProgram, solver: str = "CLARABEL", tol: float = 1e-8, verify_tol: float = 1e-4,
                max_iters: int | None = None, verbose: bool = False, **options) -> ExactResult:
    """Solve a described program, verify the point with numpy, and return an :class:`ExactResult`.

    Parameters
    ----------
    program : ExactProgram
    solver : {"CLARABEL", "SCS"}
        Case-insensitive.  CLARABEL (interior point) is the accurate choice for these small programs.
    tol : float
        CLARABEL ``tol_gap_abs``/``tol_gap_rel``/``tol_feas``, or SCS ``eps_abs``/``eps_rel``.
    verify_tol : float
        Largest accepted width of ``[success_probability, upper_bound]``; wider makes the status ``unverified``.
    max_iters : int, optional
    verbose : bool
        Let the solver print its progress.
    **options
        Passed to the solver unchanged.

    Raises
    ------
    SolverError
        When the solver is unknown or not installed.
    """
    import cvxpy as cp

    name = str(solver).upper()
    if name not in SUPPORTED_SOLVERS:
        raise SolverError(f"solver {solver!r} is not supported; use one of {', '.join(SUPPORTED_SOLVERS)}")
    if name not in cp.installed_solvers():
        raise SolverError(f"solver {name} is not installed")
    dom = program.domain
    d = dom.size
    m = len(dom.labels)
    t0 = time.perf_counter()
    # CLARABEL sometimes stops with a numerical error on programs with many optimal points; it is
    # then retried without chordal decomposition and with more regularisation (user options win).
    attempts = [dict(options)]
    if name == "CLARABEL":
        attempts += [{"chordal_decomposition_enable": False, **options},
                     {"chordal_decomposition_enable": False, "static_regularization_constant": 1e-7, **options}]
    used = dict(options)
    for opts in attempts:
        handles = program.problem()
        prob = handles.problem
        raw_status, msg, iters = None, "", None
        kwargs = _solver_kwargs(name, float(tol), max_iters, opts)
        try:
            with warnings.catch_warnings():  # an inaccurate solve is reported as a status, not a warning
                warnings.simplefilter("ignore", UserWarning)
                prob.solve(solver=name, verbose=verbose, **kwargs)
            raw_status = prob.status
            iters = prob.solver_stats.num_iters if prob.solver_stats is not None else None
        except cp.error.SolverError as err:
            raw_status, msg = "solver_error", f"{name} failed: {str(err).splitlines()[0] if str(err) else 'no detail'}"
        used = opts
        if raw_status in ("optimal", "optimal_inaccurate") and handles.phi.value is not None:
            break
        log.info("exact: %s returned %s with options %s", name, raw_status, opts)
    elapsed = time.perf_counter() - t0
    stats = SolverStats(name=name, version=_version(name), time=elapsed, iterations=iters,
                        tolerances={"tol": float(tol), "verify_tol": float(verify_tol)},
                        options={k: v for k, v in used.items()})
    status = _status.from_cvxpy(raw_status)
    common = dict(queries=program.queries, domain_size=d, alphabet_size=program.q,
                  oracle=oracle_description(program.q), solver_stats=stats,
                  program={**program.sizes, "symmetry": dict(program.symmetry)})
    if handles.s.value is None or handles.phi.value is None:
        return ExactResult(message=msg or f"{name} returned status {raw_status!r} without a point",
                           status=_status.FAILED if status in _status.SUCCESS else status, **common)
    objective = float(handles.s.value)
    point = program.unpack(handles.phi.value)
    check = verify_point(program.E, dom.output_index, point["c"], point["gammas"], point["P"])
    upper = _upper_from_multipliers(program, handles, d, m)
    residuals = {"psd_violation": check.psd_violation, "equality_residual": check.equality_residual,
                 "drift": check.drift, "raw_success": check.raw_success}
    lower = check.success_probability
    if status in _status.SUCCESS:
        width = (upper - lower) if upper is not None else math.inf
        if width > verify_tol:
            status = _status.UNVERIFIED
            msg = (f"verified interval [{lower:.6g}, {_fmt(upper)}] is wider than {verify_tol:g} "
                   f"(solver objective {objective:.6g}); tighten tol or try another solver")
        else:
            msg = (f"best {program.queries}-query worst-case success probability in [{lower:.8g}, {upper:.8g}] "
                   f"(solver objective {objective:.8g})")
    else:
        msg = msg or (f"{name} returned status {raw_status!r}; achievable success {lower:.6g} "
                      f"(solver objective {objective:.6g})")
    return ExactResult(message=msg, status=status, success_probability=lower, upper_bound=upper,
                       objective=objective, residuals=residuals, **common)


def _fmt(v):
    return "none" if v is None else f"{v:.6g}"


def _upper_from_multipliers(program: ExactProgram, handles: "_Handles", d: int, m: int) -> float | None:
    """Verified upper bound from the solver's multipliers (both sign conventions tried; both are valid)."""
    if handles.succ.dual_value is None or any(c.dual_value is None for c in handles.eqs):
        return None
    lam = np.asarray(handles.succ.dual_value, dtype=float).ravel()
    ic = program.input_class
    reps = program.success[1]
    per = np.zeros(int(ic.max()) + 1)
    per[ic[reps]] = lam
    mu = per[ic] / np.bincount(ic)[ic]
    # The multipliers of the shared-variable program satisfy the full dual constraints only after
    # averaging over the group (Reynolds average of the summed orbit conditions; see docs/exact.md).
    gens = program.input_generators
    pc = _orbit_labels(d * d, [(g[:, None] * d + g[None, :]).ravel() for g in gens]) if gens else None
    comps = [np.eye(d) - V @ V.T for V in program.bases[1:]]
    best = None
    for sign in (1.0, -1.0):
        Y = []
        for con, (_, _, k, rows) in zip(handles.eqs[1:], program.eq[1:]):
            V = program.bases[k]
            r = V.shape[1]
            nu = sign * np.asarray(con.dual_value, dtype=float).ravel()
            Z = np.zeros((r, r))
            for (i, j), v in zip(rows, nu):
                Z[i, j] += v / 2
                Z[j, i] += v / 2       # an off-diagonal row stands for both (i, j) and (j, i)
            Yk = V @ Z @ V.T
            if pc is not None:
                Yk = (np.bincount(pc, weights=Yk.ravel()) / np.bincount(pc))[pc].reshape(d, d)
            Y.append(Yk)
        try:
            ub = verify_dual(program.E, program.domain.output_index, Y, mu, m, comps)
        except np.linalg.LinAlgError:
            continue
        best = ub if best is None else min(best, ub)
        if not Y:
            break
    return None if best is None else float(min(best, 1.0))


def exact_success(f: PartialFunction, queries: int, solver: str = "CLARABEL", tol: float = 1e-8,
                  use_symmetry: bool = True, verify_tol: float = 1e-4, **options) -> ExactResult:
    """Best worst-case success probability of a ``queries``-query algorithm for ``f``.

    Parameters
    ----------
    f : PartialFunction
    queries : int
    solver : {"CLARABEL", "SCS"}
    tol : float
        Solver tolerance.
    use_symmetry : bool
        Shrink the program with automorphisms (the value is the same either way).
    verify_tol : float
        See :func:`solve_exact`.
    **options
        ``max_iters``, ``verbose``, ``group`` (automorphisms to use) or solver options.

    Returns
    -------
    ExactResult
        ``success_probability`` is achieved by an explicit algorithm;
        ``upper_bound`` bounds every algorithm.

    Examples
    --------
    One query to OR on two bits (the optimum is 9/10, see docs/exact.md):

    >>> from advbound.functions.function import PartialFunction
    >>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 1)])
    >>> round(exact_success(f, 1).success_probability, 4)
    0.9
    """
    group = options.pop("group", None)
    program = formulate_exact(f, queries, use_symmetry=use_symmetry, group=group)
    return solve_exact(program, solver=solver, tol=tol, verify_tol=verify_tol, **options)


def least_queries(f: PartialFunction, error: float, max_queries: int | None = None, decision_tol: float = 1e-4,
                  start: int = 0, **kw) -> ExactResult:
    """The least ``t`` whose optimal worst-case success reaches ``1 - error``.

    ``t`` is declared sufficient when the *verified achievable* success is at
    least ``1 - error - decision_tol``: a numerical decision (``error = 0``, exact
    computation, can only be decided up to ``decision_tol``).  Smaller ``t`` were
    rejected because their verified value fell short; their ``upper_bound`` (when
    below ``1 - error - decision_tol``) certifies the rejection, and the message
    says when it does not.

    Parameters
    ----------
    f : PartialFunction
    error : float
        ``0 <= error < 1``.
    max_queries : int, optional
        Default: the number of live positions (that many queries compute ``f`` exactly).
    decision_tol : float
    start : int
        First ``t`` tried (default 0).
    **kw
        Passed to :func:`exact_success`.
    """
    if not (isinstance(error, (int, float)) and 0 <= error < 1):
        raise InvalidFunctionError(f"error must be in [0, 1), got {error!r}")
    live = int(_domain(f).live_positions().size)
    if max_queries is None:
        max_queries = live
    if max_queries < start:
        raise InvalidFunctionError(f"max_queries {max_queries} is below the first query count tried ({start})")
    target = 1.0 - float(error) - float(decision_tol)
    history = []
    uncertified = []
    res = None
    total_time = 0.0
    for t in range(int(start), int(max_queries) + 1):
        res = exact_success(f, t, **kw)
        total_time += res.solver_stats.time
        ok = res.success_probability is not None and res.success_probability >= target
        history.append({"queries": t, "status": res.status, "success_probability": res.success_probability,
                        "upper_bound": res.upper_bound, "objective": res.objective, "reached": ok,
                        "time": res.solver_stats.time})
        if ok:
            note = ""
            if uncertified:
                note = (f"; fewer queries ({', '.join(map(str, uncertified))}) were rejected by the solver only "
                        "(verified upper bound not below the target)")
            msg = (f"{t} queries reach success {res.success_probability:.8g} >= 1 - {error:g} "
                   f"(decision tolerance {decision_tol:g}){note}")
            return dataclasses.replace(res, message=msg, target_error=float(error), reached=True,
                                       history=tuple(history),
                                       solver_stats=dataclasses.replace(res.solver_stats, time=total_time))
        if res.upper_bound is None or res.upper_bound >= target:
            uncertified.append(t)
    msg = f"no query count up to {max_queries} reached success 1 - {error:g} (decision tolerance {decision_tol:g})"
    return dataclasses.replace(res, message=msg, target_error=float(error), reached=False, history=tuple(history),
                               status=res.status if res.status not in _status.SUCCESS else _status.INACCURATE,
                               solver_stats=dataclasses.replace(res.solver_stats, time=total_time))
