"""Repeat step test: the recovery ratio Ucrit₂ / Ucrit₁ of one fish swum twice.

Jain, Birtwell & Farrell (1998) swam adult sockeye salmon to Ucrit twice with 40 min of recovery
between and proposed the ratio of the two Ucrit values as a sensitive index of fish health and
water quality: control fish gave 0.98 ± 0.01 (mean ± SEM), fish exposed to dehydroabietic acid
0.92 ± 0.02, "significantly lower than unity" (abstract, read). They give no fixed cut-off
there; this module reports the ratio with its interval and flags a ratio whose interval lies
wholly below one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from scipy import stats

from swimlab import _validate
from swimlab.checks import flag
from swimlab.errors import InputError

__all__ = ["RecoveryRatio", "recovery_ratio"]

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
        Level of the normal-approximation interval. [-]

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
        lo, hi = ratio - z * se, ratio + z * se
        below = hi < 1.0
        if below:
            flags.append(flag("REPEAT_RATIO_BELOW_UNITY",
                              f"recovery ratio {ratio:.3f} ({level:.0%} interval {lo:.3f}–{hi:.3f}) is below 1",
                              scope="fish", where=str(fish_id_1 or fish_id_2 or "")))
    fish = fish_id_1 if fish_id_1 is not None else fish_id_2
    return RecoveryRatio(PROTOCOL, ratio, se, lo, hi, level, u1, u2,
                         None if fish is None else str(fish), below, tuple(flags))
