"""Named physical constants and correlation coefficients, each with its unit and source.

Coefficients of a published correlation are kept together as a tuple in the order of the source's
equation. Values marked "from memory" were recalled rather than read from the source; each of them
is checked in ``tests/`` against an independent reference (a general-purpose library or a
published check value). Full references are in ``docs/references.md``.
"""

from __future__ import annotations

# --- units and reference states ----------------------------------------------------------------

ZERO_CELSIUS_K = 273.15
"""Temperature of 0 °C on the kelvin scale. [K] Definition of the Celsius scale (BIPM SI
Brochure, 9th ed., 2019)."""

STANDARD_ATMOSPHERE_PA = 101325.0
"""Standard atmosphere. [Pa] Definition (BIPM SI Brochure, 9th ed., 2019)."""

PA_PER_DBAR = 1.0e4
"""Pascals in one decibar, the pressure unit of TEOS-10 functions. [Pa/dbar] Definition."""

PA_PER_KPA = 1.0e3
"""Pascals in one kilopascal. [Pa/kPa] Definition."""

PA_PER_HPA = 1.0e2
"""Pascals in one hectopascal. [Pa/hPa] Definition."""

PA_PER_MMHG = 133.322387415
"""Pascals in one conventional millimetre of mercury (13.5951 g/cm³ × 9.80665 m/s² × 1 mm).
[Pa/mmHg] BIPM SI Brochure, 8th ed. (2006), Table 9. The torr (101325/760 Pa) differs from it by
less than 2e-7 relative and is accepted as the same unit (see :data:`PA_PER_TORR`)."""

PA_PER_TORR = STANDARD_ATMOSPHERE_PA / 760.0
"""Pascals in one torr. [Pa/Torr] Definition (1/760 of a standard atmosphere)."""

REFERENCE_SALINITY_PER_PRACTICAL = 35.16504 / 35.0
"""Reference salinity per unit of practical salinity, u_PS: S_R = u_PS · S_P. [g/kg]
Millero et al. (2008), eq. 7; TEOS-10 (IOC et al. 2010), used by ``gsw.SR_from_SP``. swimlab
takes absolute salinity equal to reference salinity (reference-composition seawater, no
absolute-salinity anomaly)."""

G_PER_KG = 1.0e3
"""Grams in one kilogram. [g/kg] Definition."""

SECONDS_PER_HOUR = 3600.0
"""Seconds in one hour. [s/h] Definition."""

M_PER_KM = 1.0e3
"""Metres in one kilometre. [m/km] Definition."""

CM_PER_M = 1.0e2
"""Centimetres in one metre. [cm/m] Definition."""

MOLAR_MASS_O2 = 31.9988
"""Molar mass of molecular oxygen, 2 × 15.9994 g/mol. [g/mol] IUPAC standard atomic weight of
oxygen 15.9994 (IUPAC 1995, from memory); equals 31.9988 mg/mmol."""

O2_MOLE_FRACTION_DRY_AIR = 0.20946
"""Mole fraction of oxygen in dry air. [-] Benson & Krause (1984) and Garcia & Gordon (1992) use
0.20946 (Glueckauf 1951; from memory)."""

SPECIFIC_GAS_CONSTANT_WATER = 461.51805
"""Specific gas constant of water, R/M_w. [J/(kg·K)] IAPWS-95 (Wagner & Pruss 2002), from
memory; checked through the water-activity cross-check in tests/test_water.py."""

# --- supported ranges ----------------------------------------------------------------------------

TEMPERATURE_RANGE_C = (0.0, 40.0)
"""Water temperatures swimlab's water and oxygen correlations are used over. [°C] The narrowest
of the correlations' ranges: Garcia & Gordon (1992) fit from the freezing point to 40 °C; Weiss
& Price (1980) 0–40 °C; IAPWS 2008 viscosity, Sharqawy et al. (2010) and TEOS-10 are wider."""

SALINITY_RANGE = (0.0, 42.0)
"""Practical salinities swimlab's water and oxygen correlations are used over. [-] Garcia &
Gordon (1992) fit 0–42; TEOS-10 (gsw) 0–42 g/kg for its fast polynomial; Sharqawy et al. (2010)
0–150 g/kg."""

BAROMETRIC_PRESSURE_RANGE_PA = (50.0e3, 110.0e3)
"""Barometric pressures accepted for oxygen solubility and conversions. [Pa] Common practice:
from about 5500 m altitude (≈ 50 kPa) to the highest sea-level pressures (≈ 108 kPa)."""

WATER_PRESSURE_RANGE_PA = (50.0e3, 1.0e6)
"""Absolute pressures accepted for water density. [Pa] Common practice: a high-altitude lab at
the surface to 90 m of water column, far inside TEOS-10's range."""

# --- IAPWS: critical point and reduced quantities ------------------------------------------------

WATER_CRITICAL_TEMPERATURE_K = 647.096
"""Critical temperature of water. [K] IAPWS-95 (Wagner & Pruss 2002); IAPWS 2008 viscosity
release, T* (Huber et al. 2009, eq. 1)."""

WATER_CRITICAL_PRESSURE_PA = 22.064e6
"""Critical pressure of water. [Pa] IAPWS-95 (Wagner & Pruss 2002)."""

WATER_CRITICAL_DENSITY = 322.0
"""Critical density of water, ρ* of the IAPWS 2008 viscosity release. [kg/m³] Huber et al.
(2009), eq. 2."""

IAPWS2008_REFERENCE_VISCOSITY = 1.0e-6
"""Reference viscosity μ* of the IAPWS 2008 viscosity release. [Pa·s] Huber et al. (2009), eq. 3."""

IAPWS2008_H0 = (1.67752, 2.20462, 0.6366564, -0.241605)
"""Coefficients H_i (i = 0…3) of the dilute-gas viscosity μ̄0 = 100 √T̄ / Σ H_i / T̄^i. [-]
IAPWS R12-08 (2008), Table 1; Huber et al. (2009), eq. 11. Checked against the release's Table 4
check values in tests/test_water.py."""

IAPWS2008_H1 = (
    (5.20094e-1, 2.22531e-1, -2.81378e-1, 1.61913e-1, -3.25372e-2, 0.0, 0.0),
    (8.50895e-2, 9.99115e-1, -9.06851e-1, 2.57399e-1, 0.0, 0.0, 0.0),
    (-1.08374, 1.88797, -7.72479e-1, 0.0, 0.0, 0.0, 0.0),
    (-2.89555e-1, 1.26613, -4.89837e-1, 0.0, 6.98452e-2, 0.0, -4.35673e-3),
    (0.0, 0.0, -2.57040e-1, 0.0, 0.0, 8.72102e-3, 0.0),
    (0.0, 1.20573e-1, 0.0, 0.0, 0.0, 0.0, -5.93264e-4),
)
"""Coefficients H_ij (row i = 0…5 for (1/T̄ − 1)^i, column j = 0…6 for (ρ̄ − 1)^j) of the
residual factor μ̄1 = exp[ρ̄ Σ Σ H_ij (1/T̄ − 1)^i (ρ̄ − 1)^j]. [-] IAPWS R12-08 (2008), Table 2;
Huber et al. (2009), eq. 12. Checked against the release's Table 4 check values."""

# --- Sharqawy et al. (2010): seawater viscosity --------------------------------------------------

SHARQAWY2010_A = (1.541, 1.998e-2, -9.52e-5)
"""Coefficients of A = a0 + a1 t + a2 t² in μ_sw = μ_w (1 + A S + B S²), t in °C, S in kg/kg.
[-] Sharqawy, Lienhard & Zubair (2010), eq. 22; valid 0–180 °C, 0–0.15 kg/kg, ±1.5 %."""

SHARQAWY2010_B = (7.974, -7.561e-2, 4.724e-4)
"""Coefficients of B = b0 + b1 t + b2 t² in μ_sw = μ_w (1 + A S + B S²). [-] Sharqawy, Lienhard
& Zubair (2010), eq. 22."""

# --- vapour pressure -------------------------------------------------------------------------------

WAGNER_PRUSS2002_A = (-7.85951783, 1.84408259, -11.7866497, 22.6807411, -15.9618719, 1.80122502)
"""Coefficients a1…a6 of the saturation vapour pressure of pure water,
ln(p/p_c) = (T_c/T)(a1 ϑ + a2 ϑ^1.5 + a3 ϑ³ + a4 ϑ^3.5 + a5 ϑ⁴ + a6 ϑ^7.5), ϑ = 1 − T/T_c. [-]
Wagner & Pruss (2002), eq. 2.5 (from memory); checked against the IAPWS-IF97 saturation line of
the ``iapws`` package in tests/test_water.py."""

WAGNER_PRUSS2002_EXPONENTS = (1.0, 1.5, 3.0, 3.5, 4.0, 7.5)
"""Exponents of ϑ in Wagner & Pruss (2002), eq. 2.5. [-]"""

WEISS_PRICE1980 = (24.4543, -67.4509, -4.8489, -0.000544)
"""Coefficients of ln(pH2O / 1 atm) = c0 + c1 (100/T) + c2 ln(T/100) + c3 S, T in K, S practical
salinity. [-] Weiss & Price (1980), eq. 10 (from memory); fitted over 0–40 °C, S 0–40. Checked
against Wagner & Pruss (2002) with TEOS-10 water activity in tests/test_water.py."""

# --- Garcia & Gordon (1992): oxygen solubility -----------------------------------------------------

GARCIA_GORDON1992_A = (5.80871, 3.20291, 4.17887, 5.10006, -9.86643e-2, 3.80369)
"""Coefficients A0…A5 of ln C = Σ A_i Ts^i + S Σ B_i Ts^i + C0 S², C in µmol/kg, for the
combined fit of Benson & Krause (1984) data. [-] Garcia & Gordon (1992), eq. 8 and Table 1
(from memory); checked against their check value (274.610 µmol/kg at 10 °C, S 35) and
``gsw.O2sol_SP_pt``."""

GARCIA_GORDON1992_B = (-7.01577e-3, -7.70028e-3, -1.13864e-2, -9.51519e-3)
"""Coefficients B0…B3 of Garcia & Gordon (1992), eq. 8, Benson & Krause fit. [-]"""

GARCIA_GORDON1992_C0 = -2.75915e-7
"""Coefficient C0 of Garcia & Gordon (1992), eq. 8, Benson & Krause fit. [-]"""

GARCIA_GORDON1992_TS_OFFSET_C = 298.15
"""Offset in the scaled temperature Ts = ln[(298.15 − t)/(273.15 + t)]. [°C] Garcia & Gordon
(1992), eq. 8."""

IPTS68_PER_ITS90 = 1.00024
"""Ratio t68 / t90 of Celsius temperatures on the 1968 and 1990 scales, used because Garcia &
Gordon (1992) fit on IPTS-68. [-] Saunders (1990); the conversion used in TEOS-10's
``gsw.O2sol_SP_pt``."""

# --- flume -----------------------------------------------------------------------------------------

BELL_TERHUNE1970_TAU = 0.8
"""Factor τ of the solid-blocking correction ε_s = τ λ (A_o/A_T)^1.5 for a fish-shaped body. [-]
Bell & Terhune (1970), following the wind-tunnel solid-blocking analysis (Pope & Harper 1966);
value from memory of the swim-tunnel literature (τ ≈ 0.8 for a streamlined body)."""

BELL_TERHUNE1970_LAMBDA_SCALE = 0.5
"""Factor in the body shape factor λ = 0.5 · L / t, L body length, t body thickness. [-]
Bell & Terhune (1970), from memory of their definition."""

BELL_TERHUNE1970_EXPONENT = 1.5
"""Exponent of the blocking ratio in ε_s = τ λ (A_o/A_T)^1.5. [-] Bell & Terhune (1970)."""

# --- hydrodynamics ---------------------------------------------------------------------------------

BLASIUS_COEFFICIENT = 1.328
"""Coefficient of the laminar flat-plate friction line C_f = 1.328 / √Re (both sides averaged over
the plate's length). [-] Blasius (1908); Schlichting & Gersten (2017), eq. 6.59 (from memory)."""

PRANDTL_SCHLICHTING_COEFFICIENT = 0.455
"""Coefficient of the turbulent flat-plate line C_f = 0.455 / (log10 Re)^2.58. [-] Schlichting
(1979), eq. 21.16 (Prandtl–Schlichting skin-friction law; from memory)."""

PRANDTL_SCHLICHTING_EXPONENT = 2.58
"""Exponent of the Prandtl–Schlichting line. [-] Schlichting (1979), eq. 21.16 (from memory)."""

ITTC1957_COEFFICIENT = 0.075
"""Coefficient of the ITTC-1957 model–ship correlation line C_f = 0.075 / (log10 Re − 2)². [-]
ITTC (1957); ITTC Recommended Procedure 7.5-02-02-02 (2017)."""

ITTC1957_OFFSET = 2.0
"""Offset subtracted from log10 Re in the ITTC-1957 line. [-] ITTC (1957)."""

LAMINAR_REYNOLDS_MAX = 5.0e5
"""Reynolds number on length below which a flat-plate boundary layer is taken as laminar. [-]
Common practice: the critical Reynolds number of the flat plate, Re ≈ 5 × 10^5 (Schlichting &
Gersten 2017, from memory)."""

TURBULENT_REYNOLDS_MIN = 3.0e6
"""Reynolds number on length above which a flat-plate boundary layer is taken as turbulent. [-]
Common practice: end of natural transition in a quiet stream, Re ≈ 3 × 10^6 (Schlichting &
Gersten 2017, from memory)."""

HOERNER1965_FORM = (1.5, 1.5, 7.0, 3.0)
"""Terms (a, m, b, n) of the form factor 1 + k = 1 + a (d/l)^m + b (d/l)^n of a streamlined body
of revolution, d maximum diameter, l length. [-] Hoerner (1965), Fluid-Dynamic Drag, ch. 6,
eq. 27 (from memory: 1 + 1.5 (d/l)^1.5 + 7 (d/l)³)."""
