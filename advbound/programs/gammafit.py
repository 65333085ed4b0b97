"""Free constants in a researcher's own adversary matrix: choose them to maximise the certified bound.

A callable ``gamma(x, y, **params)`` with a few real constants (a weight on some pairs, an
exponent, ...) defines a family of adversary matrices.  :func:`fit_gamma_params` searches
that family for the constants whose *certified* ratio ``||Γ|| / max_j ||Γ∘Δ_j||/c_j``
(:func:`advbound.evidence.usergamma.evaluate_gamma`, ``certified_ratio``) is largest.  Every
evaluation goes through :func:`~advbound.evidence.gammainput.gamma_from_callable` and
``evaluate_gamma``, so what is maximised is exactly what the normal evaluation reports.

The objective is a maximum over positions of spectral norms: continuous but not smooth
(it has kinks wherever the binding position or the top eigenvalue changes, and the optimum
typically sits on such a kink).  Gradients are therefore unreliable and a derivative-free
method from :mod:`scipy.optimize` is used: Nelder–Mead (the default; a simplex method that
only compares objective values, so kinks do not mislead it) or Powell (line searches along
coordinate directions, also derivative-free).  Several starts guard against local maxima:
the given start, then ``starts - 1`` deterministic perturbations
``x0 + spread · max(|x0|, 1) · z`` with ``z`` standard normal from
``numpy.random.default_rng(random_state)``.  All starts share one budget of
``max_evaluations`` evaluations of Γ (the start value's own evaluation included); the best
point seen is returned.

The optimiser's number is not the bound: callers recompute the bound at
:attr:`FitResult.params` by the normal evaluation path (``advbound gamma --fit`` does).
Parameter files (:func:`read_params_file`, :func:`write_params_file`) are JSON objects
``{"name": number, ...}``, so fitted constants can be reused at another instance size.

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [("000", 0), ("001", 1), ("010", 1), ("100", 1)])
>>> def g(x, y, b=1.0):    # star of OR_3: weight 1 on the first input, b on the others
...     w = {"100": 1.0, "010": b, "001": b}
...     return w.get(y, 0.0) if x == "000" else w.get(x, 0.0) if y == "000" else 0.0
>>> res = fit_gamma_params(f, g, {"b": 0.2})
>>> round(res.start_lower, 6), round(res.best_lower, 4), round(res.params["b"], 3)
(1.03923, 1.7321, 1.0)
"""

from __future__ import annotations

import dataclasses
import json
import math
import os

import numpy as np

from advbound.evidence.gammainput import GammaError, check_params, gamma_from_callable
from advbound.evidence.usergamma import evaluate_gamma

__all__ = ["FitResult", "FIT_METHODS", "fit_gamma_params", "read_params_file", "write_params_file"]

#: Derivative-free methods offered, by the name the command line uses, with scipy's name.
FIT_METHODS = {"nelder-mead": "Nelder-Mead", "powell": "Powell"}
#: Largest parameter file read (bytes); a parameter file holds a handful of numbers.
_MAX_FILE = 1 << 20


@dataclasses.dataclass(frozen=True)
class FitResult:
    """Outcome of :func:`fit_gamma_params`.

    Attributes
    ----------
    params : dict
        The fitted constants (the best point seen), ``{name: float}``.
    start : dict
        The start values given.
    start_lower : float
        The certified ratio at ``start``.
    best_lower : float
        The optimiser's best certified ratio (at ``params``); recompute it at ``params`` before
        reporting it as a bound.
    evaluations : int
        Evaluations of Γ done, the start's included (at most ``max_evaluations``).
    failed_evaluations : int
        Points where the callable raised or returned unusable values (counted as no bound).
    method : str
        scipy's name of the method (``"Nelder-Mead"`` or ``"Powell"``).
    starts : tuple of dict
        The start points used, the given one first.
    random_state : int
    max_evaluations : int
    """

    params: dict
    start: dict
    start_lower: float
    best_lower: float
    evaluations: int
    failed_evaluations: int
    method: str
    starts: tuple
    random_state: int
    max_evaluations: int

    def to_dict(self) -> dict:
        """Python scalars only (JSON-ready)."""
        d = dataclasses.asdict(self)
        d["starts"] = [dict(s) for s in self.starts]
        return d


class _OutOfBudget(Exception):
    """The shared evaluation budget is used up (caught inside :func:`fit_gamma_params`)."""


def _check_options(method, starts, max_evaluations, spread):
    if method not in FIT_METHODS:
        raise GammaError(f"fit method must be one of {', '.join(FIT_METHODS)}, got {method!r}")
    if isinstance(starts, bool) or not isinstance(starts, int) or starts < 1:
        raise GammaError(f"the number of starts must be a positive integer, got {starts!r}")
    if isinstance(max_evaluations, bool) or not isinstance(max_evaluations, int) or max_evaluations < 1:
        raise GammaError(f"the number of evaluations must be a positive integer, got {max_evaluations!r}")
    if not (isinstance(spread, int | float) and math.isfinite(spread) and spread >= 0):
        raise GammaError(f"the spread of the perturbed starts must be a finite number >= 0, got {spread!r}")


def fit_gamma_params(f, func, start: dict, *, method: str = "nelder-mead", starts: int = 4,
                     random_state: int = 0, max_evaluations: int = 300, spread: float = 0.5,
                     name: str | None = None, allow_large: bool = False, vectorised: bool = False) -> FitResult:
    """Choose the constants of ``func(x, y, **params)`` maximising the certified bound for ``f``.

    Parameters
    ----------
    f : PartialFunction
    func : callable
        ``func(x, y, **params) -> float``.
    start : dict
        ``{name: start value}``; at least one constant.
    method : "nelder-mead" or "powell"
        The derivative-free method of :func:`scipy.optimize.minimize`.
    starts : int
        Number of starts: the given one and ``starts - 1`` perturbations of it.
    random_state : int
        Fixes the perturbations (the same value gives the same starts).
    max_evaluations : int
        Evaluations of Γ in all, shared by the starts; the start's evaluation is the first.
    spread : float
        Relative size of the perturbations (see the module docstring).
    name : str, optional
        How messages name the callable.
    allow_large, vectorised : bool
        Passed to :func:`~advbound.evidence.gammainput.gamma_from_callable`.

    Raises
    ------
    GammaError
        For bad options, unusable start values or constants ``func`` does not accept, and
        when the callable fails *at the start* (failures at other points only count as no bound).
    """
    from scipy.optimize import minimize

    _check_options(method, starts, max_evaluations, spread)
    start = check_params(func, start, name=name)
    if not start:
        raise GammaError("fitting needs at least one free constant (give --param NAME=VALUE or --params-file)")
    names = list(start)
    x0 = np.array([start[k] for k in names])
    state = {"count": 0, "failed": 0, "best": -math.inf, "best_x": x0.copy()}

    def lower_at(x, *, at_start=False):
        if state["count"] >= max_evaluations:
            raise _OutOfBudget
        state["count"] += 1
        params = dict(zip(names, (float(v) for v in x)))
        try:
            value = evaluate_gamma(f, gamma_from_callable(f, func, name=name, allow_large=allow_large,
                                                          params=params, vectorised=vectorised)).certified_ratio
        except GammaError:
            if at_start:
                raise
            state["failed"] += 1
            return -math.inf
        if value > state["best"]:
            state["best"], state["best_x"] = value, np.array(x, dtype=float)
        return value

    start_lower = lower_at(x0, at_start=True)
    rng = np.random.default_rng(random_state)
    points = [x0] + [x0 + spread * np.maximum(np.abs(x0), 1.0) * rng.standard_normal(len(x0))
                     for _ in range(starts - 1)]
    for i, p in enumerate(points):
        left = max_evaluations - state["count"]
        share = left // (len(points) - i)
        if share < 1:
            break
        opts = {"maxfev": share, "xatol": 1e-9, "fatol": 1e-12} if method == "nelder-mead" else \
            {"maxfev": share, "xtol": 1e-9, "ftol": 1e-12}
        if method == "nelder-mead":
            step = 0.25 * np.maximum(np.abs(p), 1.0)
            opts["initial_simplex"] = np.vstack([p] + [p + step[k] * np.eye(len(p))[k] for k in range(len(p))])
        try:
            minimize(lambda x: -lower_at(x), p, method=FIT_METHODS[method], options=opts)
        except _OutOfBudget:
            break
    params = dict(zip(names, (float(v) for v in state["best_x"])))
    return FitResult(params=params, start=dict(start), start_lower=float(start_lower),
                     best_lower=float(state["best"]), evaluations=state["count"],
                     failed_evaluations=state["failed"], method=FIT_METHODS[method],
                     starts=tuple(dict(zip(names, (float(v) for v in p))) for p in points),
                     random_state=int(random_state), max_evaluations=max_evaluations)


def _no_duplicates(path):
    def hook(pairs):
        seen = set()
        for k, _ in pairs:
            if k in seen:
                raise GammaError(f"{path}: parameter {k!r} appears twice")
            seen.add(k)
        return dict(pairs)
    return hook


def read_params_file(path, func=None, *, name: str | None = None) -> dict:
    """Read ``{"name": number, ...}`` from the JSON file ``path``; with ``func``, check it accepts them.

    Raises
    ------
    GammaError
        One line naming the file for a missing or unreadable file, text that is not JSON, JSON
        that is not an object, a repeated name, a name that is not an identifier, a value that is
        not a finite number, or (with ``func``) a name the callable does not accept.
    """
    p = os.fspath(path)
    if os.path.isdir(p):
        raise GammaError(f"--params-file {p}: is a folder, not a JSON file")
    try:
        with open(p, "rb") as fh:
            raw = fh.read(_MAX_FILE + 1)
    except FileNotFoundError:
        raise GammaError(f"--params-file {p}: no such file") from None
    except OSError as err:
        raise GammaError(f"--params-file {p}: cannot be read ({err.strerror or err})") from None
    if len(raw) > _MAX_FILE:
        raise GammaError(f"--params-file {p}: larger than {_MAX_FILE} bytes; a parameter file is a small JSON object")
    try:
        data = json.loads(raw.decode("utf-8-sig"), object_pairs_hook=_no_duplicates(f"--params-file {p}"))
    except UnicodeDecodeError:
        raise GammaError(f"--params-file {p}: not UTF-8 text") from None
    except json.JSONDecodeError as err:
        raise GammaError(f"--params-file {p}: not JSON ({err.msg} at line {err.lineno}, column {err.colno})") \
            from None
    except RecursionError:
        raise GammaError(f"--params-file {p}: nested too deeply; expected an object of numbers") from None
    if not isinstance(data, dict):
        raise GammaError(f"--params-file {p}: expected a JSON object {{\"name\": number, ...}}, "
                         f"got {type(data).__name__ if data is not None else 'null'}")
    try:
        if func is None:
            return check_params(lambda x, y, **kw: 0.0, data)
        return check_params(func, data, name=name)
    except GammaError as err:
        raise GammaError(f"--params-file {p}: {err}") from None


def write_params_file(path, params: dict) -> None:
    """Write ``params`` as a JSON object (values as exact float reprs, names in the order given)."""
    with open(os.fspath(path), "w", encoding="utf-8") as fh:
        json.dump({str(k): float(v) for k, v in params.items()}, fh, indent=1)
        fh.write("\n")
