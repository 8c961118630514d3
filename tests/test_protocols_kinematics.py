"""Tests of swimlab.protocols.kinematics: tail-beat frequency, stride, Strouhal, Bainbridge."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given
from hypothesis import strategies as st

from swimlab.errors import InputError
from swimlab.protocols import kinematics as K


def test_bainbridge_1958_relation_hand_worked():
    # Bainbridge (1958), abstract point 4: V = ¼ [L (3f − 4)], V in cm/s, L in cm, f in beats/s.
    # By hand: L = 20 cm, f = 10 /s -> V = ¼ · 20 · 26 = 130 cm/s = 1.30 m/s with L = 0.20 m.
    assert K.bainbridge_speed_m_s(10.0, 0.20) == pytest.approx(1.30, rel=1e-12)
    # L = 30 cm, f = 6 /s -> ¼ · 30 · 14 = 105 cm/s
    assert K.bainbridge_speed_m_s(6.0, 0.30) == pytest.approx(1.05, rel=1e-12)
    assert K.BAINBRIDGE_MIN_FREQUENCY_HZ == 5.0


def test_tail_beat_frequency_from_window_and_from_frames():
    # By hand: 42 beats in 15 s = 2.8 Hz; 42 beats over 3600 frames at 240 frames/s (15 s) = 2.8 Hz.
    assert K.tail_beat_frequency_hz(42, 15.0) == pytest.approx(2.8)
    assert K.tail_beat_frequency_hz(42, frames=3600, frame_rate_hz=240.0) == pytest.approx(2.8)
    series = pd.Series([10, 20], index=["s1", "s2"])
    out = K.tail_beat_frequency_hz(series, 10.0)
    assert isinstance(out, pd.Series) and list(out.index) == ["s1", "s2"]


def test_tail_beat_count_without_window_names_the_field():
    with pytest.raises(InputError) as err:
        K.tail_beat_frequency_hz(42)
    assert err.value.field == "window_s"
    with pytest.raises(InputError) as err:
        K.tail_beat_frequency_hz(42, frames=3600)
    assert err.value.field == "frame_rate_hz"
    with pytest.raises(InputError) as err:
        K.tail_beat_frequency_hz(42, 10.0, frames=3600, frame_rate_hz=240.0)
    assert err.value.field == "window_s"
    with pytest.raises(InputError):
        K.tail_beat_frequency_hz(42, 0.0)


def test_strouhal_and_stride_hand_worked_and_flagged():
    # By hand: f = 3 Hz, A = 0.05 m peak to peak, U = 0.5 m/s -> St = 0.30 (inside 0.2–0.4,
    # Taylor, Nudds & Thomas 2003); stride = 0.5/3 = 0.1667 m. At U = 0.2 m/s, St = 0.75 -> flag.
    assert K.strouhal_number(3.0, 0.05, 0.5) == pytest.approx(0.30)
    assert K.stride_length_m(0.5, 3.0) == pytest.approx(0.5 / 3.0)
    flags = K.strouhal_flags([0.30, 0.75, 0.15])
    assert [f["step"] for f in flags] == [2, 3]
    assert all(f["code"] == "STROUHAL_OUTSIDE_EFFICIENT" for f in flags)
    assert K.EFFICIENT_STROUHAL_RANGE == (0.2, 0.4)


def test_frequency_speed_line_matches_statsmodels_ols():
    # Reference: statsmodels OLS parameters and standard errors.
    rng = np.random.default_rng(12)
    u = np.linspace(0.2, 0.9, 8)
    f = 1.1 + 4.0 * u + rng.normal(0, 0.1, u.size)
    line = K.frequency_speed_line(u, f)
    ols = sm.OLS(f, sm.add_constant(u)).fit()
    assert (line.intercept_hz, line.slope_hz_per_m_s) == pytest.approx(tuple(ols.params), rel=1e-10)
    assert (line.intercept_se, line.slope_se) == pytest.approx(tuple(ols.bse), rel=1e-10)
    assert line.r2 == pytest.approx(ols.rsquared, rel=1e-10)
    assert line.frequency_hz(0.5) == pytest.approx(ols.params[0] + 0.5 * ols.params[1])
    # Reference: statsmodels' 95 % confidence intervals of the same parameters.
    ci = ols.conf_int(0.05)
    assert line.ci95("intercept") == pytest.approx(tuple(ci[0]), rel=1e-10)
    assert line.ci95("slope") == pytest.approx(tuple(ci[1]), rel=1e-10)
    assert K.frequency_speed_line(u[:2], f[:2]).ci95("slope") is None  # two points: no SE
    with pytest.raises(ValueError, match="valid"):
        line.ci95("r2")


def test_step_kinematics_recovers_simulated_fish():
    # Simulated fish with known truth: f = 1.0 + 5.0 U [Hz], amplitude 0.2 L peak to peak,
    # counts of beats over 20-s windows (rounded to whole beats: up to ±0.025 Hz error).
    rng = np.random.default_rng(4)
    length = 0.30
    u = np.array([0.3, 0.45, 0.6, 0.75, 0.9, 1.05])
    beats = np.round((1.0 + 5.0 * u) * 20.0 + rng.normal(0, 1.0, u.size))
    amp = 0.2 * length * np.ones(u.size)
    res = K.step_kinematics(u, beats, amp, body_length_m=length, window_s=20.0)
    assert res.protocol == "step_ucrit"
    assert res.line.slope_hz_per_m_s == pytest.approx(5.0, abs=3 * res.line.slope_se)
    assert res.line.intercept_hz == pytest.approx(1.0, abs=3 * res.line.intercept_se)
    table = res.table
    np.testing.assert_allclose(table["stride_length_m"] * table["frequency_hz"], u, rtol=1e-12)
    np.testing.assert_allclose(table["amplitude_bl"], 0.2)
    np.testing.assert_allclose(table["strouhal"], table["frequency_hz"] * amp / u)
    assert list(table["bainbridge_in_range"]) == list(table["frequency_hz"] >= 5.0)
    flagged = [f["step"] for f in res.flags]
    assert flagged == list(table.loc[~table["strouhal_efficient"], "step"])


def test_step_kinematics_refuses_zero_beats_and_mismatched_lengths():
    with pytest.raises(InputError) as err:
        K.step_kinematics([0.3, 0.4], [10, 0], [0.05, 0.05], body_length_m=0.3, window_s=10.0)
    assert err.value.field == "tail_beats" and err.value.row == 2
    with pytest.raises(InputError) as err:
        K.step_kinematics([0.3, 0.4, 0.5], [10, 12], [0.05, 0.05], body_length_m=0.3, window_s=10.0)
    assert err.value.field == "tail_beats"
    with pytest.raises(InputError) as err:
        K.step_kinematics([0.3, 0.4], [10, 12], [0.05, 0.05], body_length_m=0.3)
    assert err.value.field == "window_s"


@given(st.floats(0.1, 20.0), st.floats(0.001, 0.5), st.floats(0.05, 5.0), st.floats(0.01, 100.0))
def test_strouhal_is_dimensionless(f, a, u, scale):
    # scaling length (amplitude and speed together) leaves St unchanged; stride × f = U
    assert K.strouhal_number(f, a * scale, u * scale) == pytest.approx(K.strouhal_number(f, a, u), rel=1e-12)
    assert K.stride_length_m(u, f) * f == pytest.approx(u, rel=1e-12)
