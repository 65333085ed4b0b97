"""Growth-law fits of a bound series L(T): least squares, uncertainties, model comparison, verdict.

This module owns the candidate laws, their least-squares fits (:func:`fit_model`,
:func:`fit_all`), the ratio diagnostics (:func:`ratio_trend`) and the model
comparison with its plain-language verdict (:func:`compare_models`).  It reads
numbers only; it never solves, stores or prints.

Candidate laws (``log`` is the natural logarithm; each also with an additive offset ``+ d``):

========== ==============================
name       law
========== ==============================
sqrt       c·√T
sqrt_log   c·√(T log T)
power      c·T^a
power_log  c·T^a·(log T)^b
========== ==============================

Typical call::

    cmp = compare_models(T, lower_bounds, laws=("sqrt", "sqrt_log", "power"), seed=0)
    cmp.verdict            # one paragraph of text
    cmp.best.params        # {'c': ...}

>>> import numpy as np
>>> T = np.arange(4.0, 13.0)
>>> r = fit_model(T, 1.5 * np.sqrt(T), "sqrt", bootstrap=0)
>>> round(r.params["c"], 12)
1.5
"""

from __future__ import annotations

import dataclasses
import math
from typing import Sequence

import numpy as np
from scipy import optimize as _opt
from scipy import stats as _stats

from advbound.errors import AdvboundError

__all__ = ["LAWS", "FitResult", "RatioTrend", "Comparison", "model_names", "fit_model", "fit_all",
           "ratio_trend", "effective_exponent", "compare_models", "evaluate"]

#: Base laws: name -> (formula, parameter names, needs T > 1).
LAWS = {
    "sqrt": ("c*sqrt(T)", ("c",), False),
    "sqrt_log": ("c*sqrt(T*log(T))", ("c",), True),
    "power": ("c*T^a", ("c", "a"), False),
    "power_log": ("c*T^a*log(T)^b", ("c", "a", "b"), True),
}

#: Convention for "the range can tell the laws apart": log(T_max)/log(T_min) at least this.
MIN_LOG_RANGE = 2.0
#: An information-criterion difference below this is "no real preference" (usual AIC reading).
DELTA_SMALL = 2.0


def _split(name: str) -> tuple[str, bool]:
    base, plus, rest = name.partition("+")
    if base not in LAWS or (plus and rest != "offset"):
        raise AdvboundError(f"fit: unknown model {name!r}; known: "
                            + ", ".join(model_names(tuple(LAWS), (False, True))))
    return base, bool(plus)


def model_names(laws: Sequence[str] = tuple(LAWS), offsets: Sequence[bool] = (False, True)) -> list[str]:
    """Model names for each law and offset choice, e.g. ``['sqrt', 'sqrt+offset']``.

    >>> model_names(["sqrt"], (False, True))
    ['sqrt', 'sqrt+offset']
    """
    out = []
    for law in laws:
        if law not in LAWS:
            raise AdvboundError(f"fit: unknown law {law!r}; known: {', '.join(LAWS)}")
        for off in offsets:
            out.append(law + ("+offset" if off else ""))
    return out


def _param_names(name: str) -> tuple[str, ...]:
    base, off = _split(name)
    return LAWS[base][1] + (("d",) if off else ())


def evaluate(name: str, params: dict | Sequence[float], T) -> np.ndarray:
    """Evaluate model ``name`` with ``params`` (dict or sequence in parameter order) at ``T``.

    >>> round(float(evaluate("sqrt_log+offset", {"c": 1.0, "d": 0.5}, np.e)), 12)   # sqrt(e) + 0.5
    2.1487212707
    """
    base, off = _split(name)
    names = _param_names(name)
    p = [params[k] for k in names] if isinstance(params, dict) else list(params)
    T = np.asarray(T, dtype=float)
    if base == "sqrt":
        y = p[0] * np.sqrt(T)
    elif base == "sqrt_log":
        y = p[0] * np.sqrt(T * np.log(T))
    elif base == "power":
        y = p[0] * T ** p[1]
    else:
        y = p[0] * T ** p[1] * np.log(T) ** p[2]
    return y + p[-1] if off else y


def _jacobian(name: str, p, T) -> np.ndarray:
    base, off = _split(name)
    if base == "sqrt":
        cols = [np.sqrt(T)]
    elif base == "sqrt_log":
        cols = [np.sqrt(T * np.log(T))]
    elif base == "power":
        g = T ** p[1]
        cols = [g, p[0] * g * np.log(T)]
    else:
        lg = np.log(T)
        g = T ** p[1] * lg ** p[2]
        cols = [g, p[0] * g * lg, p[0] * g * np.log(lg)]
    if off:
        cols.append(np.ones_like(T))
    return np.column_stack(cols)


def _initial(name: str, T, y) -> list[float]:
    base, off = _split(name)
    if base == "sqrt":
        p = [float(np.mean(y / np.sqrt(T)))]
    elif base == "sqrt_log":
        p = [float(np.mean(y / np.sqrt(T * np.log(T))))]
    else:
        pos = y > 0
        if pos.sum() >= 2:
            a, lc = np.polyfit(np.log(T[pos]), np.log(y[pos]), 1)
        else:
            a, lc = 0.5, 0.0
        p = [float(np.exp(lc)), float(a)] + ([0.0] if base == "power_log" else [])
    return p + ([0.0] if off else [])


@dataclasses.dataclass(frozen=True)
class FitResult:
    """One least-squares fit of one model to one series.

    Attributes
    ----------
    model, formula : str
        Model name (e.g. ``"sqrt_log+offset"``) and its formula.
    params, stderr : dict
        Fitted parameters and their standard errors from the Jacobian
        (``sqrt(diag((JᵀJ)⁻¹)·RSS/(n-p))``; NaN when ``n <= p``).
    intervals : dict
        Seeded residual-bootstrap 95 % percentile intervals per parameter (empty with ``bootstrap=0``).
    T, y, fitted, residuals : tuple of float
        The points used, the model values and ``y - fitted``.
    rss : float
        Residual sum of squares of the weighted residuals (see ``weighting`` of :func:`fit_model`).
    n, k : int
        Number of points and of estimated quantities (parameters plus the noise variance).
    aic, aicc, bic : float
        Gaussian-likelihood information criteria, ``n·log(RSS/n) + 2k`` etc.; ``aicc`` is
        ``inf`` when ``n <= k + 1`` (too few points for this model).
    success : bool
    message : str
    """

    model: str
    formula: str
    params: dict
    stderr: dict
    intervals: dict
    T: tuple
    y: tuple
    fitted: tuple
    residuals: tuple
    rss: float
    n: int
    k: int
    aic: float
    aicc: float
    bic: float
    success: bool
    message: str

    def to_dict(self) -> dict:
        """JSON-ready dict (infinities and NaN become ``None``)."""
        def clean(v):
            if isinstance(v, dict):
                return {k: clean(x) for k, x in v.items()}
            if isinstance(v, (list, tuple)):
                return [clean(x) for x in v]
            if isinstance(v, float) and not math.isfinite(v):
                return None
            return v
        return clean(dataclasses.asdict(self))


def _lsq(name, T, y, w, p0, max_nfev=4000):
    fun = lambda p: w * (evaluate(name, p, T) - y)  # noqa: E731
    jac = lambda p: w[:, None] * _jacobian(name, p, T)  # noqa: E731
    with np.errstate(all="ignore"):
        return _opt.least_squares(fun, p0, jac=jac, method="lm" if len(T) >= len(p0) else "trf",
                                  x_scale="jac", max_nfev=max_nfev)


def _points(T, y) -> tuple[np.ndarray, np.ndarray]:
    """``T`` and ``y`` as float arrays; every value must be a finite number."""
    out = []
    for label, v in (("T", T), ("y", y)):
        try:
            a = np.asarray(v, dtype=float)
        except (TypeError, ValueError):
            raise AdvboundError(f"fit: {label} holds a value that is not a number") from None
        bad = ~np.isfinite(a)
        if bad.any():
            i = int(np.flatnonzero(bad.ravel())[0])
            raise AdvboundError(f"fit: {label}[{i}] = {a.ravel()[i]} is not a finite number")
        out.append(a)
    return out[0], out[1]


def fit_model(T, y, name: str, *, bootstrap: int = 200, seed: int | None = 0,
              weighting: str = "relative") -> FitResult:
    """Fit model ``name`` to the points ``(T, y)`` by least squares.

    Parameters
    ----------
    T, y : array_like
        Growth variable and bound values (same length; ``T > 1`` for the laws with ``log T``).
    name : str
        A model name from :func:`model_names`.
    bootstrap : int
        Number of residual-bootstrap refits for the parameter intervals (0 to skip).
    seed : int or None
        Seed of the bootstrap's random generator.
    weighting : {"relative", "none"}
        ``"relative"`` (default) minimises ``Σ ((y - model)/y)²``: errors proportional to the value,
        as for solver tolerances and finite-size effects that scale with the bound; ``"none"`` is
        ordinary least squares.  ``rss`` and the criteria use the weighted residuals.

    Returns
    -------
    FitResult

    Raises
    ------
    AdvboundError
        Unknown model, mismatched lengths, ``T <= 1`` for a law with ``log T``, or ``y <= 0`` with
        relative weighting.
    """
    base, off = _split(name)
    T, y = _points(T, y)
    if T.shape != y.shape or T.ndim != 1:
        raise AdvboundError(f"fit: T and y must be 1-d of equal length, got {T.shape} and {y.shape}")
    if LAWS[base][2] and np.any(T <= 1):
        raise AdvboundError(f"fit: model {name!r} needs T > 1 (log T), got T = {T[T <= 1][0]:g}")
    if np.any(T <= 0):
        raise AdvboundError(f"fit: T must be positive, got T = {T[T <= 0][0]:g}")
    if weighting == "relative":
        if np.any(y <= 0):
            raise AdvboundError("fit: relative weighting needs positive values; use weighting='none'")
        w = 1.0 / y
    elif weighting == "none":
        w = np.ones_like(y)
    else:
        raise AdvboundError(f"fit: weighting {weighting!r}; expected 'relative' or 'none'")
    names = _param_names(name)
    p, n = len(names), len(T)
    k = p + 1
    formula = LAWS[base][0] + (" + d" if off else "")
    nan = {m: math.nan for m in names}
    if n < p:
        return FitResult(name, formula, nan, nan, {}, tuple(T), tuple(y), tuple([math.nan] * n),
                         tuple([math.nan] * n), math.nan, n, k, math.inf, math.inf, math.inf, False,
                         f"{n} points cannot determine {p} parameters")
    res = _lsq(name, T, y, w, _initial(name, T, y))
    fitted = evaluate(name, res.x, T)
    resid = y - fitted
    wres = w * resid
    rss = float(wres @ wres)
    scale = max(float(np.max(np.abs(w * y))), 1e-300) if n else 1.0
    rss_eff = max(rss, n * (1e-13 * scale) ** 2)  # guard log(0) for exact data
    if n > p:
        J = res.jac
        cov = np.linalg.pinv(J.T @ J) * (rss / (n - p))
        se = np.sqrt(np.clip(np.diag(cov), 0, None))
    else:
        se = np.full(p, math.nan)
    intervals = {}
    if bootstrap and n > p:
        rng = np.random.default_rng(seed)
        # weighted residuals, centred and inflated by sqrt(n/(n-p)) (leverage-free correction)
        centred = (wres - wres.mean()) * math.sqrt(n / (n - p))
        draws = []
        for _ in range(int(bootstrap)):
            yb = fitted + rng.choice(centred, size=n, replace=True) / w
            rb = _lsq(name, T, yb, w, res.x, max_nfev=30 * p)
            if rb.success or rb.status > 0:
                draws.append(rb.x)
        if draws:
            draws = np.array(draws)
            lo, hi = np.percentile(draws, [2.5, 97.5], axis=0)
            intervals = {m: (float(a), float(b)) for m, a, b in zip(names, lo, hi)}
    loglik_term = n * math.log(rss_eff / n) if n else math.nan
    aic = loglik_term + 2 * k
    aicc = aic + (2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else math.inf)
    bic = loglik_term + k * math.log(n) if n else math.nan
    ok = bool(res.success or res.status > 0)
    return FitResult(
        model=name, formula=formula,
        params={m: float(v) for m, v in zip(names, res.x)},
        stderr={m: float(v) for m, v in zip(names, se)},
        intervals=intervals, T=tuple(map(float, T)), y=tuple(map(float, y)),
        fitted=tuple(map(float, fitted)), residuals=tuple(map(float, resid)), rss=rss, n=n, k=k,
        aic=float(aic), aicc=float(aicc), bic=float(bic), success=ok,
        message=str(res.message) if ok else f"least squares did not converge: {res.message}",
    )


def fit_all(T, y, laws: Sequence[str] = tuple(LAWS), offsets: Sequence[bool] = (False, True), *,
            bootstrap: int = 200, seed: int | None = 0, weighting: str = "relative") -> list[FitResult]:
    """Fit every model of :func:`model_names` ``(laws, offsets)``; same arguments as :func:`fit_model`."""
    return [fit_model(T, y, m, bootstrap=bootstrap, seed=seed, weighting=weighting)
            for m in model_names(laws, offsets)]


@dataclasses.dataclass(frozen=True)
class RatioTrend:
    """The ratio ``L/g(T)`` for ``g = √T`` or ``√(T log T)`` and its straight-line trend in ``log T``.

    ``slope`` is the least-squares slope of the ratio against ``log T`` with its standard error and a
    two-sided 95 % Student-t interval (NaN with fewer than 3 points).  Under ``L = c·g(T)`` the
    slope is zero.
    """

    against: str
    T: tuple
    ratio: tuple
    slope: float
    stderr: float
    interval: tuple

    @property
    def flat(self) -> bool:
        """True when the 95 % interval of the slope contains 0."""
        lo, hi = self.interval
        return bool(lo <= 0 <= hi) if math.isfinite(lo) else True

    def to_dict(self) -> dict:
        """JSON-ready dict."""
        d = dataclasses.asdict(self)
        d["interval"] = [None if not math.isfinite(v) else v for v in self.interval]
        for key in ("slope", "stderr"):
            if not math.isfinite(d[key]):
                d[key] = None
        d["flat"] = self.flat
        return d


def ratio_trend(T, y, against: str = "sqrt") -> RatioTrend:
    """Ratio of ``y`` to ``√T`` (``against="sqrt"``) or ``√(T log T)`` (``"sqrt_log"``) and its trend.

    >>> T = np.array([4.0, 8, 16, 32])
    >>> rt = ratio_trend(T, 2 * np.sqrt(T * np.log(T)), "sqrt_log")
    >>> [round(v, 12) for v in rt.ratio], abs(rt.slope) < 1e-12
    ([2.0, 2.0, 2.0, 2.0], True)
    """
    T = np.asarray(T, dtype=float)
    y = np.asarray(y, dtype=float)
    if against == "sqrt":
        g = np.sqrt(T)
    elif against == "sqrt_log":
        if np.any(T <= 1):
            raise AdvboundError("fit: the ratio to sqrt(T log T) needs T > 1")
        g = np.sqrt(T * np.log(T))
    else:
        raise AdvboundError(f"fit: ratio against {against!r}; expected 'sqrt' or 'sqrt_log'")
    r = y / g
    x = np.log(T)
    n = len(T)
    if n >= 3 and np.ptp(x) > 0:
        fit = _stats.linregress(x, r)
        slope, se = float(fit.slope), float(fit.stderr)
        q = float(_stats.t.ppf(0.975, n - 2))
        iv = (slope - q * se, slope + q * se)
    else:
        slope, se, iv = math.nan, math.nan, (math.nan, math.nan)
    return RatioTrend(against, tuple(map(float, T)), tuple(map(float, r)), slope, se, iv)


def effective_exponent(T, weighting: str = "relative") -> float:
    """The exponent ``a`` of the least-squares fit of ``c·T^a`` to ``√(T log T)`` at the points ``T``:
    the power a fit of the ``power`` law finds when the data follow ``√(T log T)`` exactly
    (locally ``1/2 + 1/(2 log T)``).

    >>> round(effective_exponent([1e6, 1e6 * 1.0001]), 3)   # 1/2 + 1/(2 log 10^6) = 0.536
    0.536
    """
    T = np.asarray(T, dtype=float)
    if np.any(T <= 1) or len(T) < 2:
        raise AdvboundError("fit: the effective exponent needs at least 2 points, all T > 1")
    return float(fit_model(T, np.sqrt(T * np.log(T)), "power", bootstrap=0, weighting=weighting).params["a"])


@dataclasses.dataclass(frozen=True)
class Comparison:
    """Ranking of the fitted models and the verdict about √T versus √(T log T).

    Attributes
    ----------
    fits : tuple of FitResult
        Ranked: best first by ``criterion``; models with too few points for it last.
    criterion : str
        ``"AICc"`` or ``"AIC"`` (AIC when fewer than two models have a finite AICc).
    weights : dict
        Akaike weights (from ``criterion``) of the ranked models; 0 for a failed fit; ``None`` for a
        law with too few points: one that leaves fewer than :data:`MIN_DOF` degrees of freedom
        (points minus parameters) is fitted and shown but never ranked or weighted.
    ratios : dict
        ``{"sqrt": RatioTrend, "sqrt_log": RatioTrend}``.
    exponent : tuple
        ``(a, lo, hi)`` of the power-law fit (bootstrap interval, else ±1.96 s.e.), or NaNs.
    exponent_sqrt_log : float
        :func:`effective_exponent` of ``√(T log T)`` over the range.
    log_range : float
        ``log(T_max) / log(T_min)``.
    preference : str
        ``"sqrt"``, ``"sqrt_log"``, ``"indistinguishable"`` or ``"neither"``.
    verdict : str
        Plain-language paragraph explaining the preference and its limits.
    """

    fits: tuple
    criterion: str
    weights: dict
    ratios: dict
    exponent: tuple
    exponent_sqrt_log: float
    log_range: float
    preference: str
    verdict: str

    @property
    def best(self) -> FitResult | None:
        """The top-ranked fit, or ``None`` when no law could be ranked (too few points for every one)."""
        top = self.fits[0] if self.fits else None
        return top if top is not None and self.weights.get(top.model) is not None else None

    def too_few(self, model: str) -> bool:
        """True when ``model`` has too few points to be ranked (fewer than 2 degrees of freedom left)."""
        return self.weights.get(model, 0.0) is None

    def fit(self, model: str) -> FitResult | None:
        """The fit of ``model``, or ``None`` if it was not fitted."""
        return next((f for f in self.fits if f.model == model), None)

    def to_dict(self) -> dict:
        """JSON-ready dict."""
        def fin(v):
            return v if isinstance(v, float) and math.isfinite(v) else None
        return {
            "criterion": self.criterion, "weights": self.weights,
            "ranking": [f.model for f in self.fits if self.weights.get(f.model) is not None],
            "too_few_points": [f.model for f in self.fits if self.weights.get(f.model) is None],
            "fits": [f.to_dict() for f in self.fits],
            "ratios": {k: v.to_dict() for k, v in self.ratios.items()},
            "exponent": [fin(v) for v in self.exponent], "exponent_sqrt_log": fin(self.exponent_sqrt_log),
            "log_range": fin(self.log_range), "preference": self.preference, "verdict": self.verdict,
        }


#: The closing sentence of every verdict (a report states it once for all series).
CAVEAT = ("The residuals of deterministic solver output measure misfit, not random noise, so the "
          "criteria are a rough guide; a fit is evidence about growth on this range, not a proof.")

#: A law is ranked only when it leaves at least this many degrees of freedom (points − parameters):
#: with fewer, a law can pass through (nearly) every point and its criterion means nothing.
MIN_DOF = 2


def _ic(f: FitResult, crit: str) -> float:
    return f.aicc if crit == "AICc" else f.aic


def compare_models(T, y, laws: Sequence[str] = ("sqrt", "sqrt_log", "power", "power_log"),
                   offsets: Sequence[bool] = (False, True), *, bootstrap: int = 200,
                   seed: int | None = 0, weighting: str = "relative", variable: str = "T") -> Comparison:
    """Fit the candidate laws to ``(T, y)``, rank them and say whether √T or √(T log T) is preferred.

    Parameters
    ----------
    T, y : array_like
        Growth variable (all ``> 1``) and the verified lower bounds.
    laws, offsets : sequence
        Which laws and offset choices to fit (``sqrt`` and ``sqrt_log`` are always added).
    bootstrap, seed, weighting
        Passed to :func:`fit_model`.
    variable : str
        Name of the growth variable in the verdict text.

    Returns
    -------
    Comparison

    Notes
    -----
    The preference is ``"sqrt"`` or ``"sqrt_log"`` only when all of these hold:

    * the range is wide enough in the logarithm: ``log T_max / log T_min >= 2`` (a convention of
      this package, not a theorem; over a narrow range √(log T) is nearly constant and an
      additive lower-order term imitates it);
    * the same law wins by at least 2 in the information criterion both without and with an
      additive offset (a difference below 2 is the usual reading of "no real preference"); when
      an offset comparison was asked for but cannot be made (too few points for its criterion),
      there is no preference.

    It is ``"neither"`` (checked first) when the range is wide, both laws lose clearly (by more than 10) to the free power law and
    the power-law exponent interval excludes both 1/2 and the effective exponent of
    √(T log T); otherwise ``"indistinguishable"``.  The data are usually deterministic solver
    output, so residuals measure model misfit and solver accuracy, not random noise; the
    criteria are then a rough guide.  A fit is evidence about growth on the fitted range, never
    a proof about larger T.
    """
    T, y = _points(T, y)
    if T.shape != y.shape or T.ndim != 1:
        raise AdvboundError(f"fit: T and y must be 1-d of equal length, got {T.shape} and {y.shape}")
    order = np.argsort(T)
    T, y = T[order], y[order]
    if len(T) < 2:
        raise AdvboundError(f"fit: need at least 2 points, got {len(T)}")
    if np.any(T <= 1):
        raise AdvboundError(f"fit: the growth variable must exceed 1 for log T, got {T.min():g}")
    laws = list(dict.fromkeys(["sqrt", "sqrt_log", *laws]))
    fits = fit_all(T, y, laws, offsets, bootstrap=bootstrap, seed=seed, weighting=weighting)
    few = [f for f in fits if len(T) - len(f.params) < MIN_DOF]
    finite_aicc = [f for f in fits if f.success and math.isfinite(f.aicc) and f not in few]
    crit = "AICc" if len(finite_aicc) >= 2 else "AIC"
    rankable = [f for f in fits if f.success and math.isfinite(_ic(f, crit)) and f not in few]
    rankable.sort(key=lambda f: _ic(f, crit))
    rest = [f for f in fits if f not in rankable]
    weights = {f.model: (None if f in few else 0.0) for f in fits}
    if rankable:
        best_ic = _ic(rankable[0], crit)
        w = np.array([math.exp(-0.5 * (_ic(f, crit) - best_ic)) for f in rankable])
        w /= w.sum()
        weights.update({f.model: float(v) for f, v in zip(rankable, w)})
    ranked = tuple(rankable + rest)
    by = {f.model: f for f in fits}

    ratios = {"sqrt": ratio_trend(T, y, "sqrt"), "sqrt_log": ratio_trend(T, y, "sqrt_log")}
    a_eff = effective_exponent(T, weighting)
    pw = by.get("power")
    if pw is not None and pw.success:
        a = pw.params["a"]
        if "a" in pw.intervals:
            lo, hi = pw.intervals["a"]
        elif math.isfinite(pw.stderr["a"]):
            lo, hi = a - 1.96 * pw.stderr["a"], a + 1.96 * pw.stderr["a"]
        else:
            lo, hi = math.nan, math.nan
        exponent = (a, lo, hi)
    else:
        exponent = (math.nan, math.nan, math.nan)
    log_range = float(math.log(T[-1]) / math.log(T[0]))

    # pairwise differences  IC(sqrt_log) - IC(sqrt): positive favours sqrt
    deltas = {}
    for off in offsets:
        sfx = "+offset" if off else ""
        a_, b_ = by.get("sqrt" + sfx), by.get("sqrt_log" + sfx)
        if (a_ and b_ and a_ in rankable and b_ in rankable and math.isfinite(_ic(a_, crit))
                and math.isfinite(_ic(b_, crit))):
            deltas[bool(off)] = _ic(b_, crit) - _ic(a_, crit)
    wide = log_range >= MIN_LOG_RANGE
    signs = {("sqrt" if d > 0 else "sqrt_log") for d in deltas.values()}
    missing = [off for off in dict.fromkeys(bool(o) for o in offsets) if off not in deltas]
    clear = (bool(deltas) and not missing and all(abs(d) >= DELTA_SMALL for d in deltas.values())
             and len(signs) == 1)
    neither = False
    if pw is not None and pw in rankable and math.isfinite(exponent[1]):
        lo, hi = exponent[1], exponent[2]
        excl = not (lo <= 0.5 <= hi) and not (lo <= a_eff <= hi)
        beaten = all(_ic(by[m], crit) - _ic(pw, crit) > 10 for m in ("sqrt", "sqrt_log")
                     if m in by and math.isfinite(_ic(by[m], crit))) and math.isfinite(_ic(pw, crit))
        neither = excl and beaten
    if wide and neither:
        preference = "neither"
    elif wide and clear:
        preference = signs.pop()
    else:
        preference = "indistinguishable"

    verdict = _verdict(T, preference, deltas, missing, crit, exponent, a_eff, log_range, ratios, ranked,
                       weights, variable)
    return Comparison(ranked, crit, weights, ratios, exponent, a_eff, log_range, preference, verdict)


def _fmt_iv(iv) -> str:
    lo, hi = iv
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return "[n/a]"
    return f"[{lo:.3g}, {hi:.3g}]"


def _verdict(T, preference, deltas, missing, crit, exponent, a_eff, log_range, ratios, ranked, weights,
             v="T") -> str:
    t0, t1 = T[0], T[-1]
    grow = math.sqrt(math.log(t1) / math.log(t0))
    parts = [f"Over {v} in [{t0:g}, {t1:g}] ({len(T)} points) log {v} runs from {math.log(t0):.3g} to "
             f"{math.log(t1):.3g}, so the factor sqrt(log T) separating the two laws changes by "
             f"a factor {grow:.3g} across the whole range."]
    if ranked and weights.get(ranked[0].model) is not None:
        top = ranked[0]
        parts.append(f"Best by {crit}: {top.model} (Akaike weight {weights.get(top.model, 0):.2f}).")
    few = [f.model for f in ranked if weights.get(f.model) is None]
    if few:
        parts.append(f"Too few points for {', '.join(few)}: {len(T)} points leave fewer than {MIN_DOF} degrees of "
                     f"freedom, so they are not ranked.")
    for off, d in sorted(deltas.items()):
        label = "with an additive offset" if off else "without offset"
        who = "sqrt(T)" if d > 0 else "sqrt(T log T)"
        strength = "no real preference" if abs(d) < DELTA_SMALL else f"favours {who}"
        parts.append(f"{crit}(sqrt(T log T)) - {crit}(sqrt(T)) {label}: {d:+.3g} ({strength}).")
    for off in missing:
        label = "with an additive offset" if off else "without offset"
        parts.append(f"{label.capitalize()} the two laws cannot be compared: {len(T)} points are too few "
                     f"for {crit}.")
    a, lo, hi = exponent
    if math.isfinite(a):
        inside = [name for name, v in (("1/2", 0.5), (f"{a_eff:.3g} (the exponent sqrt(T log T) mimics here)", a_eff))
                  if math.isfinite(lo) and lo <= v <= hi]
        parts.append(f"Free power law: exponent a = {a:.3g}, 95% interval {_fmt_iv((lo, hi))}, containing "
                     + (" and ".join(inside) if inside else "neither 1/2 (the exponent of sqrt(T)) nor "
                        + f"{a_eff:.3g} (the effective exponent of sqrt(T log T) over this range: the slope "
                          f"of log sqrt(T log T) against log T)") + ".")
    rs, rl = ratios["sqrt"], ratios["sqrt_log"]
    if math.isfinite(rs.slope):
        parts.append(f"Trend in log T of L/sqrt(T): slope {rs.slope:.3g} {_fmt_iv(rs.interval)}; "
                     f"of L/sqrt(T log T): slope {rl.slope:.3g} {_fmt_iv(rl.interval)} "
                     "(zero slope is what the matching law predicts).")
    if preference == "sqrt":
        parts.append("Verdict: the data prefer c*sqrt(T) over c*sqrt(T log T) on this range.")
    elif preference == "sqrt_log":
        parts.append("Verdict: the data prefer c*sqrt(T log T) over c*sqrt(T) on this range.")
    elif preference == "neither":
        parts.append("Verdict: neither sqrt(T) nor sqrt(T log T) describes the data; a power law with "
                     "another exponent fits clearly better.")
    else:
        if log_range < MIN_LOG_RANGE:
            reason = f"the range is too narrow (log T_max / log T_min = {log_range:.3g} < {MIN_LOG_RANGE:g})"
        elif missing:
            reason = "there are too few points to compare the laws both with and without an offset"
        else:
            reason = "the criteria do not agree on a clear winner"
        parts.append(f"Verdict: this range cannot tell sqrt(T) from sqrt(T log T) apart, because {reason}; "
                     "a lower-order term (such as an offset) can imitate the slowly varying log factor.")
    parts.append(CAVEAT)
    return " ".join(parts)
