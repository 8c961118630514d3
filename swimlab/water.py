"""Properties of fresh water and seawater: density, viscosity, vapour pressure.

Inputs: water temperature [°C] (ITS-90), practical salinity S_P [-] (PSS-78; 0 for fresh
water) and absolute pressure [Pa]. Where a correlation needs absolute salinity in g/kg, swimlab
uses reference salinity S_R = (35.16504/35) · S_P (reference-composition seawater; TEOS-10's
``gsw.SR_from_SP``), i.e. no regional absolute-salinity anomaly.

All functions accept scalars, ndarrays and pandas Series (a Series keeps its index) and broadcast
their arguments. Outside the supported range (0–40 °C, S_P 0–42) they raise
:class:`swimlab.errors.OutOfRangeError` naming the argument, the value, the range and the
correlations behind it.
"""

from __future__ import annotations

from typing import Any

import gsw
import numpy as np

from swimlab import _validate
from swimlab.constants import (
    G_PER_KG,
    IAPWS2008_H0,
    IAPWS2008_H1,
    IAPWS2008_REFERENCE_VISCOSITY,
    PA_PER_DBAR,
    REFERENCE_SALINITY_PER_PRACTICAL,
    SALINITY_RANGE,
    SHARQAWY2010_A,
    SHARQAWY2010_B,
    SPECIFIC_GAS_CONSTANT_WATER,
    STANDARD_ATMOSPHERE_PA,
    TEMPERATURE_RANGE_C,
    WAGNER_PRUSS2002_A,
    WAGNER_PRUSS2002_EXPONENTS,
    WATER_CRITICAL_DENSITY,
    WATER_CRITICAL_PRESSURE_PA,
    WATER_CRITICAL_TEMPERATURE_K,
    WATER_PRESSURE_RANGE_PA,
    WEISS_PRICE1980,
    ZERO_CELSIUS_K,
)

__all__ = [
    "VAPOUR_PRESSURE_METHODS",
    "density",
    "dynamic_viscosity",
    "kinematic_viscosity",
    "reference_salinity_from_practical_salinity",
    "vapour_pressure",
]

VAPOUR_PRESSURE_METHODS = ("weiss_price1980", "wagner_pruss2002")
"""Valid ``method`` choices of :func:`vapour_pressure`."""

_RANGE_WHAT = (
    "supported range of swimlab's water correlations: TEOS-10, IAPWS 2008, "
    "Sharqawy et al. 2010, Weiss & Price 1980, Garcia & Gordon 1992"
)


def _temperature(value: Any) -> np.ndarray:
    return _validate.in_range("temperature", value, *TEMPERATURE_RANGE_C, "°C", what=_RANGE_WHAT)


def _salinity(value: Any) -> np.ndarray:
    return _validate.in_range("salinity", value, *SALINITY_RANGE, "practical salinity", what=_RANGE_WHAT)


def _pressure(value: Any) -> np.ndarray:
    return _validate.in_range(
        "pressure", value, *WATER_PRESSURE_RANGE_PA, "Pa, absolute",
        what="pressures accepted for water density",
    )


def reference_salinity_from_practical_salinity(salinity: Any) -> Any:
    """Reference salinity from practical salinity.

    Parameters
    ----------
    salinity
        Practical salinity S_P. [-]

    Returns
    -------
    Reference salinity S_R, taken as absolute salinity. [g/kg]

    Notes
    -----
    S_R = u_PS · S_P with u_PS = 35.16504/35 g/kg (Millero et al. 2008, eq. 7; TEOS-10,
    ``gsw.SR_from_SP``). Valid for reference-composition seawater; fresh water gives 0.
    """
    sp = _salinity(salinity)
    return _validate.like_input(sp * REFERENCE_SALINITY_PER_PRACTICAL, salinity)


def density(temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA) -> Any:
    """Density of fresh water or seawater (TEOS-10).

    Parameters
    ----------
    temperature
        Water temperature (in situ, ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]
    pressure
        Absolute pressure at the water. [Pa]

    Returns
    -------
    Density. [kg/m³]

    Notes
    -----
    ρ = 1 / (∂g/∂p) of the TEOS-10 Gibbs function of seawater (IOC, SCOR & IAPSO 2010,
    eq. 2.8.2), evaluated with ``gsw.rho_t_exact(S_A, t, p_sea)`` where S_A = S_R (see
    :func:`reference_salinity_from_practical_salinity`) and sea pressure p_sea = p − 101325 Pa in
    dbar. This is the exact Gibbs function behind ``gsw.rho`` (which evaluates the 75-term
    polynomial in conservative temperature; the two agree to about 1e-3 kg/m³ here). At S = 0 the
    Gibbs function reduces to the IAPWS-09 fit of pure liquid water (IAPWS-95). Supported range
    0–40 °C, S_P 0–42, 50 kPa – 1 MPa.
    """
    t = _temperature(temperature)
    sp = _salinity(salinity)
    p = _pressure(pressure)
    sa = sp * REFERENCE_SALINITY_PER_PRACTICAL
    p_sea_dbar = (p - STANDARD_ATMOSPHERE_PA) / PA_PER_DBAR
    rho = np.asarray(gsw.rho_t_exact(sa, t, p_sea_dbar), dtype=float)
    return _validate.like_input(rho, temperature, salinity, pressure)


def _iapws2008_viscosity(temperature_k: np.ndarray, density_kg_m3: np.ndarray) -> np.ndarray:
    """IAPWS 2008 viscosity μ = μ* μ̄0(T̄) μ̄1(T̄, ρ̄), with μ̄2 = 1. [Pa·s]"""
    t_bar = temperature_k / WATER_CRITICAL_TEMPERATURE_K
    rho_bar = density_kg_m3 / WATER_CRITICAL_DENSITY
    mu0 = 100.0 * np.sqrt(t_bar) / sum(h / t_bar**i for i, h in enumerate(IAPWS2008_H0))
    x = 1.0 / t_bar - 1.0
    y = rho_bar - 1.0
    total = np.zeros(np.broadcast(x, y).shape)
    for i, row in enumerate(IAPWS2008_H1):
        for j, h in enumerate(row):
            if h != 0.0:
                total = total + h * x**i * y**j
    mu1 = np.exp(rho_bar * total)
    return IAPWS2008_REFERENCE_VISCOSITY * mu0 * mu1


def _poly(coefficients: tuple[float, ...], x: np.ndarray) -> np.ndarray:
    return sum(c * x**i for i, c in enumerate(coefficients))


def dynamic_viscosity(temperature: Any, salinity: Any = 0.0) -> Any:
    """Dynamic viscosity of fresh water or seawater at atmospheric pressure.

    Parameters
    ----------
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]

    Returns
    -------
    Dynamic viscosity. [Pa·s]

    Notes
    -----
    Pure water: IAPWS R12-08 (2008) formulation, μ = μ* μ̄0(T̄) μ̄1(T̄, ρ̄) (Huber et al. 2009,
    eqs. 10–12) with the critical enhancement μ̄2 = 1 (exact to better than 1e-6 relative away
    from the critical point), ρ the pure-water density at 101325 Pa from :func:`density`.
    Seawater: μ_sw = μ_w (1 + A S + B S²), A = 1.541 + 1.998e-2 t − 9.52e-5 t²,
    B = 7.974 − 7.561e-2 t + 4.724e-4 t², S = S_R in kg/kg, t in °C (Sharqawy, Lienhard &
    Zubair 2010, eq. 22; valid 0–180 °C, 0–0.15 kg/kg, accuracy ±1.5 %), with μ_w from IAPWS
    2008 as the ITTC 2011 fresh and seawater tables do. Supported range 0–40 °C, S_P 0–42.
    """
    t = _temperature(temperature)
    sp = _salinity(salinity)
    t, sp = np.broadcast_arrays(t, sp)
    rho_w = np.asarray(density(t, 0.0), dtype=float)
    mu_w = _iapws2008_viscosity(t + ZERO_CELSIUS_K, rho_w)
    s_kg_kg = sp * REFERENCE_SALINITY_PER_PRACTICAL / G_PER_KG
    factor = 1.0 + _poly(SHARQAWY2010_A, t) * s_kg_kg + _poly(SHARQAWY2010_B, t) * s_kg_kg**2
    return _validate.like_input(mu_w * factor, temperature, salinity)


def kinematic_viscosity(
    temperature: Any, salinity: Any = 0.0, pressure: Any = STANDARD_ATMOSPHERE_PA
) -> Any:
    """Kinematic viscosity of fresh water or seawater.

    Parameters
    ----------
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]
    pressure
        Absolute pressure at the water. [Pa]

    Returns
    -------
    Kinematic viscosity ν = μ / ρ. [m²/s]

    Notes
    -----
    μ from :func:`dynamic_viscosity` (at atmospheric pressure; the pressure effect on μ is below
    1e-4 relative per 100 kPa near 20 °C and is neglected), ρ from :func:`density` at
    ``pressure``. Supported range 0–40 °C, S_P 0–42.
    """
    mu = np.asarray(dynamic_viscosity(temperature, salinity), dtype=float)
    rho = np.asarray(density(temperature, salinity, pressure), dtype=float)
    return _validate.like_input(mu / rho, temperature, salinity, pressure)


def _wagner_pruss_pure_water(temperature_k: np.ndarray) -> np.ndarray:
    theta = 1.0 - temperature_k / WATER_CRITICAL_TEMPERATURE_K
    series = sum(
        a * theta**n for a, n in zip(WAGNER_PRUSS2002_A, WAGNER_PRUSS2002_EXPONENTS, strict=True)
    )
    return WATER_CRITICAL_PRESSURE_PA * np.exp(WATER_CRITICAL_TEMPERATURE_K / temperature_k * series)


def _water_activity_teos10(temperature_c: np.ndarray, salinity_sp: np.ndarray) -> np.ndarray:
    """Water activity a_w = exp[(μ_W(S_A) − μ_W(0)) / (R_w T)] from TEOS-10."""
    sa = salinity_sp * REFERENCE_SALINITY_PER_PRACTICAL
    # gsw returns the chemical potential of water in seawater in J/g.
    d_mu = (
        np.asarray(gsw.chem_potential_water_t_exact(sa, temperature_c, 0.0))
        - np.asarray(gsw.chem_potential_water_t_exact(0.0 * sa, temperature_c, 0.0))
    ) * G_PER_KG
    return np.exp(d_mu / (SPECIFIC_GAS_CONSTANT_WATER * (temperature_c + ZERO_CELSIUS_K)))


def vapour_pressure(temperature: Any, salinity: Any = 0.0, method: str = "weiss_price1980") -> Any:
    """Saturation vapour pressure of water over fresh water or seawater.

    Parameters
    ----------
    temperature
        Water temperature (ITS-90). [°C]
    salinity
        Practical salinity; 0 for fresh water. [-]
    method
        ``"weiss_price1980"`` (default) or ``"wagner_pruss2002"``.

    Returns
    -------
    Saturation vapour pressure of water. [Pa]

    Notes
    -----
    ``"weiss_price1980"``: ln(pH2O/atm) = 24.4543 − 67.4509 (100/T) − 4.8489 ln(T/100)
    − 0.000544 S, T in K (Weiss & Price 1980, eq. 10; fitted 0–40 °C, S 0–40, the vapour
    pressure used with oceanographic gas solubilities).

    ``"wagner_pruss2002"``: the IAPWS-95 saturation pressure of pure water from the auxiliary
    equation of Wagner & Pruss (2002, eq. 2.5), multiplied by the water activity of seawater
    a_w = exp[(μ_W(S_A) − μ_W(0)) / (R_w T)] from the TEOS-10 Gibbs function (IOC, SCOR & IAPSO
    2010; ``gsw.chem_potential_water_t_exact``), i.e. Raoult's law with a real-solution
    activity and an ideal vapour. The two methods agree to about 0.1 % over 0–40 °C, S 0–42.
    """
    _validate.choice("method", method, VAPOUR_PRESSURE_METHODS)
    t = _temperature(temperature)
    sp = _salinity(salinity)
    t, sp = np.broadcast_arrays(t, sp)
    t_k = t + ZERO_CELSIUS_K
    if method == "weiss_price1980":
        c0, c1, c2, c3 = WEISS_PRICE1980
        p_atm = np.exp(c0 + c1 * (100.0 / t_k) + c2 * np.log(t_k / 100.0) + c3 * sp)
        p = p_atm * STANDARD_ATMOSPHERE_PA
    else:
        p = _wagner_pruss_pure_water(t_k) * _water_activity_teos10(t, sp)
    return _validate.like_input(p, temperature, salinity)
