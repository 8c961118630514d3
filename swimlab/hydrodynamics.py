"""Hydrodynamics of a swimming fish: Reynolds number, flow regime, friction lines, drag, power.

The drag of a fish is estimated as that of a rigid streamlined body of the same size: the
skin friction of a flat plate of the same length and wetted area, raised by a form factor for
the body's thickness (Hoerner 1965). A swimming fish's drag differs from this (body undulation
raises it, by a factor of about 3 in Lighthill's estimate); the result is a reference, not a
measurement. Lengths in m, speeds in m/s, SI throughout.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from swimlab import _validate
from swimlab.constants import (
    BLASIUS_COEFFICIENT,
    HOERNER1965_FORM,
    ITTC1957_COEFFICIENT,
    ITTC1957_OFFSET,
    LAMINAR_REYNOLDS_MAX,
    PRANDTL_SCHLICHTING_COEFFICIENT,
    PRANDTL_SCHLICHTING_EXPONENT,
    TURBULENT_REYNOLDS_MIN,
)
from swimlab.errors import InputError, OutOfRangeError

__all__ = [
    "FORM_FACTOR_METHODS",
    "FRICTION_METHODS",
    "WETTED_AREA_METHODS",
    "drag",
    "drag_power",
    "equivalent_diameter",
    "flow_regime",
    "form_factor",
    "reynolds_number",
    "skin_friction_coefficient",
    "wetted_area",
]

FRICTION_METHODS = ("blasius", "prandtl_schlichting", "ittc1957")
"""Valid ``method`` choices of :func:`skin_friction_coefficient` and :func:`drag`."""

WETTED_AREA_METHODS = ("prolate_spheroid", "ellipsoid")
"""Valid ``method`` choices of :func:`wetted_area`."""

FORM_FACTOR_METHODS = ("hoerner1965",)
"""Valid ``method`` choices of :func:`form_factor`."""

_MIN_REYNOLDS = {"blasius": 0.0, "prandtl_schlichting": 1.0, "ittc1957": 10.0**ITTC1957_OFFSET}


def reynolds_number(length: Any, speed: Any, kinematic_viscosity: Any) -> Any:
    """Reynolds number on a length.

    Parameters
    ----------
    length
        Characteristic length, for a fish its body length. [m]
    speed
        Water speed relative to the body. [m/s]
    kinematic_viscosity
        Kinematic viscosity of the water (see :func:`swimlab.water.kinematic_viscosity`). [m²/s]

    Returns
    -------
    Re = U L / ν. [-]
    """
    length_ = _validate.positive("length", length, "m")
    u = _validate.non_negative("speed", speed, "m/s")
    nu = _validate.positive("kinematic_viscosity", kinematic_viscosity, "m²/s")
    return _validate.like_input(u * length_ / nu, length, speed, kinematic_viscosity)


def flow_regime(reynolds: Any) -> Any:
    """Name the boundary-layer regime of a Reynolds number on length.

    Parameters
    ----------
    reynolds
        Reynolds number on body length. [-]

    Returns
    -------
    ``"laminar"`` (Re < 5 × 10^5), ``"transitional"`` (5 × 10^5 ≤ Re ≤ 3 × 10^6) or
    ``"turbulent"`` (Re > 3 × 10^6): a str for a scalar, an array of str for an array, a Series
    for a Series.

    Notes
    -----
    Thresholds of a flat plate in a quiet stream (:data:`~swimlab.constants.LAMINAR_REYNOLDS_MAX`,
    :data:`~swimlab.constants.TURBULENT_REYNOLDS_MIN`; Schlichting & Gersten 2017, common
    practice). Free-stream turbulence in a swim tunnel and the fish's own motion move transition
    to lower Re.
    """
    re = _validate.non_negative("reynolds", reynolds)
    names = np.where(
        re < LAMINAR_REYNOLDS_MAX, "laminar",
        np.where(re > TURBULENT_REYNOLDS_MIN, "turbulent", "transitional"),
    )
    if isinstance(reynolds, pd.Series):
        return pd.Series(names, index=reynolds.index)
    if np.ndim(names) == 0:
        return str(names)
    return names


def skin_friction_coefficient(reynolds: Any, method: str = "ittc1957") -> Any:
    """Skin-friction coefficient of a flat plate of the same length.

    Parameters
    ----------
    reynolds
        Reynolds number on length. [-]
    method
        ``"blasius"``, ``"prandtl_schlichting"`` or ``"ittc1957"``.

    Returns
    -------
    Mean skin-friction coefficient C_f over the wetted area. [-]

    Notes
    -----
    - ``"blasius"``: C_f = 1.328 / √Re, laminar boundary layer along the whole plate (Blasius
      1908); applies for Re below about 5 × 10^5.
    - ``"prandtl_schlichting"``: C_f = 0.455 / (log10 Re)^2.58, fully turbulent smooth plate
      (Schlichting 1979, eq. 21.16); applies from about 5 × 10^5 to 10^9.
    - ``"ittc1957"``: C_f = 0.075 / (log10 Re − 2)², the ITTC-1957 model–ship correlation line
      (ITTC 1957), a turbulent line that includes some form effect; used in ship practice from
      about 10^5 upward and defined only for Re > 100.

    Below a method's domain (Re ≤ 0 for Blasius, ≤ 1 for Prandtl–Schlichting, ≤ 100 for
    ITTC-1957) :class:`~swimlab.errors.OutOfRangeError` is raised. Which line fits a fish's Re is
    left to the caller; :func:`flow_regime` names the regime.
    """
    _validate.choice("method", method, FRICTION_METHODS)
    re = _validate.finite("reynolds", reynolds)
    low = _MIN_REYNOLDS[method]
    bad = re <= low
    if bad.any():
        raise OutOfRangeError(
            f"reynolds must be greater than {low:g} for the {method} friction line; "
            f"got {float(re[bad].flat[0])!r}"
        )
    if method == "blasius":
        cf = BLASIUS_COEFFICIENT / np.sqrt(re)
    elif method == "prandtl_schlichting":
        cf = PRANDTL_SCHLICHTING_COEFFICIENT / np.log10(re) ** PRANDTL_SCHLICHTING_EXPONENT
    else:
        cf = ITTC1957_COEFFICIENT / (np.log10(re) - ITTC1957_OFFSET) ** 2
    return _validate.like_input(cf, reynolds)


def equivalent_diameter(depth: Any, width: Any) -> Any:
    """Diameter of the circle with the area of the body's elliptic cross-section.

    Parameters
    ----------
    depth
        Maximum body depth. [m]
    width
        Maximum body width. [m]

    Returns
    -------
    d_eq = √(d w). [m]
    """
    d = _validate.positive("depth", depth, "m")
    w = _validate.positive("width", width, "m")
    return _validate.like_input(np.sqrt(d * w), depth, width)


def _prolate_area(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Exact surface of a prolate spheroid, semi-axes a ≥ b."""
    with np.errstate(invalid="ignore", divide="ignore"):
        e = np.sqrt(np.clip(1.0 - (b / a) ** 2, 0.0, 1.0))
        area = 2.0 * np.pi * b**2 * (1.0 + np.where(e > 0, a / (b * e) * np.arcsin(e), 1.0))
    return area


def _ellipsoid_area(x: np.ndarray, y: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Exact surface of an ellipsoid from its three semi-axes (Legendre's form)."""
    axes = np.sort(np.stack(np.broadcast_arrays(x, y, z)), axis=0)
    c, b, a = axes[0], axes[1], axes[2]
    sphere = np.isclose(a, c, rtol=1e-12, atol=0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        phi = np.arccos(np.where(sphere, 0.5, c / a))
        denom = b**2 * (a**2 - c**2)
        m = np.where(sphere, 0.0, a**2 * (b**2 - c**2) / np.where(sphere, 1.0, denom))
        sin_phi = np.sin(phi)
        general = 2.0 * np.pi * c**2 + 2.0 * np.pi * a * b / sin_phi * (
            special.ellipeinc(phi, m) * sin_phi**2 + special.ellipkinc(phi, m) * np.cos(phi) ** 2
        )
    return np.where(sphere, 4.0 * np.pi * a**2, general)


def wetted_area(length: Any, depth: Any, width: Any, method: str = "prolate_spheroid") -> Any:
    """Wetted (surface) area of a fish modelled as a smooth ellipsoidal body.

    Parameters
    ----------
    length
        Body length. [m]
    depth
        Maximum body depth. [m]
    width
        Maximum body width. [m]
    method
        ``"prolate_spheroid"`` (default) or ``"ellipsoid"``.

    Returns
    -------
    Surface area S. [m²]

    Notes
    -----
    - ``"prolate_spheroid"``: a spheroid of length L and equatorial diameter d_eq = √(d w)
      (same cross-sectional area as the fish's ellipse), semi-axes a = L/2, b = d_eq/2; exact
      surface S = 2π b² [1 + a/(b e) · arcsin e], e = √(1 − b²/a²). Needs L ≥ d_eq.
    - ``"ellipsoid"``: a triaxial ellipsoid of semi-axes L/2, d/2, w/2; exact surface
      S = 2π c² + (2π a b / sin φ)[E(φ, k) sin² φ + F(φ, k) cos² φ], a ≥ b ≥ c,
      cos φ = c/a, k² = a²(b² − c²) / (b²(a² − c²)), with Legendre's incomplete elliptic
      integrals (``scipy.special.ellipeinc``, ``ellipkinc``).

    Both ignore fins, which add wetted area (a fish's real wetted area is commonly 10–30 % above
    its body's; common practice). For the prolate method d_eq keeps the cross-sectional area;
    for a laterally compressed fish the ellipsoid method follows the body better.
    """
    _validate.choice("method", method, WETTED_AREA_METHODS)
    length_ = _validate.positive("length", length, "m")
    d = _validate.positive("depth", depth, "m")
    w = _validate.positive("width", width, "m")
    if method == "prolate_spheroid":
        d_eq = np.sqrt(d * w)
        bad = np.broadcast_to(length_ < d_eq, np.broadcast(length_, d_eq).shape)
        if bad.any():
            raise InputError(
                f"length {float(np.broadcast_to(length_, bad.shape)[bad].flat[0])!r} m is shorter "
                f"than the body's equivalent diameter √(depth·width); a prolate spheroid needs "
                f"length ≥ diameter (use method='ellipsoid')"
            )
        area = _prolate_area(length_ / 2.0, d_eq / 2.0)
    else:
        area = _ellipsoid_area(length_ / 2.0, d / 2.0, w / 2.0)
    return _validate.like_input(area, length, depth, width)


def form_factor(length: Any, depth: Any, width: Any, method: str = "hoerner1965") -> Any:
    """Form factor 1 + k of a streamlined body, the ratio of its drag to its skin friction.

    Parameters
    ----------
    length
        Body length. [m]
    depth
        Maximum body depth. [m]
    width
        Maximum body width. [m]
    method
        ``"hoerner1965"``.

    Returns
    -------
    1 + k. [-]

    Notes
    -----
    1 + k = 1 + 1.5 (d/l)^1.5 + 7 (d/l)³ for a streamlined body of revolution, drag referred to
    the wetted area (Hoerner 1965, ch. 6; from memory), with d the equivalent diameter √(d w) of
    the fish's cross-section and l its length. Fitted to bodies with l/d from about 2 to 10
    (Hoerner 1965).
    """
    _validate.choice("method", method, FORM_FACTOR_METHODS)
    length_ = _validate.positive("length", length, "m")
    d_eq = np.asarray(equivalent_diameter(depth, width), dtype=float)
    a, m, b, n = HOERNER1965_FORM
    ratio = d_eq / length_
    return _validate.like_input(1.0 + a * ratio**m + b * ratio**n, length, depth, width)


def drag(
    speed: Any,
    length: Any,
    depth: Any,
    width: Any,
    density: Any,
    kinematic_viscosity: Any,
    method: str = "ittc1957",
    *,
    area_method: str = "prolate_spheroid",
    form_method: str = "hoerner1965",
) -> Any:
    """Drag of a rigid streamlined body of the fish's size.

    Parameters
    ----------
    speed
        Water speed at the fish (corrected for blocking). [m/s]
    length, depth, width
        Body length, maximum depth and maximum width. [m]
    density
        Water density (see :func:`swimlab.water.density`). [kg/m³]
    kinematic_viscosity
        Water kinematic viscosity (see :func:`swimlab.water.kinematic_viscosity`). [m²/s]
    method
        Friction line of :func:`skin_friction_coefficient`.
    area_method
        Method of :func:`wetted_area`.
    form_method
        Method of :func:`form_factor`.

    Returns
    -------
    D = ½ ρ U² S C_f(Re) (1 + k); zero at zero speed. [N]

    Notes
    -----
    Re = U L / ν (:func:`reynolds_number`), S from :func:`wetted_area`, 1 + k from
    :func:`form_factor` (Hoerner 1965). A rigid-body estimate: a swimming fish's drag is larger.
    """
    u = _validate.non_negative("speed", speed, "m/s")
    rho = _validate.positive("density", density, "kg/m³")
    area = np.asarray(wetted_area(length, depth, width, area_method), dtype=float)
    k1 = np.asarray(form_factor(length, depth, width, form_method), dtype=float)
    re = np.asarray(reynolds_number(length, u, kinematic_viscosity), dtype=float)
    u, rho, area, k1, re = np.broadcast_arrays(u, rho, area, k1, re)
    moving = u > 0
    cf = np.zeros(u.shape)
    if moving.any():
        cf[moving] = np.asarray(skin_friction_coefficient(re[moving], method), dtype=float)
    force = 0.5 * rho * u**2 * area * cf * k1
    return _validate.like_input(force, speed, length, depth, width, density, kinematic_viscosity)


def drag_power(
    speed: Any,
    length: Any,
    depth: Any,
    width: Any,
    density: Any,
    kinematic_viscosity: Any,
    method: str = "ittc1957",
    *,
    area_method: str = "prolate_spheroid",
    form_method: str = "hoerner1965",
) -> Any:
    """Power needed to overcome the rigid-body drag.

    Parameters
    ----------
    speed, length, depth, width, density, kinematic_viscosity, method, area_method, form_method
        As for :func:`drag`.

    Returns
    -------
    P = D U. [W]

    Notes
    -----
    The mechanical power against drag, not the fish's metabolic cost (muscle and propulsive
    efficiencies come between them).
    """
    force = np.asarray(
        drag(speed, length, depth, width, density, kinematic_viscosity, method,
             area_method=area_method, form_method=form_method),
        dtype=float,
    )
    u = _validate.non_negative("speed", speed, "m/s")
    return _validate.like_input(force * u, speed, length, depth, width, density, kinematic_viscosity)
