"""Swimming performance: Ucrit, speed–MO2 curves, SMR, MMR, aerobic scope, cost of transport, Uopt.

Plain functions on numbers, arrays and DataFrames. Units are SI inside (speed [m/s], time [s],
mass [kg], power [W]) except MO2, which is kept in the trade's unit, mg O2 kg⁻¹ h⁻¹, as it
comes from :mod:`swimlab.uptake`; cost of transport is given in mg O2 kg⁻¹ km⁻¹ (the trade's
unit) and in J kg⁻¹ m⁻¹.

Bad input raises :class:`~swimlab.errors.InputError` naming the argument and the value; a result
that cannot be had from valid input (no fatigue time, too few speeds for a curve) comes back as
a result whose value is ``None`` with flags from :mod:`swimlab.checks` saying what is missing.
Sources are listed in ``docs/references.md``.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any, NamedTuple

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import optimize, stats

from swimlab import _validate
from swimlab.checks import flag
from swimlab.constants import M_PER_KM, SECONDS_PER_HOUR
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS, LabSettings

__all__ = [
    "UcritResult",
    "ucrit",
    "SpeedMetabolismFit",
    "SpeedMetabolismFits",
    "fit_speed_metabolism",
    "RateEstimate",
    "smr_from_fit",
    "smr_low_quantile",
    "smr_mlnd",
    "mmr",
    "AerobicScope",
    "aerobic_scope",
    "cost_of_transport",
    "UoptResult",
    "optimal_speed",
    "efficiency",
    "metabolic_power_w",
    "GroupCurve",
    "group_curve",
    "MODELS",
    "POWER_EXPONENT_BOUNDS",
    "SCATTER_MODELS",
    "BOOTSTRAP_KINDS",
    "EFFICIENCY_METHOD",
    "MMR_METHODS",
]

# --- unit factors (definitions) ---------------------------------------------------------------

_S_PER_H = SECONDS_PER_HOUR
_M_PER_KM = M_PER_KM
_KM_H_PER_M_S = _S_PER_H / _M_PER_KM
"""km/h in one m/s (3.6). [(km/h)/(m/s)] Definition."""

MODELS = ("exponential", "power")
"""Speed–MO2 models :func:`fit_speed_metabolism` knows."""

POWER_EXPONENT_BOUNDS = (0.3, 6.0)
"""Bounds on the exponent c of MO2 = a + b·U^c in the fit. [-] Our choice: wide enough for the
exponents reported for fishes (about 1.5–3 from hydrodynamic reasoning and data; from memory),
narrow enough to keep the curve finite and rising; a fit that ends on a bound is flagged."""

_POWER_GRID_SIZE = 240
"""Points of the log-spaced grid over c used to start the power fit and to fit bootstrap
replicates (variable projection: for a fixed c the model is linear in a and b)."""

_SMR_MIN_COMPONENT_SHARE = 0.10
"""Smallest share of the observations a mixture component must hold to be taken as the lowest
normal distribution. [-] Our choice, so that a component fitted to a few low outliers is not
taken as SMR."""


# =================================================================================================
# Ucrit
# =================================================================================================


@dataclass(frozen=True)
class UcritResult:
    """Critical swimming speed of one step test (Brett 1964).

    Attributes
    ----------
    ucrit_m_s
        Critical swimming speed, or None when it cannot be computed (see ``flags``). [m/s]
    ucrit_bl_s
        The same in body lengths per second, or None without a body length. [BL/s]
    last_completed_speed_m_s
        U_i, the speed of the last step swum to its end. [m/s]
    increment_m_s
        U_ii, the speed increment of the final (incomplete) step over the last completed one. [m/s]
    step_duration_s
        t_ii, the scheduled duration of the final step. [s]
    time_in_final_step_s
        t_i, the time swum in the final step before fatigue. [s]
    n_completed_steps
        Steps swum to their end. [-]
    method
        ``"brett1964"``.
    flags
        Flags (:func:`swimlab.checks.flag`) raised on the schedule and the fatigue time.
    final_step
        1-based number of the step in which the fish fatigued, or None.
    """

    ucrit_m_s: float | None
    ucrit_bl_s: float | None
    last_completed_speed_m_s: float | None
    increment_m_s: float | None
    step_duration_s: float | None
    time_in_final_step_s: float | None
    n_completed_steps: int
    method: str
    flags: tuple[dict, ...]
    final_step: int | None = None


def _relative_spread(values: np.ndarray) -> float:
    """(max − min) / median of ``values``; 0 for fewer than two values."""
    if values.size < 2:
        return 0.0
    return float((values.max() - values.min()) / np.median(values))


def _schedule_flags(speeds: np.ndarray, durations: np.ndarray, settings: LabSettings) -> list[dict]:
    """STEPS_TOO_SHORT and STEPS_UNEVEN over the steps swum (``speeds``, ``durations``)."""
    flags: list[dict] = []
    short = np.flatnonzero(durations < settings.step_duration_min_s)
    for i in short:
        flags.append(flag(
            "STEPS_TOO_SHORT",
            f"step {i + 1} lasted {durations[i]:g} s < {settings.step_duration_min_s:g} s",
            scope="step", where=f"step {i + 1}", step=int(i + 1),
        ))
    for what, values, unit in (("step durations", durations, "s"), ("speed increments", np.diff(speeds), "m/s")):
        spread = _relative_spread(values)
        if spread > settings.step_unevenness_max:
            flags.append(flag(
                "STEPS_UNEVEN",
                f"{what} range from {values.min():g} to {values.max():g} {unit} "
                f"(spread {spread:.0%} of the median > {settings.step_unevenness_max:.0%})",
            ))
    return flags


def ucrit(
    step_speeds_m_s: Any,
    step_durations_s: Any,
    fatigue_time_s: float | None,
    *,
    body_length_m: float | None = None,
    settings: LabSettings = DEFAULT_SETTINGS,
    strict: bool = False,
) -> UcritResult:
    """Critical swimming speed from a step test (Brett 1964).

    Parameters
    ----------
    step_speeds_m_s
        Water speed of each step of the schedule, in order, rising step by step. Pass corrected
        (solid-blocking) speeds or set speeds; the caller reports both. [m/s]
    step_durations_s
        Scheduled duration of each step, or one duration for all. [s]
    fatigue_time_s
        Time the fish met the fatigue criterion, measured from the start of the first step;
        None (or NaN) when it was not recorded. [s]
    body_length_m
        Body length, for Ucrit in body lengths per second. [m]
    settings
        Lab settings: ``step_duration_min_s`` and ``step_unevenness_max``.
    strict
        If True, a fatigue time outside the schedule or within the first step raises
        :class:`~swimlab.errors.InputError` instead of returning a flagged result.

    Returns
    -------
    UcritResult
        With ``ucrit_m_s`` None and a flag when the fatigue time is missing
        (FATIGUE_NOT_RECORDED), outside the schedule (FATIGUE_OUTSIDE_STEP) or within the first
        step (NO_STEP_COMPLETED).

    Notes
    -----
    Brett (1964), the formula as it is commonly stated (from memory)::

        Ucrit = U_i + (t_i / t_ii) · U_ii

    U_i the highest speed swum for the whole step, U_ii the speed increment, t_i the time swum
    at the final speed and t_ii the step duration. The final step's own increment and scheduled
    duration are used, so a schedule whose last step differs is still credited correctly; the
    formula assumes equal steps, so uneven schedules are flagged (STEPS_UNEVEN), as are steps
    shorter than ``settings.step_duration_min_s`` (STEPS_TOO_SHORT). Spreads are
    (max − min) / median over the steps swum. A fatigue time exactly at the end of a step counts
    that step as the final one, swum in full (t_i = t_ii).
    """
    speeds = _validate.positive("step_speeds_m_s", step_speeds_m_s, "m/s").ravel()
    if speeds.size == 0:
        raise InputError("step_speeds_m_s is empty; give the speed of each step", field="step_speeds_m_s")
    durations = _validate.positive("step_durations_s", step_durations_s, "s").ravel()
    if durations.size == 1:
        durations = np.full(speeds.size, durations[0])
    if durations.size != speeds.size:
        raise InputError(
            f"step_durations_s has {durations.size} values but step_speeds_m_s has {speeds.size}; "
            "give one duration per step or one for all", field="step_durations_s",
        )
    rises = np.diff(speeds)
    if (rises <= 0).any():
        i = int(np.flatnonzero(rises <= 0)[0])
        raise InputError(
            f"step speeds must rise from step to step; step {i + 2} ({speeds[i + 1]:g} m/s) is not "
            f"faster than step {i + 1} ({speeds[i]:g} m/s)", field="step_speeds_m_s",
        )
    length = None
    if body_length_m is not None:
        length = float(_validate.positive("body_length_m", body_length_m, "m"))

    def result(flags: list[dict], **values: Any) -> UcritResult:
        u = values.get("ucrit_m_s")
        return UcritResult(
            ucrit_m_s=u,
            ucrit_bl_s=None if (u is None or length is None) else u / length,
            last_completed_speed_m_s=values.get("u_i"),
            increment_m_s=values.get("u_ii"),
            step_duration_s=values.get("t_ii"),
            time_in_final_step_s=values.get("t_i"),
            n_completed_steps=int(values.get("n_completed", 0)),
            method="brett1964",
            flags=tuple(flags),
            final_step=values.get("final_step"),
        )

    ends = np.cumsum(durations)
    starts = ends - durations
    if fatigue_time_s is None or (np.ndim(fatigue_time_s) == 0 and _is_nan(fatigue_time_s)):
        flags = [flag("FATIGUE_NOT_RECORDED", "no fatigue time was entered; Ucrit is not computed")]
        flags += _schedule_flags(speeds, durations, settings)
        return result(flags)
    t_f = float(_validate.finite("fatigue_time_s", fatigue_time_s, "s"))
    if t_f <= 0.0 or t_f > ends[-1]:
        where = "before the first step" if t_f <= 0.0 else "after the end of the schedule"
        message = (f"fatigue time {t_f:g} s is {where} (steps run from 0 to {ends[-1]:g} s); "
                   "Ucrit is not computed")
        if strict:
            raise InputError(message, field="fatigue_time_s")
        flags = [flag("FATIGUE_OUTSIDE_STEP", message)]
        flags += _schedule_flags(speeds, durations, settings)
        return result(flags)
    k = int(np.searchsorted(ends, t_f, side="left"))  # starts[k] < t_f <= ends[k]
    if k == 0:
        message = (f"fatigue time {t_f:g} s falls within the first step (0–{ends[0]:g} s at "
                   f"{speeds[0]:g} m/s); no step was completed, so Ucrit is not computed")
        if strict:
            raise InputError(message, field="fatigue_time_s")
        return result([flag("NO_STEP_COMPLETED", message, scope="step", where="step 1", step=1)],
                      final_step=1, t_i=t_f - starts[0], t_ii=float(durations[0]))
    u_i = float(speeds[k - 1])
    u_ii = float(speeds[k] - speeds[k - 1])
    t_ii = float(durations[k])
    t_i = float(t_f - starts[k])
    value = u_i + (t_i / t_ii) * u_ii
    flags = _schedule_flags(speeds[: k + 1], durations[: k + 1], settings)
    return result(flags, ucrit_m_s=value, u_i=u_i, u_ii=u_ii, t_ii=t_ii, t_i=t_i,
                  n_completed=k, final_step=k + 1)


def _is_nan(value: Any) -> bool:
    try:
        return bool(np.isnan(float(value)))
    except (TypeError, ValueError):
        return False


# =================================================================================================
# Speed–MO2 curves
# =================================================================================================


@dataclass(frozen=True, eq=False)
class SpeedMetabolismFit:
    """One fitted speed–MO2 curve.

    Attributes
    ----------
    model
        ``"exponential"`` (MO2 = a·e^(b·U)) or ``"power"`` (MO2 = a + b·U^c).
    params
        ``{"a", "b"}`` or ``{"a", "b", "c"}``. a [mg O2 kg⁻¹ h⁻¹] is MO2 at U = 0 in both; b is
        [s/m] in the exponential and [mg O2 kg⁻¹ h⁻¹ (m/s)^-c] in the power model; c [-].
    se
        Standard errors of the parameters (exponential: OLS on ln MO2, a by the delta method;
        power: from the Jacobian at the optimum, s²(JᵀJ)⁻¹). Same units as ``params``.
    ci95
        95 % intervals of the parameters, by ``ci_method``.
    ci_method
        How ``ci95`` was obtained, in words.
    aicc
        Small-sample Akaike information criterion on the original MO2 scale (see
        :func:`fit_speed_metabolism`), or None when n ≤ k + 1.
    n
        Data points fitted. [-]
    residuals
        Observed − fitted MO2, in the order of the input. [mg O2 kg⁻¹ h⁻¹]
    speed_range_m_s
        Lowest and highest speed fitted. [m/s]
    boot_params
        Bootstrap replicates of the parameters, one row each, columns in the order of
        ``params``; None without a bootstrap. They give :meth:`band` and Uopt's interval.
    boot_method
        How the replicates were drawn, in words; None without a bootstrap.
    n_boot_failed
        Bootstrap resamples dropped because they held fewer than three distinct speeds.
    covariance
        Covariance matrix of the parameters in the order of ``params`` (exponential: of ln a and
        b), used for a delta-method band when there is no bootstrap.
    dof
        Residual degrees of freedom, n − (number of curve parameters).
    scatter
        Error model of the fit: ``"proportional"`` (least squares on ln MO2) or ``"additive"``
        (least squares on MO2); see :data:`SCATTER_MODELS`.
    """

    model: str
    params: dict[str, float]
    se: dict[str, float]
    ci95: dict[str, tuple[float, float]]
    ci_method: str
    aicc: float | None
    n: int
    residuals: np.ndarray
    speed_range_m_s: tuple[float, float]
    boot_params: np.ndarray | None = None
    boot_method: str | None = None
    n_boot_failed: int = 0
    covariance: np.ndarray | None = None
    dof: int = 0
    scatter: str = "proportional"

    def predict(self, speed: Any) -> Any:
        """MO2 on the fitted curve at ``speed`` [m/s]; returns [mg O2 kg⁻¹ h⁻¹]."""
        u = _validate.non_negative("speed", speed, "m/s")
        values = _curve(self.model, np.array(list(self.params.values())), u)
        return _validate.like_input(values, speed)

    def band(self, speed: Any, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        """Pointwise confidence band of the fitted curve at ``speed`` [m/s].

        From the bootstrap replicates' curves (percentiles) when there are replicates, else by
        the delta method with a t quantile on ``dof`` degrees of freedom. Returns (lo, hi)
        [mg O2 kg⁻¹ h⁻¹], arrays of the shape of ``speed``.
        """
        if not 0.0 < level < 1.0:
            raise InputError(f"level must lie between 0 and 1; got {level!r}", field="level")
        u = np.atleast_1d(_validate.non_negative("speed", speed, "m/s"))
        shape = np.shape(np.asarray(speed, dtype=float))
        if self.boot_params is not None and len(self.boot_params):
            curves = _curve(self.model, self.boot_params.T[:, :, None], u[None, :])
            lo, hi = np.percentile(curves, [50 * (1 - level), 50 * (1 + level)], axis=0)
        else:
            lo, hi = self._delta_band(u, level)
        return lo.reshape(shape), hi.reshape(shape)

    def _delta_band(self, u: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
        p = np.array(list(self.params.values()))
        tq = stats.t.ppf(0.5 * (1 + level), max(self.dof, 1))
        if self.model == "exponential":
            grad = np.stack([np.ones_like(u), u], axis=1)  # of ln MO2 wrt (ln a, b)
            var = np.einsum("ij,jk,ik->i", grad, self.covariance, grad)
            log_mid = math.log(p[0]) + p[1] * u
            half = tq * np.sqrt(var)
            return np.exp(log_mid - half), np.exp(log_mid + half)
        grad = _power_jacobian(p, u)
        mid = _curve("power", p, u)
        if self.scatter == "proportional":  # band on the ln scale, as fitted
            grad = grad / mid[:, None]
        half = tq * np.sqrt(np.einsum("ij,jk,ik->i", grad, self.covariance, grad))
        if self.scatter == "proportional":
            return mid * np.exp(-half), mid * np.exp(half)
        return mid - half, mid + half

    @property
    def smr_extrapolated(self) -> float:
        """MO2 extrapolated to zero speed, the parameter a. [mg O2 kg⁻¹ h⁻¹]"""
        return float(self.params["a"])

    @property
    def smr_ci95(self) -> tuple[float, float]:
        """95 % interval of :attr:`smr_extrapolated`, by ``ci_method``. [mg O2 kg⁻¹ h⁻¹]"""
        return self.ci95["a"]


@dataclass(frozen=True, eq=False)
class SpeedMetabolismFits:
    """Both speed–MO2 fits of one fish and the choice between them.

    Attributes
    ----------
    exponential, power
        The fits, or None where a model could not be fitted (see ``flags``).
    best
        ``"exponential"``, ``"power"`` or None when neither was fitted.
    best_rule
        The rule that chose ``best``, in words (lower AICc; when |ΔAICc| < 2 the models are
        taken as equally supported and the one with fewer parameters, the exponential, is
        chosen).
    delta_aicc
        AICc(power) − AICc(exponential), or None when either is missing.
    flags
        FIT_NOT_POSSIBLE and FIT_POORLY_CONSTRAINED flags.
    """

    exponential: SpeedMetabolismFit | None
    power: SpeedMetabolismFit | None
    best: str | None
    flags: tuple[dict, ...]
    best_rule: str = ""
    delta_aicc: float | None = None

    def get(self, model: str | None = None) -> SpeedMetabolismFit | None:
        """The fit of ``model``, or the best fit when ``model`` is None."""
        model = self.best if model is None else _validate.choice("model", model, MODELS)
        return None if model is None else getattr(self, model)


def _curve(model: str, p: np.ndarray, u: np.ndarray) -> np.ndarray:
    """MO2 of ``model`` with parameters ``p`` (first axis) at speeds ``u``; broadcasts."""
    if model == "exponential":
        return p[0] * np.exp(p[1] * u)
    return p[0] + p[1] * np.power(u, p[2])


def _power_jacobian(p: np.ndarray, u: np.ndarray) -> np.ndarray:
    a, b, c = p
    uc = np.power(u, c)
    with np.errstate(divide="ignore", invalid="ignore"):
        dc = np.where(u > 0, b * uc * np.log(np.where(u > 0, u, 1.0)), 0.0)
    return np.stack([np.ones_like(u), uc, dc], axis=1)


def _aicc(loglik: float, k: int, n: int) -> float | None:
    """AICc = −2 ln L + 2k + 2k(k+1)/(n − k − 1) (Hurvich & Tsai 1989); None if n ≤ k + 1."""
    if n - k - 1 <= 0:
        return None
    return -2.0 * loglik + 2.0 * k + 2.0 * k * (k + 1) / (n - k - 1)


def _distinct_per_replicate(counts: np.ndarray, speeds: np.ndarray) -> np.ndarray:
    """Number of distinct speeds in each bootstrap resample (rows of ``counts``)."""
    levels, index = np.unique(speeds, return_inverse=True)
    member = np.zeros((speeds.size, levels.size))
    member[np.arange(speeds.size), index] = 1.0
    return ((counts @ member) > 0).sum(axis=1)


def _exponential_weighted(u: np.ndarray, ly: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Weighted least squares of ln MO2 on U for each row of ``ly`` and ``w`` (both (R, n)):
    rows of (ln a, b)."""
    sw, su, suu, sy, suy, _ = _weighted_sums(w, ly, np.broadcast_to(u, w.shape), False)
    det = sw * suu - su * su
    b = (sw * suy - su * sy) / det
    ln_a = (sy - b * su) / sw
    return np.stack([ln_a, b], axis=1)


def _weighted_sums(w: np.ndarray, yy: np.ndarray, x: np.ndarray, shared: bool):
    """Sums for weighted least squares of ``yy`` on ``x``; rows are replicates.

    ``w`` and ``yy`` are (R, n). With ``shared``, ``x`` is (n, G), one design per grid column
    shared by all rows, and the sums are (R, G); otherwise ``x`` is (R, n), one design per row,
    and the sums are (R,).
    """
    wy = w * yy
    sw = w.sum(axis=1)
    sy = wy.sum(axis=1)
    syy = (wy * yy).sum(axis=1)
    if shared:
        return sw[:, None], w @ x, w @ (x * x), sy[:, None], wy @ x, syy[:, None]
    return sw, (w * x).sum(axis=1), (w * x * x).sum(axis=1), sy, (wy * x).sum(axis=1), syy


def _bounded_linear(sw, sx, sxx, sy, sxy, syy):
    """a, b ≥ 0 minimising Σ w (y − a − b x)², and the RSS, from the sums.

    When a bound is active the one-parameter solution on it is the constrained optimum (the
    problem is a convex quadratic in two variables).
    """
    det = sw * sxx - sx * sx
    with np.errstate(divide="ignore", invalid="ignore"):
        b = (sw * sxy - sx * sy) / det
        a = (sy - b * sx) / sw
        low_a = ~(a >= 0)
        b = np.where(low_a, sxy / sxx, b)
        a = np.where(low_a, 0.0, a)
        low_b = ~(b >= 0)
        a = np.where(low_b, sy / sw, a)
        b = np.where(low_b, 0.0, b)
    rss = syy - 2 * a * sy - 2 * b * sxy + a * a * sw + 2 * a * b * sx + b * b * sxx
    return a, b, np.maximum(rss, 0.0)


def _power_grid_fit(u: np.ndarray, yy: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Least-squares power fits (a, b, c) for each row of responses ``yy`` and weights ``w``.

    Variable projection: for a fixed c the model is linear in a and b. A log-spaced grid over
    :data:`POWER_EXPONENT_BOUNDS`, then a finer grid around each row's best point, then a
    parabola through the three best fine points in ln c. Rows are bootstrap replicates.
    """
    lo, hi = POWER_EXPONENT_BOUNDS
    grid = np.geomspace(lo, hi, _POWER_GRID_SIZE)
    x = np.power(u[:, None], grid[None, :])  # (n, G)
    _, _, rss = _bounded_linear(*_weighted_sums(w, yy, x, True))
    j = np.argmin(rss, axis=1)
    step = math.log(grid[1] / grid[0])
    offsets = np.linspace(-1.0, 1.0, 21) * step
    fine_c = np.clip(np.exp(np.log(grid[j])[:, None] + offsets[None, :]), lo, hi)  # (R, F)
    fine_rss = np.empty_like(fine_c)
    for f in range(offsets.size):
        xf = np.power(u[None, :], fine_c[:, f : f + 1])  # (R, n)
        fine_rss[:, f] = _bounded_linear(*_weighted_sums(w, yy, xf, False))[2]
    rows = np.arange(w.shape[0])
    k = np.clip(np.argmin(fine_rss, axis=1), 1, offsets.size - 2)
    r0, r1, r2 = fine_rss[rows, k - 1], fine_rss[rows, k], fine_rss[rows, k + 1]
    denom = r0 - 2 * r1 + r2
    with np.errstate(divide="ignore", invalid="ignore"):
        shift = np.where(denom > 0, 0.5 * (r0 - r2) / denom, 0.0)
    best_c = np.clip(np.exp(np.log(fine_c[rows, k]) + np.clip(shift, -1.0, 1.0) * (offsets[1] - offsets[0])),
                     lo, hi)
    xb = np.power(u[None, :], best_c[:, None])
    a, b, _ = _bounded_linear(*_weighted_sums(w, yy, xb, False))
    return np.stack([a, b, best_c], axis=1)


def _percentile_ci(values: np.ndarray) -> tuple[float, float]:
    lo, hi = np.percentile(values, [2.5, 97.5])
    return float(lo), float(hi)


SCATTER_MODELS = {
    "proportional": "scatter proportional to MO2 (constant CV): least squares on ln MO2",
    "additive": "scatter of constant size: least squares on MO2",
}
"""Error models of the power fit (the exponential is always fitted on ln MO2)."""


@dataclass(frozen=True)
class _BootPlan:
    """The resampling shared by both models' bootstraps (same draws for both)."""

    kind: str  # "residuals" or "cases"
    draws: np.ndarray  # residuals: (R, n) indices; cases: (R, n) counts of resamples kept
    seed: int
    n_dropped: int = 0

    def describe(self, log_scale: bool) -> str:
        scale = "ln MO2" if log_scale else "MO2"
        what = (f"resampling leverage-adjusted residuals on the {scale} scale about the fit "
                "(speeds fixed)" if self.kind == "residuals" else "resampling data points (cases)")
        dropped = (f"; {self.n_dropped} resamples with fewer than three distinct speeds dropped"
                   if self.n_dropped else "")
        return f"bootstrap, {what}, {len(self.draws)} resamples (seed {self.seed}){dropped}"


def _leverage(jac: np.ndarray) -> np.ndarray:
    """Diagonal of the hat matrix J (JᵀJ)⁺ Jᵀ."""
    return np.einsum("ij,jk,ik->i", jac, np.linalg.pinv(jac.T @ jac), jac)


def _boot_responses(plan: _BootPlan, y: np.ndarray, fitted: np.ndarray, jac: np.ndarray,
                    log_scale: bool) -> tuple[np.ndarray, np.ndarray]:
    """Bootstrap responses and weights (both (R, n)) for one model under ``plan``.

    Residual resampling uses modified residuals r/√(1 − h), centred (Davison & Hinkley 1997,
    §6.2.3, from memory), on the scale the model was fitted on; ``jac`` is that scale's Jacobian.
    """
    if plan.kind == "cases":
        return np.broadcast_to(y, plan.draws.shape), plan.draws
    raw = np.log(y) - np.log(fitted) if log_scale else y - fitted
    r = raw / np.sqrt(np.clip(1.0 - _leverage(jac), 1e-12, None))
    r = r - r.mean()
    star = fitted[None, :] * np.exp(r[plan.draws]) if log_scale else fitted[None, :] + r[plan.draws]
    return star, np.ones(plan.draws.shape)


def _fit_exponential(u: np.ndarray, y: np.ndarray, plan: _BootPlan | None) -> SpeedMetabolismFit:
    n = u.size
    ly = np.log(y)
    design = sm.add_constant(u, has_constant="add")
    ols = sm.OLS(ly, design).fit()
    ln_a, b = (float(v) for v in ols.params)
    se_ln_a, se_b = (float(v) for v in ols.bse)
    a = math.exp(ln_a)
    fitted = a * np.exp(b * u)
    cov = np.asarray(ols.cov_params())
    # Likelihood of MO2 itself under the log-normal error model: the log-scale likelihood less the
    # Jacobian of the log transform, Σ ln y (so that it compares with the power fit's).
    loglik_y = float(ols.llf) - float(ly.sum())
    tq = float(stats.t.ppf(0.975, n - 2))
    ci = {"a": (math.exp(ln_a - tq * se_ln_a), math.exp(ln_a + tq * se_ln_a)),
          "b": (b - tq * se_b, b + tq * se_b)}
    method = (f"t interval from OLS on ln MO2 ({n - 2} degrees of freedom; the profile-likelihood "
              "interval of this linear model), a by exponentiating the interval of ln a")
    boot = None
    if plan is not None:
        yy, w = _boot_responses(plan, y, fitted, design, log_scale=True)
        rows = _exponential_weighted(u, np.log(yy), w)
        boot = np.stack([np.exp(rows[:, 0]), rows[:, 1]], axis=1)
    return SpeedMetabolismFit(
        model="exponential", params={"a": a, "b": b}, se={"a": a * se_ln_a, "b": se_b}, ci95=ci,
        ci_method=method, aicc=_aicc(loglik_y, 3, n), n=n, residuals=y - fitted,
        speed_range_m_s=(float(u.min()), float(u.max())), boot_params=boot,
        boot_method=plan.describe(True) if plan else None,
        n_boot_failed=plan.n_dropped if plan else 0, covariance=cov, dof=n - 2,
        scatter="proportional",
    )


_POWER_LOWER = (0.0, 0.0, POWER_EXPONENT_BOUNDS[0])
_POWER_UPPER = (np.inf, np.inf, POWER_EXPONENT_BOUNDS[1])


class _PowerProblem:
    """Least squares of the power model on the working scale (ln MO2 or MO2)."""

    def __init__(self, u: np.ndarray, y: np.ndarray, log_scale: bool):
        self.u, self.y, self.log_scale = u, y, log_scale
        self.ly = np.log(y)
        self.scale = 1.0 if log_scale else max(float(np.abs(y).max()), 1.0)
        self.tiny = 1e-12 * float(y.min())

    def residuals(self, p: np.ndarray) -> np.ndarray:
        mu = _curve("power", p, self.u)
        if self.log_scale:
            return np.log(np.maximum(mu, self.tiny)) - self.ly
        return (mu - self.y) / self.scale

    def jacobian(self, p: np.ndarray) -> np.ndarray:
        jac = _power_jacobian(p, self.u)
        if self.log_scale:
            return jac / np.maximum(_curve("power", p, self.u), self.tiny)[:, None]
        return jac / self.scale

    def rss(self, p: np.ndarray) -> float:
        """Residual sum of squares on the working scale (unscaled)."""
        r = self.residuals(p) * self.scale
        return float(r @ r)

    def refit(self, start: np.ndarray, fixed: int, value: float, max_iter: int = 100) -> np.ndarray:
        """Refit the two other parameters with parameter ``fixed`` held at ``value``.

        A small projected Levenberg–Marquardt iteration in numpy (Moré 1978, from memory),
        fast enough to be called many times by the profile; checked against
        scipy.optimize.least_squares in the tests.
        """
        p = np.array(start, dtype=float)
        p[fixed] = value
        free = [i for i in range(3) if i != fixed]
        lower = np.array([_POWER_LOWER[i] for i in free])
        upper = np.array([_POWER_UPPER[i] for i in free])
        p[free] = np.clip(p[free], lower, upper)
        r = self.residuals(p)
        cost = float(r @ r)
        lam = 1e-3
        for _ in range(max_iter):
            jac = self.jacobian(p)[:, free]
            jtj = jac.T @ jac
            grad = jac.T @ r
            improved = converged = False
            for _ in range(30):
                m = jtj + lam * np.diag(np.diag(jtj) + 1e-300)
                det = m[0, 0] * m[1, 1] - m[0, 1] * m[1, 0]
                step = np.array([m[1, 1] * -grad[0] + m[0, 1] * grad[1],
                                 m[1, 0] * grad[0] - m[0, 0] * grad[1]]) / det
                if np.all(np.abs(step) <= 1e-10 * (np.abs(p[free]) + 1e-10)):
                    converged = True
                    break
                trial = p.copy()
                trial[free] = np.clip(p[free] + step, lower, upper)
                r_trial = self.residuals(trial)
                cost_trial = float(r_trial @ r_trial)
                if cost_trial < cost:
                    improved = True
                    lam = max(lam / 3.0, 1e-12)
                    break
                lam *= 4.0
            if converged or not improved:
                break
            done = cost - cost_trial <= 1e-13 * max(cost, 1e-300)
            p, r, cost = trial, r_trial, cost_trial
            if done:
                break
        return p

    def solve(self, start: np.ndarray, fixed: int | None = None, value: float | None = None) -> np.ndarray:
        """Bounded least squares from ``start``, with parameter ``fixed`` held at ``value``."""
        p0 = np.array(start, dtype=float)
        if fixed is not None:
            p0[fixed] = value
        free = [i for i in range(3) if i != fixed]
        lower = np.array([_POWER_LOWER[i] for i in free])
        upper = np.array([_POWER_UPPER[i] for i in free])
        x0 = np.clip(p0[free], lower, upper)

        def full(x):
            p = p0.copy()
            p[free] = x
            return p

        sol = optimize.least_squares(
            lambda x: self.residuals(full(x)), x0, jac=lambda x: self.jacobian(full(x))[:, free],
            bounds=(lower, upper), x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12, method="trf",
        )
        return full(sol.x)


def _profile_interval(g, theta_hat: float, guess: float, lower: float,
                      upper: float | None) -> tuple[float, float, bool]:
    """Roots of ``g`` (profile RSS − threshold, negative at ``theta_hat``) either side of it.

    ``guess`` is a half-width to start bracketing from (the Wald half-width); ``lower`` is the
    parameter's bound and ``upper`` its limit (None: none). Returns (lo, hi, reached), where
    ``reached`` says an end stopped at a bound or limit.
    """
    if not g(theta_hat) < 0:  # an exact fit (RSS ≈ 0): the interval has no width to find
        return theta_hat, theta_hat, False
    width = guess if np.isfinite(guess) and guess > 0 else max(abs(theta_hat), 1e-6)
    tol = 1e-5 * max(width, 1e-12)
    ends, reached = [], False
    for sign, limit in ((-1.0, lower), (1.0, upper)):
        inner, outer, found = theta_hat, None, False
        step = width
        for _ in range(60):
            trial = theta_hat + sign * step
            if limit is not None and sign * (trial - limit) >= 0:
                trial = limit
            if g(trial) > 0:
                outer, found = trial, True
                break
            inner = trial
            if limit is not None and trial == limit:
                break
            step *= 2.0
        if not found:
            ends.append(inner)
            reached = True
            continue
        a, b = (outer, inner) if sign < 0 else (inner, outer)
        ends.append(optimize.brentq(g, a, b, xtol=tol))
    return ends[0], ends[1], reached


def _power_profile_cis(problem: _PowerProblem, p: np.ndarray, se: np.ndarray, rss_min: float,
                       dof: int, level: float = 0.95):
    """Profile-likelihood intervals of a, b and c of the power model.

    {θ : RSS_profile(θ) ≤ RSS_min · (1 + F(level; 1, n − 3) / (n − 3))} on the working scale,
    the F-based profile interval of nonlinear least squares (Bates & Watts 1988, §6.1, from
    memory). The other two parameters are refitted (bounded least squares) at each θ.

    Returns (ci, reached): dicts by parameter name; ``reached`` marks an interval that ran into a
    bound or limit (a ≥ 0, b ≥ 0, c within POWER_EXPONENT_BOUNDS, a ≤ the largest MO2).
    """
    f_crit = float(stats.f.ppf(level, 1, dof))
    thr = rss_min * (1.0 + f_crit / dof)
    limits = {0: (0.0, float(problem.y.max())), 1: (0.0, None), 2: POWER_EXPONENT_BOUNDS}
    ci, reached = {}, {}
    for i, name in enumerate(("a", "b", "c")):
        last = {"p": p}  # warm start each refit from the nearest one before it

        def g(t, i=i, last=last):
            start = last["p"] if abs(t - last["p"][i]) < abs(t - p[i]) else p
            fitted = problem.refit(start, i, t)
            last["p"] = fitted
            return problem.rss(fitted) - thr

        lo, hi, hit = _profile_interval(g, float(p[i]), math.sqrt(f_crit) * float(se[i]), *limits[i])
        ci[name] = (float(lo), float(hi))
        reached[name] = hit
    return ci, reached


def _fit_power(u: np.ndarray, y: np.ndarray, plan: _BootPlan | None,
               scatter: str) -> tuple[SpeedMetabolismFit, bool]:
    """Power fit; returns the fit and whether any parameter ended on a bound."""
    n = u.size
    log_scale = scatter == "proportional"
    problem = _PowerProblem(u, y, log_scale)
    # Start: variable projection over c (weights 1/MO2², the first-order form of the ln fit).
    weights = (1.0 / y**2 if log_scale else np.ones(n))[None, :]
    start = _power_grid_fit(u, y[None, :], weights)[0]
    p = problem.solve(start)
    if problem.rss(start) < problem.rss(p):
        p = start
    fitted = _curve("power", p, u)
    rss = problem.rss(p)
    dof = n - 3
    jw = problem.jacobian(p) * problem.scale  # working-scale Jacobian
    cov = rss / dof * np.linalg.pinv(jw.T @ jw)
    se_values = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    names = ("a", "b", "c")
    params = {k: float(v) for k, v in zip(names, p, strict=True)}
    se = {k: float(v) for k, v in zip(names, se_values, strict=True)}
    lo_c, hi_c = POWER_EXPONENT_BOUNDS
    at_bound = bool(p[0] <= 0.0 or p[1] <= 0.0 or p[2] <= lo_c * (1 + 1e-9) or p[2] >= hi_c * (1 - 1e-9))
    loglik = -0.5 * n * (math.log(2 * math.pi * max(rss, 1e-300) / n) + 1.0)
    if log_scale:
        loglik -= float(np.log(y).sum())  # likelihood of MO2, as for the exponential
    ci, reached = _power_profile_cis(problem, p, se_values, rss, dof)
    scale_words = "ln MO2" if log_scale else "MO2"
    method = (f"profile likelihood on {scale_words}, F-based ({dof} degrees of freedom)"
              + (f"; interval of {', '.join(k for k, v in reached.items() if v)} reaches a bound"
                 if any(reached.values()) else ""))
    boot = None
    if plan is not None:
        yy, w = _boot_responses(plan, y, fitted, jw, log_scale)
        if log_scale:
            w = w / fitted[None, :] ** 2
        boot = _power_grid_fit(u, yy, w)
    fit = SpeedMetabolismFit(
        model="power", params=params, se=se, ci95=ci, ci_method=method,
        aicc=_aicc(loglik, 4, n), n=n, residuals=y - fitted,
        speed_range_m_s=(float(u.min()), float(u.max())), boot_params=boot,
        boot_method=(plan.describe(log_scale) + ("; refitted by least squares weighted by "
                                                 "1/fitted² (first-order ln fit)" if log_scale else ""))
        if plan else None,
        n_boot_failed=plan.n_dropped if plan else 0, covariance=cov, dof=dof, scatter=scatter,
    )
    return fit, at_bound


BOOTSTRAP_KINDS = {
    "residuals": "resample leverage-adjusted ln-scale residuals about the fitted curve (speeds fixed)",
    "cases": "resample data points (speed, MO2 pairs) with replacement",
}
"""Bootstrap schemes of :func:`fit_speed_metabolism`."""


def fit_speed_metabolism(
    speed_m_s: Any,
    mo2_mg_kg_h: Any,
    *,
    models: tuple[str, ...] = MODELS,
    n_boot: int = 1000,
    seed: int = 0,
    bootstrap: str = "residuals",
    scatter: str = "proportional",
    settings: LabSettings = DEFAULT_SETTINGS,
) -> SpeedMetabolismFits:
    """Fit the exponential and power speed–MO2 curves and choose between them by AICc.

    Parameters
    ----------
    speed_m_s
        Swimming speed of each accepted measure phase. [m/s]
    mo2_mg_kg_h
        MO2 of each phase, background-corrected. [mg O2 kg⁻¹ h⁻¹]
    models
        Which of :data:`MODELS` to fit.
    n_boot
        Bootstrap resamples kept for the curve band and Uopt's interval; 0 for none (the band
        is then by the delta method and Uopt has no interval).
    seed
        Seed of the bootstrap's random generator; the same seed gives the same replicates.
    bootstrap
        ``"residuals"`` (default; the speeds are set by the protocol, so resample residuals
        about the fit) or ``"cases"`` (resample data points); see :data:`BOOTSTRAP_KINDS`.
    scatter
        Error model of the power fit: ``"proportional"`` (default; least squares on ln MO2, as
        for the exponential) or ``"additive"`` (least squares on MO2); see
        :data:`SCATTER_MODELS`.
    settings
        Lab settings: ``fit_relative_se_max``.

    Returns
    -------
    SpeedMetabolismFits
        Fits that could not be made are None, with a FIT_NOT_POSSIBLE flag saying why (fewer
        than three distinct speeds, all MO2 equal, an MO2 that is zero, negative or not a
        number; the power model also needs four points). No exception is raised for such data.

    Notes
    -----
    Exponential (Brett 1964)::

        MO2 = a · exp(b · U),   fitted as  ln MO2 = ln a + b · U  by OLS (statsmodels)

    Power (hydrodynamic form; Korsmeyer et al. 2002, Papadopoulos 2009)::

        MO2 = a + b · U^c,   fitted by scipy.optimize.least_squares with bounds a ≥ 0, b ≥ 0,
        c within POWER_EXPONENT_BOUNDS; residuals ln MO2 − ln(a + b U^c) by default

    a is the MO2 extrapolated to zero speed in both (an estimate of SMR). MO2 scatter between
    phases tends to grow with MO2, hence the proportional default; with it, both models share
    one error model (log-normal) and differ only in the curve.

    *AICc on one scale.* Both likelihoods are written for MO2 itself: a fit on ln MO2 has the
    log-normal likelihood of MO2, its ln-scale Gaussian likelihood minus Σ ln MO2 (the Jacobian
    of the transform; Burnham & Anderson 2002, from memory); an additive power fit has the
    Gaussian likelihood of MO2. k counts the residual variance too (3 and 4). AICc = −2 ln L +
    2k + 2k(k+1)/(n−k−1) (Hurvich & Tsai 1989). The lower AICc wins; when |ΔAICc| < 2 the
    models are taken as equally supported (Burnham & Anderson 2002, from memory) and the one
    with fewer parameters, the exponential, is chosen (``best_rule`` says which rule applied).

    *Intervals of the parameters (``ci95``).* Exponential: t intervals of OLS on ln MO2 (exact
    under log-normal scatter; for this linear model they are also the profile-likelihood
    intervals), a by exponentiating the interval of ln a. Power: F-based profile-likelihood
    intervals (Bates & Watts 1988, from memory), the other parameters refitted at each value;
    an interval that runs into a bound says so in ``ci_method``. Profile intervals were chosen
    over bootstrap percentiles because the latter under-cover with the few speeds of one fish
    (measured in docs/references.md).

    *Bootstrap replicates.* With ``n_boot > 0``, residuals (leverage-adjusted, on the fitted
    scale; Davison & Hinkley 1997) or cases are resampled, seeded and deterministic, and each
    replicate is refitted (exponential: OLS; power: weighted least squares by a profile over
    c); they give :meth:`SpeedMetabolismFit.band` and :func:`optimal_speed`'s intervals.

    A parameter whose relative standard error exceeds ``settings.fit_relative_se_max``, or a
    power fit that ends on a bound, is flagged FIT_POORLY_CONSTRAINED.
    """
    for m in models:
        _validate.choice("model", m, MODELS)
    u = _validate.as_float_array("speed_m_s", speed_m_s).ravel()
    y = _validate.as_float_array("mo2_mg_kg_h", mo2_mg_kg_h).ravel()
    if u.size != y.size:
        raise InputError(
            f"speed_m_s has {u.size} values but mo2_mg_kg_h has {y.size}; give one speed per MO2",
            field="speed_m_s",
        )
    _validate.choice("bootstrap", bootstrap, BOOTSTRAP_KINDS)
    _validate.choice("scatter", scatter, SCATTER_MODELS)
    n_boot = int(n_boot)
    if n_boot < 0:
        raise InputError(f"n_boot must be zero or more; got {n_boot}", field="n_boot")

    def not_possible(message: str) -> SpeedMetabolismFits:
        return SpeedMetabolismFits(
            exponential=None, power=None, best=None,
            flags=(flag("FIT_NOT_POSSIBLE", message),), best_rule="no fit",
        )

    bad_u = ~np.isfinite(u) | (u < 0)
    if bad_u.any():
        i = int(np.flatnonzero(bad_u)[0])
        return not_possible(f"speed of point {i + 1} is {u[i]!r} m/s; speeds must be finite and ≥ 0")
    bad_y = ~np.isfinite(y)
    if bad_y.any():
        i = int(np.flatnonzero(bad_y)[0])
        return not_possible(f"MO2 of point {i + 1} is not a number ({y[i]!r})")
    if (y <= 0).any():
        i = int(np.flatnonzero(y <= 0)[0])
        return not_possible(
            f"MO2 of point {i + 1} is {y[i]:g} mg O2 kg⁻¹ h⁻¹; every MO2 must be greater than zero "
            "(check the background correction of that phase)"
        )
    distinct = np.unique(u).size
    if distinct < 3:
        return not_possible(f"{distinct} distinct speed(s) in {u.size} points; a curve needs at least three")
    if np.ptp(y) == 0:
        return not_possible(f"all {y.size} MO2 values are equal ({y[0]:g}); MO2 must vary with speed")

    plan = None
    if n_boot > 0:
        rng = np.random.default_rng(seed)
        if bootstrap == "cases":
            counts = rng.multinomial(u.size, np.full(u.size, 1.0 / u.size), size=n_boot).astype(float)
            keep = _distinct_per_replicate(counts, u) >= 3
            if keep.sum() >= 2:
                plan = _BootPlan("cases", counts[keep], seed, int((~keep).sum()))
        else:
            plan = _BootPlan("residuals", rng.integers(0, u.size, size=(n_boot, u.size)), seed)

    flags: list[dict] = []
    fits: dict[str, SpeedMetabolismFit | None] = {"exponential": None, "power": None}
    if "exponential" in models:
        fits["exponential"] = _fit_exponential(u, y, plan)
    if "power" in models:
        if u.size < 4:
            flags.append(flag(
                "FIT_NOT_POSSIBLE",
                f"power model not fitted: {u.size} points for 3 parameters; it needs at least four",
            ))
        else:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                power_fit, at_bound = _fit_power(u, y, plan, scatter)
            fits["power"] = power_fit
            if at_bound:
                flags.append(flag(
                    "FIT_POORLY_CONSTRAINED",
                    "power model: a parameter ended on its bound "
                    f"(a = {power_fit.params['a']:.3g}, b = {power_fit.params['b']:.3g}, "
                    f"c = {power_fit.params['c']:.3g}; bounds a ≥ 0, b ≥ 0, "
                    f"{POWER_EXPONENT_BOUNDS[0]:g} ≤ c ≤ {POWER_EXPONENT_BOUNDS[1]:g})",
                ))
    for name, fit in fits.items():
        if fit is None:
            continue
        for key, value in fit.params.items():
            rel = fit.se[key] / abs(value) if value != 0 else math.inf
            if rel > settings.fit_relative_se_max:
                flags.append(flag(
                    "FIT_POORLY_CONSTRAINED",
                    f"{name} model: relative standard error of {key} is {rel:.0%} "
                    f"> {settings.fit_relative_se_max:.0%}",
                ))

    best, rule, delta = _choose(fits["exponential"], fits["power"])
    return SpeedMetabolismFits(
        exponential=fits["exponential"], power=fits["power"], best=best,
        flags=tuple(flags), best_rule=rule, delta_aicc=delta,
    )


def _choose(expo: SpeedMetabolismFit | None, power: SpeedMetabolismFit | None):
    if expo is None and power is None:
        return None, "no fit", None
    if power is None or power.aicc is None:
        return "exponential" if expo is not None else "power", "only model with an AICc", None
    if expo is None or expo.aicc is None:
        return "power", "only model with an AICc", None
    delta = power.aicc - expo.aicc
    if abs(delta) < 2.0:
        return "exponential", (f"|ΔAICc| = {abs(delta):.2f} < 2: equally supported; the model with "
                               "fewer parameters (exponential) is chosen"), delta
    winner = "power" if delta < 0 else "exponential"
    return winner, f"lower AICc (ΔAICc = {abs(delta):.2f} ≥ 2)", delta


# =================================================================================================
# SMR, MMR and aerobic scope
# =================================================================================================


@dataclass(frozen=True)
class RateEstimate:
    """A metabolic rate (SMR or MMR) and how it was obtained.

    Attributes
    ----------
    value
        The rate. [mg O2 kg⁻¹ h⁻¹]
    method
        The method's name (e.g. ``"quantile_0.2"``, ``"mlnd"``, ``"extrapolation_exponential"``,
        ``"swimming_peak"``).
    ci95
        95 % interval, or None where the method gives none. [mg O2 kg⁻¹ h⁻¹]
    n
        Observations the estimate rests on. [-]
    notes
        What a reader needs to judge the estimate, in words.
    details
        Method-specific figures (e.g. the mixture's components, CV_MLND).
    """

    value: float
    method: str
    ci95: tuple[float, float] | None
    n: int
    notes: str
    details: dict = field(default_factory=dict)


def _positive_values(name: str, values: Any, unit: str = "mg O2 kg⁻¹ h⁻¹") -> np.ndarray:
    arr = _validate.as_float_array(name, values).ravel()
    if arr.size == 0:
        raise InputError(f"{name} is empty; give at least one value", field=name)
    bad = ~np.isfinite(arr) | (arr <= 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"{name}: value {i + 1} is {arr[i]:g}; each must be a finite number > 0 [{unit}]",
                         field=name)
    return arr


def smr_from_fit(fits: SpeedMetabolismFits, model: str | None = None) -> RateEstimate | None:
    """SMR as the speed–MO2 curve's value at zero speed.

    Parameters
    ----------
    fits
        Result of :func:`fit_speed_metabolism`.
    model
        ``"exponential"`` or ``"power"``; the best fit when None.

    Returns
    -------
    RateEstimate or None
        None when the requested fit does not exist (see ``fits.flags``).

    Notes
    -----
    SMR = MO2(U = 0) = a in both models (Brett 1964 extrapolated his semi-log lines to zero
    speed). It is an extrapolation below the lowest speed tested; the interval is the fit's.
    """
    fit = fits.get(model)
    if fit is None:
        return None
    lo_u = fit.speed_range_m_s[0]
    return RateEstimate(
        value=fit.smr_extrapolated, method=f"extrapolation_{fit.model}", ci95=fit.smr_ci95,
        n=fit.n,
        notes=(f"{fit.model} speed–MO2 curve extrapolated to zero speed from {lo_u:g} m/s; "
               f"interval: {fit.ci_method}"),
    )


def smr_low_quantile(mo2: Any, q: float | None = None, *, settings: LabSettings = DEFAULT_SETTINGS) -> RateEstimate:
    """SMR as a low quantile of resting MO2 (Chabot, Steffensen & Farrell 2016).

    Parameters
    ----------
    mo2
        Resting MO2 values (e.g. overnight in the respirometer, the first hours of recovery from
        handling left out as Chabot et al. recommend). [mg O2 kg⁻¹ h⁻¹]
    q
        Quantile; ``settings.smr_quantile`` (0.2) when None. [-]

    Returns
    -------
    RateEstimate
        ``method`` ``"quantile_<q>"``; ``ci95`` the distribution-free interval of the quantile from
        order statistics, or None when n is too small for one.

    Notes
    -----
    The q-quantile by linear interpolation between order statistics (numpy's default, the same
    definition as R's default type 7; Hyndman & Fan 1996). Chabot et al. (2016) recommend
    q = 0.2 (or 0.25) unless the data fit the MLND method well (CV_MLND ≤ 5.4). The interval
    [x_(l), x_(u)] takes ranks l, u with P(l ≤ B < u) ≥ 0.95 for B ~ Binomial(n, q) (Conover 1999,
    §3.2, from memory).
    """
    values = _positive_values("mo2", mo2)
    q = settings.smr_quantile if q is None else float(q)
    if not 0.0 < q < 1.0:
        raise InputError(f"q must lie strictly between 0 and 1; got {q!r}", field="q")
    value = float(np.quantile(values, q))
    ci = _quantile_interval(np.sort(values), q)
    n = values.size
    return RateEstimate(
        value=value, method=f"quantile_{q:g}", ci95=ci, n=n,
        notes=(f"{q:g} quantile of {n} resting MO2 values (Chabot et al. 2016)"
               + ("" if ci else "; too few values for a 95 % order-statistic interval")),
    )


def _quantile_interval(sorted_values: np.ndarray, q: float, level: float = 0.95):
    """Shortest symmetric-in-probability order-statistic interval for the q-quantile."""
    n = sorted_values.size
    alpha = 1.0 - level
    lo_rank = int(stats.binom.ppf(alpha / 2, n, q))  # P(B < lo_rank) ≤ α/2 → x_(lo_rank) 1-based
    hi_rank = int(stats.binom.ppf(1 - alpha / 2, n, q)) + 1
    # Widen until the coverage P(lo ≤ B < hi) reaches the level.
    while (stats.binom.cdf(hi_rank - 1, n, q) - stats.binom.cdf(lo_rank - 1, n, q)) < level:
        if lo_rank > 1:
            lo_rank -= 1
        elif hi_rank < n:
            hi_rank += 1
        else:
            break
    if lo_rank < 1 or hi_rank > n:
        return None
    cover = stats.binom.cdf(hi_rank - 1, n, q) - stats.binom.cdf(lo_rank - 1, n, q)
    if cover < level:
        return None
    return float(sorted_values[lo_rank - 1]), float(sorted_values[hi_rank - 1])


@dataclass(frozen=True)
class _Mixture:
    weights: np.ndarray
    means: np.ndarray
    sds: np.ndarray
    loglik: float
    bic: float
    resp: np.ndarray


def _em_mixture(x: np.ndarray, k: int, rng: np.random.Generator, n_starts: int, max_iter: int = 400,
                tol: float = 1e-8) -> _Mixture:
    """Maximum-likelihood 1-D Gaussian mixture of ``k`` components (unequal variances) by EM.

    Starts: means at evenly spaced quantiles, then ``n_starts − 1`` random draws of k data
    points, all iterated together; the start with the highest likelihood wins. A variance floor
    of (1e-3 · sd(x))² keeps a component from collapsing onto one point. Iteration stops when
    the log-likelihood of every start rises by less than ``tol`` · |ln L|, or after ``max_iter``
    iterations (EM converges slowly for surplus components, which BIC then rejects anyway).
    """
    n = x.size
    sd_all = float(np.std(x))
    floor = (1e-3 * sd_all) ** 2 if sd_all > 0 else 1e-12
    starts = [np.quantile(x, (np.arange(k) + 0.5) / k)]
    for _ in range(max(n_starts - 1, 0)):
        starts.append(np.sort(rng.choice(x, size=k, replace=False)))
    mu = np.array(starts, dtype=float)  # (S, k)
    var = np.full_like(mu, max(sd_all**2 / k**2, floor))
    w = np.full_like(mu, 1.0 / k)
    xs = x[None, :, None]  # (1, n, 1)

    def e_step(w, mu, var):
        logp = (np.log(w)[:, None, :] - 0.5 * np.log(2 * np.pi * var)[:, None, :]
                - 0.5 * (xs - mu[:, None, :]) ** 2 / var[:, None, :])  # (S, n, k)
        mx = logp.max(axis=2, keepdims=True)
        lse = mx[..., 0] + np.log(np.exp(logp - mx).sum(axis=2))  # (S, n)
        return np.exp(logp - lse[..., None]), lse.sum(axis=1)

    prev = np.full(mu.shape[0], -np.inf)
    for _ in range(max_iter):
        resp, ll = e_step(w, mu, var)
        nk = np.maximum(resp.sum(axis=1), 1e-300)  # (S, k)
        w = np.maximum(nk / n, 1e-300)
        mu = (resp * xs).sum(axis=1) / nk
        var = np.maximum((resp * (xs - mu[:, None, :]) ** 2).sum(axis=1) / nk, floor)
        if np.all(ll - prev < tol * np.maximum(1.0, np.abs(ll))):
            break
        prev = ll
    resp, ll = e_step(w, mu, var)
    ll = np.where(np.isfinite(ll), ll, -np.inf)
    best = int(np.argmax(ll))
    order = np.argsort(mu[best])
    n_par = 3 * k - 1
    loglik = float(ll[best])
    return _Mixture(w[best][order], mu[best][order], np.sqrt(var[best][order]), loglik,
                    -2 * loglik + n_par * math.log(n), resp[best][:, order])


def smr_mlnd(
    mo2: Any,
    *,
    max_components: int = 4,
    n_starts: int = 5,
    seed: int = 0,
    min_share: float = _SMR_MIN_COMPONENT_SHARE,
) -> RateEstimate:
    """SMR as the mean of the lowest normal distribution (MLND; Chabot, Steffensen & Farrell 2016).

    Parameters
    ----------
    mo2
        Resting MO2 values, at least 10. [mg O2 kg⁻¹ h⁻¹]
    max_components
        Largest number of mixture components tried (1 … max_components, at most 4).
    n_starts
        EM starts per number of components (one at quantiles, the rest random, seeded).
    seed
        Seed of the random starts.
    min_share
        Smallest share of the observations the chosen component must hold. [-]

    Returns
    -------
    RateEstimate
        ``method`` ``"mlnd"``; ``details`` holds the chosen number of components, their weights,
        means and standard deviations, the BIC of each number tried, and ``cv_mlnd``
        (100 · sd / mean of the lowest component, in %). ``ci95`` is None.

    Notes
    -----
    A Gaussian mixture is fitted to the MO2 values by expectation–maximisation (Dempster, Laird
    & Rubin 1977) for 1 … max_components components with unequal variances; the number with the
    lowest BIC = −2 ln L + (3k − 1) ln n (Schwarz 1978) is kept. SMR is the mean of the component
    with the lowest mean among those holding at least ``min_share`` of the observations. Chabot
    et al. (2016) recommend the MLND when CV_MLND ≤ 5.4 and a low quantile (q0.2) otherwise;
    the notes say which applies.
    """
    values = _positive_values("mo2", mo2)
    if values.size < 10:
        raise InputError(f"mo2 has {values.size} values; the MLND method needs at least 10", field="mo2")
    max_components = int(max_components)
    if not 1 <= max_components <= 4:
        raise InputError(f"max_components must be 1 to 4; got {max_components}", field="max_components")
    rng = np.random.default_rng(seed)
    fits = {}
    for k in range(1, max_components + 1):
        if values.size < 3 * k:
            break
        fits[k] = _em_mixture(values, k, rng, n_starts)
    k_best = min(fits, key=lambda k: fits[k].bic)
    mix = fits[k_best]
    share = mix.weights
    eligible = np.flatnonzero(share >= min_share)
    j = int(eligible[0]) if eligible.size else int(np.argmax(share))
    mean, sd = float(mix.means[j]), float(mix.sds[j])
    cv = 100.0 * sd / mean
    advice = ("CV_MLND ≤ 5.4: Chabot et al. (2016) recommend the MLND" if cv <= 5.4 else
              "CV_MLND > 5.4: Chabot et al. (2016) recommend a low quantile (q0.2) instead")
    return RateEstimate(
        value=mean, method="mlnd", ci95=None, n=values.size,
        notes=(f"mean of the lowest of {k_best} normal component(s) chosen by BIC "
               f"(weight {share[j]:.2f}); CV_MLND = {cv:.2f} %; {advice}"),
        details={
            "n_components": k_best,
            "weights": mix.weights.tolist(),
            "means": mix.means.tolist(),
            "sds": mix.sds.tolist(),
            "bic": {k: f.bic for k, f in fits.items()},
            "cv_mlnd": cv,
        },
    )


MMR_METHODS = {
    "swimming_peak": "highest MO2 of the measure phases while swimming (step test)",
    "recovery_peak": "highest MO2 in the first measure phases after exhaustive exercise",
}
"""Methods of :func:`mmr`, with what each means."""


def mmr(
    mo2_values: Any,
    *,
    method: str = "swimming_peak",
    window_s: float | None = None,
) -> RateEstimate:
    """Maximum metabolic rate as the highest MO2 among the given phase (or window) values.

    Parameters
    ----------
    mo2_values
        MO2 of each measure phase, or of the steepest sliding window within each phase (from
        :func:`swimlab.trace.steepest_window_slopes` through :mod:`swimlab.uptake`).
        [mg O2 kg⁻¹ h⁻¹]
    method
        ``"swimming_peak"`` or ``"recovery_peak"`` (see :data:`MMR_METHODS`).
    window_s
        Length of the sliding window the values come from, or None for whole phases. [s]

    Returns
    -------
    RateEstimate
        The maximum, labelled with the method and how the values were obtained.

    Notes
    -----
    MMR is the highest aerobic rate a fish reaches; in a step test it is usually reached near
    Ucrit, after a chase at the start of recovery. Short windows raise the estimate, so the
    window length is part of the result (Norin & Clark 2016, from memory).
    """
    _validate.choice("method", method, MMR_METHODS)
    values = _positive_values("mo2_values", mo2_values)
    how = "whole measure phases" if window_s is None else (
        f"steepest {float(_validate.positive('window_s', window_s, 's')):g} s window per phase")
    i = int(np.argmax(values))
    return RateEstimate(
        value=float(values[i]), method=method, ci95=None, n=values.size,
        notes=f"{MMR_METHODS[method]}; values from {how}; maximum at value {i + 1} of {values.size}",
        details={"window_s": window_s, "index": i},
    )


class AerobicScope(NamedTuple):
    """Absolute and factorial aerobic scope."""

    absolute_mg_kg_h: float
    """MMR − SMR. [mg O2 kg⁻¹ h⁻¹]"""
    factorial: float
    """MMR / SMR. [-]"""


def aerobic_scope(smr: float | RateEstimate, mmr: float | RateEstimate) -> AerobicScope:
    """Absolute (MMR − SMR) and factorial (MMR / SMR) aerobic scope.

    Parameters
    ----------
    smr, mmr
        Standard and maximum metabolic rate, numbers or :class:`RateEstimate`. [mg O2 kg⁻¹ h⁻¹]

    Notes
    -----
    Fry (1947) defined the scope for activity as the difference between active and standard
    rates; the factorial scope is their ratio (Clark, Sandblom & Jutfelt 2013, from memory).
    An MMR below SMR is refused: one of them is wrong.
    """
    s = float(_validate.positive("smr", smr.value if isinstance(smr, RateEstimate) else smr,
                                 "mg O2 kg⁻¹ h⁻¹"))
    m = float(_validate.positive("mmr", mmr.value if isinstance(mmr, RateEstimate) else mmr,
                                 "mg O2 kg⁻¹ h⁻¹"))
    if m < s:
        raise InputError(f"mmr ({m:g}) is below smr ({s:g}) [mg O2 kg⁻¹ h⁻¹]; check both estimates",
                         field="mmr")
    return AerobicScope(absolute_mg_kg_h=m - s, factorial=m / s)


# =================================================================================================
# Cost of transport, Uopt, power and efficiency
# =================================================================================================


def cost_of_transport(
    mo2_mg_kg_h: Any,
    speed_m_s: Any,
    *,
    smr_mg_kg_h: float | None = None,
    oxycaloric_j_per_mg_o2: float = DEFAULT_SETTINGS.oxycaloric_j_per_mg_o2,
) -> pd.DataFrame:
    """Gross and net cost of transport at each speed.

    Parameters
    ----------
    mo2_mg_kg_h
        MO2 at each speed. [mg O2 kg⁻¹ h⁻¹]
    speed_m_s
        Swimming speed, greater than zero. [m/s]
    smr_mg_kg_h
        SMR for the net cost (MO2 − SMR); None gives gross cost only. [mg O2 kg⁻¹ h⁻¹]
    oxycaloric_j_per_mg_o2
        Energy per mg of oxygen consumed (lab setting, 13.6 by default). [J/mg]

    Returns
    -------
    pandas.DataFrame
        Columns ``speed_m_s``, ``mo2_mg_kg_h``, ``cot_gross_mg_kg_km``, ``cot_gross_j_kg_m`` and,
        with an SMR, ``cot_net_mg_kg_km``, ``cot_net_j_kg_m`` and ``below_smr`` (True where MO2 is
        below SMR, so the net cost is negative). A Series input keeps its index.

    Notes
    -----
    COT = MO2 / U with U in km/h (Schmidt-Nielsen 1972; Tucker 1970)::

        COT [mg O2 kg⁻¹ km⁻¹] = MO2 [mg O2 kg⁻¹ h⁻¹] / (3.6 · U [m/s])
        COT [J kg⁻¹ m⁻¹]      = COT [mg O2 kg⁻¹ km⁻¹] · Q_ox [J/mg] / 1000

    Net COT uses MO2 − SMR (the cost of swimming alone).
    """
    mo2 = _validate.positive("mo2_mg_kg_h", mo2_mg_kg_h, "mg O2 kg⁻¹ h⁻¹")
    speed = _validate.positive("speed_m_s", speed_m_s, "m/s")
    q_ox = float(_validate.positive("oxycaloric_j_per_mg_o2", oxycaloric_j_per_mg_o2, "J/mg"))
    mo2, speed = np.broadcast_arrays(np.atleast_1d(mo2), np.atleast_1d(speed))
    index = next((s.index for s in (mo2_mg_kg_h, speed_m_s) if isinstance(s, pd.Series)), None)
    gross = mo2 / (_KM_H_PER_M_S * speed)
    table = {
        "speed_m_s": speed.astype(float),
        "mo2_mg_kg_h": mo2.astype(float),
        "cot_gross_mg_kg_km": gross,
        "cot_gross_j_kg_m": gross * q_ox / _M_PER_KM,
    }
    if smr_mg_kg_h is not None:
        smr = float(_validate.positive("smr_mg_kg_h", smr_mg_kg_h, "mg O2 kg⁻¹ h⁻¹"))
        net = (mo2 - smr) / (_KM_H_PER_M_S * speed)
        table["cot_net_mg_kg_km"] = net
        table["cot_net_j_kg_m"] = net * q_ox / _M_PER_KM
        table["below_smr"] = mo2 < smr
    return pd.DataFrame(table, index=index)


@dataclass(frozen=True)
class UoptResult:
    """Optimal swimming speed (minimum gross cost of transport) from a speed–MO2 fit.

    Attributes
    ----------
    uopt_m_s
        Speed of the minimum cost of transport, or None when the curve has no minimum. [m/s]
    cotmin_mg_kg_km
        The minimum gross cost of transport. [mg O2 kg⁻¹ km⁻¹]
    uopt_ci95, cotmin_ci95
        Percentile intervals from the fit's bootstrap replicates, or None without replicates.
    closed_form
        True when the optimum came from the model's closed form.
    outside_tested
        True when Uopt lies outside the tested speeds.
    model
        The fit's model.
    flags
        UOPT_OUTSIDE_TESTED when the optimum is outside the tested speeds or does not exist.
    n_replicates_without_optimum
        Bootstrap replicates whose curve has no minimum (left out of the intervals).
    """

    uopt_m_s: float | None
    cotmin_mg_kg_km: float | None
    uopt_ci95: tuple[float, float] | None
    cotmin_ci95: tuple[float, float] | None
    closed_form: bool
    outside_tested: bool
    model: str
    flags: tuple[dict, ...]
    n_replicates_without_optimum: int = 0


def _uopt_closed_form(model: str, p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Uopt [m/s] and COTmin [mg O2 kg⁻¹ km⁻¹] for parameter rows ``p`` (first axis); NaN where
    the curve has no minimum (handled by callers)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if model == "exponential":
            a, b = p[0], p[1]
            u = np.where(b > 0, 1.0 / b, np.nan)
        else:
            a, b, c = p[0], p[1], p[2]
            ok = (c > 1) & (a > 0) & (b > 0)
            u = np.where(ok, np.power(a / (b * (c - 1)), 1.0 / c), np.nan)
        cot = _curve(model, p, u) / (_KM_H_PER_M_S * u)
    return u, cot


def optimal_speed(fit: SpeedMetabolismFit, *, tested_range: tuple[float, float] | None = None) -> UoptResult:
    """Optimal swimming speed Uopt and the minimum cost of transport COTmin of a fitted curve.

    Parameters
    ----------
    fit
        A speed–MO2 fit (:class:`SpeedMetabolismFit`).
    tested_range
        Lowest and highest speed tested; the fit's speed range when None. [m/s]

    Returns
    -------
    UoptResult

    Notes
    -----
    Gross COT(U) = MO2(U) / U is smallest where d(MO2/U)/dU = 0, i.e. MO2'(U) = MO2(U) / U
    (the tangent from the origin; Tucker 1970)::

        exponential  MO2 = a e^(bU):   Uopt = 1/b,                 COTmin = a e b / 3.6
        power        MO2 = a + bU^c:   Uopt = (a / (b (c − 1)))^(1/c)   for c > 1, a > 0

    (COTmin in mg O2 kg⁻¹ km⁻¹ with U in m/s.) A power curve with c ≤ 1 or a = 0, or an
    exponential with b ≤ 0, has no minimum: COT keeps falling with speed. The closed forms are
    checked against scipy.optimize.minimize_scalar in the tests. Intervals are percentiles of
    the closed form over the fit's bootstrap replicates.
    """
    if not isinstance(fit, SpeedMetabolismFit):
        raise InputError(f"fit must be a SpeedMetabolismFit; got {type(fit).__name__}", field="fit")
    if tested_range is None:
        tested_range = fit.speed_range_m_s
    lo, hi = (float(v) for v in _validate.non_negative("tested_range", tested_range, "m/s").ravel()[:2])
    if hi < lo:
        raise InputError(f"tested_range must be (low, high); got ({lo:g}, {hi:g})", field="tested_range")
    p = np.array(list(fit.params.values()))
    u, cot = _uopt_closed_form(fit.model, p)
    flags: list[dict] = []
    u_ci = cot_ci = None
    n_none = 0
    if fit.boot_params is not None and len(fit.boot_params):
        ub, cb = _uopt_closed_form(fit.model, fit.boot_params.T)
        ok = np.isfinite(ub) & np.isfinite(cb)
        n_none = int((~ok).sum())
        if ok.sum() >= 2:
            u_ci, cot_ci = _percentile_ci(ub[ok]), _percentile_ci(cb[ok])
    if not np.isfinite(u):
        why = ("b ≤ 0" if fit.model == "exponential" else
               f"c = {p[2]:.3g} ≤ 1 or a = {p[0]:.3g} ≤ 0")
        flags.append(flag("UOPT_OUTSIDE_TESTED",
                          f"{fit.model} curve has no cost-of-transport minimum ({why}): COT falls "
                          "with speed over the whole curve"))
        return UoptResult(None, None, u_ci, cot_ci, closed_form=True, outside_tested=True,
                          model=fit.model, flags=tuple(flags), n_replicates_without_optimum=n_none)
    uopt, cotmin = float(u), float(cot)
    outside = not (lo <= uopt <= hi)
    if outside:
        flags.append(flag("UOPT_OUTSIDE_TESTED",
                          f"Uopt {uopt:.3g} m/s is outside the tested speeds {lo:g}–{hi:g} m/s"))
    return UoptResult(uopt, cotmin, u_ci, cot_ci, closed_form=True, outside_tested=outside,
                      model=fit.model, flags=tuple(flags), n_replicates_without_optimum=n_none)


def metabolic_power_w(
    mo2_mg_kg_h: Any,
    mass_kg: Any,
    oxycaloric_j_per_mg_o2: float = DEFAULT_SETTINGS.oxycaloric_j_per_mg_o2,
) -> Any:
    """Metabolic power of a fish from its MO2.

    Parameters
    ----------
    mo2_mg_kg_h
        MO2 (total, or net of SMR for the power of swimming). [mg O2 kg⁻¹ h⁻¹]
    mass_kg
        Body mass. [kg]
    oxycaloric_j_per_mg_o2
        Energy per mg of oxygen consumed. [J/mg]

    Returns
    -------
    float, ndarray or Series
        Power. [W]

    Notes
    -----
    P = MO2 · M · Q_ox / 3600 (mg/h → mg/s). Q_ox ≈ 13.6 J/mg O2 for a mixed diet (Elliott &
    Davison 1975, from memory; a lab setting).
    """
    mo2 = _validate.non_negative("mo2_mg_kg_h", mo2_mg_kg_h, "mg O2 kg⁻¹ h⁻¹")
    mass = _validate.positive("mass_kg", mass_kg, "kg")
    q_ox = _validate.positive("oxycaloric_j_per_mg_o2", oxycaloric_j_per_mg_o2, "J/mg")
    return _validate.like_input(mo2 * mass * q_ox / _S_PER_H, mo2_mg_kg_h, mass_kg)


EFFICIENCY_METHOD = "rigid-body estimate: drag power of the stretched-straight body / net metabolic power"
"""Label of :func:`efficiency`'s ratio, to be shown beside it."""


def efficiency(drag_power_w: Any, net_metabolic_power_w: Any) -> Any:
    """Overall swimming efficiency, drag power over net metabolic power (rigid-body estimate).

    Parameters
    ----------
    drag_power_w
        Power to overcome drag at the swimming speed, from
        :func:`swimlab.hydrodynamics.drag_power` (rigid, stretched-straight body). [W]
    net_metabolic_power_w
        Metabolic power above SMR at the same speed (:func:`metabolic_power_w` on MO2 − SMR). [W]

    Returns
    -------
    float, ndarray or Series
        Efficiency η = P_drag / P_net. [-] Label: :data:`EFFICIENCY_METHOD`.

    Notes
    -----
    η = P_drag / P_met,net (Webb 1975, from memory). The drag of a swimming (undulating) fish
    exceeds that of the rigid, stretched-straight body (Lighthill 1971, from memory), so this
    ratio is a rigid-body estimate, likely low; report it with that label.
    """
    drag = _validate.positive("drag_power_w", drag_power_w, "W")
    net = _validate.positive("net_metabolic_power_w", net_metabolic_power_w, "W")
    return _validate.like_input(drag / net, drag_power_w, net_metabolic_power_w)


# =================================================================================================
# Group curves
# =================================================================================================


@dataclass(frozen=True, eq=False)
class GroupCurve:
    """Population speed–MO2 curve across fish, MO2 = a·e^(b·U), from a mixed-effects model.

    Attributes
    ----------
    a, b
        Population a [mg O2 kg⁻¹ h⁻¹] (geometric-mean MO2 at zero speed) and b [s/m].
    a_ci95, b_ci95
        95 % Wald intervals (a by exponentiating the interval of ln a).
    sd_between_ln_a
        Between-fish standard deviation of ln a. [-]
    sd_between_b
        Between-fish standard deviation of b, or None with random intercepts only. [s/m]
    sd_residual_ln
        Residual standard deviation on the ln MO2 scale. [-]
    random_slopes
        Whether the model has random slopes.
    per_fish
        One row per fish: ``fish_id``, ``n_points``, ``n_speeds``, ``a_mixed``, ``b_mixed`` (the
        model's per-fish curve, fixed effects plus predicted random effects) and ``a_own``,
        ``b_own`` (each fish's own OLS fit on ln MO2, where it has at least two speeds).
    n_fish, n
        Fish and data points. [-]
    converged
        Whether the optimiser reported convergence.
    notes
        The model formula, and why random slopes were or were not used.
    """

    a: float
    b: float
    a_ci95: tuple[float, float]
    b_ci95: tuple[float, float]
    sd_between_ln_a: float
    sd_between_b: float | None
    sd_residual_ln: float
    random_slopes: bool
    per_fish: pd.DataFrame
    n_fish: int
    n: int
    converged: bool
    notes: str

    def predict(self, speed: Any) -> Any:
        """Population curve MO2 at ``speed`` [m/s]; returns [mg O2 kg⁻¹ h⁻¹]."""
        u = _validate.non_negative("speed", speed, "m/s")
        return _validate.like_input(self.a * np.exp(self.b * u), speed)

    def predict_fish(self, fish_id: str, speed: Any) -> Any:
        """One fish's curve of the mixed model (fixed plus its random effects) at ``speed``
        [m/s]; returns [mg O2 kg⁻¹ h⁻¹]."""
        row = self.per_fish[self.per_fish["fish_id"].astype(str) == str(fish_id)]
        if row.empty:
            raise InputError(f"fish {fish_id!r} is not in the group curve; fish are "
                             f"{sorted(self.per_fish['fish_id'].astype(str))}", field="fish_id")
        u = _validate.non_negative("speed", speed, "m/s")
        a, b = float(row["a_mixed"].iloc[0]), float(row["b_mixed"].iloc[0])
        return _validate.like_input(a * np.exp(b * u), speed)


_GROUP_COLUMNS = ("fish_id", "speed_m_s", "mo2_mg_kg_h")


def _mixed_fit(data: pd.DataFrame, slopes: bool):
    from statsmodels.regression.mixed_linear_model import MixedLM

    model = MixedLM.from_formula(
        "ln_mo2 ~ speed_m_s", data=data, groups=data["fish_id"],
        re_formula="~speed_m_s" if slopes else "1",
    )
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = model.fit(reml=True, method=["lbfgs", "powell"])
    boundary = any("boundary" in str(w.message).lower() or "singular" in str(w.message).lower()
                   for w in caught)
    return result, boundary


def group_curve(table: pd.DataFrame, *, random_slopes: bool | str = "auto") -> GroupCurve:
    """Population speed–MO2 curve across fish by a linear mixed model on ln MO2.

    Parameters
    ----------
    table
        One row per measure phase with columns ``fish_id``, ``speed_m_s`` [m/s] and
        ``mo2_mg_kg_h`` [mg O2 kg⁻¹ h⁻¹].
    random_slopes
        True, False or ``"auto"``: random slopes where the data support them — at least three
        fish with at least three distinct speeds each, and a fit that converges away from the
        boundary (no singular random-effects covariance); otherwise random intercepts only.

    Returns
    -------
    GroupCurve

    Notes
    -----
    ln MO2_ij = (β0 + u0_i) + (β1 + u1_i) · U_ij + ε_ij, (u0, u1) ~ N(0, G), ε ~ N(0, σ²), fitted
    by REML with statsmodels ``MixedLM`` (Laird & Ware 1982; Lindstrom & Bates 1988). The
    population curve is a = e^β0, b = β1; since it is fitted on the log scale, a is the
    geometric-mean (median) MO2 at zero speed across fish. Each fish's own curve is given
    beside the model's so a reader sees the shrinkage.
    """
    if not isinstance(table, pd.DataFrame):
        raise InputError(f"table must be a DataFrame; got {type(table).__name__}", field="table")
    missing = [c for c in _GROUP_COLUMNS if c not in table.columns]
    if missing:
        raise InputError(f"table lacks column(s) {missing}; it needs {list(_GROUP_COLUMNS)}",
                         column=missing[0])
    if random_slopes not in (True, False, "auto"):
        raise ValueError(f"unknown random_slopes {random_slopes!r}; valid choices are True, False, 'auto'")
    data = table.loc[:, list(_GROUP_COLUMNS)].copy()
    for col in ("speed_m_s", "mo2_mg_kg_h"):
        values = pd.to_numeric(data[col], errors="coerce").to_numpy(dtype=float)
        bad = ~np.isfinite(values) | (values <= 0 if col == "mo2_mg_kg_h" else values < 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"{table[col].iloc[i]!r} is not a valid value; expected a finite number "
                             f"{'> 0' if col == 'mo2_mg_kg_h' else '≥ 0'}", row=i + 1, column=col)
        data[col] = values
    if data["fish_id"].isna().any():
        i = int(np.flatnonzero(data["fish_id"].isna().to_numpy())[0])
        raise InputError("fish_id is missing", row=i + 1, column="fish_id")
    data["fish_id"] = data["fish_id"].astype(str)
    data["ln_mo2"] = np.log(data["mo2_mg_kg_h"])
    per = data.groupby("fish_id", sort=True).agg(
        n_points=("speed_m_s", "size"), n_speeds=("speed_m_s", "nunique"))
    n_fish = len(per)
    if n_fish < 2:
        raise InputError(f"table holds {n_fish} fish; a group curve needs at least two "
                         "(use fit_speed_metabolism for one fish)", column="fish_id")
    if data["speed_m_s"].nunique() < 2:
        raise InputError("all speeds are equal; a group curve needs at least two speeds", column="speed_m_s")

    supported = int((per["n_speeds"] >= 3).sum()) >= 3
    reasons = []
    use_slopes = False
    result = None
    if random_slopes is True or (random_slopes == "auto" and supported):
        result, boundary = _mixed_fit(data, slopes=True)
        if random_slopes is True:
            use_slopes = True
        elif result.converged and not boundary and _cov_ok(result):
            use_slopes = True
            reasons.append("random slopes: ≥ 3 fish with ≥ 3 speeds each and the fit converged")
        else:
            reasons.append("random slopes tried but the fit did not converge or its random-effects "
                           "covariance was singular; random intercepts only")
            result = None
    elif random_slopes == "auto":
        reasons.append(f"random intercepts only: {int((per['n_speeds'] >= 3).sum())} fish with ≥ 3 "
                       "speeds (random slopes need at least 3)")
    else:
        reasons.append("random intercepts only, as asked")
    if result is None:
        result, _ = _mixed_fit(data, slopes=False)

    fe = result.fe_params
    ci = result.conf_int().loc[["Intercept", "speed_m_s"]]
    cov_re = np.asarray(result.cov_re)
    re = result.random_effects
    rows = []
    for fish_id, grp in data.groupby("fish_id", sort=True):
        eff = re[fish_id]
        u0 = float(eff.iloc[0])
        u1 = float(eff.iloc[1]) if use_slopes and len(eff) > 1 else 0.0
        a_own = b_own = None
        if grp["speed_m_s"].nunique() >= 2:
            own = np.polyfit(grp["speed_m_s"], grp["ln_mo2"], 1)
            b_own, a_own = float(own[0]), float(math.exp(own[1]))
        rows.append({
            "fish_id": fish_id, "n_points": int(len(grp)), "n_speeds": int(grp["speed_m_s"].nunique()),
            "a_mixed": math.exp(float(fe["Intercept"]) + u0), "b_mixed": float(fe["speed_m_s"]) + u1,
            "a_own": a_own, "b_own": b_own,
        })
    formula = ("ln MO2 ~ U, random intercept" + (" and slope" if use_slopes else "") + " per fish (REML)")
    return GroupCurve(
        a=math.exp(float(fe["Intercept"])), b=float(fe["speed_m_s"]),
        a_ci95=(math.exp(float(ci.loc["Intercept", 0])), math.exp(float(ci.loc["Intercept", 1]))),
        b_ci95=(float(ci.loc["speed_m_s", 0]), float(ci.loc["speed_m_s", 1])),
        sd_between_ln_a=float(math.sqrt(max(cov_re[0, 0], 0.0))),
        sd_between_b=float(math.sqrt(max(cov_re[1, 1], 0.0))) if use_slopes else None,
        sd_residual_ln=float(math.sqrt(result.scale)),
        random_slopes=use_slopes, per_fish=pd.DataFrame(rows), n_fish=n_fish, n=len(data),
        converged=bool(result.converged), notes=f"{formula}; " + "; ".join(reasons),
    )


def _cov_ok(result) -> bool:
    cov = np.asarray(result.cov_re)
    if not np.all(np.isfinite(cov)):
        return False
    eig = np.linalg.eigvalsh(cov)
    return bool(eig.min() > 1e-10 * max(eig.max(), 1e-300))
