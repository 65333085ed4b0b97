"""The semidefinite programs for ADV± and ADV, and the solver call (the only module that knows cvxpy).

:func:`formulate` describes the primal program (and, lazily, its Lagrange dual)
for a :class:`~advbound.functions.domain.Domain`; :func:`solve_formulation` runs a cvxpy
solver on it and returns the raw point, in canonical input order, as a
:class:`RawSolution`.  Nothing here decides what is a bound: that is
:mod:`advbound.evidence.verify`'s job.

>>> from advbound.functions.function import PartialFunction
>>> from advbound.functions.domain import domain
>>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 1)])   # OR_2
>>> form = formulate(domain(f))
>>> form.sizes()["lmi_sizes"], form.sizes()["form"]
([4, 4], 'bipartite')

The primal program
------------------
With ``W = Γ∘(δδᵀ)`` and ``ρ = δ²`` (δ the principal eigenvector of Γ) the
general adversary bound with costs ``c_j`` is (see ``formulations.md``)::

    maximise   Σ_{x,y} W[x,y]
    subject to W symmetric, W∘F = 0, ρ >= 0, Σρ = 1,
               -c_j diag(ρ) ⪯ W∘Δ_j ⪯ c_j diag(ρ)      for every live position j.

Only the blocks of ``W`` between different output classes are variables
(``W∘F = 0`` holds by construction).  Inputs are grouped by output class in the
LMIs; :attr:`Formulation.order` maps that order back to the canonical one.

* Two output values (``form="bipartite"``): only the off-diagonal block ``W01``
  is a variable and only the upper LMI ``c_j diag(ρ) - W∘Δ_j ⪰ 0`` is kept.
  Conjugating by ``diag(I, -I)`` flips the sign of ``W∘Δ_j`` and fixes
  ``diag(ρ)``, so the lower LMI is the upper one in disguise.
* Three or more values (``form="full"``): both LMI sides are kept.
* Positive bound ADV: ``W >= 0`` is added and only the upper LMI is kept for any
  number of outputs.  For ``A = W∘Δ_j >= 0`` entrywise and ``D = c_j diag(ρ)``,
  ``vᵀ(D + A)v >= |v|ᵀ(D - A)|v| >= 0``, so the lower LMI is implied.
* Dead positions (``Δ_j = 0``, every input has the same symbol there) impose
  ``c_j diag(ρ) ⪰ 0``, already implied by ``ρ >= 0``; they are skipped.

The dual program
----------------
Multipliers ``X_j⁺ ⪰ 0`` (upper LMI), ``X_j⁻ ⪰ 0`` (lower LMI, full form only),
``t`` (for ``Σρ = 1``).  Stationarity in ``W[x,y]`` (a pair with
``f(x) ≠ f(y)``) and in ``ρ_x >= 0`` gives::

    minimise   t
    subject to Σ_j c_j (X_j⁺ + X_j⁻)[x,x] <= t                     for every x,
               Σ_{j: x_j≠y_j} (X_j⁺ - X_j⁻)[x,y] = 1              for f(x) ≠ f(y),
               X_j^± ⪰ 0.

For the positive bound the multiplier ``Z >= 0`` of ``W >= 0`` enters the
stationarity condition as ``1 - S[x,y] + Z[x,y] = 0``, so the equality becomes
``Σ_{j: x_j≠y_j} X_j[x,y] >= 1`` (and there is no ``X_j⁻``).  Weak duality:
for feasible points, ``Σ W = Σ_{x≠y} S[x,y]W[x,y] <= Σ_j <X_j, c_j diag ρ> <= t``
(with ``W >= 0`` needed for the ``>=`` version).

Where the dual witness comes from
---------------------------------
``dual_source="multipliers"`` (default) reads the witness from the primal
solve's constraint multipliers (one solve; cvxpy returns exactly the ``X_j``
above, in the LMI order, mapped back to canonical order here).
``dual_source="program"`` solves :attr:`Formulation.dual` separately as a
second solve and takes its variables.  Both are only approximately feasible;
:func:`advbound.evidence.verify.verify_certificate` repairs whichever is used.  On the
known instances of the test suite the two agree to solver accuracy and the
multipliers cost half the time, hence the default.
"""

from __future__ import annotations

import dataclasses
import functools
import logging
import time
import warnings

import numpy as np

from advbound.functions.domain import Domain
from advbound.errors import AdvboundWarning, InvalidFunctionError, SolverError
from advbound.result import SolverStats

__all__ = ["Formulation", "DualProgram", "RawSolution", "formulate", "solve_formulation", "SUPPORTED_SOLVERS"]

log = logging.getLogger("advbound")

BOUNDS = ("general", "positive")

#: Options each supported solver accepts besides the tolerance and iteration limit set by advbound.
_SCS_OPTIONS = frozenset({
    "normalize", "scale", "adaptive_scale", "rho_x", "eps_abs", "eps_rel", "eps_infeas", "alpha",
    "time_limit_secs", "warm_start", "acceleration_lookback", "acceleration_interval",
    "write_data_filename", "log_csv_filename", "use_indirect", "max_iters",
})
_CLARABEL_OPTIONS = frozenset({
    "max_iter", "time_limit", "max_step_fraction", "tol_gap_abs", "tol_gap_rel", "tol_feas",
    "tol_infeas_abs", "tol_infeas_rel", "tol_ktratio", "reduced_tol_gap_abs", "reduced_tol_gap_rel",
    "reduced_tol_feas", "reduced_tol_infeas_abs", "reduced_tol_infeas_rel", "reduced_tol_ktratio",
    "equilibrate_enable", "equilibrate_max_iter", "equilibrate_min_scaling", "equilibrate_max_scaling",
    "linesearch_backtrack_step", "min_switch_step_length", "min_terminate_step_length",
    "direct_kkt_solver", "direct_solve_method", "static_regularization_enable",
    "static_regularization_constant", "static_regularization_proportional",
    "dynamic_regularization_enable", "dynamic_regularization_eps", "dynamic_regularization_delta",
    "iterative_refinement_enable", "iterative_refinement_reltol", "iterative_refinement_abstol",
    "iterative_refinement_max_iter", "iterative_refinement_stop_ratio", "presolve_enable",
    "chordal_decomposition_enable", "chordal_decomposition_merge_method",
    "chordal_decomposition_compact", "chordal_decomposition_complete_dual", "max_threads",
})
#: Solvers advbound knows how to pass tolerances to.
SUPPORTED_SOLVERS = {"SCS": _SCS_OPTIONS, "CLARABEL": _CLARABEL_OPTIONS}


@dataclasses.dataclass(frozen=True, eq=False)
class DualProgram:
    """The dual cvxpy problem with its variable handles (canonical input order).

    ``x_plus[k]`` / ``x_minus[k]`` belong to position ``live[k]``; ``x_minus`` is
    empty for the bipartite and the positive forms.
    """

    problem: object
    t: object
    x_plus: tuple
    x_minus: tuple
    live: tuple[int, ...]


@dataclasses.dataclass(frozen=True, eq=False)
class Formulation:
    """The primal program for one domain and bound kind, inspectable without solving.

    Attributes
    ----------
    domain : Domain
    bound : str
        ``"general"`` or ``"positive"``.
    form : str
        ``"bipartite"`` (two outputs) or ``"full"`` (three or more).
    live : tuple of int
        Positions with ``Δ_j ≠ 0``; one LMI (or pair of LMIs) each.
    order : ndarray
        Canonical indices of the inputs in LMI order (grouped by output class).
    class_sizes : tuple of int
        Number of inputs of each output class, in LMI order.
    primal : cvxpy.Problem
    blocks : dict
        ``(k, l) -> cvxpy Variable`` (k < l): the block of ``W`` between classes ``k`` and ``l``.
    rho : cvxpy.Variable
        ``ρ`` in LMI order.
    normalisation : cvxpy constraint
        ``Σρ = 1``; its multiplier is the dual's ``t``.
    upper : tuple
        Constraints ``c_j diag(ρ) - W∘Δ_j ⪰ 0``, one per live position.
    lower : tuple
        Constraints ``c_j diag(ρ) + W∘Δ_j ⪰ 0`` (full general form only).
    scale : float
        The program is solved with ``Σρ = scale`` (default ``|D|``, so that entries are of order 1,
        which first-order solvers such as SCS converge on several times faster; the interior-point
        CLARABEL is more accurate with ``scale=1``, which :func:`advbound.programs.solve.solve` uses for it) and objective
        ``Σ W / scale``; :meth:`weight_matrix`, :meth:`rho_vector` and the multipliers are
        rescaled to the ``Σρ = 1`` program above.
    """

    domain: Domain
    bound: str
    form: str
    live: tuple[int, ...]
    order: np.ndarray
    class_sizes: tuple[int, ...]
    primal: object
    blocks: dict
    rho: object
    normalisation: object
    upper: tuple
    lower: tuple
    scale: float = 1.0

    @functools.cached_property
    def dual(self) -> DualProgram:
        """The Lagrange dual as a cvxpy problem (built on first access)."""
        return _build_dual(self)

    def sizes(self) -> dict:
        """Variable counts and LMI sizes of the primal and dual programs (no solve, no dual build)."""
        n = self.domain.size
        pairs = int(sum(v.size for v in self.blocks.values()))
        k = len(self.live)
        sides = 1 if not self.lower else 2
        return {
            "form": self.form,
            "bound": self.bound,
            "inputs": n,
            "positions": self.domain.n,
            "live_positions": k,
            "primal_variables": pairs + n,
            "lmi_count": k * sides,
            "lmi_sizes": [n] * (k * sides),
            "dual_variables": 1 + k * sides * n * (n + 1) // 2,
            "dual_pair_constraints": pairs,
        }

    def weight_matrix(self) -> np.ndarray:
        """The solved ``W`` as a dense symmetric matrix in canonical order (after a solve)."""
        n = self.domain.size
        w = np.zeros((n, n))
        starts = np.concatenate([[0], np.cumsum(self.class_sizes)])
        for (k, l), var in self.blocks.items():
            if var.value is None:
                raise SolverError("the formulation has not been solved (no value for W)")
            ik = self.order[starts[k]:starts[k + 1]]
            il = self.order[starts[l]:starts[l + 1]]
            b = np.asarray(var.value, dtype=float)
            w[np.ix_(ik, il)] = b
            w[np.ix_(il, ik)] = b.T
        return w / self.scale

    def rho_vector(self) -> np.ndarray:
        """The solved ``ρ`` in canonical order (after a solve)."""
        if self.rho.value is None:
            raise SolverError("the formulation has not been solved (no value for rho)")
        out = np.zeros(self.domain.size)
        out[self.order] = np.asarray(self.rho.value, dtype=float) / self.scale
        return out


@dataclasses.dataclass(frozen=True, eq=False)
class RawSolution:
    """What a solver returned, in canonical order; claims only, nothing verified.

    ``weights`` is ``W``, ``rho`` is ``ρ``; ``dual_plus`` / ``dual_minus`` are stacks of
    shape ``(N, |D|, |D|)`` (zero for dead positions), ``dual_minus`` is ``None`` for the
    bipartite and positive forms.  Any array is ``None`` when the solver returned no point.
    """

    status: str
    message: str
    objective: float | None
    weights: np.ndarray | None
    rho: np.ndarray | None
    dual_t: float | None
    dual_plus: np.ndarray | None
    dual_minus: np.ndarray | None
    stats: SolverStats
    dual_source: str = "multipliers"


# ---------------------------------------------------------------------------------------------
def formulate(dom: Domain, bound: str = "general", scale: float | None = None) -> "Formulation":
    """Build the primal program of ``bound`` (``"general"`` = ADV±, ``"positive"`` = ADV) for ``dom``.

    Parameters
    ----------
    dom : Domain
        The function's arrays; costs are ``dom.costs``.
    bound : {"general", "positive"}
    scale : float, optional
        Solve with ``Σρ = scale`` (default ``|D|``); see :class:`Formulation`.

    Returns
    -------
    Formulation

    Raises
    ------
    InvalidFunctionError
        For an unknown ``bound`` or a function constant on its domain.
    """
    import cvxpy as cp

    if bound not in BOUNDS:
        raise InvalidFunctionError(f"bound {bound!r} is unknown; use 'general' or 'positive'")
    n_classes = len(dom.labels)
    if n_classes < 2:
        raise InvalidFunctionError("function is constant on its domain: its adversary bound is 0")
    parts = [dom.part(k) for k in range(n_classes)]
    order = np.concatenate(parts)
    sizes = tuple(len(p) for p in parts)
    sym = np.asarray(dom.symbols)
    live = tuple(int(j) for j in dom.live_positions())
    costs = np.asarray(dom.costs, dtype=float)
    form = "bipartite" if n_classes == 2 else "full"
    positive = bound == "positive"

    blocks = {}
    cons = []
    for k in range(n_classes):
        for l in range(k + 1, n_classes):
            var = cp.Variable((sizes[k], sizes[l]), nonneg=positive, name=f"W{k}{l}")
            blocks[(k, l)] = var
    rho = cp.Variable(dom.size, nonneg=True, name="rho")
    starts = np.concatenate([[0], np.cumsum(sizes)])
    scale = float(dom.size if scale is None else scale)
    if not (scale > 0 and np.isfinite(scale)):
        raise InvalidFunctionError(f"scale must be positive and finite, got {scale!r}")
    normalisation = cp.sum(rho) == scale
    cons.append(normalisation)

    def masked_w(j, sign):
        """Block matrix ``c_j diag(ρ) + sign·W∘Δ_j`` in LMI order."""
        rows = []
        for k in range(n_classes):
            row = []
            for l in range(n_classes):
                if k == l:
                    row.append(costs[j] * cp.diag(rho[starts[k]:starts[k + 1]]))
                    continue
                a, b = (k, l) if k < l else (l, k)
                mask = (sym[parts[a], j][:, None] != sym[parts[b], j][None, :]).astype(float)
                blk = cp.multiply(blocks[(a, b)], mask) * sign
                row.append(blk if k < l else blk.T)
            rows.append(row)
        return cp.bmat(rows)

    upper, lower = [], []
    for j in live:
        upper.append(masked_w(j, -1.0) >> 0)
        if form == "full" and not positive:
            lower.append(masked_w(j, 1.0) >> 0)
    objective = cp.Maximize(2 * sum(cp.sum(v) for v in blocks.values()) / scale)
    problem = cp.Problem(objective, cons + upper + lower)
    return Formulation(dom, bound, form, live, order, sizes, problem, blocks, rho, normalisation,
                       tuple(upper), tuple(lower), scale)


def _build_dual(form: Formulation) -> DualProgram:
    import cvxpy as cp
    import scipy.sparse as sp

    dom = form.domain
    n = dom.size
    sym = np.asarray(dom.symbols)
    costs = np.asarray(dom.costs, dtype=float)
    with_minus = bool(form.lower)
    t = cp.Variable(name="t")
    xp = [cp.Variable((n, n), PSD=True, name=f"Xp{j}") for j in form.live]
    xm = [cp.Variable((n, n), PSD=True, name=f"Xm{j}") for j in form.live] if with_minus else []
    diag = sum(costs[j] * cp.diag(xp[k]) for k, j in enumerate(form.live))
    if with_minus:
        diag = diag + sum(costs[j] * cp.diag(xm[k]) for k, j in enumerate(form.live))
    out = np.asarray(dom.output_index)
    rows, cols = np.nonzero(np.triu(out[:, None] != out[None, :], 1))
    # vec() is column-major: entry (r, c) sits at r + c*n.
    sel = sp.csr_matrix((np.ones(len(rows)), (np.arange(len(rows)), rows + cols * n)), shape=(len(rows), n * n))
    s_expr = 0
    for k, j in enumerate(form.live):
        d = (sym[:, j][:, None] != sym[:, j][None, :]).astype(float)
        xj = xp[k] - xm[k] if with_minus else xp[k]
        s_expr = s_expr + cp.multiply(d, xj)
    pair_sum = sel @ cp.vec(s_expr, order="F")
    cons = [diag <= t]
    cons.append(pair_sum >= 1 if form.bound == "positive" else pair_sum == 1)
    problem = cp.Problem(cp.Minimize(t), cons)
    return DualProgram(problem, t, tuple(xp), tuple(xm), form.live)


# ---------------------------------------------------------------------------------------------
def _solver_settings(solver: str, tol: float, max_iters: int | None, options: dict) -> dict:
    known = SUPPORTED_SOLVERS[solver]
    kwargs = {}
    if solver == "SCS":
        kwargs.update(eps_abs=tol, eps_rel=tol)
        if max_iters is not None:
            kwargs["max_iters"] = int(max_iters)
    else:
        kwargs.update(tol_gap_abs=tol, tol_gap_rel=tol, tol_feas=tol)
        if max_iters is not None:
            kwargs["max_iter"] = int(max_iters)
    for key, val in options.items():
        if key not in known:
            warnings.warn(f"option {key!r} is not a known {solver} option; ignored", AdvboundWarning,
                          stacklevel=4)
            continue
        kwargs[key] = val
    return kwargs


def _solver_version(solver: str) -> str:
    try:
        if solver == "SCS":
            import scs
            return str(scs.__version__)
        import clarabel
        return str(clarabel.__version__)
    except Exception:  # pragma: no cover - version lookup is best effort
        return ""


def solve_formulation(form: Formulation, solver: str = "SCS", tol: float = 1e-7, max_iters: int | None = None,
                      verbose: bool = False, dual_source: str = "multipliers", **options) -> RawSolution:
    """Run ``solver`` on ``form`` and return the raw point in canonical order.

    Parameters
    ----------
    form : Formulation
    solver : {"SCS", "CLARABEL"}
        Case-insensitive.
    tol : float
        Passed as ``eps_abs``/``eps_rel`` (SCS) or ``tol_gap_abs``/``tol_gap_rel``/``tol_feas`` (CLARABEL).
    max_iters : int, optional
        ``max_iters`` (SCS, default 100000) or ``max_iter`` (CLARABEL, solver default).
    verbose : bool
        Let the solver print its progress.
    dual_source : {"multipliers", "program"}
        Where the dual witness comes from (see the module docstring).
    **options
        Further solver options; unknown names emit :class:`AdvboundWarning` and are dropped.

    Returns
    -------
    RawSolution
        Its ``status`` is cvxpy's status word (``"solver_error"`` when the solver crashed).

    Raises
    ------
    SolverError
        When the solver is unknown to advbound or not installed.
    """
    import cvxpy as cp

    name = str(solver).upper()
    if name not in SUPPORTED_SOLVERS:
        raise SolverError(f"solver {solver!r} is not supported; use one of {', '.join(sorted(SUPPORTED_SOLVERS))}")
    if name not in cp.installed_solvers():
        raise SolverError(f"solver {name} is not installed; install it (pip install {name.lower()}) or use "
                          f"--solver {'CLARABEL' if name == 'SCS' else 'SCS'}")
    if dual_source not in ("multipliers", "program"):
        raise InvalidFunctionError(f"dual_source {dual_source!r} is unknown; use 'multipliers' or 'program'")
    if name == "SCS" and max_iters is None:
        max_iters = 100_000
    kwargs = _solver_settings(name, float(tol), max_iters, options)
    stats_tol = {"tol": float(tol)}
    if max_iters is not None:
        stats_tol["max_iters"] = int(max_iters)
    shown_opts = {k: v for k, v in kwargs.items() if k in options}

    t0 = time.perf_counter()
    status, message = None, ""
    iterations = 0
    try:
        _quiet_solve(form.primal, name, verbose, kwargs)
        status = form.primal.status
        iterations = _iterations(form.primal)
    except cp.error.SolverError as err:
        status, message = "solver_error", f"{name} failed: {str(err).splitlines()[0] if str(err) else 'no detail'}"
    n = form.domain.size
    N = form.domain.n
    objective = weights = rho = dual_t = dual_plus = dual_minus = None
    if status not in (None, "solver_error") and form.rho.value is not None:
        objective = float(form.primal.value)
        weights = form.weight_matrix()
        rho = form.rho_vector()
        if dual_source == "multipliers":
            dual_t, dual_plus, dual_minus = _multipliers(form)
    if dual_source == "program" and weights is not None:
        dp = form.dual
        try:
            _quiet_solve(dp.problem, name, verbose, kwargs)
            iterations += _iterations(dp.problem)
            if dp.t.value is not None:
                dual_t = float(dp.t.value)
                dual_plus = np.zeros((N, n, n))
                for k, j in enumerate(dp.live):
                    dual_plus[j] = dp.x_plus[k].value
                if dp.x_minus:
                    dual_minus = np.zeros((N, n, n))
                    for k, j in enumerate(dp.live):
                        dual_minus[j] = dp.x_minus[k].value
        except cp.error.SolverError as err:
            message = f"{name} failed on the dual program: {str(err).splitlines()[0] if str(err) else 'no detail'}"
    elapsed = time.perf_counter() - t0
    if not message:
        message = f"{name} returned status {status!r}"
    log.info("%s: %s in %.2fs, %s iterations", name, status, elapsed, iterations)
    stats = SolverStats(name=name, version=_solver_version(name), time=elapsed, iterations=iterations,
                        tolerances=stats_tol, options=shown_opts)
    return RawSolution(status=str(status), message=message, objective=objective, weights=weights, rho=rho,
                       dual_t=dual_t, dual_plus=dual_plus, dual_minus=dual_minus, stats=stats,
                       dual_source=dual_source)


def _quiet_solve(problem, name, verbose, kwargs) -> None:
    """Solve, turning cvxpy's "may be inaccurate" warning into one AdvboundWarning aimed at the caller."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        problem.solve(solver=name, verbose=verbose, **kwargs)
    for w in caught:
        if "inaccurate" in str(w.message):
            warnings.warn(f"{name} returned a low-accuracy point (status {problem.status!r}); verified bounds "
                          f"still hold but the gap may be large", AdvboundWarning, stacklevel=5)
        elif not issubclass(w.category, DeprecationWarning):
            log.info("%s: %s", name, w.message)


def _iterations(problem) -> int:
    try:
        it = problem.solver_stats.num_iters
        return int(it) if it is not None else 0
    except Exception:  # pragma: no cover
        return 0


def _multipliers(form: Formulation):
    """Dual witness from the primal solve's multipliers, mapped to canonical order."""
    n = form.domain.size
    N = form.domain.n
    t = form.normalisation.dual_value
    if t is None:
        return None, None, None
    inv = np.argsort(form.order)  # canonical index -> LMI position

    def canon(m):
        # multipliers of the scaled program are 1/scale times those of the Σρ = 1 program
        m = np.asarray(m, dtype=float) * form.scale
        return m[np.ix_(inv, inv)]

    plus = np.zeros((N, n, n))
    for k, j in enumerate(form.live):
        v = form.upper[k].dual_value
        if v is None:
            return None, None, None
        plus[j] = canon(v)
    minus = None
    if form.lower:
        minus = np.zeros((N, n, n))
        for k, j in enumerate(form.live):
            v = form.lower[k].dual_value
            if v is None:
                return None, None, None
            minus[j] = canon(v)
    return float(np.squeeze(t)) * form.scale, plus, minus
