"""Ramp (constant-acceleration) test: the speed reached at fatigue, Umax.

In a ramp test the water speed rises steadily from a start speed until the fish fatigues; the
speed at that moment is Umax. It is not a step-test Ucrit: Farrell (2008) found Umax up to 57 %
above Ucrit in the same rainbow trout, so every result here carries ``protocol="ramp"`` and the
flag PROTOCOL_NOT_COMPARABLE.

The caller passes set speeds or speeds already corrected for solid blocking
(:mod:`swimlab.flume`); this module does not correct them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from swimlab import _validate
from swimlab.checks import flag
from swimlab.errors import InputError

__all__ = [
    "RampResult",
    "umax",
    "speed_at",
    "distance_m",
    "m_s2_from_cm_s_per_min",
]

PROTOCOL = "ramp"
"""Name of the protocol, as in :data:`swimlab.session.PROTOCOL_TYPES`."""

_M_PER_CM = 0.01
"""Metres in one centimetre. [m/cm] Definition."""
_S_PER_MIN = 60.0
"""Seconds in one minute. [s/min] Definition."""


@dataclass(frozen=True)
class RampResult:
    """Umax of one ramp test.

    Attributes
    ----------
    protocol
        ``"ramp"``.
    umax_m_s
        Speed at fatigue. [m/s]
    umax_bl_s
        The same in body lengths per second, or None without a body length. [BL/s]
    ramp_rate_m_s2
        Rate at which the speed rose. [m/s²]
    start_speed_m_s
        Speed at the start of the ramp. [m/s]
    time_to_fatigue_s
        Time from the start of the ramp to fatigue. [s]
    flags
        Flags raised (always PROTOCOL_NOT_COMPARABLE).
    """

    protocol: str
    umax_m_s: float
    umax_bl_s: float | None
    ramp_rate_m_s2: float
    start_speed_m_s: float
    time_to_fatigue_s: float
    flags: tuple[dict, ...]


def _scalar(name: str, value: Any, check, unit: str) -> float:
    if value is None:
        raise InputError(f"{name} is required [{unit}]", field=name)
    arr = check(name, value, unit)
    if arr.ndim != 0 and arr.size != 1:
        raise InputError(f"{name} must be one number [{unit}]; got {arr.size} values", field=name)
    return float(arr.reshape(()))


def m_s2_from_cm_s_per_min(rate_cm_s_per_min: Any) -> Any:
    """Ramp rate in m/s² from the rate as entered, in cm/s per minute.

    Parameters
    ----------
    rate_cm_s_per_min
        Increase of water speed per minute. [cm s⁻¹ min⁻¹]

    Returns
    -------
    float, ndarray or Series
        Ramp rate. [m/s²]

    Notes
    -----
    a = r · 0.01 / 60 (definitions of the centimetre and the minute). Farrell's (2008) slowest
    rate, 1 cm s⁻¹ every minute, is 1.667 × 10⁻⁴ m/s².
    """
    rate = _validate.positive("rate_cm_s_per_min", rate_cm_s_per_min, "cm s⁻¹ min⁻¹")
    return _validate.like_input(rate * _M_PER_CM / _S_PER_MIN, rate_cm_s_per_min)


def speed_at(time_s: Any, ramp_rate_m_s2: float, start_speed_m_s: float = 0.0, ramp_start_s: float = 0.0) -> Any:
    """Water speed during a ramp at the given times.

    Parameters
    ----------
    time_s
        Times on the trace clock, not before the start of the ramp. [s]
    ramp_rate_m_s2
        Rate at which the speed rises. [m/s²]
    start_speed_m_s
        Speed at the start of the ramp. [m/s]
    ramp_start_s
        Start of the ramp on the trace clock. [s]

    Returns
    -------
    float, ndarray or Series
        U(t) = U₀ + a (t − t₀). [m/s]
    """
    rate = _scalar("ramp_rate_m_s2", ramp_rate_m_s2, _validate.positive, "m/s²")
    u0 = _scalar("start_speed_m_s", start_speed_m_s, _validate.non_negative, "m/s")
    t0 = _scalar("ramp_start_s", ramp_start_s, _validate.non_negative, "s")
    t = _validate.finite("time_s", time_s, "s")
    if np.any(t < t0):
        bad = float(np.asarray(t)[t < t0].flat[0])
        raise InputError(f"time_s must not be before the ramp's start {t0:g} s; got {bad!r}", field="time_s")
    return _validate.like_input(u0 + rate * (t - t0), time_s)


def umax(
    ramp_rate_m_s2: float | None,
    time_to_fatigue_s: float | None,
    start_speed_m_s: float = 0.0,
    *,
    body_length_m: float | None = None,
) -> RampResult:
    """Umax of a ramp (constant-acceleration) test.

    Parameters
    ----------
    ramp_rate_m_s2
        Rate at which the water speed rose; required. [m/s²]
    time_to_fatigue_s
        Time from the start of the ramp to fatigue; required. [s]
    start_speed_m_s
        Speed at the start of the ramp. [m/s]
    body_length_m
        Body length for Umax in BL/s, or None. [m]

    Returns
    -------
    RampResult

    Raises
    ------
    InputError
        A missing ramp rate or fatigue time (the error names the field), or a value that is not
        a finite positive number.

    Notes
    -----
    Under constant acceleration the speed at fatigue is::

        Umax = U₀ + a · t_fat

    (the constant-acceleration test of Farrell 2008). Umax in BL/s is Umax / L. Umax depends on
    the rate (Farrell 2008 found the slowest rate he tested, 1 cm s⁻¹ min⁻¹, gave a lower Umax)
    and is not comparable with a step-test Ucrit; the result carries PROTOCOL_NOT_COMPARABLE.
    """
    if ramp_rate_m_s2 is None:
        raise InputError("a ramp test needs its ramp rate [m/s²]", field="ramp_rate_m_s2")
    if time_to_fatigue_s is None:
        raise InputError("a ramp test needs the time from the ramp's start to fatigue [s]", field="time_to_fatigue_s")
    rate = _scalar("ramp_rate_m_s2", ramp_rate_m_s2, _validate.positive, "m/s²")
    t_fat = _scalar("time_to_fatigue_s", time_to_fatigue_s, _validate.positive, "s")
    u0 = _scalar("start_speed_m_s", start_speed_m_s, _validate.non_negative, "m/s")
    u_max = u0 + rate * t_fat
    u_bl = None
    if body_length_m is not None:
        length = _scalar("body_length_m", body_length_m, _validate.positive, "m")
        u_bl = u_max / length
    note = flag(
        "PROTOCOL_NOT_COMPARABLE",
        f"ramp Umax {u_max:.3g} m/s at {rate:.3g} m/s² is not a step-test Ucrit",
        scope="fish",
    )
    return RampResult(
        protocol=PROTOCOL,
        umax_m_s=u_max,
        umax_bl_s=u_bl,
        ramp_rate_m_s2=rate,
        start_speed_m_s=u0,
        time_to_fatigue_s=t_fat,
        flags=(note,),
    )


def distance_m(ramp_rate_m_s2: float, time_s: Any, start_speed_m_s: float = 0.0) -> Any:
    """Distance swum through the water during a ramp, from its start.

    Parameters
    ----------
    ramp_rate_m_s2
        Rate at which the speed rises. [m/s²]
    time_s
        Time from the start of the ramp. [s]
    start_speed_m_s
        Speed at the start of the ramp. [m/s]

    Returns
    -------
    float, ndarray or Series
        d = U₀ t + a t² / 2 (the integral of U(t) under constant acceleration). [m]
    """
    rate = _scalar("ramp_rate_m_s2", ramp_rate_m_s2, _validate.positive, "m/s²")
    u0 = _scalar("start_speed_m_s", start_speed_m_s, _validate.non_negative, "m/s")
    t = _validate.non_negative("time_s", time_s, "s")
    return _validate.like_input(u0 * t + 0.5 * rate * t**2, time_s)
