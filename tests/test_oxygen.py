"""Tests of swimlab.oxygen: solubility against published values and TEOS-10, conversions.

Check values are in tests/data/oxygen_check_values.csv (source and tolerance reason per row).
"""

from __future__ import annotations

import itertools
from pathlib import Path

import gsw
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from swimlab import oxygen
from swimlab.errors import InputError, OutOfRangeError

DATA = Path(__file__).parent / "data"
ROWS = pd.read_csv(DATA / "oxygen_check_values.csv").to_dict("records")


@pytest.mark.parametrize("row", ROWS, ids=lambda r: f"{r['quantity']}-{r['temperature_c']}C-S{r['salinity']}")
def test_published_solubility(row):
    # Garcia & Gordon (1992) check value and a fresh-water solubility table; see source column.
    if row["quantity"] == "solubility_umol_kg":
        value = oxygen.solubility_umol_kg(row["temperature_c"], row["salinity"])
    else:
        value = oxygen.solubility(row["temperature_c"], row["salinity"], row["pressure_pa"])
    assert abs(value - row["expected"]) <= row["tolerance"], row["source"]


def test_solubility_matches_gsw_over_the_range():
    # TEOS-10 / GSW-Python gsw.O2sol_SP_pt implements the same Garcia & Gordon (1992) equation:
    # agreement to rounding (1e-12 relative).
    t, s = np.meshgrid(np.linspace(0.0, 40.0, 21), np.linspace(0.0, 42.0, 15))
    np.testing.assert_allclose(oxygen.solubility_umol_kg(t, s), gsw.O2sol_SP_pt(s, t), rtol=1e-12)


def test_mg_l_at_one_atmosphere_is_umol_kg_times_density():
    # At 101325 Pa the barometric factor is 1: C [mg/L] = C [µmol/kg] · ρ [kg/L] · 31.9988e-3.
    c = oxygen.solubility(10.0, 35.0)
    expected = gsw.O2sol_SP_pt(35.0, 10.0) * gsw.rho_t_exact(35.16504, 10.0, 0.0) / 1000.0 * 31.9988e-3
    assert c == pytest.approx(expected, rel=1e-12)


def test_air_saturated_water_po2_at_20c():
    # Common practice: air-saturated fresh water at 20 °C and 1 atm has pO2 ≈ 155.5 mmHg
    # (0.20946 × (760 − 17.5) mmHg). 0.2 mmHg: rounding of that textbook value.
    assert oxygen.convert(100.0, "%", "mmHg", 20.0) == pytest.approx(155.5, abs=0.2)


def test_one_mg_l_is_31_25_umol_l():
    # 1 mg/L O2 = 1000/31.9988 µmol/L = 31.2512 µmol/L (IUPAC molar mass). 1e-4: printed digits.
    assert oxygen.umol_l_from_mg_l(1.0) == pytest.approx(31.2512, abs=1e-4)
    assert oxygen.mg_l_from_umol_l(31.2512) == pytest.approx(1.0, abs=1e-5)


def test_kpa_to_mmhg_is_the_definition():
    # 1 kPa = 1000/133.322387415 mmHg = 7.50062 mmHg (BIPM SI Brochure, 8th ed., Table 9).
    assert oxygen.convert(1.0, "kPa", "mmHg") == pytest.approx(7.50062, abs=1e-5)
    assert oxygen.convert(10.0, "hPa", "kPa") == pytest.approx(1.0, rel=1e-15)


@settings(max_examples=30, deadline=None)
@given(t=st.floats(0.0, 40.0), s=st.floats(0.0, 42.0), p1=st.floats(60e3, 105e3), p2=st.floats(60e3, 105e3))
def test_henrys_law_concentration_per_partial_pressure_does_not_depend_on_barometric_pressure(t, s, p1, p2):
    # Henry's law: at fixed T and S, C / pO2 is constant whatever the barometric pressure.
    k1 = oxygen.solubility(t, s, p1) / oxygen.partial_pressure_kpa(t, s, p1)
    k2 = oxygen.solubility(t, s, p2) / oxygen.partial_pressure_kpa(t, s, p2)
    assert k1 == pytest.approx(k2, rel=1e-12)


def test_solubility_falls_with_altitude_and_salt_and_warmth():
    assert oxygen.solubility(15.0, 0.0, 80e3) < oxygen.solubility(15.0, 0.0, 101325.0)
    assert oxygen.solubility(15.0, 35.0) < oxygen.solubility(15.0, 0.0)
    assert oxygen.solubility(25.0) < oxygen.solubility(15.0)


def test_named_conversions_agree_with_convert():
    t, s, p = 12.0, 30.0, 99e3
    assert oxygen.mg_l_from_percent_air_saturation(80.0, t, s, p) == pytest.approx(
        0.8 * oxygen.solubility(t, s, p), rel=1e-14)
    assert oxygen.percent_air_saturation_from_mg_l(oxygen.solubility(t, s, p), t, s, p) == pytest.approx(100.0)
    assert oxygen.kpa_from_percent_air_saturation(100.0, t, s, p) == pytest.approx(oxygen.partial_pressure_kpa(t, s, p))
    assert oxygen.percent_air_saturation_from_kpa(oxygen.partial_pressure_kpa(t, s, p), t, s, p) == pytest.approx(100.0)
    assert oxygen.percent_air_saturation_from_umol_l(
        oxygen.umol_l_from_percent_air_saturation(55.0, t, s, p), t, s, p) == pytest.approx(55.0)
    assert oxygen.percent_air_saturation_from_mmhg(
        oxygen.mmhg_from_percent_air_saturation(55.0, t, s, p), t, s, p) == pytest.approx(55.0)
    assert oxygen.mg_l_from_kpa(oxygen.kpa_from_mg_l(7.0, t, s, p), t, s, p) == pytest.approx(7.0)


@pytest.mark.parametrize(
    ("alias", "unit"),
    [("%", "% air saturation"), ("% Air Sat", "% air saturation"), ("%AS", "% air saturation"),
     ("mg/l", "mg/L"), ("MG/L", "mg/L"), ("umol/L", "µmol/L"), ("μmol/L", "µmol/L"),
     ("Torr", "mmHg"), (" kPa ", "kPa"), ("mbar", "hPa")],
)
def test_aliases(alias, unit):
    assert oxygen.canonical_unit(alias) == unit


def test_series_keep_their_index():
    v = pd.Series([50.0, 90.0], index=pd.Index([3, 7]))
    out = oxygen.convert(v, "%", "mg/L", 15.0)
    assert isinstance(out, pd.Series)
    assert list(out.index) == [3, 7]


@settings(max_examples=60, deadline=None)
@given(
    pair=st.sampled_from(list(itertools.permutations(oxygen.UNITS, 2))),
    percent=st.floats(0.0, 299.0),
    t=st.floats(0.0, 40.0),
    s=st.floats(0.0, 42.0),
    p=st.floats(50e3, 110e3),
)
def test_conversions_round_trip_between_all_pairs(pair, percent, t, s, p):
    a, b = pair
    value = oxygen.convert(percent, "% air saturation", a, t, s, p)
    there = oxygen.convert(value, a, b, t, s, p)
    back = oxygen.convert(there, b, a, t, s, p)
    assert back == pytest.approx(value, rel=1e-12, abs=1e-12)


# --- bad input -----------------------------------------------------------------------------------------


def test_unknown_unit_lists_valid_ones():
    with pytest.raises(ValueError, match=r"unknown from_unit 'ppm'; valid units are '% air saturation', 'mg/L'"):
        oxygen.convert(5.0, "ppm", "mg/L", 20.0)
    with pytest.raises(ValueError, match=r"unknown to_unit 'ml/l'"):
        oxygen.convert(5.0, "mg/L", "ml/l", 20.0)


@pytest.mark.parametrize("unit", oxygen.UNITS)
def test_negative_level_refused(unit):
    with pytest.raises(InputError, match=r"value -1.0 cannot be an oxygen level .*zero or more"):
        oxygen.convert(-1.0, unit, "mg/L" if unit != "mg/L" else "%", 20.0)


def test_percent_beyond_300_refused():
    with pytest.raises(InputError, match=r"value 350.0 % air saturation is beyond the accepted 0–300 %"):
        oxygen.convert(350.0, "%", "mg/L", 20.0)


def test_concentration_beyond_300_percent_refused():
    # 40 mg/L at 20 °C is about 440 % air saturation.
    with pytest.raises(InputError, match=r"value 40.0 mg/L is beyond 300 % air saturation"):
        oxygen.convert(40.0, "mg/L", "%", 20.0)


def test_nan_refused():
    with pytest.raises(InputError, match="value must be a finite number"):
        oxygen.convert([80.0, float("nan")], "%", "mg/L", 20.0)


def test_temperature_needed_across_groups():
    with pytest.raises(InputError, match="temperature is needed to convert from '% air saturation' to 'mg/L'"):
        oxygen.convert(80.0, "%", "mg/L")


@pytest.mark.parametrize(("t", "s"), [(-1.0, 0.0), (41.0, 0.0), (20.0, 43.0), (20.0, -0.1)])
def test_water_outside_range(t, s):
    with pytest.raises(OutOfRangeError, match="Garcia & Gordon 1992"):
        oxygen.solubility(t, s)


def test_barometric_pressure_outside_range():
    with pytest.raises(OutOfRangeError, match=r"pressure must lie between 50000 and 110000 \[Pa, absolute\].*got 10.0"):
        oxygen.solubility(20.0, 0.0, 10.0)
