"""Tests of swimlab.flume: geometry, solid blocking, speed calibration and their flags.

Worked solid-blocking examples are in tests/data/flume_blocking_examples.csv. The calibration
fit is checked against scipy.stats.linregress and numpy.polyfit; areas against scipy.quad.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

from swimlab import flume
from swimlab.errors import InputError
from swimlab.settings import LabSettings

DATA = Path(__file__).parent / "data"
EXAMPLES = pd.read_csv(DATA / "flume_blocking_examples.csv").to_dict("records")


@pytest.mark.parametrize("row", EXAMPLES, ids=lambda r: f"L{r['body_length_m']}")
def test_solid_blocking_worked_examples(row):
    eps = flume.solid_blocking(row["body_length_m"], row["body_depth_m"], row["body_width_m"],
                               row["section_area_m2"])
    assert abs(eps - row["expected"]) <= row["tolerance"], row["source"]


def test_circular_section_of_worked_example():
    # π/4 · 0.30² = 0.0706858 m² (third worked example's section).
    assert flume.section_area("circular", diameter=0.30) == pytest.approx(0.0706858347, abs=1e-10)
    assert flume.section_area("rectangular", width=0.25, height=0.2) == pytest.approx(0.05, rel=1e-15)


def test_frontal_area_is_the_ellipse_area():
    # π/4 · d · w against the ellipse's area integrated with scipy.quad.
    d, w = 0.06, 0.03
    numeric, _ = integrate.quad(lambda y: w * np.sqrt(1.0 - (2.0 * y / d) ** 2), -d / 2, d / 2)
    assert flume.frontal_area(d, w) == pytest.approx(numeric, rel=1e-9)


def test_blocking_ratio_and_summary():
    a_t = flume.section_area("rectangular", width=0.2, height=0.2)
    result = flume.blocking_summary(0.30, 0.06, 0.03, a_t)
    assert result.ratio == pytest.approx(flume.blocking_ratio(flume.frontal_area(0.06, 0.03), a_t))
    assert result.factor == pytest.approx(1.0 + result.epsilon)
    assert result.limit == 0.10 and result.within_limit
    strict = flume.blocking_summary(0.30, 0.06, 0.03, a_t, LabSettings(blocking_ratio_limit=0.03))
    assert not strict.within_limit


def test_corrected_speed_worked_example():
    # First worked example: U_F = 0.5 · (1 + 0.0132887334) m/s.
    u = flume.corrected_speed(0.5, 0.30, 0.06, 0.03, 0.04)
    assert u == pytest.approx(0.5 * 1.0132887334, abs=1e-9)


def test_thickness_override():
    # λ = 0.5 L / t: passing t = width (0.03) doubles λ relative to t = depth (0.06).
    base = flume.solid_blocking(0.30, 0.06, 0.03, 0.04)
    assert flume.solid_blocking(0.30, 0.06, 0.03, 0.04, thickness=0.03) == pytest.approx(2 * base)


@settings(max_examples=80, deadline=None)
@given(
    u=st.floats(0.0, 3.0),
    length=st.floats(0.01, 1.0),
    depth=st.floats(0.002, 0.2),
    width=st.floats(0.002, 0.2),
    section_side=st.floats(0.25, 1.0),
)
def test_corrected_speed_never_below_set_speed(u, length, depth, width, section_side):
    a_t = section_side**2
    assert flume.corrected_speed(u, length, depth, width, a_t) >= u


def test_series_keep_their_index():
    u = pd.Series([0.2, 0.4], index=["s1", "s2"])
    out = flume.corrected_speed(u, 0.3, 0.06, 0.03, 0.04)
    assert list(out.index) == ["s1", "s2"]


# --- flags ---------------------------------------------------------------------------------------


def test_blocking_flags():
    a_t = 0.04
    assert flume.blocking_flags(0.06, 0.03, a_t) == []
    beyond = flume.blocking_flags(0.15, 0.06, a_t, where="fish 2")
    assert [f["code"] for f in beyond] == ["BLOCKING_BEYOND_LIMIT"]
    assert beyond[0]["where"] == "fish 2" and "17.7% > 10.0%" in beyond[0]["message"]
    larger = flume.blocking_flags(0.3, 0.3, a_t)
    assert [f["code"] for f in larger] == ["FISH_LARGER_THAN_SECTION"]


def test_calibration_flags():
    cal = flume.fit_speed_calibration([10, 20, 30, 40], [0.1, 0.2, 0.31, 0.4])
    flags = flume.calibration_flags(cal, [5, 25, 45], where="flume A")
    assert [f["step"] for f in flags] == [1, 3]
    assert all(f["code"] == "SPEED_OUTSIDE_CALIBRATION" for f in flags)
    assert flags[0]["where"] == "flume A, step 1"
    assert list(cal.in_range([5, 10, 40, 41])) == [False, True, True, False]


# --- speed calibration -------------------------------------------------------------------------------

SETTINGS = np.array([5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 40.0])
SPEEDS = np.array([0.052, 0.118, 0.171, 0.236, 0.289, 0.352, 0.405, 0.468])


def test_linear_calibration_matches_scipy_linregress():
    # scipy.stats.linregress: slope, intercept, r. 1e-12 relative: two least-squares solvers.
    cal = flume.fit_speed_calibration(SETTINGS, SPEEDS)
    ref = stats.linregress(SETTINGS, SPEEDS)
    assert cal.coefficients[1] == pytest.approx(ref.slope, rel=1e-12)
    assert cal.coefficients[0] == pytest.approx(ref.intercept, rel=1e-10)
    assert cal.r2 == pytest.approx(ref.rvalue**2, rel=1e-12)
    fitted = ref.intercept + ref.slope * SETTINGS
    np.testing.assert_allclose(cal.residuals, SPEEDS - fitted, atol=1e-14)
    assert cal.residual_sd == pytest.approx(np.sqrt(np.sum((SPEEDS - fitted) ** 2) / 6), rel=1e-12)


def test_quadratic_calibration_matches_numpy_polyfit_and_inverts():
    cal = flume.fit_speed_calibration(SETTINGS, SPEEDS, degree=2)
    ref = np.polyfit(SETTINGS, SPEEDS, 2)[::-1]
    np.testing.assert_allclose(cal.coefficients, ref, rtol=1e-9, atol=1e-14)
    settings_back = cal.setting_for(cal.speed_at(np.array([7.0, 22.0, 39.0])))
    np.testing.assert_allclose(settings_back, [7.0, 22.0, 39.0], rtol=1e-9)


def test_calibration_range_and_inverse():
    cal = flume.fit_speed_calibration(SETTINGS, SPEEDS)
    assert (cal.setting_min, cal.setting_max) == (5.0, 40.0)
    assert cal.speed_min == pytest.approx(cal.speed_at(5.0))
    assert cal.setting_for(cal.speed_at(17.5)) == pytest.approx(17.5)
    with pytest.raises(InputError, match=r"speed 0.9 m/s is outside the calibrated speeds"):
        cal.setting_for(0.9)


# --- bad input --------------------------------------------------------------------------------------


@pytest.mark.parametrize("bad", [-0.01, 0.0, float("nan")])
def test_bad_morphometrics(bad):
    with pytest.raises(InputError, match=r"body_depth must be"):
        flume.frontal_area(bad, 0.03)
    with pytest.raises(InputError, match=r"body_width must be"):
        flume.frontal_area(0.06, bad)
    with pytest.raises(InputError, match=r"body_length must be"):
        flume.solid_blocking(bad, 0.06, 0.03, 0.04)


@pytest.mark.parametrize("bad", [-0.04, 0.0, float("nan")])
def test_bad_areas(bad):
    with pytest.raises(InputError, match=r"section_area must be"):
        flume.solid_blocking(0.3, 0.06, 0.03, bad)
    with pytest.raises(InputError, match=r"frontal_area must be"):
        flume.blocking_ratio(bad, 0.04)
    with pytest.raises(InputError, match=r"width must be (greater than zero|a finite number) \[m\]"):
        flume.section_area("rectangular", width=bad, height=0.2)


@pytest.mark.parametrize("bad", [-0.1, float("nan")])
def test_bad_set_speed(bad):
    with pytest.raises(InputError, match=r"set_speed must be"):
        flume.corrected_speed(bad, 0.3, 0.06, 0.03, 0.04)


def test_fish_larger_than_section():
    with pytest.raises(InputError, match=r"fish larger than the working section: frontal area 0.0706\d* m²"):
        flume.solid_blocking(0.5, 0.3, 0.3, 0.04)
    with pytest.raises(InputError, match="fish larger than the working section"):
        flume.blocking_ratio(0.05, 0.04)
    with pytest.raises(InputError, match="fish larger than the working section"):
        flume.blocking_summary(0.5, 0.3, 0.3, 0.04)


def test_section_shape_errors():
    with pytest.raises(ValueError, match=r"unknown shape 'oval'; valid choices are 'circular', 'rectangular'"):
        flume.section_area("oval", width=0.2)
    with pytest.raises(InputError, match="height is needed for a rectangular section"):
        flume.section_area("rectangular", width=0.2)
    with pytest.raises(InputError, match="diameter is needed for a circular section"):
        flume.section_area("circular")
    with pytest.raises(InputError, match="width and height do not apply to a circular section"):
        flume.section_area("circular", diameter=0.3, width=0.2)


def test_unknown_blocking_method():
    with pytest.raises(ValueError, match=r"unknown method 'maskell'; valid choices are 'bell_terhune1970'"):
        flume.solid_blocking(0.3, 0.06, 0.03, 0.04, method="maskell")


def test_bad_calibrations():
    with pytest.raises(InputError, match="needs at least 3 points; got 2"):
        flume.fit_speed_calibration([1, 2], [0.1, 0.2])
    with pytest.raises(InputError, match="same length; got 3 and 2"):
        flume.fit_speed_calibration([1, 2, 3], [0.1, 0.2])
    with pytest.raises(InputError, match="does not rise with motor_setting"):
        flume.fit_speed_calibration([1, 2, 3, 4], [0.4, 0.3, 0.2, 0.1])
    with pytest.raises(InputError, match=r"measured_speed must be zero or more \[m/s\]; got -0.1"):
        flume.fit_speed_calibration([1, 2, 3], [0.1, -0.1, 0.3])
    with pytest.raises(ValueError, match="unknown degree 4"):
        flume.fit_speed_calibration(SETTINGS, SPEEDS, degree=4)


def test_speed_at_fish_is_the_set_speed_raised_by_the_blocking_correction():
    # U_F = U_T (1 + ε_s) (Bell & Terhune 1970, as in solid_blocking): the corrected speed of a
    # fish is the speed at the fish with its own ε_s; several fish add their ε_s.
    eps = flume.solid_blocking(0.30, 0.06, 0.03, 0.04)
    assert flume.speed_at_fish(0.5, eps) == pytest.approx(flume.corrected_speed(0.5, 0.30, 0.06, 0.03, 0.04))
    assert flume.speed_at_fish(0.5, 0.02 + 0.03) == pytest.approx(0.525)
    with pytest.raises(InputError, match="epsilon"):
        flume.speed_at_fish(0.5, -0.01)
