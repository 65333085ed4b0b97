"""Tests for advbound.studies.fit: recovery of known synthetic laws, uncertainties, criteria, the verdict."""

import math

import numpy as np
import pytest

from advbound.errors import AdvboundError
from advbound.studies.fit import (compare_models, effective_exponent, evaluate, fit_model, model_names,
                                  ratio_trend)

WIDE = np.geomspace(10, 1e4, 20)
NARROW = np.arange(4.0, 13.0)


def _noisy(f, T, rel, seed):
    rng = np.random.default_rng(seed)
    return f(T) * (1 + rel * rng.standard_normal(len(T)))


def test_exact_power_law_recovered():
    """c·T^a with c = 0.7, a = 0.6 (chosen here) is recovered exactly from noise-free data."""
    T = np.arange(2.0, 20.0)
    r = fit_model(T, 0.7 * T ** 0.6, "power", bootstrap=0)
    assert r.params["c"] == pytest.approx(0.7, rel=1e-9)
    assert r.params["a"] == pytest.approx(0.6, rel=1e-9)
    assert max(abs(v) for v in r.residuals) < 1e-9


def test_offset_recovered():
    """c·√(T log T) + d with c = 1.2, d = -0.4 (chosen here) is recovered from noise-free data."""
    T = np.arange(3.0, 30.0)
    r = fit_model(T, evaluate("sqrt_log+offset", {"c": 1.2, "d": -0.4}, T), "sqrt_log+offset", bootstrap=0)
    assert (r.params["c"], r.params["d"]) == pytest.approx((1.2, -0.4), abs=1e-8)


def test_stderr_matches_linear_regression():
    """For c·√T (linear in c) the Jacobian s.e. equals the textbook one sqrt(s²/Σx²), x = √T (derived)."""
    T = np.arange(4.0, 15.0)
    y = _noisy(lambda t: 2 * np.sqrt(t), T, 0.02, 3)
    r = fit_model(T, y, "sqrt", bootstrap=0, weighting="none")
    x = np.sqrt(T)
    c = (x @ y) / (x @ x)
    s2 = np.sum((y - c * x) ** 2) / (len(T) - 1)
    assert r.params["c"] == pytest.approx(c, rel=1e-10)
    assert r.stderr["c"] == pytest.approx(math.sqrt(s2 / (x @ x)), rel=1e-8)


def test_relative_weighting_rss():
    """With relative weighting rss = Σ ((y - fitted)/y)² (the definition in fit_model's docstring)."""
    y = _noisy(lambda t: np.sqrt(t), NARROW, 0.05, 2)
    r = fit_model(NARROW, y, "sqrt", bootstrap=0)
    assert r.rss == pytest.approx(sum((e / v) ** 2 for e, v in zip(r.residuals, y)))


def test_bootstrap_is_seeded_and_covers_truth():
    """Equal seeds give equal bootstrap intervals, and the interval of a covers the true 0.5."""
    y = _noisy(lambda t: 1.1 * np.sqrt(t), WIDE, 0.01, 5)
    a = fit_model(WIDE, y, "power", bootstrap=60, seed=11)
    b = fit_model(WIDE, y, "power", bootstrap=60, seed=11)
    assert a.intervals == b.intervals
    lo, hi = a.intervals["a"]
    assert lo < 0.5 < hi


def test_information_criteria_formula():
    """AIC = n log(RSS/n) + 2k, AICc adds 2k(k+1)/(n-k-1), BIC = n log(RSS/n) + k log n (standard)."""
    y = _noisy(lambda t: np.sqrt(t), NARROW, 0.05, 2)
    r = fit_model(NARROW, y, "sqrt+offset", bootstrap=0, weighting="none")
    assert r.rss == pytest.approx(sum(v * v for v in r.residuals))
    n, k = 9, 3
    base = n * math.log(r.rss / n)
    assert r.aic == pytest.approx(base + 2 * k)
    assert r.aicc == pytest.approx(base + 2 * k + 2 * k * (k + 1) / (n - k - 1))
    assert r.bic == pytest.approx(base + k * math.log(n))


def test_too_few_points_for_aicc():
    """With n = 5 points a 4-parameter model (k = 5) has infinite AICc (n - k - 1 < 0)."""
    T = np.arange(4.0, 9.0)
    r = fit_model(T, np.sqrt(T), "power_log+offset", bootstrap=0)
    assert math.isinf(r.aicc)


def test_prefers_sqrt_log_over_wide_range():
    """L = 1.3·√(T log T) with 0.5% noise over T = 10..10^4: the verdict prefers √(T log T)."""
    y = _noisy(lambda t: 1.3 * np.sqrt(t * np.log(t)), WIDE, 0.005, 1)
    cmp = compare_models(WIDE, y, bootstrap=40, seed=0)
    assert cmp.preference == "sqrt_log"
    assert cmp.ratios["sqrt_log"].flat and not cmp.ratios["sqrt"].flat
    assert "prefer c*sqrt(T log T)" in cmp.verdict


def test_prefers_sqrt_over_wide_range():
    """L = 1.3·√T with 0.5% noise over T = 10..10^4: the verdict prefers √T, exponent interval holds 1/2."""
    y = _noisy(lambda t: 1.3 * np.sqrt(t), WIDE, 0.005, 1)
    cmp = compare_models(WIDE, y, bootstrap=40, seed=0)
    assert cmp.preference == "sqrt"
    a, lo, hi = cmp.exponent
    assert lo <= 0.5 <= hi
    assert cmp.ratios["sqrt"].flat


def test_narrow_range_cannot_tell_apart():
    """L = 1.3·√(T log T) with 1% noise over T = 4..12: the verdict says the range cannot tell them apart."""
    y = _noisy(lambda t: 1.3 * np.sqrt(t * np.log(t)), NARROW, 0.01, 4)
    cmp = compare_models(NARROW, y, laws=("sqrt", "sqrt_log", "power"), bootstrap=40, seed=0)
    assert cmp.preference == "indistinguishable"
    assert "cannot tell" in cmp.verdict
    assert "1.34" in cmp.verdict  # sqrt(log 12 / log 4) = 1.339 (derived)


def test_other_exponent_is_neither():
    """L = T^0.8 over T = 10..10^4 (0.5% noise): neither law; the fitted exponent is 0.8 +- 0.01."""
    y = _noisy(lambda t: t ** 0.8, WIDE, 0.005, 7)
    cmp = compare_models(WIDE, y, laws=("sqrt", "sqrt_log", "power"), bootstrap=40, seed=0)
    assert cmp.preference == "neither"
    assert cmp.exponent[0] == pytest.approx(0.8, abs=0.01)


def test_akaike_weights_sum_to_one():
    """Akaike weights of the ranked models sum to 1 and the best model has the largest weight."""
    y = _noisy(lambda t: np.sqrt(t), NARROW, 0.01, 9)
    cmp = compare_models(NARROW, y, laws=("sqrt", "sqrt_log"), bootstrap=0)
    assert sum(cmp.weights.values()) == pytest.approx(1.0)
    assert cmp.weights[cmp.best.model] == max(cmp.weights.values())


def test_effective_exponent_local_value():
    """Over a tiny range near T the exponent of √(T log T) is 1/2 + 1/(2 log T) (derivative of log L)."""
    T = np.array([100.0, 100.01, 100.02])
    assert effective_exponent(T) == pytest.approx(0.5 + 1 / (2 * math.log(100)), rel=1e-4)


def test_ratio_trend_slope_of_sqrt_log_data():
    """For L = √(T log T), L/√T = √(log T): slope vs log T over log T in [2, 2.0001] is 1/(2√2) (derived)."""
    T = np.exp(np.array([2.0, 2.00005, 2.0001]))
    rt = ratio_trend(T, np.sqrt(T * np.log(T)), "sqrt")
    assert rt.slope == pytest.approx(1 / (2 * math.sqrt(2)), rel=1e-3)


def test_log_law_rejects_T_at_most_one():
    """A law with log T refuses T <= 1 with a one-line AdvboundError naming the model."""
    with pytest.raises(AdvboundError, match="sqrt_log"):
        fit_model([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], "sqrt_log")


def test_unknown_model():
    """An unknown model name raises AdvboundError listing the known names."""
    with pytest.raises(AdvboundError, match="unknown"):
        model_names(["cubic"])


def test_to_dict_is_json():
    """Comparison.to_dict() is JSON-serialisable (no inf/NaN left)."""
    import json
    T = np.arange(4.0, 9.0)
    cmp = compare_models(T, 1.1 * np.sqrt(T) + 0.01 * np.sin(T), bootstrap=10)
    json.dumps(cmp.to_dict(), allow_nan=False)


@pytest.mark.parametrize("T, y, where", [
    ([4.0, 5.0, 6.0], [2.0, float("nan"), 2.4], r"y\[1\] = nan"),
    ([4.0, float("inf"), 6.0], [2.0, 2.2, 2.4], r"T\[1\] = inf"),
    ([4.0, 5.0, 6.0], [2.0, "abc", 2.4], "y holds a value that is not a number"),
])
def test_non_finite_values_refused(T, y, where):
    """A NaN, an infinity or text among the points is one AdvboundError naming the entry, never a fit."""
    with pytest.raises(AdvboundError, match=where):
        compare_models(T, y, bootstrap=0)
    with pytest.raises(AdvboundError, match=where):
        fit_model(T, y, "sqrt", bootstrap=0)


def test_too_few_points_for_a_law_is_never_ranked():
    """With 3 points a 2-parameter law leaves 1 degree of freedom: fitted, shown, never ranked or weighted
    (fewer than 2 degrees of freedom; a 3-parameter law would pass through every point)."""
    import numpy as np
    from advbound.studies.fit import compare_models
    T = np.array([6.0, 8.0, 10.0])
    cmp = compare_models(T, 1.1 * np.sqrt(T), laws=("sqrt", "sqrt_log", "power"), offsets=(False, True),
                         bootstrap=0)
    assert cmp.too_few("power") and cmp.too_few("sqrt+offset") and not cmp.too_few("sqrt")
    assert cmp.weights["power"] is None and "power" not in cmp.to_dict()["ranking"]
    assert cmp.best is not None and cmp.best.model in ("sqrt", "sqrt_log")
    assert "Too few points for" in cmp.verdict
    two = compare_models(T[:2], 1.1 * np.sqrt(T[:2]), laws=("sqrt", "sqrt_log"), offsets=(False,), bootstrap=0)
    assert two.best is None and "Best by" not in two.verdict
