"""The public ``solve`` entry point: formulate -> solver -> verify -> :class:`~advbound.result.SolveResult`.

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 1)])   # OR_2
>>> r = solve(f, solver="CLARABEL")
>>> r.status, round(r.lower, 6), round(r.upper, 6)                  # ADV±(OR_2) = sqrt(2)
('optimal', 1.414214, 1.414214)

The reported ``lower`` is always :func:`advbound.evidence.verify.verify_certificate`'s
recomputation from Γ, never the solver's objective; ``upper`` is the repaired
dual objective and is reported only when the dual witness passed its checks.
A function that is constant on its domain raises
:class:`~advbound.errors.InvalidFunctionError` (its bound is 0; there is nothing
to solve).

Methods: ``"auto"`` (the default) picks one of the others by
:func:`advbound.programs.choose.choose_method`; ``"dense"`` (this module: one dense SDP over the
whole domain); ``"symmetric"``, ``"factored"``, ``"rows"`` and ``"minimax"`` are dispatched to
:mod:`advbound.programs.symmetric`, :mod:`advbound.programs.factored` and
:mod:`advbound.programs.rowsym` and :mod:`advbound.programs.minimax`.  The result's ``method`` names the program that ran.
"""

from __future__ import annotations

import dataclasses
import importlib
import inspect
import logging
import platform

import numpy as np

from advbound import status as _status
from advbound.evidence.certificate import Certificate
from advbound.functions.domain import domain
from advbound.errors import InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.result import SolveResult

__all__ = ["solve", "check_solvable", "METHODS"]

log = logging.getLogger("advbound")

#: method name -> (module, function) for the methods implemented outside this module.
_DISPATCH = {"symmetric": ("advbound.programs.symmetric", "solve_symmetric"),
             "factored": ("advbound.programs.factored", "solve_factored"),
             "rows": ("advbound.programs.rowsym", "solve_rows"),
             "minimax": ("advbound.programs.minimax", "solve_minimax_rows")}
METHODS = ("auto", "dense") + tuple(_DISPATCH)

#: Γ support thresholds tried by :func:`solve`; each gives a valid lower bound, the best is kept.
_SUPPORT_THRESHOLDS = (1e-12, 1e-9, 1e-6)


def check_solvable(f: PartialFunction, bound: str) -> None:
    """Raise :class:`InvalidFunctionError` for an unknown ``bound`` or a constant ``f`` (bound 0, nothing to solve)."""
    if bound not in ("general", "positive"):
        raise InvalidFunctionError(f"bound {bound!r} is unknown; use 'general' or 'positive'")
    if f.is_constant:
        raise InvalidFunctionError(f"function is constant on its domain (every input gives {f.outputs[0]!r}): "
                                   f"its adversary bound is 0")


def solve(f: PartialFunction, bound: str = "general", solver: str | None = None, tol: float | None = None,
          max_iters: int | None = None, verbose: bool = False, with_dual: bool = True, method: str = "auto",
          dual_source: str = "multipliers", repair_tol: float = 1e-2, allow_large: bool = False,
          **options) -> SolveResult:
    """Solve the adversary program of ``f`` and return verified bounds.

    Parameters
    ----------
    f : PartialFunction
        Costs ``f.costs`` give the cost-weighted bound (all 1: plain ADV± / ADV).
    bound : {"general", "positive"}
        ADV± (negative weights allowed) or ADV (non-negative weights).
    solver : {"SCS", "CLARABEL"}, optional
        Default: the one ``method="auto"`` picks; SCS for an explicit ``"dense"`` or ``"symmetric"``.
    tol : float, optional
        Solver tolerance (see :func:`advbound.programs.sdp.solve_formulation`); for ``method="factored"`` the
        target relative gap between the verified bounds.  Default: 1e-7, or 1e-4 for ``"factored"``.
    max_iters : int, optional
        Solver iteration limit.
    verbose : bool
        Let the solver print progress.
    with_dual : bool
        Also verify a dual witness and report ``upper``.
    method : {"auto", "dense", "symmetric", "factored", "rows", "minimax"}
        ``"auto"`` (default) picks by :func:`advbound.programs.choose.choose_method` and says why in
        ``result.method_reason``; ``"rows"``: the S_n-reduced program of interchangeable rows
        (:mod:`advbound.programs.rowsym`); ``"minimax"``: the positive bound of interchangeable rows by
        cutting planes on its minimax form (:mod:`advbound.programs.minimax`).
    dual_source : {"multipliers", "program"}
        Where the dual witness comes from (see :mod:`advbound.programs.sdp`).
    repair_tol : float
        Largest relative cost of repairing the dual witness (see :mod:`advbound.evidence.verify`).
    allow_large : bool
        With ``method="dense"``, the memory of the whole solve is estimated first
        (:func:`advbound.functions.sizing.solve_estimate`) and a program that needs more than this
        machine has available (:func:`advbound.functions.sizing.memory_budget`) is refused before
        anything is built; ``True`` only logs the estimate.  ``method="rows"`` checks its own
        estimate the same way (:func:`advbound.programs.rowsym.rows_estimate`); the other methods
        size themselves.
    **options
        Passed to the solver; unknown ones emit :class:`~advbound.errors.AdvboundWarning`.

    Returns
    -------
    SolveResult
        ``status`` is ``optimal`` or ``inaccurate`` when the bounds verified, ``unverified``
        when a check failed (``message`` names it), ``failed`` / ``infeasible`` when the
        solver returned no usable point.

    Raises
    ------
    InvalidFunctionError
        For a constant function, an unknown ``bound`` or ``method``.
    SolverError
        When the solver is unsupported or not installed.
    advbound.functions.sizing.TooLargeError
        When the dense program does not fit in memory and ``allow_large`` is false.
    """
    if method not in METHODS:
        raise InvalidFunctionError(f"method {method!r} is unknown; use one of {', '.join(METHODS)}")
    check_solvable(f, bound)
    reason, target = f"method {method!r} was asked for", f
    if method == "auto":
        from advbound.programs.choose import choose_method

        choice = choose_method(f, bound, solver)
        method, solver, reason = choice.method, choice.solver, choice.reason
        target = f if choice.family is None else choice.family   # the row family, found once
        log.info("method auto: %s (%s)", method, reason)
    if tol is None:
        tol = {"factored": 1e-4, "rows": 1e-8, "minimax": 1e-6}.get(method, 1e-7)
    if method in _DISPATCH:
        modname, funcname = _DISPATCH[method]
        func = getattr(importlib.import_module(modname), funcname)
        # pass the common settings the other method declares; everything else goes through **options
        params = inspect.signature(func).parameters
        chosen = solver if method in ("rows", "minimax") else (solver or "SCS")
        extra = {k: v for k, v in dict(solver=chosen, max_iters=max_iters, with_dual=with_dual,
                                       allow_large=allow_large).items() if k in params}
        res = func(target, bound=bound, tol=tol, verbose=verbose, **extra, **options)
    else:
        res = _solve_dense(f, bound, solver or "SCS", tol, max_iters, verbose, with_dual, dual_source, repair_tol,
                           allow_large, options)
    return dataclasses.replace(res, method=method, method_reason=reason)


def _solve_dense(f, bound, solver, tol, max_iters, verbose, with_dual, dual_source, repair_tol, allow_large,
                 options) -> SolveResult:
    """The dense program: formulate, solve, extract Γ at several thresholds, verify, report."""
    _check_size(f, bound, solver, allow_large)
    from advbound.programs import sdp
    from advbound.evidence.verify import extract_gamma, verify_certificate

    dom = domain(f)
    # Σρ = |D| speeds up the first-order SCS several times; the interior-point CLARABEL is more
    # accurate on the Σρ = 1 program (see advbound.programs.sdp.Formulation.scale)
    form = sdp.formulate(dom, bound, scale=None if str(solver).upper() == "SCS" else 1.0)
    raw = sdp.solve_formulation(form, solver=solver, tol=tol, max_iters=max_iters, verbose=verbose,
                                dual_source=dual_source, **options)
    st = _status.from_cvxpy(raw.status)
    base = dict(bound=bound, domain_size=f.size, solver_stats=raw.stats, objective=raw.objective)
    if raw.weights is None:
        if st in _status.SUCCESS:
            st = _status.FAILED
        return SolveResult(message=f"{raw.message}; no point returned: {_status.MESSAGES[st]}", status=st, **base)

    meta = _metadata(f, bound, raw, tol, max_iters, "dense", dual_source)
    meta["verification"] = {"repair_tol": float(repair_tol), "support_thresholds": list(_SUPPORT_THRESHOLDS)}
    if not (np.all(np.isfinite(raw.weights)) and np.all(np.isfinite(raw.rho))):
        return SolveResult(message=f"solver returned {raw.status!r} with non-finite entries in its point; no bound",
                           status=_status.FAILED, **base)
    if raw.dual_plus is not None and not all(np.all(np.isfinite(a)) for a in (raw.dual_plus, raw.dual_minus, raw.dual_t)
                                             if a is not None):
        raw = dataclasses.replace(raw, dual_plus=None, dual_minus=None, dual_t=None)
    best = None
    for thr in _SUPPORT_THRESHOLDS:
        gamma = extract_gamma(raw.weights, raw.rho, threshold=thr)
        cert = Certificate(alphabet=f.alphabet, inputs=f.inputs, outputs=f.outputs, costs=np.asarray(f.costs),
                           gamma=gamma, metadata=meta)
        rep = verify_certificate(cert, bound=bound, repair_tol=repair_tol)
        if best is None or rep.lower > best[1].lower:
            best = (gamma, rep)
    gamma = best[0]
    dual = {}
    if with_dual and raw.dual_plus is not None:
        dual = dict(dual_t=raw.dual_t, dual_plus=raw.dual_plus, dual_minus=raw.dual_minus)
    cert = Certificate(alphabet=f.alphabet, inputs=f.inputs, outputs=f.outputs, costs=np.asarray(f.costs),
                       gamma=gamma, metadata=meta, **dual)
    rep = verify_certificate(cert, bound=bound, repair_tol=repair_tol)
    meta = dict(meta, claimed_lower=rep.lower, claimed_upper=rep.upper)
    cert = dataclasses.replace(cert, metadata=meta)

    lower, upper = rep.lower, rep.upper
    if not rep.passed:
        failed = ", ".join(rep.failed_checks())
        msg = f"check(s) {failed} failed after the solver returned {raw.status!r}: {rep.message}"
        st = _status.UNVERIFIED
        upper = None
    elif with_dual and raw.dual_plus is None:
        msg = f"solver returned {raw.status!r} but no dual witness; lower bound verified, no upper bound"
        st = _status.UNVERIFIED if st == _status.OPTIMAL else st
    elif st in _status.SUCCESS:
        msg = _status.MESSAGES[st] if with_dual else "solved; lower bound verified (dual not requested)"
        if upper is not None and st == _status.OPTIMAL:
            rel = (upper - lower) / max(abs(upper), 1e-300)
            if rel > max(1e-3, 1e3 * tol):
                st = _status.INACCURATE
                msg = f"solver claimed optimality but the verified relative gap is {rel:.2g}"
    else:
        # the point still passed verification, so its numbers are valid bounds; the status says why
        # the gap may be poor
        msg = f"solver returned {raw.status!r}: {_status.MESSAGES[st]}"
    log.info("solve %s: %s lower=%s upper=%s", f.description or "function", st, lower, upper)
    return SolveResult(message=msg, status=st, lower=lower, upper=upper, certificate=cert, verification=rep,
                       **base)


def _check_size(f, bound, solver, allow_large) -> None:
    """Refuse a dense program whose estimated memory exceeds the budget (see :mod:`advbound.functions.sizing`)."""
    from advbound.functions.sizing import check_memory, solve_estimate

    hint = "or use method 'factored' (--method factored), which is built for large two-output functions" \
        if f.is_boolean else ""
    check_memory(solve_estimate(f, bound, solver), allow_large=allow_large, hint=hint)


def _metadata(f, bound, raw, tol, max_iters, method, dual_source) -> dict:
    import scipy

    from advbound import __version__
    try:
        import cvxpy
        cv = cvxpy.__version__
    except Exception:  # pragma: no cover
        cv = ""
    st = raw.stats
    return {
        "description": f.description,
        "bound": bound,
        "method": method,
        "solver": {"name": st.name, "version": st.version, "tol": float(tol),
                   "max_iters": None if max_iters is None else int(max_iters), "options": dict(st.options),
                   "status": raw.status, "iterations": st.iterations, "time": float(st.time),
                   "dual_source": dual_source},
        "versions": {"advbound": __version__, "numpy": np.__version__, "scipy": scipy.__version__,
                     "cvxpy": cv, "python": platform.python_version()},
        "objective": raw.objective,
    }
