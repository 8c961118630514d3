"""Swimming kinematics: tail-beat frequency, amplitude, stride length, Strouhal number.

- Tail-beat frequency from a count of beats and its counting window, or from video frames and
  the frame rate.
- Stride length, the distance travelled per tail beat, U / f (Videler & Wardle 1991: speed
  equals stride length times tail-beat frequency).
- Strouhal number St = f A / U with A the peak-to-peak tail-tip amplitude; cruising swimmers and
  fliers are usually reported within 0.2–0.4, the range of high propulsive efficiency (Taylor,
  Nudds & Thomas 2003). A value outside raises STROUHAL_OUTSIDE_EFFICIENT (info).
- A per-fish frequency–speed line by least squares, and Bainbridge's (1958) relation
  U = ¼ L (3f − 4) for comparison.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from swimlab import _validate
from swimlab.checks import flag
from swimlab.errors import InputError
from swimlab.session import PROTOCOL_TYPES

__all__ = [
    "EFFICIENT_STROUHAL_RANGE",
    "BAINBRIDGE_MIN_FREQUENCY_HZ",
    "tail_beat_frequency_hz",
    "stride_length_m",
    "strouhal_number",
    "strouhal_flags",
    "bainbridge_speed_m_s",
    "FrequencySpeedLine",
    "frequency_speed_line",
    "KinematicsResult",
    "step_kinematics",
]

EFFICIENT_STROUHAL_RANGE = (0.2, 0.4)
"""Strouhal numbers usually reported for efficient cruising. [-] Taylor, Nudds & Thomas (2003),
Nature 425:707–711 (0.2 < St < 0.4; the range as quoted in reports of the paper, read)."""

BAINBRIDGE_MIN_FREQUENCY_HZ = 5.0
"""Tail-beat frequency above which Bainbridge (1958) found speed directly dependent on
frequency and gave U = ¼ L (3f − 4). [Hz] Bainbridge (1958), abstract point 4 (read)."""


def tail_beat_frequency_hz(
    count: Any,
    window_s: Any = None,
    *,
    frames: Any = None,
    frame_rate_hz: float | None = None,
) -> Any:
    """Tail-beat frequency from a count of beats over a window (or over video frames).

    Parameters
    ----------
    count
        Tail beats counted (full cycles). [-]
    window_s
        Length of the counting window. [s]
    frames
        Video frames spanned by the counted beats, instead of ``window_s``. [-]
    frame_rate_hz
        Video frame rate, with ``frames``. [1/s]

    Returns
    -------
    float, ndarray or Series
        f = count / window, with window = frames / frame rate for video. [Hz]

    Raises
    ------
    InputError
        A count without a window (field ``window_s``), frames without a frame rate (field
        ``frame_rate_hz``), both a window and frames, or a value that is not a positive number.
    """
    n = _validate.non_negative("count", count, "beats")
    if window_s is not None and frames is not None:
        raise InputError("give either window_s or frames with frame_rate_hz, not both", field="window_s")
    if window_s is None and frames is None:
        raise InputError("a tail-beat count needs its counting window [s] (or video frames and frame rate)",
                         field="window_s")
    if frames is not None:
        if frame_rate_hz is None:
            raise InputError("frames need the video frame rate [1/s]", field="frame_rate_hz")
        rate = _validate.positive("frame_rate_hz", frame_rate_hz, "1/s")
        window = _validate.positive("frames", frames, "frames") / rate
    else:
        window = _validate.positive("window_s", window_s, "s")
    return _validate.like_input(n / window, count, window_s, frames)


def stride_length_m(speed_m_s: Any, frequency_hz: Any) -> Any:
    """Distance travelled per tail beat, λ_s = U / f. [m]

    Parameters
    ----------
    speed_m_s
        Swimming speed. [m/s]
    frequency_hz
        Tail-beat frequency, greater than zero. [Hz]

    Notes
    -----
    Videler & Wardle (1991): the speed of a fish equals its stride length times its tail-beat
    frequency (abstract, read); divide by body length for stride length in BL.
    """
    u = _validate.positive("speed_m_s", speed_m_s, "m/s")
    f = _validate.positive("frequency_hz", frequency_hz, "Hz")
    return _validate.like_input(u / f, speed_m_s, frequency_hz)


def strouhal_number(frequency_hz: Any, amplitude_m: Any, speed_m_s: Any) -> Any:
    """Strouhal number St = f A / U.

    Parameters
    ----------
    frequency_hz
        Tail-beat frequency. [Hz]
    amplitude_m
        Peak-to-peak amplitude of the tail tip (the wake width). [m]
    speed_m_s
        Swimming speed, greater than zero. [m/s]

    Notes
    -----
    St = f A / U with A peak to peak (Taylor, Nudds & Thomas 2003; the definition used for fish,
    e.g. in J. Exp. Biol. 217:2244 (2014), eq. 1, read). Some papers write 2 f a / U with a the
    half amplitude: the same number.
    """
    f = _validate.non_negative("frequency_hz", frequency_hz, "Hz")
    a = _validate.non_negative("amplitude_m", amplitude_m, "m")
    u = _validate.positive("speed_m_s", speed_m_s, "m/s")
    return _validate.like_input(f * a / u, frequency_hz, amplitude_m, speed_m_s)


def strouhal_flags(
    strouhal: Any,
    *,
    efficient_range: tuple[float, float] = EFFICIENT_STROUHAL_RANGE,
    steps: Any = None,
) -> list[dict]:
    """STROUHAL_OUTSIDE_EFFICIENT flags for Strouhal numbers outside ``efficient_range``.

    Parameters
    ----------
    strouhal
        Strouhal numbers. [-]
    efficient_range
        (low, high) of the efficient range; Taylor, Nudds & Thomas (2003) by default. [-]
    steps
        Step numbers of the values, for the flags' ``step``, or None.
    """
    st = np.atleast_1d(_validate.non_negative("strouhal", strouhal))
    low, high = (float(v) for v in efficient_range)
    if not 0 <= low < high:
        raise InputError(f"efficient_range must be (low, high) with 0 ≤ low < high; got {efficient_range!r}",
                         field="efficient_range")
    labels = list(range(1, st.size + 1)) if steps is None else [int(s) for s in np.atleast_1d(steps)]
    out = []
    for value, step in zip(st, labels, strict=True):
        if value < low or value > high:
            out.append(flag("STROUHAL_OUTSIDE_EFFICIENT", f"St {value:.2f} outside {low:g}–{high:g}",
                            scope="step", where=f"step {step}", step=step))
    return out


def bainbridge_speed_m_s(frequency_hz: Any, body_length_m: Any) -> Any:
    """Speed predicted from tail-beat frequency by Bainbridge (1958): U = ¼ L (3f − 4).

    Parameters
    ----------
    frequency_hz
        Tail-beat frequency. [Hz]
    body_length_m
        Body length, snout to the tip of the tail. [m]

    Returns
    -------
    float, ndarray or Series
        Predicted speed. [m/s]

    Notes
    -----
    Bainbridge (1958), J. Exp. Biol. 35:109, abstract point 4 (read): V = ¼ [L (3f − 4)], V in
    cm/s, L in cm, f in beats/s, for dace, trout and goldfish above 5 beats/s. Since V/L has the
    unit 1/s, the relation holds with L in m and V in m/s. Below 5 Hz it is outside
    Bainbridge's range (see :data:`BAINBRIDGE_MIN_FREQUENCY_HZ`); for frequencies below 4/3 Hz
    it gives a negative speed, which is returned as it is, for comparison only.
    """
    f = _validate.non_negative("frequency_hz", frequency_hz, "Hz")
    length = _validate.positive("body_length_m", body_length_m, "m")
    return _validate.like_input(0.25 * length * (3.0 * f - 4.0), frequency_hz, body_length_m)


@dataclass(frozen=True)
class FrequencySpeedLine:
    """Least-squares line of tail-beat frequency on speed for one fish: f = intercept + slope · U.

    Attributes
    ----------
    protocol
        The protocol the data come from.
    intercept_hz, slope_hz_per_m_s
        Line parameters. [Hz], [Hz per m/s]
    intercept_se, slope_se
        Their standard errors (None with only two points). [Hz], [Hz per m/s]
    r2
        Coefficient of determination. [-]
    n
        Points. [-]
    stride_length_m
        1 / slope, the stride length the line implies at high speed, or None for slope ≤ 0. [m]
    """

    protocol: str
    intercept_hz: float
    slope_hz_per_m_s: float
    intercept_se: float | None
    slope_se: float | None
    r2: float
    n: int
    stride_length_m: float | None

    def frequency_hz(self, speed_m_s: Any) -> Any:
        """Frequency on the line at ``speed_m_s``. [Hz]"""
        u = _validate.finite("speed_m_s", speed_m_s, "m/s")
        return _validate.like_input(self.intercept_hz + self.slope_hz_per_m_s * u, speed_m_s)

    def ci95(self, parameter: str) -> tuple[float, float] | None:
        """95 % t interval of ``"intercept"`` [Hz] or ``"slope"`` [Hz per m/s], or None without an SE.

        value ± t₀.₉₇₅(n − 2) · SE, the usual interval of a least-squares parameter.
        """
        _validate.choice("parameter", parameter, ("intercept", "slope"))
        value, se = ((self.intercept_hz, self.intercept_se) if parameter == "intercept"
                     else (self.slope_hz_per_m_s, self.slope_se))
        if se is None:
            return None
        t = float(stats.t.ppf(0.975, self.n - 2))
        return value - t * se, value + t * se


def frequency_speed_line(speed_m_s: Any, frequency_hz: Any, *, protocol: str = "step_ucrit") -> FrequencySpeedLine:
    """Fit f = a + b U by ordinary least squares for one fish.

    Parameters
    ----------
    speed_m_s
        Speeds. [m/s]
    frequency_hz
        Tail-beat frequency at each speed. [Hz]
    protocol
        The protocol the data come from (:data:`swimlab.session.PROTOCOL_TYPES`).

    Raises
    ------
    InputError
        Fewer than two points, lengths that differ, or fewer than two distinct speeds.

    Notes
    -----
    Tail-beat frequency rises linearly with speed over the steady range (Bainbridge 1958;
    Videler & Wardle 1991). Ordinary least squares with the usual standard errors,
    s² = RSS/(n − 2).
    """
    _validate.choice("protocol", protocol, PROTOCOL_TYPES)
    u = np.atleast_1d(_validate.positive("speed_m_s", speed_m_s, "m/s")).astype(float)
    f = np.atleast_1d(_validate.positive("frequency_hz", frequency_hz, "Hz")).astype(float)
    if u.shape != f.shape:
        raise InputError(f"speed_m_s and frequency_hz must have one value per point; got {u.size} and {f.size}",
                         field="frequency_hz")
    if np.unique(u).size < 2:
        raise InputError("a frequency–speed line needs at least two distinct speeds", field="speed_m_s")
    fit = stats.linregress(u, f)
    n = int(u.size)
    se_b = se_a = None
    if n > 2:
        se_b, se_a = float(fit.stderr), float(fit.intercept_stderr)
    slope = float(fit.slope)
    return FrequencySpeedLine(
        protocol=protocol,
        intercept_hz=float(fit.intercept),
        slope_hz_per_m_s=slope,
        intercept_se=se_a,
        slope_se=se_b,
        r2=float(fit.rvalue**2),
        n=n,
        stride_length_m=1.0 / slope if slope > 0 else None,
    )


@dataclass(frozen=True)
class KinematicsResult:
    """Per-step kinematics of one fish.

    Attributes
    ----------
    protocol
        The protocol the steps belong to.
    body_length_m
        Body length used for BL units and Bainbridge's relation. [m]
    table
        Per step: ``step``, ``speed_m_s``, ``frequency_hz``, ``amplitude_m``, ``amplitude_bl``,
        ``stride_length_m``, ``stride_length_bl``, ``strouhal``, ``strouhal_efficient``,
        ``bainbridge_speed_m_s``, ``bainbridge_in_range`` (f ≥ 5 Hz).
    line
        Frequency–speed line, or None with fewer than two distinct speeds.
    flags
        STROUHAL_OUTSIDE_EFFICIENT for each step outside the range.
    """

    protocol: str
    body_length_m: float
    table: pd.DataFrame = field(repr=False, compare=False)
    line: FrequencySpeedLine | None
    flags: tuple[dict, ...]


def step_kinematics(
    speed_m_s: Any,
    tail_beats: Any,
    amplitude_m: Any,
    *,
    body_length_m: float,
    window_s: Any = None,
    frames: Any = None,
    frame_rate_hz: float | None = None,
    efficient_range: tuple[float, float] = EFFICIENT_STROUHAL_RANGE,
    protocol: str = "step_ucrit",
) -> KinematicsResult:
    """Kinematics at each step from tail-beat counts and amplitudes.

    Parameters
    ----------
    speed_m_s
        Speed of each step (set or corrected). [m/s]
    tail_beats
        Tail beats counted at each step. [-]
    amplitude_m
        Peak-to-peak tail-tip amplitude at each step. [m]
    body_length_m
        Body length. [m]
    window_s, frames, frame_rate_hz
        Counting window of each count, or frames and frame rate (see
        :func:`tail_beat_frequency_hz`). [s], [-], [1/s]
    efficient_range
        Efficient Strouhal range for the flags. [-]
    protocol
        The protocol the steps belong to.

    Returns
    -------
    KinematicsResult
    """
    _validate.choice("protocol", protocol, PROTOCOL_TYPES)
    u = np.atleast_1d(_validate.positive("speed_m_s", speed_m_s, "m/s")).astype(float)
    freq = np.atleast_1d(tail_beat_frequency_hz(
        np.asarray(_validate.as_float_array("tail_beats", tail_beats)), window_s, frames=frames,
        frame_rate_hz=frame_rate_hz)).astype(float)
    amp = np.atleast_1d(_validate.non_negative("amplitude_m", amplitude_m, "m")).astype(float)
    length = float(_validate.positive("body_length_m", body_length_m, "m").reshape(()))
    try:
        u, freq, amp = np.broadcast_arrays(u, freq, amp)
    except ValueError as exc:
        raise InputError(f"speed_m_s, tail_beats and amplitude_m must have one value per step; got "
                         f"{u.size}, {freq.size} and {amp.size}", field="tail_beats") from exc
    if np.any(freq <= 0):
        i = int(np.flatnonzero(freq <= 0)[0])
        raise InputError("a step needs at least one tail beat for frequency and stride length; got 0",
                         field="tail_beats", row=i + 1)
    st = strouhal_number(freq, amp, u)
    low, high = efficient_range
    table = pd.DataFrame({
        "step": np.arange(1, u.size + 1),
        "speed_m_s": u,
        "frequency_hz": freq,
        "amplitude_m": amp,
        "amplitude_bl": amp / length,
        "stride_length_m": stride_length_m(u, freq),
        "stride_length_bl": stride_length_m(u, freq) / length,
        "strouhal": st,
        "strouhal_efficient": (st >= low) & (st <= high),
        "bainbridge_speed_m_s": bainbridge_speed_m_s(freq, length),
        "bainbridge_in_range": freq >= BAINBRIDGE_MIN_FREQUENCY_HZ,
    })
    line = frequency_speed_line(u, freq, protocol=protocol) if np.unique(u).size >= 2 else None
    flags = strouhal_flags(st, efficient_range=efficient_range, steps=table["step"].to_numpy())
    return KinematicsResult(protocol, length, table, line, tuple(flags))

