"""Calibration fits checked against simulated cells, regression theory and reference libraries."""

from __future__ import annotations

import re

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

from monitor import physics
from monitor.calibrate import (
    JACKSON_EXPONENTS,
    CalibrationError,
    ctwd_variance_from_coefficients,
    fit_melt_coefficients,
    fit_penetration_exponents,
    fit_penetration_scale,
    simulate_reference_runs,
)
from monitor.units import to_si

# Check values for 0.035 in carbon-steel wire (common practice, no source):
# A = 0.017 lb/h/A, B = 0.00014 lb/h/(in·A²), density 7.85 g/cm³.
A_CHECK = to_si("0.017 lb/h/A", "melt_a")
B_CHECK = to_si("0.00014 lb/h/in/A**2", "melt_b")
DIAMETER = to_si("0.035 in", "length")
DENSITY = to_si("7.85 g/cm**3", "density")
CTWDS = [to_si(t, "length") for t in ("0.375 in", "0.625 in", "0.875 in")]
WFS = [to_si(t, "speed") for t in ("250 in/min", "350 in/min", "450 in/min")]


def _runs(seed: int, **kw):
    kw.setdefault("repeats", 3)
    return simulate_reference_runs(
        A_CHECK, B_CHECK, CTWDS, WFS, DIAMETER, DENSITY, np.random.default_rng(seed), **kw
    )


def _fit(r):
    return fit_melt_coefficients(r["mr"], r["i_mean"], r["i_sq_mean"], r["ctwd"])


# ---------------------------------------------------------------------------------------------
# melting coefficients


def test_unit_conversion_of_check_values():
    # pint conversion checked by hand: 1 lb = 0.45359237 kg (exact, international pound),
    # 1 h = 3600 s, 1 in = 0.0254 m (exact).
    assert A_CHECK == pytest.approx(0.017 * 0.45359237 / 3600, rel=1e-12)
    assert B_CHECK == pytest.approx(0.00014 * 0.45359237 / 3600 / 0.0254, rel=1e-12)


def test_check_values_recovered_within_2_percent():
    # Round trip: simulate reference seams with the check values (common practice, no source),
    # 3 CTWDs (3/8, 5/8, 7/8 in) × 3 WFS, 15 % RMS ripple, 0.5 % melt-rate scatter, then
    # calibrate. Lesnewich's relation is linear in A and B, so OLS is unbiased.
    r = _runs(7, mr_noise_rel=0.005)
    fit = _fit(r)
    assert fit.a == pytest.approx(A_CHECK, rel=0.02)
    assert fit.b == pytest.approx(B_CHECK, rel=0.02)
    assert fit.n == 27 and fit.dof == 25
    assert fit.warnings == ()
    # the simulated currents are in the trade's range for 0.035 in wire at these feeds
    # (roughly 120-250 A; common practice, no source)
    assert 100 < r["i_mean"].min() and r["i_mean"].max() < 300
    # back-solved CTWDs with the fitted coefficients land near the set CTWDs (< 1 mm)
    assert np.max(np.abs(fit.ctwd_error)) < 1e-3
    # the residual scatter estimates the simulated one: 0.5 % of MR (OLS variance estimator)
    assert fit.residual_std / np.mean(r["mr"]) == pytest.approx(0.005, rel=0.5)


def test_default_noise_truth_within_three_standard_errors():
    # Round trip with the default 1 % melt-rate scatter, two feeds, 5 seams per combination.
    # A and B are strongly correlated, so 1 % scatter leaves ≈ 1-2 % standard errors; the check
    # is that the truth lies within 3 SE of the estimate (OLS theory, ≈ 0.3 % miss rate each).
    r = simulate_reference_runs(
        A_CHECK, B_CHECK, CTWDS, WFS[::2], DIAMETER, DENSITY, np.random.default_rng(11), repeats=5
    )
    fit = _fit(r)
    assert abs(fit.a - A_CHECK) < 3 * fit.a_se
    assert abs(fit.b - B_CHECK) < 3 * fit.b_se
    assert 0.003 < fit.a_se / fit.a < 0.05 and 0.003 < fit.b_se / fit.b < 0.05
    assert -1 < fit.ab_corr < -0.5  # more arc melting explains the same data with less resistive melting


def test_confidence_interval_coverage():
    # Coverage property of OLS intervals: β̂ ± 1.96·SE covers the truth in about 95 % of repeated
    # experiments (standard linear-regression theory; with 34 dof the t correction gives ≈ 94 %,
    # and the simulated scatter is relative, not constant, which costs another point or two).
    # Accept 90-99 %.
    rng = np.random.default_rng(2024)
    n_sim = 300
    hit_a = hit_b = 0
    for _ in range(n_sim):
        r = simulate_reference_runs(A_CHECK, B_CHECK, CTWDS, WFS, DIAMETER, DENSITY, rng, repeats=4)
        fit = _fit(r)
        hit_a += abs(fit.a - A_CHECK) <= 1.96 * fit.a_se
        hit_b += abs(fit.b - B_CHECK) <= 1.96 * fit.b_se
    assert 0.90 <= hit_a / n_sim <= 0.99
    assert 0.90 <= hit_b / n_sim <= 0.99


def test_against_scipy_curve_fit():
    # Reference library: scipy.optimize.curve_fit (Levenberg-Marquardt, absolute_sigma=False
    # gives pcov = s²·(JᵀJ)⁻¹) on the same data must give the same estimates and SEs.
    r = _runs(3)
    fit = _fit(r)
    x = np.vstack([r["i_mean"], r["ctwd"] * r["i_sq_mean"]])

    def model(x, a_micro, b_micro):  # parameters in 1e-6 SI units to keep the solver well scaled
        return 1e-6 * (a_micro * x[0] + b_micro * x[1])

    popt, pcov = optimize.curve_fit(model, x, r["mr"], p0=[1.0, 1.0], xtol=1e-15, ftol=1e-15, gtol=1e-15)
    assert fit.a == pytest.approx(popt[0] * 1e-6, rel=1e-6)
    assert fit.b == pytest.approx(popt[1] * 1e-6, rel=1e-6)
    se = np.sqrt(np.diag(pcov)) * 1e-6
    assert fit.a_se == pytest.approx(se[0], rel=1e-3)
    assert fit.b_se == pytest.approx(se[1], rel=1e-3)
    assert fit.covariance[0, 1] == pytest.approx(pcov[0, 1] * 1e-12, rel=1e-3)
    # residuals are data − model (definition)
    np.testing.assert_allclose(fit.residuals, r["mr"] - model(x, *popt), rtol=0, atol=1e-9 * r["mr"].max())


def test_ctwd_error_definition():
    # ctwd_error is the CTWD back-solved with the fitted A, B (Lesnewich rearranged, in physics)
    # minus the set CTWD; with noiseless data it vanishes (exact inverse).
    r = _runs(5, mr_noise_rel=0.0)
    fit = _fit(r)
    assert fit.a == pytest.approx(A_CHECK, rel=1e-9)
    assert fit.b == pytest.approx(B_CHECK, rel=1e-9)
    np.testing.assert_allclose(fit.ctwd_error, 0.0, atol=1e-9)


@settings(max_examples=25, deadline=None)
@given(
    a_scale=st.floats(0.5, 2.0),
    b_scale=st.floats(0.5, 2.0),
    ripple=st.floats(0.0, 0.4),
)
def test_noiseless_round_trip_property(a_scale, b_scale, ripple):
    # Property: on data generated exactly by the relation (current_from_melt_rate is its exact
    # inverse in I), least squares returns the generating coefficients (Lesnewich 1958).
    a, b = A_CHECK * a_scale, B_CHECK * b_scale
    r = simulate_reference_runs(
        a, b, CTWDS, WFS, DIAMETER, DENSITY, np.random.default_rng(0), ripple_rms=ripple, mr_noise_rel=0.0
    )
    fit = _fit(r)
    assert fit.a == pytest.approx(a, rel=1e-8)
    assert fit.b == pytest.approx(b, rel=1e-8)


def test_one_ctwd_is_refused_with_message():
    # Design check: at one CTWD the resistive term B·L·⟨I²⟩ cannot be told from a CTWD offset
    # (common practice, no source: calibrate at two or more CTWDs).
    r = simulate_reference_runs(
        A_CHECK, B_CHECK, [0.015], WFS, DIAMETER, DENSITY, np.random.default_rng(1), repeats=3
    )
    msg = "all reference seams were run at one CTWD (15.0 mm); weld at two or more CTWDs at least 5 mm apart"
    with pytest.raises(CalibrationError, match=re.escape(msg)):
        _fit(r)


def test_too_few_seams_refused():
    # n < parameters + 2 leaves fewer than 2 degrees of freedom for the scatter (regression theory).
    r = simulate_reference_runs(A_CHECK, B_CHECK, CTWDS, WFS[:1], DIAMETER, DENSITY, np.random.default_rng(1))
    with pytest.raises(CalibrationError, match=r"at least 4 reference seams .*got 3"):
        _fit(r)


def test_bad_inputs_refused():
    r = _runs(1)
    with pytest.raises(CalibrationError, match="ctwd"):
        fit_melt_coefficients(r["mr"], r["i_mean"], r["i_sq_mean"], r["ctwd"][:-1])
    # ⟨I²⟩ ≥ Ī² always (Jensen's inequality); passing the RMS current instead is caught
    with pytest.raises(CalibrationError, match="i_sq_mean"):
        fit_melt_coefficients(r["mr"], r["i_mean"], np.sqrt(r["i_sq_mean"]), r["ctwd"])


def test_weak_designs_warn():
    # Thresholds stated in calibrate: CTWD spread < 5 mm, current spread < 10 %, condition > 20.
    narrow = simulate_reference_runs(
        A_CHECK, B_CHECK, [0.012, 0.013], WFS[1:2], DIAMETER, DENSITY, np.random.default_rng(4), repeats=3
    )
    fit = _fit(narrow)
    text = " | ".join(fit.warnings)
    assert "span only 1.0 mm" in text
    assert "mean current varies by only" in text
    assert "ill-conditioned" in text
    assert fit.condition_number > 20


def test_ctwd_variance_against_monte_carlo():
    # First-order propagation J Σ Jᵀ (GUM, JCGM 100:2008, 5.2) compared with a Monte Carlo
    # propagation of the same (A, B) distribution (JCGM 101:2008) through ctwd_from_melt_rate.
    fit = _fit(_runs(9))
    i = np.array([150.0, 200.0, 250.0])
    q = 1.0225 * i * i
    L = np.array([0.010, 0.016, 0.022])
    mr = physics.melt_rate(i, q, L, A_CHECK, B_CHECK)
    var = ctwd_variance_from_coefficients(mr, i, q, fit.a, fit.b, fit.covariance)
    assert var.shape == (3,)
    draws = np.random.default_rng(0).multivariate_normal([fit.a, fit.b], fit.covariance, size=40_000)
    l_mc = physics.ctwd_from_melt_rate(mr[:, None], i[:, None], q[:, None], draws[:, 0], draws[:, 1])
    np.testing.assert_allclose(var, l_mc.var(axis=1), rtol=0.05)


def test_current_gain_sensitivity_linearisation():
    # A +1 % current-gain error (Ī × 1.01, ⟨I²⟩ × 1.01²) at the check-value point (0.035 in wire,
    # 200 A, 3/8 in) changes the back-solved CTWD by ∂L/∂ln g · ln(1.01) to within 5 %
    # (first-order Taylor expansion, GUM 5.1; check values common practice, no source).
    i, L = 200.0, CTWDS[0]
    q = 1.0225 * i * i
    mr = physics.melt_rate(i, q, L, A_CHECK, B_CHECK)
    predicted = physics.ctwd_sensitivities(mr, i, q, A_CHECK, B_CHECK)["current"] * 0.01
    actual = physics.ctwd_from_melt_rate(mr, 1.01 * i, 1.01**2 * q, A_CHECK, B_CHECK) - L
    assert actual < 0  # reading more current than flows makes the stick-out look shorter
    assert actual == pytest.approx(predicted, rel=0.05)


# ---------------------------------------------------------------------------------------------
# penetration

P_REF = 3.0e-3  # invented reference section: 3 mm at 250 A, 26 V, 8 mm/s
I_REF, V_REF, S_REF = 250.0, 26.0, 8.0e-3


def _sections(n, seed, sigma=0.05, i_range=(200, 300), v_range=(23, 29), s_range=(6e-3, 10e-3)):
    # Sections simulated from Jackson's relation (Jackson 1960) with multiplicative lognormal
    # scatter of σ in ln P (macro-section measurement and bead-to-bead variation).
    rng = np.random.default_rng(seed)
    i = rng.uniform(*i_range, n)
    v = rng.uniform(*v_range, n)
    s = rng.uniform(*s_range, n)
    p = physics.jackson_penetration(i, v, s, I_REF, V_REF, S_REF, P_REF) * rng.lognormal(0.0, sigma, n)
    return p, i, v, s


def test_penetration_scale_recovered():
    # Round trip with Jackson's exponents fixed: the log-space mean recovers P_ref; the truth lies
    # within 3 SE (sampling theory of the mean) and within 5 %.
    p, i, v, s = _sections(12, seed=1)
    fit = fit_penetration_scale(p, i, v, s, I_REF, V_REF, S_REF)
    assert fit.ref_depth == pytest.approx(P_REF, rel=0.05)
    assert abs(fit.ref_depth - P_REF) < 3 * fit.ref_depth_se
    assert fit.log_residual_std == pytest.approx(0.05, rel=0.6)
    assert fit.n == 12 and fit.dof == 11
    # residuals in metres are measured minus fitted (definition)
    fitted = physics.jackson_penetration(i, v, s, I_REF, V_REF, S_REF, fit.ref_depth)
    np.testing.assert_allclose(fit.residuals, p - fitted, atol=1e-15)


def test_penetration_scale_needs_three_sections():
    p, i, v, s = _sections(2, seed=1)
    with pytest.raises(CalibrationError, match=r"at least 3 macro sections .*got 2"):
        fit_penetration_scale(p, i, v, s, I_REF, V_REF, S_REF)


def test_free_exponents_recover_jackson_on_wide_design():
    # Wide design (150-350 A, 20-32 V, 4-14 mm/s), 40 sections, 5 % scatter: the fitted exponents
    # sit near Jackson's 4/3, −2/3, −1/3 and their 99 % t intervals contain them (three intervals
    # miss together in about 1 − 0.99³ ≈ 3 % of experiments; Student-t regression theory).
    p, i, v, s = _sections(40, seed=5, i_range=(150, 350), v_range=(20, 32), s_range=(4e-3, 14e-3))
    fit = fit_penetration_exponents(p, i, v, s, I_REF, V_REF, S_REF, alpha=0.01)
    assert fit.jackson_inside
    assert (fit.current_inside, fit.voltage_inside, fit.speed_inside) == (True, True, True)
    np.testing.assert_allclose(fit.exponents, JACKSON_EXPONENTS, atol=0.2)
    assert fit.ref_depth == pytest.approx(P_REF, rel=0.05)
    assert fit.warnings == ()
    # interval half-width is t(0.995, dof)·SE (scipy.stats.t, Student's t)
    lo, hi = fit.exponents_ci[0]
    assert (hi - lo) / 2 == pytest.approx(stats.t.ppf(0.995, 36) * fit.exponents_se[0], rel=1e-12)


def test_free_exponents_against_numpy_lstsq():
    # Reference solution: numpy.linalg.lstsq on the raw log design, covariance s²·(XᵀX)⁻¹ from
    # numpy.linalg.inv (textbook OLS).
    p, i, v, s = _sections(15, seed=8, sigma=0.08)
    fit = fit_penetration_exponents(p, i, v, s, I_REF, V_REF, S_REF)
    x = np.column_stack([np.ones(15), np.log(i / I_REF), np.log(v / V_REF), np.log(s / S_REF)])
    y = np.log(p)
    beta, rss, *_ = np.linalg.lstsq(x, y, rcond=None)
    s2 = rss[0] / (15 - 4)
    cov = s2 * np.linalg.inv(x.T @ x)
    assert fit.log_ref_depth == pytest.approx(beta[0], rel=1e-9, abs=1e-12)
    np.testing.assert_allclose(fit.exponents, beta[1:], rtol=1e-9)
    np.testing.assert_allclose(fit.exponents_se, np.sqrt(np.diag(cov))[1:], rtol=1e-8)
    np.testing.assert_allclose(fit.covariance, cov, rtol=1e-8, atol=1e-14)
    assert fit.ref_depth == pytest.approx(np.exp(beta[0]), rel=1e-9)
    # delta method: SE(exp c0) = exp(c0)·SE(c0)
    assert fit.ref_depth_se == pytest.approx(np.exp(beta[0]) * np.sqrt(cov[0, 0]), rel=1e-8)


def test_free_exponents_need_six_sections():
    p, i, v, s = _sections(5, seed=2)
    with pytest.raises(CalibrationError, match=r"at least 6 macro sections .*got 5"):
        fit_penetration_exponents(p, i, v, s, I_REF, V_REF, S_REF)


def test_constant_regressor_is_held_and_warned():
    # All sections at one voltage: its exponent cannot be estimated (singular design), so it is
    # held at Jackson's value and said so; the other two are still fitted.
    p, i, v, s = _sections(20, seed=3, v_range=(26.0, 26.0))
    fit = fit_penetration_exponents(p, i, v, s, I_REF, V_REF, S_REF)
    assert fit.held == (False, True, False)
    assert fit.voltage_inside is None
    assert fit.exponents[1] == JACKSON_EXPONENTS[1]
    assert np.isnan(fit.exponents_se[1])
    assert any("voltage did not vary" in w for w in fit.warnings)
    assert fit.dof == 20 - 3


def test_narrow_regressor_warns():
    # Travel speed within ±2 %: its exponent is poorly determined (ln spread < 0.2, stated threshold).
    p, i, v, s = _sections(20, seed=4, s_range=(7.9e-3, 8.1e-3))
    fit = fit_penetration_exponents(p, i, v, s, I_REF, V_REF, S_REF)
    assert any(w.startswith("travel speed varies by only") for w in fit.warnings)
    assert fit.exponents_se[2] > 5 * fit.exponents_se[0]
