"""Repeat step test: the recovery ratio Ucrit₂ / Ucrit₁ of one fish swum twice.

Jain, Birtwell & Farrell (1998) swam adult sockeye salmon to Ucrit twice with 40 min of recovery
between and proposed the ratio of the two Ucrit values as a sensitive index of fish health and
water quality: control fish gave 0.98 ± 0.01 (mean ± SEM), fish exposed to dehydroabietic acid
0.92 ± 0.02, "significantly lower than unity" (abstract, read). They give no fixed cut-off
there; this module reports the ratio with its interval and flags a ratio whose interval lies
wholly below one.

A single pair's interval needs the two Ucrit values' uncertainties, which a step test does not
give as a standard error. :func:`ucrit_measurement_uncertainty` states a measurement model for
them (the fatigue time's resolution, and the speed calibration), and
:func:`recovery_ratio_from_measurement` carries it into the ratio by the delta method or by
Fieller's (1954) theorem. That interval covers *measurement* uncertainty only, not how much a
fish's Ucrit varies from one swim to the next; between-fish spread comes from the group summary
(:func:`swimlab.protocol_analysis.repeat_pairs`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from scipy import stats

from swimlab import _validate
from swimlab.checks import flag
from swimlab.errors import InputError

__all__ = [
    "CI_METHODS",
    "RecoveryRatio",
    "UcritUncertainty",
    "fieller_interval",
    "recovery_ratio",
    "recovery_ratio_from_measurement",
    "ucrit_measurement_uncertainty",
]

CI_METHODS = ("delta", "fieller1954")
"""Interval methods of :func:`recovery_ratio`: the first-order (delta-method) normal interval, and
Fieller's (1954) interval for a ratio of two normal estimates."""

PROTOCOL = "repeat_ucrit"
"""Name of the protocol, as in :data:`swimlab.session.PROTOCOL_TYPES`."""


@dataclass(frozen=True)
class RecoveryRatio:
    """Recovery ratio of a repeat swim.

    Attributes
    ----------
    protocol
        ``"repeat_ucrit"``.
    ratio
        Ucrit₂ / Ucrit₁. [-]
    se
        Delta-method standard error, or None without both standard errors. [-]
    ci_low, ci_high
        Normal-approximation interval at ``confidence``, or None. [-]
    confidence
        Confidence level of the interval. [-]
    ucrit_1_m_s, ucrit_2_m_s
        The two Ucrit values. [m/s]
    fish_id
        The fish swum twice, if given.
    below_unity
        True when the interval lies wholly below one, False when it does not, None without an
        interval.
    flags
        REPEAT_RATIO_BELOW_UNITY when ``below_unity`` is True.
    ci_method
        ``"delta"`` or ``"fieller1954"`` (None without an interval).
    uncertainty
        What the standard errors stand for (e.g. the measurement model's words), or ``""``.
    """

    protocol: str
    ratio: float
    se: float | None
    ci_low: float | None
    ci_high: float | None
    confidence: float
    ucrit_1_m_s: float
    ucrit_2_m_s: float
    fish_id: str | None
    below_unity: bool | None
    flags: tuple[dict, ...]
    ci_method: str | None = None
    uncertainty: str = ""


def _ucrit_value(name: str, value: Any) -> float:
    if value is None:
        raise InputError(f"{name} is required [m/s]", field=name)
    if hasattr(value, "ucrit_m_s"):  # a step-test result object
        value = value.ucrit_m_s
        if value is None:
            raise InputError(f"{name} has no Ucrit (the step test gave none)", field=name)
    arr = _validate.positive(name, value, "m/s")
    if arr.size != 1:
        raise InputError(f"{name} must be one number [m/s]; got {arr.size} values", field=name)
    return float(arr.reshape(()))


def _se_value(name: str, value: Any) -> float | None:
    if value is None:
        return None
    arr = _validate.non_negative(name, value, "m/s")
    if arr.size != 1:
        raise InputError(f"{name} must be one number [m/s]; got {arr.size} values", field=name)
    return float(arr.reshape(()))


def recovery_ratio(
    ucrit_1: Any,
    ucrit_2: Any,
    se_1: float | None = None,
    se_2: float | None = None,
    *,
    fish_id_1: str | None = None,
    fish_id_2: str | None = None,
    covariance: float = 0.0,
    confidence: float = 0.95,
    method: str = "delta",
    uncertainty: str = "",
) -> RecoveryRatio:
    """Recovery ratio Ucrit₂ / Ucrit₁ with its delta-method uncertainty.

    Parameters
    ----------
    ucrit_1, ucrit_2
        Ucrit of the first and the second swim of one fish (numbers, or step-test results with
        a ``ucrit_m_s`` attribute). [m/s]
    se_1, se_2
        Their standard errors, or None. [m/s]
    fish_id_1, fish_id_2
        The fish of each swim; when both are given they must be the same fish.
    covariance
        Covariance of the two Ucrit estimates (0 for independent estimates). [m²/s²]
    confidence
        Level of the interval. [-]
    method
        ``"delta"`` (RR ± z·se, the default) or ``"fieller1954"`` (:func:`fieller_interval`).
    uncertainty
        Words saying what the standard errors stand for, kept with the result.

    Returns
    -------
    RecoveryRatio

    Raises
    ------
    InputError
        A missing or non-positive Ucrit, or two different fish (field ``fish_id_2``).

    Notes
    -----
    Jain, Birtwell & Farrell (1998): RR = Ucrit₂ / Ucrit₁. First-order (delta-method) variance of
    a ratio of two estimates::

        Var(RR) ≈ RR² (se₁²/U₁² + se₂²/U₂² − 2 cov/(U₁ U₂))

    (e.g. Stuart & Ord, Kendall's Advanced Theory of Statistics, vol. 1, §10.5–10.7; from
    memory). The interval is RR ± z se; it is trustworthy while se₁/U₁ is small (say below
    0.1), where the first-order expansion holds.
    """
    _validate.choice("interval method", method, CI_METHODS)
    u1 = _ucrit_value("ucrit_1", ucrit_1)
    u2 = _ucrit_value("ucrit_2", ucrit_2)
    if fish_id_1 is not None and fish_id_2 is not None and str(fish_id_1) != str(fish_id_2):
        raise InputError(
            f"a recovery ratio compares two swims of one fish; got fish {fish_id_1!r} and {fish_id_2!r}",
            field="fish_id_2",
        )
    level = float(_validate.in_range("confidence", confidence, 0.5, 0.999, what="a confidence level"))
    cov = float(_validate.finite("covariance", covariance, "m²/s²"))
    s1, s2 = _se_value("se_1", se_1), _se_value("se_2", se_2)
    ratio = u2 / u1
    se = lo = hi = None
    below = None
    flags: list[dict] = []
    if s1 is not None and s2 is not None:
        var = ratio**2 * ((s1 / u1) ** 2 + (s2 / u2) ** 2 - 2.0 * cov / (u1 * u2))
        if var < 0:
            raise InputError("covariance is too large for the standard errors (negative variance)", field="covariance")
        se = math.sqrt(var)
        z = float(stats.norm.ppf(0.5 + level / 2.0))
        if method == "delta":
            lo, hi = ratio - z * se, ratio + z * se
        else:
            lo, hi = fieller_interval(u2, u1, s2**2, s1**2, cov, confidence=level)
        below = hi < 1.0
        if below:
            flags.append(flag("REPEAT_RATIO_BELOW_UNITY",
                              f"recovery ratio {ratio:.3f} ({level:.0%} interval {lo:.3f}–{hi:.3f}"
                              + (f"; {uncertainty}" if uncertainty else "") + ") is below 1",
                              scope="fish", where=str(fish_id_1 or fish_id_2 or "")))
    fish = fish_id_1 if fish_id_1 is not None else fish_id_2
    return RecoveryRatio(PROTOCOL, ratio, se, lo, hi, level, u1, u2,
                         None if fish is None else str(fish), below, tuple(flags),
                         None if se is None else method, uncertainty)


def fieller_interval(numerator: float, denominator: float, var_numerator: float, var_denominator: float,
                     covariance: float = 0.0, *, confidence: float = 0.95) -> tuple[float, float]:
    """Fieller's interval for the ratio θ = μ_a / μ_b of two normal estimates a and b.

    Parameters
    ----------
    numerator, denominator
        The estimates a (Ucrit₂) and b (Ucrit₁). [m/s]
    var_numerator, var_denominator, covariance
        Their variances and covariance, taken as known. [m²/s²]
    confidence
        Level of the interval. [-]

    Returns
    -------
    (low, high). [-]

    Raises
    ------
    InputError
        When the denominator is not clearly different from zero at this level (g ≥ 1 below):
        the Fieller set is then unbounded and no finite interval exists (field ``denominator``).

    Notes
    -----
    Fieller (1954): a − θ b is normal with mean 0 and variance v_a − 2θ c + θ² v_b, so the set
    of θ with (a − θ b)² ≤ z² (v_a − 2θ c + θ² v_b) is an exact interval when a and b are
    normal. It is the quadratic A θ² − 2 B θ + C ≤ 0 with::

        A = b² − z² v_b,  B = a b − z² c,  C = a² − z² v_a
        θ = (B ± √(B² − A C)) / A

    bounded when g = z² v_b / b² < 1. Unlike the delta interval it is not symmetric about a/b.
    """
    a, b = float(numerator), float(denominator)
    va, vb, c = float(var_numerator), float(var_denominator), float(covariance)
    if min(va, vb) < 0:
        raise InputError("variances must be zero or more", field="var_numerator" if va < 0 else "var_denominator")
    level = float(_validate.in_range("confidence", confidence, 0.5, 0.999, what="a confidence level"))
    z = float(stats.norm.ppf(0.5 + level / 2.0))
    big_a = b * b - z * z * vb
    if b == 0 or big_a <= 0:
        raise InputError(f"the denominator {b:g} is not clearly different from zero at the {level:.0%} level; "
                         "Fieller's interval is unbounded", field="denominator")
    big_b = a * b - z * z * c
    big_c = a * a - z * z * va
    disc = big_b * big_b - big_a * big_c
    root = math.sqrt(max(disc, 0.0))
    return (big_b - root) / big_a, (big_b + root) / big_a


@dataclass(frozen=True)
class UcritUncertainty:
    """Measurement uncertainty of one step-test Ucrit (the model of :func:`ucrit_measurement_uncertainty`).

    Attributes
    ----------
    ucrit_m_s
        The Ucrit. [m/s]
    se_timing_m_s
        From the fatigue time's uncertainty: (ΔU / t_ii) · w / √12. [m/s]
    se_calibration_m_s
        From the speed calibration: U · s_cal. [m/s]
    se_m_s
        Both together, √(se_timing² + se_calibration²). [m/s]
    """

    ucrit_m_s: float
    se_timing_m_s: float
    se_calibration_m_s: float
    se_m_s: float


def ucrit_measurement_uncertainty(ucrit_m_s: float, increment_m_s: float, step_duration_s: float,
                                  fatigue_time_uncertainty_s: float, calibration_relative_sd: float = 0.0
                                  ) -> UcritUncertainty:
    """Measurement uncertainty of a step-test Ucrit from its fatigue time and the speed calibration.

    Parameters
    ----------
    ucrit_m_s
        Ucrit. [m/s]
    increment_m_s
        ΔU (U_ii of Brett 1964), the speed increment of the step the fish fatigued in. [m/s]
    step_duration_s
        t_ii, that step's scheduled duration. [s]
    fatigue_time_uncertainty_s
        Width w of the span in which the true fatigue time could lie. [s]
    calibration_relative_sd
        Relative standard uncertainty of the calibrated speeds (0 to leave it out). [-]

    Returns
    -------
    UcritUncertainty

    Notes
    -----
    Brett (1964): Ucrit = U_i + (t_i / t_ii) ΔU, so ∂Ucrit/∂t_i = ΔU / t_ii. A fatigue time known
    only to within a span of width w is taken as uniform over it (standard deviation w/√12,
    the uniform distribution's). Speeds read from one calibration share its error: Ucrit is then
    (1 + c) times the true value with sd(c) = s_cal, so its calibration SE is U · s_cal. The two
    sources are independent. The model leaves out the step speeds' own noise (the tunnel's
    steadiness) and everything about the fish: it is a measurement uncertainty, not the swim-to-
    swim variation of a fish's Ucrit.
    """
    u = float(_validate.positive("ucrit_m_s", ucrit_m_s, "m/s").reshape(()))
    du = float(_validate.positive("increment_m_s", increment_m_s, "m/s").reshape(()))
    t = float(_validate.positive("step_duration_s", step_duration_s, "s").reshape(()))
    w = float(_validate.non_negative("fatigue_time_uncertainty_s", fatigue_time_uncertainty_s, "s").reshape(()))
    s_cal = float(_validate.non_negative("calibration_relative_sd", calibration_relative_sd, "-").reshape(()))
    timing = du / t * w / math.sqrt(12.0)
    cal = u * s_cal
    return UcritUncertainty(u, timing, cal, math.hypot(timing, cal))


def recovery_ratio_from_measurement(
    first: UcritUncertainty,
    second: UcritUncertainty,
    *,
    shared_calibration: bool,
    fish_id: str | None = None,
    confidence: float = 0.95,
    method: str = "fieller1954",
) -> RecoveryRatio:
    """Recovery ratio of one pair with an interval from the measurement model.

    Parameters
    ----------
    first, second
        :func:`ucrit_measurement_uncertainty` of the first and the second swim.
    shared_calibration
        True when both swims' speeds come from one flume calibration: its error is then the same
        factor in both, fully correlated, and cancels in the ratio.
    fish_id
        The fish swum twice.
    confidence
        Level of the interval. [-]
    method
        ``"fieller1954"`` (default) or ``"delta"``.

    Returns
    -------
    RecoveryRatio, with ``uncertainty`` saying what the interval covers.

    Notes
    -----
    Var(U_k) = se_timing,k² + se_cal,k². With a shared calibration both speeds carry one factor
    (1 + c), and (1 + c) U₂ / ((1 + c) U₁) = U₂ / U₁: the calibration cancels exactly (in the
    delta method, its terms U₁U₂s² in the covariance and the variances sum to zero), so only the
    timing terms enter, Var(RR)/RR² = (se_t,1/U₁)² + (se_t,2/U₂)². With two calibrations the
    errors are independent and both variances are used whole, with no covariance. The interval
    is Fieller's (1954) by default, the delta method's on request.
    """
    if shared_calibration:  # one factor on both speeds: the ratio does not depend on it at all
        se_1, se_2 = first.se_timing_m_s, second.se_timing_m_s
    else:
        se_1, se_2 = first.se_m_s, second.se_m_s
    words = ("measurement only (fatigue-time span and "
             + ("one shared speed calibration, which cancels" if shared_calibration else "two separate speed calibrations")
             + "); not the swim-to-swim variation of the fish")
    return recovery_ratio(first.ucrit_m_s, second.ucrit_m_s, se_1, se_2, fish_id_1=fish_id, fish_id_2=fish_id,
                          confidence=confidence, method=method, uncertainty=words)
