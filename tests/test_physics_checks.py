"""The physics against the trade's published relations and check values.

Unit conversions go through pint (an independent reference library), never through factors
typed into the tests.
"""

from __future__ import annotations

import numpy as np
import pint
import pytest
from hypothesis import given
from hypothesis import strategies as st

from monitor import physics
from monitor.units import to_si

ureg = pint.UnitRegistry()

# 0.035 in carbon-steel wire, CTWD form of the melting-rate relation:
# A = 0.017 lb/h/A, B = 0.00014 lb/h/(in·A²) (common practice, no source).
A = to_si("0.017 lb/h/A", "melt_a")
B = to_si("0.00014 lb/h/in/A**2", "melt_b")
IN = ureg("1 in").to("m").magnitude


def lb_h(kg_s: float) -> float:
    return ureg.Quantity(kg_s, "kg/s").to("lb/h").magnitude


def test_coefficients_convert_like_pint():
    # pint as the reference for the unit conversion of the coefficients
    assert A == pytest.approx(ureg("0.017 lb/h/A").to("kg/s/A").magnitude, rel=1e-12)
    assert B == pytest.approx(ureg("0.00014 lb/h/in/A**2").to("kg/s/m/A**2").magnitude, rel=1e-12)


def test_melt_rate_check_values_150_A():
    # At 150 A: 3/8 in CTWD gives about 3.7 lb/h, 7/8 in about 5.3 lb/h, +43 %
    # (common practice, no source).
    mr_short = lb_h(physics.melt_rate(150.0, 150.0**2, 0.375 * IN, A, B))
    mr_long = lb_h(physics.melt_rate(150.0, 150.0**2, 0.875 * IN, A, B))
    assert mr_short == pytest.approx(3.7, abs=0.05)
    assert mr_long == pytest.approx(5.3, abs=0.05)
    assert mr_long / mr_short - 1 == pytest.approx(0.43, abs=0.01)


@pytest.mark.parametrize("ctwd_in, current", [(0.5, 184.0), (0.75, 162.0), (0.875, 154.0)])
def test_current_falls_with_ctwd_at_fixed_wfs(ctwd_in, current):
    # At the WFS that gives 200 A at 3/8 in, the current falls to about 184 A at 1/2 in,
    # 162 A at 3/4 in and 154 A at 7/8 in (common practice, no source).
    mr = physics.melt_rate(200.0, 200.0**2, 0.375 * IN, A, B)
    i = physics.current_from_melt_rate(mr, ctwd_in * IN, A, B)
    assert float(i) == pytest.approx(current, abs=1.5)


def test_jackson_check_values():
    # Jackson: 200 A, 23 V, 10 in/min gives 0.127 in for that process; at 184, 162 and 154 A
    # penetration falls by about 11 %, 24 % and "almost 30 %" (common practice, no source).
    s = to_si("10 in/min", "speed")
    ref = dict(ref_current=200.0, ref_voltage=23.0, ref_travel_speed=s, ref_depth=0.127 * IN)
    p0 = physics.jackson_penetration(200.0, 23.0, s, **ref)
    assert p0 / IN == pytest.approx(0.127, rel=1e-12)
    drops = [1 - physics.jackson_penetration(i, 23.0, s, **ref) / p0 for i in (184.0, 162.0, 154.0)]
    assert drops[0] == pytest.approx(0.11, abs=0.01)
    assert drops[1] == pytest.approx(0.24, abs=0.01)
    assert 0.28 <= drops[2] < 0.30


def test_jackson_reference_form_equals_constant_form():
    # P = K·(I⁴/(S·V²))^(1/3) with K from one section equals the reference-scaled form
    # (Jackson 1960, from memory); the K form is evaluated with numpy's cbrt independently.
    s_ref, v_ref, i_ref, p_ref = 8e-3, 24.0, 220.0, 2.9e-3
    k = p_ref / np.cbrt(i_ref**4 / (s_ref * v_ref**2))
    rng = np.random.default_rng(1)
    i = rng.uniform(120, 320, 50)
    v = rng.uniform(18, 32, 50)
    s = rng.uniform(3e-3, 15e-3, 50)
    p = physics.jackson_penetration(i, v, s, i_ref, v_ref, s_ref, p_ref)
    np.testing.assert_allclose(p, k * physics.jackson_scale(i, v, s), rtol=1e-12)


def test_jackson_directions():
    # More voltage means less penetration; current is the strongest lever; halving travel
    # speed raises penetration by 2**(1/3) (the relation's form, Jackson 1960, from memory).
    args = (200.0, 24.0, 8e-3, 2.9e-3)
    base = physics.jackson_penetration(200.0, 24.0, 8e-3, *args)
    assert physics.jackson_penetration(200.0, 26.0, 8e-3, *args) < base
    assert physics.jackson_penetration(200.0, 24.0, 4e-3, *args) == pytest.approx(base * 2 ** (1 / 3))
    up_i = physics.jackson_penetration(220.0, 24.0, 8e-3, *args) / base
    down_v = base / physics.jackson_penetration(200.0, 26.4, 8e-3, *args)
    assert up_i > down_v  # +10 % current outweighs -10 % voltage


def test_wire_mass_rule_of_thumb():
    # Deposition (lb/h) ≈ 13.1·D²·WFS·efficiency, D in inches, WFS in in/min (common practice,
    # no source): within 2 % of the density-based melting rate of carbon steel (7.85 g/cm³).
    d_in, wfs_in_min = 0.035, 300.0
    rule = 13.1 * d_in**2 * wfs_in_min
    ours = lb_h(physics.melt_rate_from_wfs(to_si(f"{wfs_in_min} in/min", "speed"), d_in * IN,
                                           to_si("7.85 g/cm**3", "density")))
    assert rule == pytest.approx(ours, rel=0.02)


def test_ripple_biases_ctwd_when_mean_squared_is_replaced():
    # A waveform with relative RMS ripple c has ⟨I²⟩ = (1 + c²)·Ī² (definition of RMS). Using
    # Ī² in the resistive term overstates the CTWD; ⟨I²⟩ recovers it. Lesnewich form.
    rng = np.random.default_rng(2)
    ctwd, c = 15e-3, 0.25
    mr = physics.melt_rate_from_wfs(0.15, 1.0e-3, 7850.0)
    a, b = to_si("7.8e-3 kg/h/A", "melt_a"), to_si("2.95e-6 kg/h/mm/A**2", "melt_b")
    i_bar = physics.current_from_melt_rate(mr, ctwd, a, b, 1 + c**2)
    from monitor.simulate import ripple_waveform

    i = i_bar * (1 + c * ripple_waveform(20000, 1000.0, rng))
    right = physics.ctwd_from_melt_rate(mr, i.mean(), np.mean(i**2), a, b)
    wrong = physics.ctwd_from_melt_rate(mr, i.mean(), i.mean() ** 2, a, b)
    assert right == pytest.approx(ctwd, abs=0.05e-3)
    assert wrong - ctwd > 0.5e-3  # biased long by more than half a millimetre


@given(st.floats(120, 400), st.floats(5e-3, 35e-3), st.floats(1.0, 1.3))
def test_back_solve_inverts_forward_model(i_bar, ctwd, k):
    # Property: L(MR(I, L)) == L over the physical range (algebraic identity of the relation).
    mr = physics.melt_rate(i_bar, k * i_bar**2, ctwd, A, B)
    assert physics.ctwd_from_melt_rate(mr, i_bar, k * i_bar**2, A, B) == pytest.approx(ctwd, rel=1e-9)
    assert physics.current_from_melt_rate(mr, ctwd, A, B, k) == pytest.approx(i_bar, rel=1e-9)


def test_arc_energy_instantaneous_power():
    # ISO/TR 18491: arc energy = mean of instantaneous power / travel speed; for a waveform the
    # product of means understates it. Check with numpy on a synthetic anti-correlated waveform.
    t = np.linspace(0, 1, 10001)
    i = 200 + 60 * np.sin(2 * np.pi * 80 * t)
    v = 24 + 3 * np.sin(2 * np.pi * 80 * t)
    e = physics.arc_energy_per_length(physics.arc_power(i, v).mean(), 8e-3)
    assert e == pytest.approx(np.mean(i * v) / 8e-3)
    assert e > i.mean() * v.mean() / 8e-3
    assert e * 1e-6 == pytest.approx(0.61, abs=0.02)  # ~0.6 kJ/mm, typical of GMAW (common practice, no source)
