"""Oxygen in water: solubility at air saturation and conversions between units.

The core unit of oxygen concentration is mg/L (= g/m³). The units a person or an oxygen logger
may use are in :data:`UNITS`; names are matched case-insensitively through :data:`UNIT_ALIASES`
(``"%"``, ``"% air sat"``, ``"umol/L"``, ``"torr"``, …).

Conversions between a concentration (mg/L, µmol/L) and a saturation or partial pressure
(% air saturation, kPa, hPa, mmHg) need the water's temperature [°C], practical salinity [-] and
the barometric pressure [Pa] at the water's surface; conversions within one group do not (pass
``temperature=None`` there if it is not known).

"% air saturation" is the oxygen partial pressure relative to that of water in equilibrium with
water-saturated air at the barometric pressure: 100 % ↔ pO2 = 0.20946 (P − pH2O).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from swimlab import _validate, water
from swimlab.constants import (
    BAROMETRIC_PRESSURE_RANGE_PA,
    GARCIA_GORDON1992_A,
    GARCIA_GORDON1992_B,
    GARCIA_GORDON1992_C0,
    GARCIA_GORDON1992_TS_OFFSET_C,
    IPTS68_PER_ITS90,
    MOLAR_MASS_O2,
    O2_MOLE_FRACTION_DRY_AIR,
    PA_PER_HPA,
    PA_PER_KPA,
    PA_PER_MMHG,
    STANDARD_ATMOSPHERE_PA,
    ZERO_CELSIUS_K,
)
from swimlab.errors import InputError

__all__ = [
    "MAX_PERCENT_AIR_SATURATION",
    "UNITS",
    "UNIT_ALIASES",
    "air_saturation_partial_pressure",
    "canonical_unit",
    "convert",
    "kpa_from_mg_l",
    "kpa_from_percent_air_saturation",
    "mg_l_from_kpa",
    "mg_l_from_percent_air_saturation",
    "mg_l_from_umol_l",
    "mmhg_from_percent_air_saturation",
    "partial_pressure_kpa",
    "percent_air_saturation_from_kpa",
    "percent_air_saturation_from_mg_l",
    "percent_air_saturation_from_mmhg",
    "percent_air_saturation_from_umol_l",
    "solubility",
    "solubility_umol_kg",
    "umol_l_from_mg_l",
    "umol_l_from_percent_air_saturation",
]

PERCENT_AIR_SATURATION = "% air saturation"
MG_L = "mg/L"
UMOL_L = "µmol/L"
KPA = "kPa"
HPA = "hPa"
MMHG = "mmHg"

UNITS: tuple[str, ...] = (PERCENT_AIR_SATURATION, MG_L, UMOL_L, KPA, HPA, MMHG)
"""Canonical names of the oxygen units swimlab converts between."""

_ALIASES = {
    PERCENT_AIR_SATURATION: (
        "%", "% air saturation", "% air sat", "% air sat.", "%air sat", "% as", "%as", "%a.s.",
        "% a.s.", "%sat", "% sat", "% saturation", "percent air saturation", "pct air sat",
        "air saturation %", "air sat %", "% air",
    ),
    MG_L: ("mg/l", "mg l-1", "mg l^-1", "mg·l-1", "mg/dm3", "mg/dm³", "g/m3", "g/m³", "mg per l"),
    UMOL_L: (
        "µmol/l", "μmol/l", "umol/l", "µmol l-1", "μmol l-1", "umol l-1", "µm", "μm", "um",
        "micromol/l", "mmol/m3", "mmol/m³",
    ),
    KPA: ("kpa",),
    HPA: ("hpa", "mbar", "mb"),
    MMHG: ("mmhg", "mm hg", "torr"),
}

UNIT_ALIASES: dict[str, str] = {
    alias: unit for unit, aliases in _ALIASES.items() for alias in (*aliases, unit.lower())
}
"""Accepted spellings (lower case, surrounding spaces removed) → canonical unit. The torr is
taken as the millimetre of mercury (they differ by less than 2e-7 relative)."""

MAX_PERCENT_AIR_SATURATION = 300.0
"""Highest oxygen level accepted as a reading, as % air saturation (in any unit, its
equivalent). [%] Common practice: hyperoxic respirometry rarely exceeds 200 %; a higher value
is taken as a unit or entry mistake."""

_CONCENTRATION_UNITS = (MG_L, UMOL_L)
_PRESSURE_UNITS = (KPA, HPA, MMHG)

# mg/L per unit of each concentration unit; Pa per unit of each pressure unit.
_MG_L_PER_UNIT = {MG_L: 1.0, UMOL_L: MOLAR_MASS_O2 / 1000.0}
_PA_PER_UNIT = {KPA: PA_PER_KPA, HPA: PA_PER_HPA, MMHG: PA_PER_MMHG}


def canonical_unit(unit: str, name: str = "unit") -> str:
    """Return the canonical name of an oxygen unit, accepting the aliases of :data:`UNIT_ALIASES`.

    Raises ``ValueError`` naming ``name``, the value and the valid units.
    """
    key = unit.strip().lower() if isinstance(unit, str) else None
    if key is None or key not in UNIT_ALIASES:
        valid = ", ".join(repr(u) for u in UNITS)
        raise ValueError(
            f"unknown {name} {unit!r}; valid units are {valid} "
            f"(aliases such as '%', 'umol/L', 'mg/l', 'torr' are accepted)"
        )
    return UNIT_ALIASES[key]


def _barometric(pressure: Any) -> np.ndarray:
    return _validate.in_range(
        "pressure", pressure, *BAROMETRIC_PRESSURE_RANGE_PA, "Pa, absolute",
        what="barometric pressures accepted for oxygen solubility",
    )


def solubility_umol_kg(temperature: Any, salinity: Any = 0.0) -> Any:
    """Oxygen solubility in water saturated with moist air at one standard atmosphere, per mass.

    Parameters
    ----------
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]

    Returns
    -------
    Oxygen concentration at equilibrium with water-saturated air at 101325 Pa total pressure.
    [µmol/kg]

    Notes
    -----
    ln C = A0 + A1 Ts + A2 Ts² + A3 Ts³ + A4 Ts⁴ + A5 Ts⁵ + S (B0 + B1 Ts + B2 Ts² + B3 Ts³)
    + C0 S², Ts = ln[(298.15 − t)/(273.15 + t)], with the coefficients of the combined fit to the
    Benson & Krause (1984) data (Garcia & Gordon 1992, eq. 8 and Table 1). Their fit is on the
    IPTS-68 scale: t68 = 1.00024 t90, as in TEOS-10's ``gsw.O2sol_SP_pt``. Valid from the
    freezing point to 40 °C, S 0–42.
    """
    t = water._temperature(temperature)
    sp = water._salinity(salinity)
    t68 = t * IPTS68_PER_ITS90
    ts = np.log((GARCIA_GORDON1992_TS_OFFSET_C - t68) / (ZERO_CELSIUS_K + t68))
    ln_c = (
        sum(a * ts**i for i, a in enumerate(GARCIA_GORDON1992_A))
        + sp * sum(b * ts**i for i, b in enumerate(GARCIA_GORDON1992_B))
        + GARCIA_GORDON1992_C0 * sp**2
    )
    return _validate.like_input(np.exp(ln_c), temperature, salinity)


def solubility(
    temperature: Any,
    salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
    *,
    vapour_pressure_method: str = "weiss_price1980",
) -> Any:
    """Oxygen concentration of air-saturated water at a barometric pressure.

    Parameters
    ----------
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]
    pressure
        Barometric (absolute) pressure at the water's surface. [Pa]
    vapour_pressure_method
        Method of :func:`swimlab.water.vapour_pressure` for pH2O.

    Returns
    -------
    Oxygen concentration at air saturation (100 % air saturation). [mg/L]

    Notes
    -----
    C(P) = C*(1 atm) · (P − pH2O) / (P_std − pH2O), the usual correction for barometric pressure
    and water vapour (Benson & Krause 1984; the small non-ideality term θ of their eq. 24, below
    1e-3 relative, is neglected). C*(1 atm) from :func:`solubility_umol_kg` (Garcia & Gordon
    1992), converted to mg/L with the seawater density at 101325 Pa
    (:func:`swimlab.water.density`) and the molar mass of O2, 31.9988 g/mol.
    Valid 0–40 °C, S 0–42, 50–110 kPa.
    """
    t = water._temperature(temperature)
    sp = water._salinity(salinity)
    p = _barometric(pressure)
    t, sp, p = np.broadcast_arrays(t, sp, p)
    c_umol_kg = np.asarray(solubility_umol_kg(t, sp), dtype=float)
    rho_kg_l = np.asarray(water.density(t, sp), dtype=float) / 1000.0
    c_star = c_umol_kg * rho_kg_l * MOLAR_MASS_O2 / 1000.0  # µmol/kg · kg/L · mg/µmol → mg/L
    p_h2o = np.asarray(water.vapour_pressure(t, sp, method=vapour_pressure_method), dtype=float)
    c = c_star * (p - p_h2o) / (STANDARD_ATMOSPHERE_PA - p_h2o)
    return _validate.like_input(c, temperature, salinity, pressure)


def air_saturation_partial_pressure(
    temperature: Any,
    salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
    *,
    vapour_pressure_method: str = "weiss_price1980",
) -> Any:
    """Oxygen partial pressure in air-saturated water.

    Parameters
    ----------
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]
    pressure
        Barometric (absolute) pressure at the water's surface. [Pa]
    vapour_pressure_method
        Method of :func:`swimlab.water.vapour_pressure` for pH2O.

    Returns
    -------
    pO2 at 100 % air saturation. [Pa]

    Notes
    -----
    pO2 = x_O2 (P − pH2O), x_O2 = 0.20946 the mole fraction of O2 in dry air (Benson & Krause
    1984), pH2O from :func:`swimlab.water.vapour_pressure`. Valid 0–40 °C, S 0–42, 50–110 kPa.
    """
    t = water._temperature(temperature)
    sp = water._salinity(salinity)
    p = _barometric(pressure)
    t, sp, p = np.broadcast_arrays(t, sp, p)
    p_h2o = np.asarray(water.vapour_pressure(t, sp, method=vapour_pressure_method), dtype=float)
    return _validate.like_input(O2_MOLE_FRACTION_DRY_AIR * (p - p_h2o), temperature, salinity, pressure)


def partial_pressure_kpa(
    temperature: Any,
    salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
    *,
    vapour_pressure_method: str = "weiss_price1980",
) -> Any:
    """Oxygen partial pressure in air-saturated water, in kPa.

    Parameters
    ----------
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]
    pressure
        Barometric (absolute) pressure at the water's surface. [Pa]
    vapour_pressure_method
        Method of :func:`swimlab.water.vapour_pressure` for pH2O.

    Returns
    -------
    pO2 at 100 % air saturation, 0.20946 (P − pH2O). [kPa]

    Notes
    -----
    See :func:`air_saturation_partial_pressure`.
    """
    pa = air_saturation_partial_pressure(
        temperature, salinity, pressure, vapour_pressure_method=vapour_pressure_method
    )
    return _validate.like_input(np.asarray(pa, dtype=float) / PA_PER_KPA, temperature, salinity, pressure)


def _check_value(value: Any, unit: str) -> np.ndarray:
    arr = _validate.as_float_array("value", value)
    bad = ~np.isfinite(arr)
    if bad.any():
        raise InputError(f"value must be a finite number [{unit}]; got {float(arr[bad].flat[0])!r}")
    bad = arr < 0
    if bad.any():
        raise InputError(
            f"value {float(arr[bad].flat[0])!r} cannot be an oxygen level in {unit}: "
            f"it must be zero or more"
        )
    if unit == PERCENT_AIR_SATURATION:
        bad = arr > MAX_PERCENT_AIR_SATURATION
        if bad.any():
            raise InputError(
                f"value {float(arr[bad].flat[0])!r} % air saturation is beyond the accepted "
                f"0–{MAX_PERCENT_AIR_SATURATION:g} %; check the unit of the reading"
            )
    return arr


def _check_fraction(fraction: np.ndarray, value: np.ndarray, unit: str) -> None:
    fraction, value = np.broadcast_arrays(fraction, value)
    bad = fraction * 100.0 > MAX_PERCENT_AIR_SATURATION
    if bad.any():
        raise InputError(
            f"value {float(value[bad].flat[0])!r} {unit} is beyond "
            f"{MAX_PERCENT_AIR_SATURATION:g} % air saturation at this temperature, salinity and "
            f"pressure; check the unit of the reading"
        )


def convert(
    value: Any,
    from_unit: str,
    to_unit: str,
    temperature: Any = None,
    salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
    *,
    vapour_pressure_method: str = "weiss_price1980",
) -> Any:
    """Convert an oxygen level between any two units of :data:`UNITS`.

    Parameters
    ----------
    value
        Oxygen level in ``from_unit``. [from_unit]
    from_unit, to_unit
        Units (canonical names or aliases, case-insensitive).
    temperature
        Water temperature (ITS-90); may be None only for conversions within the concentration
        units or within the pressure units. [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]
    pressure
        Barometric (absolute) pressure at the water's surface. [Pa]
    vapour_pressure_method
        Method of :func:`swimlab.water.vapour_pressure` for pH2O.

    Returns
    -------
    Oxygen level in ``to_unit``. [to_unit]

    Notes
    -----
    Through the fraction of air saturation f:
    f = %/100 = C / C_sat = pO2 / pO2_sat, with C_sat from :func:`solubility`
    (Garcia & Gordon 1992 with the barometric and vapour-pressure correction) and
    pO2_sat = 0.20946 (P − pH2O) from :func:`air_saturation_partial_pressure`. Henry's law makes
    concentration proportional to partial pressure at fixed temperature and salinity.
    1 µmol/L = 0.0319988 mg/L; 1 mmHg = 133.322387415 Pa.

    Raises ``ValueError`` for an unknown unit and :class:`~swimlab.errors.InputError` for a
    value that cannot be in its unit (negative, not finite, or beyond 300 % air saturation).
    """
    source = canonical_unit(from_unit, "from_unit")
    target = canonical_unit(to_unit, "to_unit")
    v = _check_value(value, source)
    same_group = (source in _CONCENTRATION_UNITS and target in _CONCENTRATION_UNITS) or (
        source in _PRESSURE_UNITS and target in _PRESSURE_UNITS
    )
    if source == target:
        result = v.copy()
        if source != PERCENT_AIR_SATURATION and temperature is not None:
            _check_fraction(v / _saturation_in(source, temperature, salinity, pressure,
                                              vapour_pressure_method), v, source)
        return _validate.like_input(result, value, temperature, salinity, pressure)
    if same_group:
        if source in _CONCENTRATION_UNITS:
            result = v * _MG_L_PER_UNIT[source] / _MG_L_PER_UNIT[target]
        else:
            result = v * _PA_PER_UNIT[source] / _PA_PER_UNIT[target]
        if temperature is not None:
            _check_fraction(v / _saturation_in(source, temperature, salinity, pressure,
                                              vapour_pressure_method), v, source)
        return _validate.like_input(result, value, temperature, salinity, pressure)
    if temperature is None:
        raise InputError(
            f"temperature is needed to convert from {source!r} to {target!r}; got None"
        )
    sat_source = 100.0 if source == PERCENT_AIR_SATURATION else _saturation_in(
        source, temperature, salinity, pressure, vapour_pressure_method)
    sat_target = 100.0 if target == PERCENT_AIR_SATURATION else _saturation_in(
        target, temperature, salinity, pressure, vapour_pressure_method)
    fraction = v / sat_source
    if source != PERCENT_AIR_SATURATION:
        _check_fraction(fraction, v, source)
    result = fraction * sat_target
    return _validate.like_input(result, value, temperature, salinity, pressure)


def _saturation_in(unit: str, temperature: Any, salinity: Any, pressure: Any, method: str) -> np.ndarray:
    """Level of air-saturated water in ``unit`` (not for % air saturation)."""
    if unit in _CONCENTRATION_UNITS:
        c = np.asarray(solubility(temperature, salinity, pressure, vapour_pressure_method=method))
        return c / _MG_L_PER_UNIT[unit]
    pa = np.asarray(
        air_saturation_partial_pressure(temperature, salinity, pressure, vapour_pressure_method=method)
    )
    return pa / _PA_PER_UNIT[unit]


# --- named conversions (<target>_from_<source>) ------------------------------------------------


def mg_l_from_percent_air_saturation(
    percent_air_saturation: Any, temperature: Any, salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """Oxygen concentration from % air saturation.

    Parameters
    ----------
    percent_air_saturation
        Oxygen level. [% air saturation]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen concentration, C = %/100 · C_sat. [mg/L]

    Notes
    -----
    C_sat from :func:`solubility` (Garcia & Gordon 1992, barometric correction).
    """
    return convert(percent_air_saturation, PERCENT_AIR_SATURATION, MG_L, temperature, salinity, pressure)


def percent_air_saturation_from_mg_l(
    mg_l: Any, temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """% air saturation from oxygen concentration.

    Parameters
    ----------
    mg_l
        Oxygen concentration. [mg/L]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen level, 100 · C / C_sat. [% air saturation]

    Notes
    -----
    C_sat from :func:`solubility` (Garcia & Gordon 1992, barometric correction).
    """
    return convert(mg_l, MG_L, PERCENT_AIR_SATURATION, temperature, salinity, pressure)


def umol_l_from_mg_l(mg_l: Any) -> Any:
    """Oxygen concentration in µmol/L from mg/L.

    Parameters
    ----------
    mg_l
        Oxygen concentration. [mg/L]

    Returns
    -------
    Oxygen concentration, C / 0.0319988. [µmol/L]

    Notes
    -----
    Molar mass of O2, 31.9988 g/mol (IUPAC).
    """
    return convert(mg_l, MG_L, UMOL_L)


def mg_l_from_umol_l(umol_l: Any) -> Any:
    """Oxygen concentration in mg/L from µmol/L.

    Parameters
    ----------
    umol_l
        Oxygen concentration. [µmol/L]

    Returns
    -------
    Oxygen concentration, 0.0319988 · C. [mg/L]

    Notes
    -----
    Molar mass of O2, 31.9988 g/mol (IUPAC).
    """
    return convert(umol_l, UMOL_L, MG_L)


def umol_l_from_percent_air_saturation(
    percent_air_saturation: Any, temperature: Any, salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """Oxygen concentration in µmol/L from % air saturation.

    Parameters
    ----------
    percent_air_saturation
        Oxygen level. [% air saturation]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen concentration. [µmol/L]

    Notes
    -----
    See :func:`mg_l_from_percent_air_saturation` and :func:`umol_l_from_mg_l`.
    """
    return convert(percent_air_saturation, PERCENT_AIR_SATURATION, UMOL_L, temperature, salinity, pressure)


def percent_air_saturation_from_umol_l(
    umol_l: Any, temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """% air saturation from oxygen concentration in µmol/L.

    Parameters
    ----------
    umol_l
        Oxygen concentration. [µmol/L]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen level. [% air saturation]

    Notes
    -----
    See :func:`percent_air_saturation_from_mg_l`.
    """
    return convert(umol_l, UMOL_L, PERCENT_AIR_SATURATION, temperature, salinity, pressure)


def kpa_from_percent_air_saturation(
    percent_air_saturation: Any, temperature: Any, salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """Oxygen partial pressure in kPa from % air saturation.

    Parameters
    ----------
    percent_air_saturation
        Oxygen level. [% air saturation]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    pO2 = %/100 · 0.20946 (P − pH2O). [kPa]

    Notes
    -----
    See :func:`air_saturation_partial_pressure`.
    """
    return convert(percent_air_saturation, PERCENT_AIR_SATURATION, KPA, temperature, salinity, pressure)


def percent_air_saturation_from_kpa(
    kpa: Any, temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """% air saturation from oxygen partial pressure in kPa.

    Parameters
    ----------
    kpa
        Oxygen partial pressure. [kPa]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen level, 100 · pO2 / (0.20946 (P − pH2O)). [% air saturation]

    Notes
    -----
    See :func:`air_saturation_partial_pressure`.
    """
    return convert(kpa, KPA, PERCENT_AIR_SATURATION, temperature, salinity, pressure)


def mmhg_from_percent_air_saturation(
    percent_air_saturation: Any, temperature: Any, salinity: Any = 0.0,
    pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """Oxygen partial pressure in mmHg from % air saturation.

    Parameters
    ----------
    percent_air_saturation
        Oxygen level. [% air saturation]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen partial pressure. [mmHg]

    Notes
    -----
    See :func:`air_saturation_partial_pressure`; 1 mmHg = 133.322387415 Pa.
    """
    return convert(percent_air_saturation, PERCENT_AIR_SATURATION, MMHG, temperature, salinity, pressure)


def percent_air_saturation_from_mmhg(
    mmhg: Any, temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """% air saturation from oxygen partial pressure in mmHg.

    Parameters
    ----------
    mmhg
        Oxygen partial pressure. [mmHg]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen level. [% air saturation]

    Notes
    -----
    See :func:`air_saturation_partial_pressure`; 1 mmHg = 133.322387415 Pa.
    """
    return convert(mmhg, MMHG, PERCENT_AIR_SATURATION, temperature, salinity, pressure)


def mg_l_from_kpa(
    kpa: Any, temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """Oxygen concentration from oxygen partial pressure in kPa (Henry's law).

    Parameters
    ----------
    kpa
        Oxygen partial pressure. [kPa]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen concentration, C_sat · pO2 / pO2_sat. [mg/L]

    Notes
    -----
    See :func:`convert`.
    """
    return convert(kpa, KPA, MG_L, temperature, salinity, pressure)


def kpa_from_mg_l(
    mg_l: Any, temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA,
) -> Any:
    """Oxygen partial pressure in kPa from oxygen concentration (Henry's law).

    Parameters
    ----------
    mg_l
        Oxygen concentration. [mg/L]
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity. [-]
    pressure
        Barometric (absolute) pressure. [Pa]

    Returns
    -------
    Oxygen partial pressure, pO2_sat · C / C_sat. [kPa]

    Notes
    -----
    See :func:`convert`.
    """
    return convert(mg_l, MG_L, KPA, temperature, salinity, pressure)
