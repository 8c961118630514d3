"""Swim-tunnel (flume) geometry, speed calibration and the solid-blocking correction.

Lengths in m, areas in m², speeds in m/s. A fish in the working section narrows the flow
around it, so the water passing the fish is faster than the speed set for the empty tunnel; the
solid-blocking correction of Bell & Terhune (1970) estimates by how much. The correction is
trusted only for fish that block a small share of the section (``LabSettings.blocking_ratio_limit``,
about 10 % by common practice); :func:`blocking_flags` says when a fish is beyond it.

The speed calibration maps a motor setting (whatever the lab's controller shows: Hz, %, rpm,
volts) to the water speed measured in the empty working section (e.g. with a flow meter), as a
least-squares polynomial whose residuals are kept.

Live animals: these numbers help plan and report a trial; they do not replace the protocol
approved by the institution's animal-care committee, local law, or licensed practice. A fish
too large for the section (or beyond the blocking limit) should not be swum in it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from swimlab import _validate, checks
from swimlab.constants import (
    BELL_TERHUNE1970_EXPONENT,
    BELL_TERHUNE1970_LAMBDA_SCALE,
    BELL_TERHUNE1970_TAU,
)
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS, LabSettings

__all__ = [
    "BLOCKING_METHODS",
    "SECTION_SHAPES",
    "BlockingResult",
    "SpeedCalibration",
    "blocking_flags",
    "blocking_ratio",
    "blocking_summary",
    "calibration_flags",
    "corrected_speed",
    "fit_speed_calibration",
    "frontal_area",
    "section_area",
    "solid_blocking",
    "speed_at_fish",
]

SECTION_SHAPES = ("rectangular", "circular")
"""Valid ``shape`` choices of :func:`section_area`."""

BLOCKING_METHODS = ("bell_terhune1970",)
"""Valid ``method`` choices of :func:`solid_blocking` and :func:`corrected_speed`."""

CALIBRATION_DEGREES = (1, 2, 3)
"""Valid polynomial degrees of :func:`fit_speed_calibration`."""


# --- geometry -------------------------------------------------------------------------------------


def section_area(
    shape: str, *, width: Any = None, height: Any = None, diameter: Any = None
) -> Any:
    """Cross-sectional area of the working section.

    Parameters
    ----------
    shape
        ``"rectangular"`` (give ``width`` and ``height``) or ``"circular"`` (give ``diameter``).
    width
        Inner width of a rectangular section. [m]
    height
        Inner height (water depth) of a rectangular section. [m]
    diameter
        Inner diameter of a circular section. [m]

    Returns
    -------
    Area A_T. [m²]

    Notes
    -----
    Rectangle: A_T = w h. Circle: A_T = π D² / 4. Use inner dimensions at the fish's position.
    """
    _validate.choice("shape", shape, SECTION_SHAPES)
    if shape == "rectangular":
        if diameter is not None:
            raise InputError(f"diameter does not apply to a rectangular section; got {diameter!r}")
        for name, value in (("width", width), ("height", height)):
            if value is None:
                raise InputError(f"{name} is needed for a rectangular section [m]; got None")
        w = _validate.positive("width", width, "m")
        h = _validate.positive("height", height, "m")
        return _validate.like_input(w * h, width, height)
    if width is not None or height is not None:
        raise InputError(
            f"width and height do not apply to a circular section; got width={width!r}, "
            f"height={height!r}"
        )
    if diameter is None:
        raise InputError("diameter is needed for a circular section [m]; got None")
    d = _validate.positive("diameter", diameter, "m")
    return _validate.like_input(np.pi / 4.0 * d**2, diameter)


def frontal_area(body_depth: Any, body_width: Any) -> Any:
    """Largest cross-sectional (frontal) area of a fish, taken as an ellipse.

    Parameters
    ----------
    body_depth
        Maximum body depth, dorsal to ventral, without fins. [m]
    body_width
        Maximum body width, side to side. [m]

    Returns
    -------
    Frontal area A_o = π/4 · d · w. [m²]

    Notes
    -----
    The fish's largest cross-section is taken as an ellipse with axes d and w (common practice in
    swim-tunnel work). Fins are not included.
    """
    d = _validate.positive("body_depth", body_depth, "m")
    w = _validate.positive("body_width", body_width, "m")
    return _validate.like_input(np.pi / 4.0 * d * w, body_depth, body_width)


def _ratio(frontal: np.ndarray, section: np.ndarray) -> np.ndarray:
    frontal, section = np.broadcast_arrays(frontal, section)
    bad = frontal >= section
    if bad.any():
        raise InputError(
            f"fish larger than the working section: frontal area {float(frontal[bad].flat[0])!r} m² "
            f"is not smaller than section area {float(section[bad].flat[0])!r} m²; check the "
            f"fish's depth and width and the section's dimensions"
        )
    return frontal / section


def blocking_ratio(frontal_area: Any, section_area: Any) -> Any:
    """Share of the working section blocked by the fish.

    Parameters
    ----------
    frontal_area
        Fish frontal area A_o (see :func:`frontal_area`). [m²]
    section_area
        Working-section area A_T (see :func:`section_area`). [m²]

    Returns
    -------
    Blocking ratio A_o / A_T. [-]

    Notes
    -----
    A fish whose frontal area is not smaller than the section raises
    :class:`~swimlab.errors.InputError`.
    """
    a_o = _validate.positive("frontal_area", frontal_area, "m²")
    a_t = _validate.positive("section_area", section_area, "m²")
    return _validate.like_input(_ratio(a_o, a_t), frontal_area, section_area)


def _thickness(body_depth: np.ndarray, body_width: np.ndarray, thickness: Any) -> np.ndarray:
    if thickness is None:
        return np.maximum(body_depth, body_width)
    return _validate.positive("thickness", thickness, "m")


def solid_blocking(
    body_length: Any,
    body_depth: Any,
    body_width: Any,
    section_area: Any,
    method: str = "bell_terhune1970",
    *,
    thickness: Any = None,
) -> Any:
    """Fractional speed increase at the fish due to solid blocking.

    Parameters
    ----------
    body_length
        Fish length used for the shape factor (total length unless the lab decides otherwise). [m]
    body_depth
        Maximum body depth. [m]
    body_width
        Maximum body width. [m]
    section_area
        Working-section area A_T. [m²]
    method
        ``"bell_terhune1970"``.
    thickness
        Body thickness t of the shape factor; by default the larger of depth and width. [m]

    Returns
    -------
    ε_s, so that the speed at the fish is U_T (1 + ε_s). [-]

    Notes
    -----
    Bell & Terhune (1970): ε_s = τ λ (A_o / A_T)^(3/2), with τ = 0.8 a factor of the tunnel's
    cross-section, λ = 0.5 L / t the body's shape factor (L length, t maximum thickness), A_o the
    fish's frontal area (:func:`frontal_area`, an ellipse) and A_T the section's area. The form
    follows the solid-blocking analysis of closed wind tunnels (Pope & Harper 1966). The values of
    τ and λ's definition are from memory of the swim-tunnel literature, not read from Bell &
    Terhune's report; t is taken as the larger of depth and width (pass ``thickness`` to use
    another measure). Trusted for blocking ratios up to about 10 % (common practice).
    """
    _validate.choice("method", method, BLOCKING_METHODS)
    length = _validate.positive("body_length", body_length, "m")
    depth = _validate.positive("body_depth", body_depth, "m")
    width = _validate.positive("body_width", body_width, "m")
    a_t = _validate.positive("section_area", section_area, "m²")
    ratio = _ratio(np.asarray(frontal_area(depth, width), dtype=float), a_t)
    t = _thickness(depth, width, thickness)
    shape = BELL_TERHUNE1970_LAMBDA_SCALE * length / t
    eps = BELL_TERHUNE1970_TAU * shape * ratio**BELL_TERHUNE1970_EXPONENT
    return _validate.like_input(eps, body_length, body_depth, body_width, section_area)


def corrected_speed(
    set_speed: Any,
    body_length: Any,
    body_depth: Any,
    body_width: Any,
    section_area: Any,
    method: str = "bell_terhune1970",
    *,
    thickness: Any = None,
) -> Any:
    """Water speed at the fish, corrected for solid blocking.

    Parameters
    ----------
    set_speed
        Speed of the empty working section at the motor setting used, U_T. [m/s]
    body_length, body_depth, body_width
        Fish morphometrics (see :func:`solid_blocking`). [m]
    section_area
        Working-section area. [m²]
    method
        ``"bell_terhune1970"``.
    thickness
        Body thickness of the shape factor; by default the larger of depth and width. [m]

    Returns
    -------
    U_F = U_T (1 + ε_s), never below ``set_speed``. [m/s]

    Notes
    -----
    Bell & Terhune (1970); see :func:`solid_blocking`.
    """
    eps = solid_blocking(body_length, body_depth, body_width, section_area, method, thickness=thickness)
    return _validate.like_input(
        np.asarray(speed_at_fish(set_speed, eps), dtype=float), set_speed, body_length, body_depth,
        body_width, section_area,
    )


def speed_at_fish(set_speed: Any, epsilon: Any) -> Any:
    """Water speed at the fish from the set speed and a known solid-blocking correction.

    Parameters
    ----------
    set_speed
        Speed of the empty working section, U_T. [m/s]
    epsilon
        Fractional speed increase ε_s (:func:`solid_blocking`; for several fish in one section,
        the sum of theirs). [-]

    Returns
    -------
    U_F = U_T (1 + ε_s). [m/s]
    """
    u_t = _validate.non_negative("set_speed", set_speed, "m/s")
    eps = _validate.non_negative("epsilon", epsilon, "-")
    return _validate.like_input(u_t * (1.0 + eps), set_speed, epsilon)


@dataclass(frozen=True)
class BlockingResult:
    """Solid-blocking summary for one fish in one working section.

    Attributes
    ----------
    frontal_area
        Fish frontal area A_o. [m²]
    section_area
        Working-section area A_T. [m²]
    ratio
        Blocking ratio A_o / A_T. [-]
    epsilon
        Solid-blocking ε_s. [-]
    factor
        Speed factor 1 + ε_s (corrected speed / set speed). [-]
    limit
        Largest ratio for which the correction is trusted (``LabSettings.blocking_ratio_limit``). [-]
    within_limit
        Whether ``ratio`` is at most ``limit``.
    method
        The correction's method name.
    """

    frontal_area: float
    section_area: float
    ratio: float
    epsilon: float
    factor: float
    limit: float
    within_limit: bool
    method: str


def blocking_summary(
    body_length: float,
    body_depth: float,
    body_width: float,
    section_area: float,
    settings: LabSettings | None = None,
    method: str = "bell_terhune1970",
    *,
    thickness: float | None = None,
) -> BlockingResult:
    """Blocking ratio, correction and its validity for one fish (scalars).

    Parameters
    ----------
    body_length, body_depth, body_width
        Fish morphometrics. [m]
    section_area
        Working-section area. [m²]
    settings
        Lab settings; ``blocking_ratio_limit`` is the trusted range. Default: the defaults.
    method
        ``"bell_terhune1970"``.
    thickness
        Body thickness of the shape factor; by default the larger of depth and width. [m]

    Returns
    -------
    BlockingResult

    Notes
    -----
    Bell & Terhune (1970); see :func:`solid_blocking`. A fish larger than the section raises
    :class:`~swimlab.errors.InputError`.
    """
    settings = settings or DEFAULT_SETTINGS
    for name, value in (("body_length", body_length), ("body_depth", body_depth),
                        ("body_width", body_width), ("section_area", section_area)):
        if np.ndim(value) != 0:
            raise InputError(f"{name} must be a single number for a blocking summary; got {value!r}")
    a_o = float(frontal_area(body_depth, body_width))
    a_t = float(_validate.positive("section_area", section_area, "m²"))
    ratio = float(_ratio(np.asarray(a_o), np.asarray(a_t)))
    eps = float(solid_blocking(body_length, body_depth, body_width, section_area, method,
                               thickness=thickness))
    limit = float(settings.blocking_ratio_limit)
    return BlockingResult(
        frontal_area=a_o, section_area=a_t, ratio=ratio, epsilon=eps, factor=1.0 + eps,
        limit=limit, within_limit=ratio <= limit, method=method,
    )


def blocking_flags(
    body_depth: float,
    body_width: float,
    section_area: float,
    settings: LabSettings | None = None,
    *,
    where: str = "",
    scope: str = "fish",
) -> list[dict]:
    """Flags for a fish's blocking of the working section.

    Parameters
    ----------
    body_depth, body_width
        Fish morphometrics. [m]
    section_area
        Working-section area. [m²]
    settings
        Lab settings (``blocking_ratio_limit``).
    where
        Label a person reads (e.g. ``"fish 3"``).
    scope
        Scope of the flags (see :func:`swimlab.checks.flag`).

    Returns
    -------
    A list of :func:`swimlab.checks.flag` dicts: ``FISH_LARGER_THAN_SECTION`` when the frontal
    area is not smaller than the section, else ``BLOCKING_BEYOND_LIMIT`` when the ratio exceeds
    the limit; empty when neither applies.
    """
    settings = settings or DEFAULT_SETTINGS
    a_o = float(frontal_area(body_depth, body_width))
    a_t = float(_validate.positive("section_area", section_area, "m²"))
    if a_o >= a_t:
        return [checks.flag(
            "FISH_LARGER_THAN_SECTION",
            f"frontal area {a_o:.4g} m² ≥ section area {a_t:.4g} m²",
            scope=scope, where=where,
        )]
    ratio = a_o / a_t
    limit = float(settings.blocking_ratio_limit)
    if ratio > limit:
        return [checks.flag(
            "BLOCKING_BEYOND_LIMIT",
            f"blocking ratio {ratio:.1%} > {limit:.1%}",
            scope=scope, where=where,
        )]
    return []


# --- speed calibration ---------------------------------------------------------------------------


@dataclass(frozen=True)
class SpeedCalibration:
    """A fitted speed calibration: motor setting → water speed in the empty working section.

    Attributes
    ----------
    coefficients
        Polynomial coefficients, lowest power first: speed = Σ c_i · setting^i. [m/s per unit^i]
    degree
        Polynomial degree.
    settings
        Motor settings of the calibration points. [controller unit]
    speeds
        Measured water speeds of the calibration points. [m/s]
    residuals
        Measured minus fitted speeds at the calibration points. [m/s]
    r2
        Coefficient of determination of the fit. [-]
    residual_sd
        Residual standard deviation, √(Σ r² / (n − degree − 1)). [m/s]
    setting_min, setting_max
        Range of calibrated motor settings. [controller unit]
    speed_min, speed_max
        Range of fitted speeds over the calibrated settings. [m/s]
    """

    coefficients: tuple[float, ...]
    degree: int
    settings: tuple[float, ...]
    speeds: tuple[float, ...]
    residuals: tuple[float, ...]
    r2: float
    residual_sd: float
    setting_min: float
    setting_max: float
    speed_min: float
    speed_max: float

    def speed_at(self, setting: Any) -> Any:
        """Water speed at a motor setting. [m/s]

        Settings outside the calibrated range are extrapolated; check with :meth:`in_range`
        or :func:`calibration_flags`.
        """
        s = _validate.finite("setting", setting)
        speed = np.polynomial.polynomial.polyval(s, self.coefficients)
        return _validate.like_input(np.asarray(speed, dtype=float), setting)

    def setting_for(self, speed: Any) -> Any:
        """Motor setting that gives a water speed, within the calibrated range.

        Raises :class:`~swimlab.errors.InputError` for a speed outside the calibrated speeds.
        """
        u = _validate.non_negative("speed", speed, "m/s")
        tol = 1e-12 * max(abs(self.speed_max), 1.0)
        bad = (u < self.speed_min - tol) | (u > self.speed_max + tol)
        if bad.any():
            raise InputError(
                f"speed {float(u[bad].flat[0])!r} m/s is outside the calibrated speeds "
                f"{self.speed_min:.4g}–{self.speed_max:.4g} m/s"
            )
        flat = u.ravel()
        out = np.empty_like(flat)
        for k, target in enumerate(flat):
            shifted = np.array(self.coefficients, dtype=float)
            shifted[0] -= target
            roots = np.polynomial.polynomial.polyroots(shifted)
            real = roots[np.abs(roots.imag) < 1e-9].real
            span = self.setting_max - self.setting_min
            inside = real[(real >= self.setting_min - 1e-9 * span) & (real <= self.setting_max + 1e-9 * span)]
            out[k] = float(np.clip(inside[0], self.setting_min, self.setting_max))
        return _validate.like_input(out.reshape(u.shape), speed)

    def in_range(self, setting: Any) -> np.ndarray:
        """Whether each setting lies within the calibrated range (bool array)."""
        s = _validate.finite("setting", setting)
        return np.asarray((s >= self.setting_min) & (s <= self.setting_max))


def fit_speed_calibration(motor_setting: Any, measured_speed: Any, degree: int = 1) -> SpeedCalibration:
    """Fit a speed calibration by least squares.

    Parameters
    ----------
    motor_setting
        Motor settings of the calibration points. [controller unit]
    measured_speed
        Water speed measured in the empty working section at each setting. [m/s]
    degree
        Polynomial degree: 1, 2 or 3.

    Returns
    -------
    SpeedCalibration

    Notes
    -----
    Ordinary least squares of speed on a polynomial in the setting. R² = 1 − SS_res / SS_tot.
    Needs at least degree + 2 points (so that a residual is left) at degree + 1 distinct settings,
    and a fit that rises with the setting over the calibrated range (one setting per speed).
    """
    if degree not in CALIBRATION_DEGREES:
        raise ValueError(f"unknown degree {degree!r}; valid choices are {CALIBRATION_DEGREES}")
    x = _validate.finite("motor_setting", motor_setting).ravel()
    y = _validate.non_negative("measured_speed", measured_speed, "m/s").ravel()
    if x.size != y.size:
        raise InputError(
            f"motor_setting and measured_speed must have the same length; got {x.size} and {y.size}"
        )
    if x.size < degree + 2:
        raise InputError(
            f"a degree-{degree} speed calibration needs at least {degree + 2} points; got {x.size}"
        )
    if np.unique(x).size < degree + 1:
        raise InputError(
            f"a degree-{degree} speed calibration needs at least {degree + 1} distinct motor "
            f"settings; got {np.unique(x).size}"
        )
    coef = np.polynomial.polynomial.polyfit(x, y, degree)
    fitted = np.polynomial.polynomial.polyval(x, coef)
    residuals = y - fitted
    ss_res = float(np.sum(residuals**2))
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    if ss_tot == 0.0:
        raise InputError("measured_speed does not vary over the calibration points; got all "
                         f"{float(y[0])!r} m/s")
    grid = np.linspace(x.min(), x.max(), 201)
    slope = np.polynomial.polynomial.polyval(grid, np.polynomial.polynomial.polyder(coef))
    if np.any(slope <= 0.0):
        raise InputError(
            "the fitted speed does not rise with motor_setting over the calibrated range; "
            "check the points or use a lower degree"
        )
    dof = x.size - degree - 1
    fitted_ends = np.polynomial.polynomial.polyval(np.array([x.min(), x.max()]), coef)
    return SpeedCalibration(
        coefficients=tuple(float(c) for c in coef),
        degree=degree,
        settings=tuple(float(v) for v in x),
        speeds=tuple(float(v) for v in y),
        residuals=tuple(float(r) for r in residuals),
        r2=1.0 - ss_res / ss_tot,
        residual_sd=float(np.sqrt(ss_res / dof)),
        setting_min=float(x.min()),
        setting_max=float(x.max()),
        speed_min=float(fitted_ends[0]),
        speed_max=float(fitted_ends[1]),
    )


def calibration_flags(
    calibration: SpeedCalibration,
    motor_setting: Any,
    *,
    where: str = "",
    scope: str = "step",
    steps: Any = None,
) -> list[dict]:
    """Flags for motor settings outside a speed calibration's range.

    Parameters
    ----------
    calibration
        The flume's speed calibration.
    motor_setting
        Settings used (one per step, say). [controller unit]
    where
        Label prefix a person reads (e.g. ``"flume A"``).
    scope
        Scope of the flags (see :func:`swimlab.checks.flag`).
    steps
        Step numbers matching ``motor_setting``, for linking; default 1, 2, 3, …

    Returns
    -------
    One ``SPEED_OUTSIDE_CALIBRATION`` flag per setting outside
    [``setting_min``, ``setting_max``].
    """
    s = _validate.finite("motor_setting", motor_setting).ravel()
    numbers = list(range(1, s.size + 1)) if steps is None else [int(v) for v in np.ravel(steps)]
    if len(numbers) != s.size:
        raise InputError(f"steps must match motor_setting in length; got {len(numbers)} and {s.size}")
    inside = calibration.in_range(s)
    flags = []
    for value, ok, step in zip(s, inside, numbers, strict=True):
        if not ok:
            label = f"{where}, step {step}" if where else f"step {step}"
            flags.append(checks.flag(
                "SPEED_OUTSIDE_CALIBRATION",
                f"motor setting {value:g} outside the calibrated "
                f"{calibration.setting_min:g}–{calibration.setting_max:g}",
                scope=scope, where=label, step=step,
            ))
    return flags
