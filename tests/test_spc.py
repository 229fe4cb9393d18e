"""Tests for monitor.spc: control charts, ARL, robust trend and the parts-to-limit forecast."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from monitor.spc import (
    D2_N2,
    cusum_arl,
    cusum_chart,
    ewma_arl,
    ewma_chart,
    moving_range_sigma,
    parts_to_limit,
    theil_sen_trend,
)

finite_values = st.floats(min_value=-1e3, max_value=1e3, allow_nan=False, allow_infinity=False)
series = arrays(np.float64, st.integers(min_value=1, max_value=60), elements=finite_values)


def _cusum_by_recursion(x, target, sigma, k):
    """The textbook recursion, one observation at a time, in data units, then divided by σ."""
    cp, cm = 0.0, 0.0
    up, lo = [], []
    for xi in x:
        cp = max(0.0, xi - (target + k * sigma) + cp)
        cm = max(0.0, (target - k * sigma) - xi + cm)
        up.append(cp / sigma)
        lo.append(cm / sigma)
    return np.array(up), np.array(lo)


# ---------------------------------------------------------------- moving-range sigma


def test_d2_is_expected_range_of_two_normals():
    # X1 - X2 ~ N(0, 2σ²) and E|N(0, s²)| = s·√(2/π), so E|X1 - X2| = 2σ/√π: d2(n=2) = 2/√π.
    # Source: half-normal mean (standard result); tabulated d2 = 1.128, Montgomery, from memory.
    assert D2_N2 == pytest.approx(2.0 / math.sqrt(math.pi), abs=5e-4)


def test_moving_range_sigma_recovers_sigma_of_normal_sample():
    # On an independent normal sample, MR̄/d2 estimates σ (Montgomery, individuals chart, from
    # memory); numpy's sample standard deviation is the independent reference.
    rng = np.random.default_rng(7)
    x = rng.normal(0.015, 0.0008, 20_000)
    est = moving_range_sigma(x)
    assert est == pytest.approx(0.0008, rel=0.03)
    assert est == pytest.approx(np.std(x, ddof=1), rel=0.03)


def test_moving_range_sigma_ignores_slow_drift_that_inflates_std():
    # A slow linear drift barely changes consecutive differences but inflates the overall
    # standard deviation: the reason individuals charts use MR̄/d2. Common practice, no source.
    rng = np.random.default_rng(8)
    n = 5_000
    x = rng.normal(0.0, 1.0, n) + np.linspace(0.0, 10.0, n)
    assert moving_range_sigma(x) == pytest.approx(1.0, rel=0.05)
    assert np.std(x) > 2.5


def test_moving_range_sigma_nan_and_reset_handling():
    x = np.array([1.0, 2.0, np.nan, 4.0, 6.0, 100.0, 101.0])
    reset = np.zeros(7, dtype=bool)
    reset[5] = True  # a tip change before index 5: the 6 -> 100 step is not common-cause noise
    # usable ranges: |2-1| = 1, |6-4| = 2, |101-100| = 1 (both neighbours finite, no reset between)
    assert moving_range_sigma(x, reset=reset) == pytest.approx(np.mean([1.0, 2.0, 1.0]) / D2_N2)
    assert math.isnan(moving_range_sigma([1.0]))
    assert math.isnan(moving_range_sigma([np.nan, 1.0, np.nan]))


# ---------------------------------------------------------------- EWMA


def test_ewma_statistic_matches_pandas_ewm():
    # pandas' Series.ewm(alpha=λ, adjust=False) computes y_t = (1-λ)·y_{t-1} + λ·x_t from y_0 = x_0:
    # prepending the target as x_0 gives z_0 = target. Reference library: pandas.
    rng = np.random.default_rng(1)
    x = rng.normal(15.0, 0.7, 300)
    target, lam = 15.2, 0.15
    ref = pd.Series(np.concatenate(([target], x))).ewm(alpha=lam, adjust=False).mean().to_numpy()[1:]
    out = ewma_chart(x, target, 0.7, lam, 2.9)
    np.testing.assert_allclose(out["z"], ref, rtol=0, atol=1e-12)


def test_ewma_exact_limits_equal_variance_of_weighted_sum():
    # z_i = target + λ·Σ_{j<i} (1-λ)^j·ε_{i-j}, so Var(z_i) = σ²·λ²·Σ_{j<i} (1-λ)^(2j) (sum of
    # independent terms) - computed here by numpy summation, independently of the closed form.
    # Closed form and limits: Montgomery, EWMA chart, from memory.
    sigma, lam, L, n = 0.5, 0.2, 3.0, 40
    out = ewma_chart(np.zeros(n), 0.0, sigma, lam, L)
    w2 = (lam * (1.0 - lam) ** np.arange(n)) ** 2
    var = sigma**2 * np.cumsum(w2)
    np.testing.assert_allclose(out["ucl"], L * np.sqrt(var), rtol=1e-12)
    np.testing.assert_allclose(out["lcl"], -L * np.sqrt(var), rtol=1e-12)
    assert out["ucl"][0] == pytest.approx(L * sigma * lam)  # first point: Var(z_1) = λ²σ²
    assert out["ucl"][-1] == pytest.approx(L * sigma * math.sqrt(lam / (2 - lam)), rel=1e-6)


def test_ewma_signals_on_sustained_shift_and_reset_restarts():
    rng = np.random.default_rng(3)
    x = np.concatenate((rng.normal(0.0, 1.0, 50), rng.normal(2.0, 1.0, 50)))
    out = ewma_chart(x, 0.0, 1.0, 0.2, 2.962)
    assert out["first_signal_index"] is not None and out["first_signal_index"] >= 40
    reset = np.zeros(x.size, dtype=bool)
    reset[70] = True
    r = ewma_chart(x, 0.0, 1.0, 0.2, 2.962, reset=reset)
    fresh = ewma_chart(x[70:], 0.0, 1.0, 0.2, 2.962)
    np.testing.assert_allclose(r["z"][70:], fresh["z"], atol=1e-12)
    np.testing.assert_allclose(r["ucl"][70:], fresh["ucl"], atol=1e-12)
    np.testing.assert_array_equal(r["count"][70:], np.arange(1, 31))
    np.testing.assert_allclose(r["z"][:70], out["z"][:70], atol=1e-12)


def test_ewma_skips_nan_observations():
    x = np.array([1.0, np.nan, 3.0, np.nan, np.nan, 2.0])
    out = ewma_chart(x, 0.0, 1.0, 0.5, 3.0)
    clean = ewma_chart(x[np.isfinite(x)], 0.0, 1.0, 0.5, 3.0)
    np.testing.assert_allclose(out["z"][[0, 2, 5]], clean["z"])
    assert out["z"][1] == out["z"][0] and out["z"][4] == out["z"][2]
    np.testing.assert_array_equal(out["count"], [1, 1, 2, 2, 2, 3])
    assert not out["signal"][[1, 3, 4]].any()
    lead = ewma_chart(np.array([np.nan, 1.0]), 5.0, 1.0, 0.5, 3.0)
    assert lead["z"][0] == 5.0 and lead["ucl"][0] == 5.0  # nothing seen yet: at target, zero width


@settings(max_examples=60, deadline=None)
@given(c=finite_values, n=st.integers(1, 80), lam=st.floats(0.01, 1.0))
def test_ewma_of_constant_series_is_the_constant(c, n, lam):
    # A weighted average of equal values is that value (weights sum to 1). Common practice, no source.
    out = ewma_chart(np.full(n, c), c, 1.0, lam, 3.0)
    np.testing.assert_allclose(out["z"], c, rtol=1e-12, atol=1e-9)
    assert not out["signal"].any()


@settings(max_examples=60, deadline=None)
@given(x=series, target=finite_values, lam=st.floats(0.01, 1.0))
def test_ewma_stays_within_range_of_target_and_data(x, target, lam):
    # z_i is a convex combination of the target and x_1..x_i. Common practice, no source.
    z = ewma_chart(x, target, 1.0, lam, 3.0)["z"]
    lo, hi = min(target, x.min()), max(target, x.max())
    tol = 1e-9 * max(1.0, abs(lo), abs(hi))
    assert np.all(z >= lo - tol) and np.all(z <= hi + tol)


# ---------------------------------------------------------------- CUSUM


def test_cusum_hand_computed_example():
    # μ0 = 10, σ = 2, k = 0.5 (K = kσ = 1), h = 4 (8 in data units). Recursions (Montgomery,
    # tabular CUSUM, from memory): C+_i = max(0, x_i - 11 + C+_{i-1}), C-_i = max(0, 9 - x_i + C-_{i-1}).
    # x         :   9   12   13    8   15   16   11
    # x - 11    :  -2    1    2   -3    4    5    0  -> C+ = 0 1 3 0 4 9 9   -> /σ: 0 .5 1.5 0 2 4.5 4.5
    # 9 - x     :   0   -3   -4    1   -6   -7   -2  -> C- = 0 0 0 1 0 0 0   -> /σ: 0 0 0 .5 0 0 0
    x = [9.0, 12.0, 13.0, 8.0, 15.0, 16.0, 11.0]
    out = cusum_chart(x, 10.0, 2.0, k=0.5, h=4.0)
    np.testing.assert_allclose(out["upper"], [0, 0.5, 1.5, 0, 2, 4.5, 4.5])
    np.testing.assert_allclose(out["lower"], [0, 0, 0, 0.5, 0, 0, 0])
    np.testing.assert_array_equal(out["signal_upper"], [0, 0, 0, 0, 0, 1, 1])
    assert not out["signal_lower"].any()
    assert out["first_signal_index"] == 5
    # A tip change before index 5 restarts the sums: from [16, 11], C+ = 5, 5 -> 2.5, 2.5: no signal.
    reset = np.array([0, 0, 0, 0, 0, 1, 0], dtype=bool)
    r = cusum_chart(x, 10.0, 2.0, k=0.5, h=4.0, reset=reset)
    np.testing.assert_allclose(r["upper"], [0, 0.5, 1.5, 0, 2, 2.5, 2.5])
    assert r["first_signal_index"] is None


def test_cusum_matches_step_by_step_recursion():
    # The vectorised closed form against the definition evaluated one observation at a time.
    rng = np.random.default_rng(11)
    x = rng.normal(0.016, 0.001, 500) + np.where(np.arange(500) > 250, 0.0012, 0.0)
    out = cusum_chart(x, 0.016, 0.001, k=0.5, h=5.0)
    up, lo = _cusum_by_recursion(x, 0.016, 0.001, 0.5)
    np.testing.assert_allclose(out["upper"], up, atol=1e-9)
    np.testing.assert_allclose(out["lower"], lo, atol=1e-9)
    assert out["first_signal_index"] > 250  # the 1.2σ step is found after it happens


def test_cusum_nan_is_skipped():
    x = np.array([12.0, np.nan, 13.0])
    out = cusum_chart(x, 10.0, 2.0, k=0.5, h=4.0)
    np.testing.assert_allclose(out["upper"], [0.5, 0.5, 1.5])
    assert not out["signal"][1]


@settings(max_examples=80, deadline=None)
@given(x=series, target=finite_values, sigma=st.floats(1e-3, 1e3), k=st.floats(0.0, 2.0))
def test_cusum_statistics_nonnegative_and_equal_recursion(x, target, sigma, k):
    # C± = max(0, ...) can never be negative (definition).
    out = cusum_chart(x, target, sigma, k=k, h=5.0)
    assert np.all(out["upper"] >= 0) and np.all(out["lower"] >= 0)
    up, lo = _cusum_by_recursion(x, target, sigma, k)
    scale = 1e-9 * (1.0 + np.abs(x - target).sum() / sigma)
    np.testing.assert_allclose(out["upper"], up, atol=scale)
    np.testing.assert_allclose(out["lower"], lo, atol=scale)


@settings(max_examples=40, deadline=None)
@given(x=arrays(np.float64, st.integers(2, 50), elements=finite_values), data=st.data())
def test_reset_is_a_fresh_start(x, data):
    j = data.draw(st.integers(1, x.size - 1))
    reset = np.zeros(x.size, dtype=bool)
    reset[j] = True
    c = cusum_chart(x, 0.0, 10.0, reset=reset)
    np.testing.assert_allclose(c["upper"][j:], cusum_chart(x[j:], 0.0, 10.0)["upper"], atol=1e-9)
    np.testing.assert_allclose(c["upper"][:j], cusum_chart(x[:j], 0.0, 10.0)["upper"], atol=1e-9)
    e = ewma_chart(x, 0.0, 10.0, 0.2, 3.0, reset=reset)
    np.testing.assert_allclose(e["z"][j:], ewma_chart(x[j:], 0.0, 10.0, 0.2, 3.0)["z"], atol=1e-9)


# ---------------------------------------------------------------- ARL (Monte Carlo vs published tables)

# Published zero-state ARLs, from memory: Montgomery, Introduction to Statistical Quality
# Control; Lucas and Saccucci 1990. Tabular CUSUM with k = 0.5 (two-sided); EWMA with the
# asymptotic limits. Accept ±10 %.
ARL_TABLE = [
    ("cusum", (0.5, 4.0), 0.0, 168.0),
    ("cusum", (0.5, 4.0), 1.0, 8.38),
    ("cusum", (0.5, 5.0), 0.0, 465.0),
    ("cusum", (0.5, 5.0), 1.0, 10.4),
    ("ewma", (0.10, 2.814), 0.0, 500.0),
    ("ewma", (0.10, 2.814), 1.0, 10.3),
    ("ewma", (0.20, 2.962), 0.0, 500.0),
    ("ewma", (0.20, 2.962), 1.0, 10.5),
]


@pytest.mark.parametrize(("chart", "params", "shift", "published"), ARL_TABLE)
def test_arl_matches_published_tables(chart, params, shift, published):
    # in-control run lengths are roughly geometric: se ≈ ARL/√n, so 20 000 runs give ≈ 0.7 %
    rng = np.random.default_rng(20240 + int(10 * shift) + int(1000 * params[1]))
    n_runs = 20_000 if shift == 0.0 else 5_000
    fn = cusum_arl if chart == "cusum" else ewma_arl
    est = fn(*params, shift, n_runs, 100_000, rng)
    assert est.n_censored == 0
    assert est.se < 0.02 * est.arl  # MC error well below the ±10 % tolerance
    assert est.arl == pytest.approx(published, rel=0.10)


# ---------------------------------------------------------------- Theil-Sen trend and forecast


def test_theil_sen_resists_gross_outliers():
    # Robustness (breakdown point ≈ 29 %, Sen 1968, from memory): 15 % gross outliers barely move
    # the Theil-Sen slope while they wreck least squares (numpy.polyfit as the reference).
    rng = np.random.default_rng(5)
    n = 80
    x = np.arange(n, dtype=float)
    y = 3.0e-3 - 1.5e-5 * x + rng.normal(0.0, 5e-5, n)
    bad = rng.choice(n, size=12, replace=False)
    y[bad] += rng.uniform(2e-3, 4e-3, bad.size) * np.where(x[bad] > n / 2, -1.0, 1.0)
    fit = theil_sen_trend(x, y)
    ols = np.polyfit(x, y, 1)[0]
    assert fit["slope"] == pytest.approx(-1.5e-5, rel=0.10)
    assert abs(ols - -1.5e-5) > 5 * abs(fit["slope"] - -1.5e-5)
    assert fit["significant"] and fit["slope_low"] <= fit["slope"] <= fit["slope_high"]


def test_theil_sen_no_trend_in_pure_noise_and_too_few_points():
    rng = np.random.default_rng(6)
    fit = theil_sen_trend(np.arange(60.0), rng.normal(0.0, 1.0, 60))
    assert fit["slope_low"] < 0.0 < fit["slope_high"] and not fit["significant"]
    short = theil_sen_trend([0.0, 1.0], [1.0, 2.0])
    assert math.isnan(short["slope"]) and not short["significant"]


def test_parts_to_limit_exact_line():
    # penetration = 5.0 - 0.1·n mm for n = 0..9; fitted value at n = 9 is 4.1 mm; a 3.0 mm limit
    # is reached after (4.1 - 3.0)/0.1 = 11 more parts (straight-line arithmetic).
    n = np.arange(10.0)
    p = (5.0 - 0.1 * n) * 1e-3
    out = parts_to_limit(n, p, 3.0e-3)
    expected = ((5.0 - 0.1 * 9) - 3.0) / 0.1
    for key in ("parts", "parts_low", "parts_high"):
        assert out[key] == pytest.approx(expected, rel=1e-9)


def test_parts_to_limit_bounds_order_and_special_cases():
    rng = np.random.default_rng(9)
    n = np.arange(100.0)
    p = 4e-3 - 1e-5 * n + rng.normal(0.0, 1e-4, n.size)
    out = parts_to_limit(n, p, 2e-3)
    assert out["parts_low"] < out["parts"] < out["parts_high"] < math.inf  # steeper slope: fewer parts
    rising = parts_to_limit(n, 4e-3 + 1e-5 * n + rng.normal(0.0, 1e-4, n.size), 2e-3)
    assert all(math.isinf(v) for v in rising.values())
    flat = parts_to_limit(n, 4e-3 + rng.normal(0.0, 1e-4, n.size), 2e-3)
    assert all(math.isnan(v) for v in flat.values())
    below = parts_to_limit(n, p, 5e-3)
    assert all(v == 0.0 for v in below.values())
