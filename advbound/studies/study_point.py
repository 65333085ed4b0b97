"""One point of a study: its computation in a worker, and its stored row (certificate first).

This module owns :func:`solve_point`, the per-point function a worker runs (it never raises
for a failing computation: the failure is data), and the turning of its outcome into a
:class:`~advbound.studies.store.StoredRow` in the calling process: the certificate file is
written under a temporary name and renamed into place before the row is committed, and a
success whose verified lower bound exceeds its verified upper bound is stored as unverified.
A conjecture point (``[study] conjecture``) loads the callable in the worker from its spec string,
fits its constants when asked, and evaluates Γ on the dense path of
:func:`advbound.evidence.usergamma.evaluate_gamma`; above the dense limit a function of interchangeable
rows is evaluated by orbits (:func:`advbound.evidence.orbitquotient.quotient_gamma`, constants given or
reused, not fitted), any other is stored as ``skipped`` (too large), and a callable that fails as
``failed`` with its one-line message.

>>> _safe("T=5 rows=3 exact t=2")
'T=5_rows=3_exact_t=2'
"""

from __future__ import annotations

import os
import re
import time
import traceback

from advbound import status as _status
from advbound.errors import AdvboundError
from advbound.studies.store import (BOUND_SLACK, ERROR_STATUS, SKIPPED, LeaseHolder, Store, StoredRow, make_row,
                                    package_versions)
from advbound.studies.study_spec import (CONJECTURE_KIND, EXACT_KIND, Point, StudySpec, _one_line, invalid_message,
                                         solver_settings)

__all__ = ["solve_point"]


def solve_point(task: dict) -> dict:
    """Compute one point (runs in a worker; never raises for a failing computation).

    ``task`` has ``instance`` (an InstanceSpec), ``params``, ``bound`` and ``settings``
    (:func:`solver_settings`).  Returns a dict with ``ok``; on success ``result``
    (``SolveResult.to_dict()``), ``certificate`` (or ``None``); on failure ``error``, and
    ``invalid = True`` when building the instance raised an
    :class:`~advbound.errors.AdvboundError` (the input is wrong, not the solver); always
    ``time_total`` (s) and ``versions``.  A task with ``kind == "exact"`` carries the
    request (one entry of :func:`exact_settings`) as ``settings`` and returns ``exact``
    (``ExactResult.to_dict()``) instead of ``result``.  A task with ``kind == "conjecture"`` carries
    :func:`~advbound.studies.study_spec.conjecture_settings` as ``settings``, the spec string to load as
    ``callable``, its ``label`` and, when it reuses another point's fit, ``reuse`` (``{"params", "at"}``) or
    ``reuse_error``; it returns ``conjecture`` (see :func:`_conjecture`), or ``skipped`` (one line) for a
    function above the dense limit.
    """
    t0 = time.perf_counter()
    try:
        out = _compute(task)
    except Exception as err:  # a failing point is data, recorded by the parent
        tb = traceback.format_exception_only(type(err), err)[-1].strip()
        out = {"ok": False, "error": tb}
    out["time_total"] = time.perf_counter() - t0
    out["versions"] = package_versions()
    return out


def _compute(task: dict) -> dict:
    from advbound.functions.instance import build_instance
    s = task["settings"]
    if task.get("kind") not in (EXACT_KIND, CONJECTURE_KIND):
        res = _minimax_by_orbits(task)
        if res is not None:
            return {"ok": True, "result": res.to_dict(), "certificate": res.certificate}
    try:
        f = build_instance(task["instance"], task["params"])
    except AdvboundError as err:
        return {"ok": False, "invalid": True, "error": invalid_message(err)}
    if task.get("kind") == EXACT_KIND:
        return {"ok": True, "exact": _solve_exact(f, s).to_dict()}
    if task.get("kind") == CONJECTURE_KIND:
        return _conjecture(f, task)
    from advbound.programs.solve import solve
    res = solve(f, bound=task["bound"], solver=s["solver"], tol=s["tol"], max_iters=s["max_iters"],
                method=s["method"], **s["options"])
    return {"ok": True, "result": res.to_dict(), "certificate": res.certificate}


def _minimax_by_orbits(task: dict):
    """The positive bound of an interchangeable-rows instance, from its orbits (no |D| listing), or None.

    Used when the settings leave the method to ``auto`` or ask for ``minimax``; any instance outside
    the orbit form (:func:`advbound.functions.specfamily.family_from_spec`) goes the usual way.
    """
    import dataclasses

    s = task["settings"]
    if task["bound"] != "positive" or s["method"] not in ("auto", "minimax") or s["options"] \
            or str(s["solver"] or "CLARABEL").upper() != "CLARABEL":
        return None
    from advbound.functions.specfamily import family_from_spec
    from advbound.programs.minimax import solve_minimax_rows
    try:
        fam = family_from_spec(task["instance"], task["params"])
    except AdvboundError:
        return None
    res = solve_minimax_rows(fam, tol=s["tol"] or 1e-6, max_iters=s["max_iters"])
    why = (f"{fam.n} interchangeable rows and the positive bound: the minimax program on {len(fam.contents)} "
           f"input orbits (read from the instance file; the {fam.size} inputs are never listed)")
    return dataclasses.replace(res, method="minimax", method_reason=why)


def _solve_exact(f, s: dict):
    from advbound.programs.exact import exact_success, least_queries
    kw = dict(solver=s["solver"], tol=s["tol"], use_symmetry=s["symmetry"])
    if s.get("queries") is not None:
        return exact_success(f, int(s["queries"]), **kw)
    return least_queries(f, s["error"], max_queries=s.get("max_queries"), decision_tol=s["decision_tol"], **kw)


def _conjecture(f, task: dict) -> dict:
    """Evaluate (and fit, as the settings ask) the conjectured Γ for ``f``; never raises for a bad callable.

    Returns ``{"ok": True, "conjecture": {...}}`` with ``lower`` (the certified ratio), ``params`` (the
    constants used), ``fitted``, ``fitted_at`` (the grid point whose fit gave them), ``fit`` (the
    :class:`~advbound.programs.gammafit.FitResult` as a dict, for a fit done here), ``report`` (facts of
    the :class:`~advbound.evidence.usergamma.GammaReport`) and ``time``; ``{"ok": True, "skipped": msg}``
    above the dense limit; ``{"ok": False, "error": msg}`` with a one-line message otherwise.
    """
    from advbound.evidence.gammainput import DENSE_LIMIT, GammaError, gamma_from_callable, load_callable
    from advbound.evidence.usergamma import evaluate_gamma
    from advbound.functions.sizing import TooLargeError
    s = task["settings"]
    label = task.get("label") or s["callable"]
    size = len(f.inputs)
    if task.get("reuse_error"):
        return {"ok": False, "error": task["reuse_error"], "domain_size": size}
    if size > DENSE_LIMIT:
        return _conjecture_by_orbits(f, task, label, size)
    t0 = time.perf_counter()
    fit = None
    try:
        func = load_callable(task["callable"])
        reuse = task.get("reuse")
        if s["fit"] == "each" or (s["fit"] == "once" and reuse is None):
            from advbound.programs.gammafit import fit_gamma_params
            fit = fit_gamma_params(f, func, s["params"], method=s["fit_method"], starts=s["starts"],
                                   random_state=s["seed"], max_evaluations=s["max_evals"], name=label)
            params, fitted_at = fit.params, task["params"]
        elif reuse is not None:
            params, fitted_at = dict(reuse["params"]), reuse["at"]
        else:
            params, fitted_at = dict(s["params"]), None
        rep = evaluate_gamma(f, gamma_from_callable(f, func, name=label, params=params))
    except TooLargeError as err:
        return {"ok": True, "skipped": f"skipped: too large: {_one_line(err)}", "domain_size": size}
    except GammaError as err:
        return {"ok": False, "error": f"conjecture {label}: {_one_line(err)}", "domain_size": size}
    facts = {k: v for k, v in rep.to_dict().items() if k in ("norm", "binding_names", "method", "was_symmetric",
                                                             "zeroed_entries", "message")}
    return {"ok": True, "conjecture": {"lower": rep.certified_ratio, "params": params, "fitted": fitted_at is not None,
                                       "fitted_at": fitted_at, "fit": None if fit is None else fit.to_dict(),
                                       "report": facts, "domain_size": size, "time": time.perf_counter() - t0}}


def _conjecture_by_orbits(f, task: dict, label: str, size: int) -> dict:
    """Above the dense limit: a row-invariant Γ with given (or reused) constants, by quotient norms.

    Fitting needs the dense path, so a point that would fit is skipped; a function without
    interchangeable rows, or a callable that is not row-invariant, is skipped or failed with the reason.
    """
    from advbound.evidence.gammainput import DENSE_LIMIT, GammaError, load_callable
    from advbound.evidence.orbitquotient import quotient_gamma
    from advbound.functions.rowfamily import family_of
    s, reuse = task["settings"], task.get("reuse")
    too_large = f"skipped: too large: |D| = {size} inputs, above the dense limit {DENSE_LIMIT} of advbound gamma"
    fam = family_of(f)
    if fam is None or s["fit"] == "each" or (s["fit"] == "once" and reuse is None):
        why = "the rows are not interchangeable" if fam is None else "fitting needs the dense path"
        return {"ok": True, "skipped": f"{too_large} ({why})", "domain_size": size}
    params, fitted_at = (dict(reuse["params"]), reuse["at"]) if reuse is not None else (dict(s["params"]), None)
    t0 = time.perf_counter()
    try:
        rep = quotient_gamma(fam, load_callable(task["callable"]), params, name=label)
    except GammaError as err:
        return {"ok": False, "error": f"conjecture {label}: {_one_line(err)}", "domain_size": size}
    if not rep.passed:
        return {"ok": False, "error": f"conjecture {label}: the pair-orbit count check failed", "domain_size": size}
    facts = {"method": "orbits (quotient norms)", "exact_norms": rep.exact_norms, "pair_orbits": rep.pair_orbits}
    return {"ok": True, "conjecture": {"lower": rep.lower, "params": params, "fitted": fitted_at is not None,
                                       "fitted_at": fitted_at, "fit": None, "report": facts, "domain_size": size,
                                       "time": time.perf_counter() - t0}}


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.=-]+", "_", text)[:80]


def _common(study: StudySpec, point: Point, out: dict) -> dict:
    exact = point.kind == EXACT_KIND
    own = exact or point.kind == CONJECTURE_KIND
    return dict(kind=point.kind, spec_key=point.spec_key, spec=point.spec, params=point.params,
                bound=None if exact else point.bound, study=study.name,
                solver=dict(point.request or {}) if own else solver_settings(study),
                versions=out.get("versions", {}), time_total=out.get("time_total"))


def _failed_row(point: Point, out: dict, common: dict) -> StoredRow:
    if out.get("invalid"):
        return make_row(point.run_key, status=_status.INVALID, message=str(out.get("error")), **common)
    return make_row(point.run_key, status=ERROR_STATUS, message="the computation raised an exception",
                    error=str(out.get("error", "unknown error")), **common)


def _record(store: Store, study: StudySpec, point: Point, out: dict, holder: LeaseHolder | None = None
            ) -> StoredRow:
    """Write the certificate (temp file, then rename) and then the row (one transaction, which also
    releases ``holder``'s lease on the point)."""
    common = _common(study, point, out)
    if point.kind == CONJECTURE_KIND and not out.get("invalid"):
        row = _conjecture_row(study, point, out, common)
    elif not out.get("ok"):
        row = _failed_row(point, out, common)
    elif point.kind == EXACT_KIND:
        row = _exact_row(point, out["exact"], common)
    else:
        row = _adversary_row(store, study, point, out, common)
    store.put(row, release=holder)
    return row


def _consistent(status: str, message, lower, upper):
    """A success status whose verified lower bound exceeds its verified upper bound is a contradiction."""
    if status in _status.SUCCESS and lower is not None and upper is not None and \
            lower > upper + BOUND_SLACK * max(1.0, abs(upper)):
        return _status.UNVERIFIED, f"verified lower {lower!r} exceeds verified upper {upper!r}"
    return status, message


def _adversary_row(store: Store, study: StudySpec, point: Point, out: dict, common: dict) -> StoredRow:
    from advbound.evidence.orbitcert import save_any_certificate
    res = out["result"]
    cert = out.get("certificate")
    cert_path = None
    if cert is not None:
        final = os.path.join(study.certificates, f"{_safe(point.label)}-{point.run_key[:12]}.npz")
        tmp = os.path.join(study.certificates, f".{point.run_key[:12]}.{os.getpid()}.tmp")
        try:
            os.makedirs(study.certificates, exist_ok=True)
            save_any_certificate(cert, tmp)
            os.replace(tmp, final)
        except OSError as err:
            raise AdvboundError(f"{final}: cannot write the certificate ({err.strerror or err})") from None
        cert_path = os.path.relpath(os.path.abspath(final), store.folder)
    solver = res.get("solver", {})
    values = {"relative_gap": res.get("relative_gap"), "success": res.get("success"),
              "solver_stats": solver}
    status, message = _consistent(res["status"], res.get("message"), _num(res.get("lower")), _num(res.get("upper")))
    return make_row(point.run_key, status=status, message=message, lower=res.get("lower"),
                    upper=res.get("upper"), objective=res.get("objective"), domain_size=res.get("domain_size"),
                    values=values, time_solve=solver.get("time"), certificate=cert_path, **common)


def _exact_row(point: Point, d: dict, common: dict) -> StoredRow:
    """The row of an exact point: lower/upper = verified achievable success / verified upper bound."""
    status, message = _consistent(d["status"], d.get("message"), _num(d.get("success_probability")),
                                  _num(d.get("upper_bound")))
    return make_row(point.run_key, status=status, message=message, lower=d.get("success_probability"),
                    upper=d.get("upper_bound"), objective=d.get("objective"), domain_size=d.get("domain_size"),
                    values=d, time_solve=(d.get("solver") or {}).get("time"), **common)


def _conjecture_row(study: StudySpec, point: Point, out: dict, common: dict) -> StoredRow:
    """The row of a conjecture point: ``lower`` = the certified bound, ``values`` = constants used and how."""
    cj = study.conjecture or {}
    base = {"callable": cj.get("callable"), "label": cj.get("label"), "fit_mode": (point.request or {}).get("fit")}
    size = out.get("domain_size")
    if not out.get("ok"):
        msg = _one_line_text(out.get("error", "unknown error"))
        return make_row(point.run_key, status=ERROR_STATUS, message=msg, error=msg, domain_size=size, values=base,
                        **common)
    if "skipped" in out:
        return make_row(point.run_key, status=SKIPPED, message=out["skipped"], domain_size=size, values=base,
                        **common)
    c = out["conjecture"]
    values = dict(base, params=c["params"], fitted=c["fitted"], fitted_at=c["fitted_at"], fit=c["fit"],
                  report=c["report"])
    return make_row(point.run_key, status=_status.OPTIMAL, message=f"conjecture {base['label']}: "
                    + str(c["report"].get("message", "")), lower=c["lower"], domain_size=c["domain_size"],
                    values=values, time_solve=c["time"], **common)


def _one_line_text(text) -> str:
    return " ".join(str(text).split()) or "unknown error"


def _num(v):
    try:
        return None if v is None else float(v)
    except (TypeError, ValueError):
        return None
