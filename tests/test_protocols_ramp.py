"""Tests of swimlab.protocols.ramp: Umax of a constant-acceleration test."""

import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import integrate

from swimlab.errors import InputError
from swimlab.protocols import ramp


def test_umax_hand_worked_at_farrell_slowest_rate():
    # By hand: 1 cm s⁻¹ per minute (Farrell 2008's slowest rate) = 0.01/60 = 1.6667e-4 m/s²;
    # from 0.20 m/s for 45 min: 0.20 + 1.6667e-4 · 2700 = 0.65 m/s; for a 0.25 m fish 2.6 BL/s.
    rate = ramp.m_s2_from_cm_s_per_min(1.0)
    assert rate == pytest.approx(1.0 / 6000.0, rel=1e-12)
    res = ramp.umax(rate, 45 * 60.0, 0.20, body_length_m=0.25)
    assert res.protocol == "ramp"
    assert res.umax_m_s == pytest.approx(0.65, rel=1e-12)
    assert res.umax_bl_s == pytest.approx(2.6, rel=1e-12)


def test_umax_always_says_it_is_not_a_step_ucrit():
    res = ramp.umax(0.001, 300.0)
    assert [f["code"] for f in res.flags] == ["PROTOCOL_NOT_COMPARABLE"]
    assert res.umax_bl_s is None


def test_ramp_without_rate_names_the_field():
    with pytest.raises(InputError) as err:
        ramp.umax(None, 600.0)
    assert err.value.field == "ramp_rate_m_s2"
    with pytest.raises(InputError) as err:
        ramp.umax(0.001, None)
    assert err.value.field == "time_to_fatigue_s"
    with pytest.raises(InputError) as err:
        ramp.umax(-0.001, 600.0)
    assert "ramp_rate_m_s2" in str(err.value)


def test_speed_at_and_distance_agree_with_numerical_integration():
    # Reference: scipy.integrate.quad of U(t) = U₀ + a (t − t₀) equals distance_m.
    rate, u0 = 2.5e-4, 0.3
    d_quad, _ = integrate.quad(lambda t: ramp.speed_at(t + 100.0, rate, u0, ramp_start_s=100.0), 0.0, 1800.0)
    assert ramp.distance_m(rate, 1800.0, u0) == pytest.approx(d_quad, rel=1e-10)
    assert ramp.speed_at(1900.0, rate, u0, ramp_start_s=100.0) == pytest.approx(ramp.umax(rate, 1800.0, u0).umax_m_s)
    with pytest.raises(InputError) as err:
        ramp.speed_at(50.0, rate, u0, ramp_start_s=100.0)
    assert err.value.field == "time_s"


@given(st.floats(1e-5, 1e-2), st.floats(1.0, 1e4), st.floats(1.0, 1e4), st.floats(0.0, 1.0))
def test_umax_rises_with_time_to_fatigue(rate, t1, t2, u0):
    lo, hi = sorted((t1, t2))
    assert ramp.umax(rate, lo, u0).umax_m_s <= ramp.umax(rate, hi, u0).umax_m_s
