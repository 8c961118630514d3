"""Tests of swimlab.constants: definitions and values recalled from sources, checked outside."""

from __future__ import annotations

import pytest

from swimlab import constants as c


def test_definitions():
    # BIPM SI Brochure: 1 atm = 101325 Pa; 1 Torr = 1/760 atm; 0 °C = 273.15 K.
    assert c.STANDARD_ATMOSPHERE_PA == 101325.0
    assert c.PA_PER_TORR * 760.0 == pytest.approx(101325.0, rel=1e-15)
    assert c.ZERO_CELSIUS_K == 273.15
    # mmHg and torr differ by less than 2e-7 relative (BIPM SI Brochure, 8th ed., Table 9).
    assert abs(c.PA_PER_MMHG / c.PA_PER_TORR - 1.0) < 2e-7


def test_molar_mass_of_oxygen():
    # IUPAC standard atomic weight of oxygen 15.9994 (from memory); scipy's CODATA table has no
    # atomic weights, so the check is the sum 2 × 15.9994.
    assert c.MOLAR_MASS_O2 == pytest.approx(2 * 15.9994, abs=1e-12)


def test_specific_gas_constant_of_water_from_codata():
    # R / M_w with CODATA R (scipy.constants) and M_w = 18.015268 g/mol (IAPWS-95). 1e-4 relative:
    # IAPWS-95 fixed R = 8.314371 J/(mol K), older than today's CODATA 8.314462618.
    scipy_constants = pytest.importorskip("scipy.constants")
    assert c.SPECIFIC_GAS_CONSTANT_WATER == pytest.approx(scipy_constants.R / 18.015268e-3, rel=1e-4)


def test_specific_gas_constant_of_water_matches_iapws():
    iapws = pytest.importorskip("iapws._iapws")
    # iapws._iapws.R is the IAPWS-IF97 value, 0.461526 kJ/(kg K); IAPWS-95's is 0.46151805.
    # 2e-5 relative: the difference between the two releases' values.
    assert c.SPECIFIC_GAS_CONSTANT_WATER == pytest.approx(iapws.R * 1000.0, rel=2e-5)


def test_critical_point_matches_iapws():
    iapws = pytest.importorskip("iapws._iapws")
    # IAPWS-95 critical point, as in the iapws package: Tc 647.096 K, Pc 22.064 MPa, ρc 322 kg/m³.
    assert c.WATER_CRITICAL_TEMPERATURE_K == iapws.Tc
    assert c.WATER_CRITICAL_PRESSURE_PA == pytest.approx(iapws.Pc * 1e6, rel=1e-12)
    assert c.WATER_CRITICAL_DENSITY == iapws.rhoc


def test_reference_salinity_factor_matches_gsw():
    gsw = pytest.importorskip("gsw")
    # TEOS-10: S_R = (35.16504/35) S_P (Millero et al. 2008), as gsw.SR_from_SP.
    assert 35.0 * c.REFERENCE_SALINITY_PER_PRACTICAL == pytest.approx(float(gsw.SR_from_SP(35.0)), rel=1e-12)


def test_supported_ranges_are_ordered():
    for low, high in (c.TEMPERATURE_RANGE_C, c.SALINITY_RANGE, c.BAROMETRIC_PRESSURE_RANGE_PA,
                      c.WATER_PRESSURE_RANGE_PA):
        assert low < high
    assert c.LAMINAR_REYNOLDS_MAX < c.TURBULENT_REYNOLDS_MIN
