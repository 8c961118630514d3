"""Tests of swimlab.water against published tables and reference libraries.

Sources are named beside each check; reference tables are in tests/data/water_*.csv with a
tolerance and a reason per row. `iapws` is a test-only reference library (IAPWS-95, IAPWS-IF97,
IAPWS-08 seawater); `gsw` is GSW-Python (TEOS-10).
"""

from __future__ import annotations

from pathlib import Path

import gsw
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from swimlab import water
from swimlab.errors import InputError, OutOfRangeError

iapws = pytest.importorskip("iapws")

DATA = Path(__file__).parent / "data"


def _rows(name: str) -> list[dict]:
    return pd.read_csv(DATA / name).to_dict("records")


# --- published check values -------------------------------------------------------------------


@pytest.mark.parametrize("row", _rows("water_iapws2008_table4.csv"), ids=lambda r: f"{r['temperature_k']}K-{r['density_kg_m3']}")
def test_iapws2008_viscosity_table4(row):
    # IAPWS R12-08 (2008), Table 4: check values of μ(T, ρ) without critical enhancement.
    mu = water._iapws2008_viscosity(np.float64(row["temperature_k"]), np.float64(row["density_kg_m3"]))
    assert abs(mu * 1e6 - row["expected"]) <= row["tolerance"]


@pytest.mark.parametrize("row", _rows("water_tables.csv"), ids=lambda r: f"{r['quantity']}-{r['temperature_c']}C-S{r['salinity']}")
def test_published_water_tables(row):
    # ITTC 7.5-02-01-03 (2011) and Tupper (2004) Table 5.1; see the source column.
    fn = {"density": water.density, "kinematic_viscosity": water.kinematic_viscosity}[row["quantity"]]
    value = fn(row["temperature_c"], row["salinity"], row["pressure_pa"])
    assert abs(value - row["expected"]) <= row["tolerance"], row["source"]


def test_ittc_seawater_density_at_atmospheric_pressure_differs_from_the_quote():
    # Records the finding behind the ITTC seawater row: at 101325 Pa absolute, TEOS-10 and
    # IAPWS-08 (iapws.SeaWater) give 1025.976 kg/m³ at 15 °C, S_A 35.16504 g/kg, not 1026.021.
    sw = iapws.SeaWater(T=288.15, P=0.101325, S=0.03516504)
    assert water.density(15.0, 35.0) == pytest.approx(sw.rho, abs=1e-4)
    assert abs(water.density(15.0, 35.0) - 1026.021) > 0.04


# --- sweeps against reference libraries ---------------------------------------------------------

TEMPERATURES = [0.0, 2.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0]
SALINITIES = [0.0, 5.0, 15.0, 25.0, 35.0, 40.0]


@pytest.mark.parametrize("t", TEMPERATURES)
def test_fresh_water_density_matches_iapws95(t):
    # IAPWS-95 through iapws.IAPWS95 at 0.101325 MPa. TEOS-10's pure-water Gibbs function
    # (IAPWS-09) reproduces IAPWS-95 to about 2e-5 kg/m³ here; 1e-4 allows for iapws's solver.
    ref = iapws.IAPWS95(T=t + 273.15, P=0.101325)
    assert water.density(t) == pytest.approx(ref.rho, abs=1e-4)


@pytest.mark.parametrize("t", TEMPERATURES)
def test_fresh_water_kinematic_viscosity_matches_iapws95(t):
    # iapws.IAPWS95.nu = IAPWS 2008 viscosity / IAPWS-95 density. Relative 1e-6: the critical
    # enhancement (kept by iapws, dropped here) is below 1e-7 relative at these states.
    ref = iapws.IAPWS95(T=t + 273.15, P=0.101325)
    assert water.kinematic_viscosity(t) == pytest.approx(ref.nu, rel=1e-6)


@pytest.mark.parametrize("t", TEMPERATURES)
@pytest.mark.parametrize("s", SALINITIES)
def test_seawater_density_matches_iapws08(t, s):
    # IAPWS-08 seawater (iapws.SeaWater, salinity in kg/kg = S_R) — an implementation of the same
    # Gibbs function independent of gsw. 1e-4 kg/m³ covers the pure-water part's IAPWS-09 fit.
    ref = iapws.SeaWater(T=t + 273.15, P=0.101325, S=s * 35.16504 / 35.0 / 1000.0)
    assert water.density(t, s) == pytest.approx(ref.rho, abs=1e-4)


def test_density_agrees_with_gsw_polynomial_rho():
    # gsw.rho (75-term polynomial in CT) approximates the exact Gibbs function used here; the
    # polynomial's stated fit error is below about 1e-3 kg/m³ in the oceanographic range.
    t, s = np.meshgrid(TEMPERATURES, SALINITIES)
    sa = gsw.SR_from_SP(s)
    ref = gsw.rho(sa, gsw.CT_from_t(sa, t, 0.0), 0.0)
    np.testing.assert_allclose(water.density(t, s), ref, atol=2e-3)


def test_density_pressure_follows_gsw_sea_pressure():
    # Sea pressure = absolute − 101325 Pa, in dbar (TEOS-10 convention).
    assert water.density(10.0, 35.0, 301325.0) == pytest.approx(
        gsw.rho_t_exact(35.16504, 10.0, 20.0), rel=1e-12
    )


@pytest.mark.parametrize("t", [0.01, 5.0, 10.0, 20.0, 25.0, 30.0, 40.0])
def test_pure_water_vapour_pressure_matches_iapws(t):
    # Wagner & Pruss (2002) eq. 2.5 against the IAPWS-IF97 saturation line (iapws.iapws97._PSat_T).
    # 2e-4 relative: IF97 represents IAPWS-95 saturation to about 1e-4 here, and the auxiliary
    # equation does the same.
    from iapws.iapws97 import _PSat_T

    ref = _PSat_T(t + 273.15) * 1e6
    assert water.vapour_pressure(t, method="wagner_pruss2002") == pytest.approx(ref, rel=2e-4)


def test_vapour_pressure_triple_point():
    # Triple point of water: 611.657 Pa at 273.16 K (IAPWS-95; Wagner & Pruss 2002). Tolerance of
    # 0.01 Pa: the auxiliary equation is fitted through the triple point.
    assert water.vapour_pressure(0.01, method="wagner_pruss2002") == pytest.approx(611.657, abs=0.01)


@pytest.mark.parametrize("s", [0.0, 10.0, 20.0, 35.0, 42.0])
def test_vapour_pressure_methods_agree(s):
    # Weiss & Price (1980) against Wagner & Pruss (2002) with TEOS-10 water activity: two
    # formulations on different data. 0.25 % of pH2O changes oxygen solubility by < 0.02 %.
    t = np.linspace(0.0, 40.0, 9)
    a = water.vapour_pressure(t, s, method="weiss_price1980")
    b = water.vapour_pressure(t, s, method="wagner_pruss2002")
    np.testing.assert_allclose(a, b, rtol=2.5e-3)


def test_water_activity_of_standard_seawater():
    # Water activity of standard seawater (S_P 35) near 25 °C is about 0.981 (osmotic
    # coefficient 0.90; Millero & Leung 1976, from memory). 0.001: rounding of that value.
    a_w = water._water_activity_teos10(np.float64(25.0), np.float64(35.0))
    assert a_w == pytest.approx(0.981, abs=1e-3)


def test_seawater_viscosity_is_sharqawy_ratio_on_iapws_pure_water():
    # Sharqawy et al. (2010) eq. 22 at t = 20 °C, S = 0.035 kg/kg: A = 1.90252, B = 6.65076,
    # so μ_sw/μ_w = 1 + A S + B S² (hand calculation from the published coefficients).
    s_p = 35.0 * 35.0 / 35.16504  # S_R = 35 g/kg
    ratio = water.dynamic_viscosity(20.0, s_p) / water.dynamic_viscosity(20.0)
    assert ratio == pytest.approx(1.0 + 1.90252 * 0.035 + 6.65076 * 0.035**2, rel=1e-12)


# --- kinds of input --------------------------------------------------------------------------------


def test_series_keep_their_index():
    t = pd.Series([10.0, 20.0], index=["a", "b"])
    out = water.kinematic_viscosity(t, 35.0)
    assert isinstance(out, pd.Series)
    assert list(out.index) == ["a", "b"]


def test_scalar_in_float_out_and_arrays_broadcast():
    assert isinstance(water.density(20.0), float)
    out = water.dynamic_viscosity(np.array([[10.0], [20.0]]), np.array([0.0, 35.0]))
    assert out.shape == (2, 2)


# --- properties ----------------------------------------------------------------------------------------


@settings(max_examples=60, deadline=None)
@given(
    t=st.floats(0.0, 39.0),
    dt=st.floats(0.01, 1.0),
    s=st.floats(0.0, 42.0),
)
def test_viscosity_falls_with_temperature(t, dt, s):
    assert water.dynamic_viscosity(t + dt, s) < water.dynamic_viscosity(t, s)
    assert water.kinematic_viscosity(t + dt, s) < water.kinematic_viscosity(t, s)


@settings(max_examples=40, deadline=None)
@given(t=st.floats(0.0, 40.0), s=st.floats(0.0, 41.0), ds=st.floats(0.1, 1.0))
def test_salt_raises_density_and_viscosity_and_lowers_vapour_pressure(t, s, ds):
    assert water.density(t, s + ds) > water.density(t, s)
    assert water.dynamic_viscosity(t, s + ds) > water.dynamic_viscosity(t, s)
    for method in water.VAPOUR_PRESSURE_METHODS:
        assert water.vapour_pressure(t, s + ds, method=method) < water.vapour_pressure(t, s, method=method)


# --- bad input -----------------------------------------------------------------------------------------


@pytest.mark.parametrize("fn", [water.density, water.dynamic_viscosity, water.kinematic_viscosity, water.vapour_pressure])
@pytest.mark.parametrize("t", [-0.5, 40.5, 100.0])
def test_temperature_outside_range(fn, t):
    with pytest.raises(OutOfRangeError, match=r"temperature .*between 0 and 40.*IAPWS 2008") as info:
        fn(t)
    assert repr(t) in str(info.value)


@pytest.mark.parametrize("fn", [water.density, water.dynamic_viscosity, water.kinematic_viscosity, water.vapour_pressure])
@pytest.mark.parametrize("s", [-1.0, 42.5])
def test_salinity_outside_range(fn, s):
    with pytest.raises(OutOfRangeError, match=r"salinity .*between 0 and 42.*Sharqawy"):
        fn(20.0, s)


@pytest.mark.parametrize("fn", [water.density, water.dynamic_viscosity, water.vapour_pressure])
def test_nan_and_text_refused(fn):
    with pytest.raises(InputError, match="temperature must be a finite number"):
        fn(float("nan"))
    with pytest.raises(InputError, match="temperature must be numeric"):
        fn("warm")


def test_nan_inside_an_array_refused():
    with pytest.raises(InputError, match="salinity must be a finite number.*nan"):
        water.density([10.0, 20.0], [35.0, np.nan])


def test_pressure_outside_range():
    with pytest.raises(OutOfRangeError, match=r"pressure must lie between 50000 and 1e\+06.*got 0.0"):
        water.density(20.0, 0.0, 0.0)


def test_unknown_vapour_pressure_method():
    with pytest.raises(ValueError, match=r"unknown method 'magnus'.*'wagner_pruss2002', 'weiss_price1980'"):
        water.vapour_pressure(20.0, method="magnus")
