"""Fixed-speed endurance: time to fatigue at each set speed, with fish that outlast the limit.

In an endurance trial each fish swims at one set speed until it fatigues or until the time
limit ends. A fish still swimming at the limit has not given a fatigue time, only a lower bound:
its time is *right-censored*, and it stays in the analysis as such (dropping it, or taking the
limit as its fatigue time, biases endurance low).

- :func:`endurance_outcomes` turns recorded fatigue times and the limit into (time, fatigued).
- :func:`kaplan_meier` is the share of fish still swimming against time (Kaplan & Meier 1958).
- :func:`fatigue_curve` fits log10 endurance time on speed by a censored normal (Tobit)
  likelihood (Tobin 1958), the log-linear fatigue curve of Brett (1964) with censoring handled.
- :func:`fatigue_curves_by_gait` fits that curve separately for each gait the trials ended in
  (the steady and the burst-assisted domains of Brett 1964 and Beamish 1978), tests whether
  separate curves describe the data better than one, and gives the speed where they meet.
- :func:`max_sustained_speed` is the highest tested speed no fish failed within the limit.
- :func:`speed_half_fatigued` is the speed at which half the fish fatigue within the limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize, stats
from statsmodels.tools import numdiff

from swimlab import _validate
from swimlab.checks import flag
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS, LabSettings

__all__ = [
    "endurance_outcomes",
    "kaplan_meier",
    "kaplan_meier_by_speed",
    "FatigueCurveFit",
    "fatigue_curve",
    "GaitCurves",
    "fatigue_curves_by_gait",
    "MaxSustainedSpeed",
    "max_sustained_speed",
    "SpeedAtShare",
    "speed_half_fatigued",
    "KM_COLUMNS",
]

PROTOCOL = "endurance"
"""Name of the protocol, as in :data:`swimlab.session.PROTOCOL_TYPES`."""

KM_COLUMNS = ["time_s", "at_risk", "fatigued", "censored", "share_swimming", "share_swimming_se"]
"""Columns of the table :func:`kaplan_meier` returns."""

_LN10 = math.log(10.0)


# --------------------------------------------------------------------------------------------
# Input helpers
# --------------------------------------------------------------------------------------------


def _time_limit(time_limit_s: Any) -> float:
    if time_limit_s is None:
        raise InputError("an endurance trial needs its time limit [s]", field="time_limit_s")
    arr = _validate.positive("time_limit_s", time_limit_s, "s")
    if arr.size != 1:
        raise InputError(f"time_limit_s must be one number [s]; got {arr.size} values", field="time_limit_s")
    return float(arr.reshape(()))


def _fatigued_flags(fatigued: Any, n: int) -> np.ndarray:
    raw = fatigued.to_numpy() if isinstance(fatigued, pd.Series) else np.asarray(fatigued)
    if raw.ndim == 0:
        raw = raw.reshape(1)
    if raw.shape != (n,):
        raise InputError(f"fatigued must have one value per fish ({n}); got shape {raw.shape}", field="fatigued")
    out = np.empty(n, dtype=bool)
    for i, value in enumerate(raw):
        if isinstance(value, bool | np.bool_):
            out[i] = bool(value)
        elif isinstance(value, int | float | np.integer | np.floating) and value in (0, 1):
            out[i] = bool(value)
        else:
            raise InputError(
                f"fatigued must be True (fatigued) or False (still swimming at the limit); got {value!r}",
                field="fatigued",
                row=i + 1,
            )
    return out


def _outcomes(times_s: Any, fatigued: Any) -> tuple[np.ndarray, np.ndarray]:
    t = np.atleast_1d(_validate.positive("times_s", times_s, "s")).astype(float)
    if t.ndim != 1 or t.size == 0:
        raise InputError("times_s must be a non-empty list of times, one per fish [s]", field="times_s")
    return t, _fatigued_flags(fatigued, t.size)


def endurance_outcomes(fatigue_time_s: Any, time_limit_s: float | None) -> tuple[np.ndarray, np.ndarray]:
    """Times and fatigue status from recorded fatigue times and the trial's time limit.

    Parameters
    ----------
    fatigue_time_s
        Time from the start of the set speed to fatigue, one per fish; NaN or None for a fish
        still swimming when the limit ended. [s]
    time_limit_s
        The trial's time limit; required. [s]

    Returns
    -------
    time_s, fatigued
        ``time_s`` is the fatigue time, or the limit for a fish still swimming (censored);
        ``fatigued`` is True where the fish fatigued within the limit.

    Raises
    ------
    InputError
        No time limit (field ``time_limit_s``); a fatigue time that is not positive or lies
        beyond the limit (field ``fatigue_time_s`` with the fish's row).
    """
    limit = _time_limit(time_limit_s)
    values = fatigue_time_s.to_numpy() if isinstance(fatigue_time_s, pd.Series) else fatigue_time_s
    raw = np.atleast_1d(np.asarray([np.nan if v is None else v for v in np.atleast_1d(values)], dtype=float))
    fatigued = ~np.isnan(raw)
    for i, value in enumerate(raw):
        if fatigued[i] and not (np.isfinite(value) and value > 0):
            raise InputError(f"a fatigue time must be a positive number of seconds; got {value!r}",
                             field="fatigue_time_s", row=i + 1)
        if fatigued[i] and value > limit:
            raise InputError(
                f"fatigue time {value:g} s is beyond the time limit {limit:g} s; the trial ends at the limit",
                field="fatigue_time_s", row=i + 1,
            )
    return np.where(fatigued, raw, limit), fatigued


# --------------------------------------------------------------------------------------------
# Kaplan–Meier
# --------------------------------------------------------------------------------------------


def kaplan_meier(times_s: Any, fatigued: Any) -> pd.DataFrame:
    """Share of fish still swimming against time (Kaplan–Meier product-limit estimate).

    Parameters
    ----------
    times_s
        Fatigue time of each fish, or the time it was last seen swimming (the limit) if it did
        not fatigue. [s]
    fatigued
        True where the fish fatigued at that time; False where it was still swimming
        (right-censored).

    Returns
    -------
    pandas.DataFrame
        One row per distinct time, ascending, with the columns of :data:`KM_COLUMNS`: the fish
        at risk just before the time, the fish that fatigued and that were censored at it, the
        estimated share still swimming just after it, and its Greenwood standard error
        (0 where the estimate has reached 0).

    Notes
    -----
    Kaplan & Meier (1958)::

        S(t) = Π_{t_j ≤ t} (1 − d_j / n_j)
        Var S(t) = S(t)² Σ_{t_j ≤ t} d_j / (n_j (n_j − d_j))        (Greenwood 1926)

    n_j counts the fish whose time is t_j or later; a fish censored at t_j is at risk at t_j
    (the usual convention: fatigue before censoring at a tie).
    """
    t, e = _outcomes(times_s, fatigued)
    distinct = np.unique(t)
    at_risk = np.array([np.sum(t >= u) for u in distinct])
    events = np.array([np.sum(e & (t == u)) for u in distinct])
    censored = np.array([np.sum(~e & (t == u)) for u in distinct])
    share = np.cumprod(1.0 - events / at_risk)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(events > 0, events / (at_risk * (at_risk - events)), 0.0)
        greenwood = np.cumsum(terms)
        se = np.where(share > 0, share * np.sqrt(greenwood), 0.0)
    return pd.DataFrame(
        {
            "time_s": distinct,
            "at_risk": at_risk,
            "fatigued": events,
            "censored": censored,
            "share_swimming": share,
            "share_swimming_se": se,
        },
        columns=KM_COLUMNS,
    )


def kaplan_meier_by_speed(speed_m_s: Any, times_s: Any, fatigued: Any) -> pd.DataFrame:
    """:func:`kaplan_meier` for each set speed; the table gains a first column ``speed_m_s``."""
    u = np.atleast_1d(_validate.positive("speed_m_s", speed_m_s, "m/s"))
    t, e = _outcomes(times_s, fatigued)
    if u.shape != t.shape:
        raise InputError(f"speed_m_s must have one value per fish ({t.size}); got {u.size}", field="speed_m_s")
    parts = []
    for speed in np.unique(u):
        table = kaplan_meier(t[u == speed], e[u == speed])
        table.insert(0, "speed_m_s", speed)
        parts.append(table)
    return pd.concat(parts, ignore_index=True)


# --------------------------------------------------------------------------------------------
# Fatigue curve: censored normal regression of log10 time on speed
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FatigueCurveFit:
    """log10 endurance time on speed, fitted with right-censoring (Tobit).

    The model is log10 T = intercept + slope · U + sigma · ε with ε standard normal.

    Attributes
    ----------
    protocol
        ``"endurance"``.
    intercept, slope, sigma
        Fitted parameters. [log10 s], [log10 s per m/s], [log10 s]
    intercept_se, slope_se, sigma_se
        Standard errors from the observed information (None if it is not invertible).
    covariance
        Covariance of (intercept, slope, sigma), 3 × 3, or None.
    n_fish, n_fatigued, n_censored
        Fish in the fit, those that fatigued, those still swimming at the limit. [-]
    speeds_m_s
        Distinct speeds tested. [m/s]
    log_likelihood
        Maximised log-likelihood (of log10 times). [-]
    converged
        True when the optimiser converged and the covariance is positive definite.
    method
        ``"tobin1958"`` (censored normal likelihood).
    flags
        ENDURANCE_CENSORED when fish were censored; FIT_POORLY_CONSTRAINED when a parameter's
        relative standard error exceeds the lab setting or the fit did not converge.
    """

    protocol: str
    intercept: float
    slope: float
    sigma: float
    intercept_se: float | None
    slope_se: float | None
    sigma_se: float | None
    covariance: tuple[tuple[float, ...], ...] | None = field(repr=False)
    n_fish: int
    n_fatigued: int
    n_censored: int
    speeds_m_s: tuple[float, ...]
    log_likelihood: float
    converged: bool
    method: str
    flags: tuple[dict, ...]

    def median_time_s(self, speed_m_s: Any) -> Any:
        """Median endurance time at a speed, 10^(intercept + slope · U). [s]"""
        u = _validate.finite("speed_m_s", speed_m_s, "m/s")
        return _validate.like_input(10.0 ** (self.intercept + self.slope * u), speed_m_s)

    def share_fatigued(self, speed_m_s: Any, time_s: float) -> Any:
        """Modelled share of fish fatigued by ``time_s`` at a speed, Φ((log10 t − μ(U)) / σ). [-]"""
        u = _validate.finite("speed_m_s", speed_m_s, "m/s")
        t = float(_validate.positive("time_s", time_s, "s"))
        z = (math.log10(t) - self.intercept - self.slope * u) / self.sigma
        return _validate.like_input(stats.norm.cdf(z), speed_m_s)


def _tobit_negloglik(theta: np.ndarray, u: np.ndarray, y: np.ndarray, e: np.ndarray) -> float:
    a, b, log_s = theta
    z = (y - a - b * u) / math.exp(log_s)
    ll = np.where(e, stats.norm.logpdf(z) - log_s, stats.norm.logsf(z))
    return -float(np.sum(ll))


def _tobit_gradient(theta: np.ndarray, u: np.ndarray, y: np.ndarray, e: np.ndarray) -> np.ndarray:
    a, b, log_s = theta
    s = math.exp(log_s)
    z = (y - a - b * u) / s
    # Inverse Mills ratio φ(z)/(1 − Φ(z)); far in the upper tail logsf underflows, and the
    # ratio tends to z + 1/z (its asymptotic series), which is used there instead.
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        hazard = np.exp(stats.norm.logpdf(z) - stats.norm.logsf(z))
        tail = z > 30.0
        hazard = np.where(tail, z + 1.0 / np.where(tail, z, 1.0), hazard)
    d_mu = np.where(e, z, hazard) / s  # d ll / d mu for each fish
    d_logs = np.where(e, z**2 - 1.0, hazard * z)
    return -np.array([np.sum(d_mu), np.sum(d_mu * u), np.sum(d_logs)])


def fatigue_curve(
    speed_m_s: Any,
    time_s: Any,
    fatigued: Any,
    *,
    time_limit_s: float | None = None,
    settings: LabSettings = DEFAULT_SETTINGS,
) -> FatigueCurveFit:
    """Fit log10 endurance time on speed, with fish still swimming at the limit as censored.

    Parameters
    ----------
    speed_m_s
        Set (or corrected) speed of each fish. [m/s]
    time_s
        Fatigue time, or the limit for a fish still swimming. [s]
    fatigued
        True where the fish fatigued; False where it was censored.
    time_limit_s
        The trial's time limit; if given, times are checked against it. [s]
    settings
        Lab settings (``fit_relative_se_max`` for the poorly-constrained flag).

    Returns
    -------
    FatigueCurveFit

    Raises
    ------
    InputError
        Mismatched lengths, times or speeds that are not positive, fewer than two fish that
        fatigued, or fewer than two distinct speeds.

    Notes
    -----
    Brett (1964) and Beamish (1978) describe endurance above the maximum sustained speed as
    log time falling linearly with speed (from memory). With censoring the least-squares line is
    biased; the censored normal (Tobit) likelihood of Tobin (1958) uses each censored fish's
    probability of lasting beyond its time::

        log L = Σ_fatigued [log φ(z_i) − log σ] + Σ_censored log(1 − Φ(z_i)),
        z_i = (log10 t_i − a − b U_i) / σ

    maximised over (a, b, log σ) by BFGS from the least-squares start; standard errors from the
    inverse of the numerically differentiated analytic gradient (observed information). This is
    the log-normal accelerated-failure-time model in base-10 logs (with natural logs:
    β = a ln 10, σ_ln = σ ln 10). With no censoring it reduces to least squares, σ² = RSS/n.
    """
    u = np.atleast_1d(_validate.positive("speed_m_s", speed_m_s, "m/s")).astype(float)
    t, e = _outcomes(time_s, fatigued)
    if u.shape != t.shape:
        raise InputError(f"speed_m_s must have one value per fish ({t.size}); got {u.size}", field="speed_m_s")
    if time_limit_s is not None:
        limit = _time_limit(time_limit_s)
        over = np.flatnonzero(t > limit * (1 + 1e-12))
        if over.size:
            i = int(over[0])
            raise InputError(f"time {t[i]:g} s is beyond the time limit {limit:g} s", field="time_s", row=i + 1)
    if e.sum() < 2:
        raise InputError(
            f"a fatigue curve needs at least two fish that fatigued; got {int(e.sum())}", field="fatigued"
        )
    speeds = np.unique(u)
    if speeds.size < 2:
        raise InputError(f"a fatigue curve needs at least two distinct speeds; got {speeds.size}", field="speed_m_s")

    y = np.log10(t)
    design = np.column_stack([np.ones_like(u), u])
    start_beta, *_ = np.linalg.lstsq(design, y, rcond=None)
    resid = y - design @ start_beta
    start_sigma = max(float(np.sqrt(np.mean(resid**2))), 1e-3)
    theta0 = np.array([start_beta[0], start_beta[1], math.log(start_sigma)])
    res = optimize.minimize(
        _tobit_negloglik, theta0, args=(u, y, e), jac=_tobit_gradient, method="BFGS",
        options={"gtol": 1e-10, "maxiter": 2000},
    )
    theta = res.x
    # BFGS may stop on "precision loss" at the optimum; accept a gradient that is negligible on
    # the scale of the log-likelihood (our threshold: 1e-5 per fish)
    converged = bool(res.success) or float(np.max(np.abs(_tobit_gradient(theta, u, y, e)))) < 1e-5 * t.size
    hess = numdiff.approx_fprime(theta, _tobit_gradient, args=(u, y, e), centered=True)
    hess = 0.5 * (hess + hess.T)
    a, b, log_s = (float(v) for v in theta)
    s = math.exp(log_s)
    cov_out = None
    ses: list[float | None] = [None, None, None]
    try:
        cov_theta = np.linalg.inv(hess)
        eig = np.linalg.eigvalsh(cov_theta)
        if not np.all(np.isfinite(cov_theta)) or eig.min() <= 0:
            raise np.linalg.LinAlgError("covariance not positive definite")
        jac = np.diag([1.0, 1.0, s])  # (a, b, log σ) -> (a, b, σ)
        cov = jac @ cov_theta @ jac.T
        cov_out = tuple(tuple(float(v) for v in row) for row in cov)
        ses = [float(math.sqrt(cov[i, i])) for i in range(3)]
    except np.linalg.LinAlgError:
        converged = False

    n_cens = int((~e).sum())
    flags = []
    if n_cens:
        flags.append(flag("ENDURANCE_CENSORED",
                          f"{n_cens} of {t.size} fish were still swimming at the limit (censored)", scope="session"))
    limit_rel = settings.fit_relative_se_max
    if not converged:
        flags.append(flag("FIT_POORLY_CONSTRAINED", "the censored fatigue-curve fit did not converge", scope="session"))
    else:
        for name, value, se in (("slope", b, ses[1]), ("sigma", s, ses[2])):
            if se is not None and value != 0 and se / abs(value) > limit_rel:
                flags.append(flag("FIT_POORLY_CONSTRAINED",
                                  f"fatigue-curve {name} relative SE {se / abs(value):.2f} > {limit_rel:g}",
                                  scope="session"))
    return FatigueCurveFit(
        protocol=PROTOCOL,
        intercept=a,
        slope=b,
        sigma=s,
        intercept_se=ses[0],
        slope_se=ses[1],
        sigma_se=ses[2],
        covariance=cov_out,
        n_fish=int(t.size),
        n_fatigued=int(e.sum()),
        n_censored=n_cens,
        speeds_m_s=tuple(float(v) for v in speeds),
        log_likelihood=-float(res.fun),
        converged=converged,
        method="tobin1958",
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------------------------
# Fatigue curves per gait
# --------------------------------------------------------------------------------------------

MIN_FISH_PER_GAIT = 4
"""Fewest fish of one gait for its own curve. [-] Our rule: three parameters (a, b, σ) need at
least one fish beyond them."""
MIN_FATIGUED_PER_GAIT = 3
"""Fewest fish of one gait that fatigued within the limit. [-] Our rule: censored fish bound the
line only from one side, so the slope needs fatigue times at more than two points."""


@dataclass(frozen=True)
class GaitCurves:
    """Fatigue curves fitted separately for each gait the endurance trials ended in.

    Attributes
    ----------
    protocol
        ``"endurance"``.
    curves
        Gait → :class:`FatigueCurveFit` for each gait with enough trials.
    too_few
        Gait → why it has no curve of its own (counts and the rule).
    n_fish
        Gait → fish of that gait (including gaits without a curve). [-]
    not_recorded
        Fish whose gait was not recorded (in no per-gait curve). [-]
    pooled
        The single curve through every fish with a gait in ``curves`` (for the test), or None.
    lr_statistic, lr_df, lr_p
        Likelihood-ratio test of one curve per gait against the pooled curve: 2 (Σ log L_gait −
        log L_pooled) against χ² with 3 (k − 1) degrees of freedom; None with fewer than two
        curves.
    break_speed_m_s
        Speed where the median-endurance lines of two gaits cross, (a₂ − a₁) / (b₁ − b₂), or
        None (not two curves, parallel, or outside the speeds tested). [m/s]
    flags
        The fits' flags.
    """

    protocol: str
    curves: dict[str, FatigueCurveFit]
    too_few: dict[str, str]
    n_fish: dict[str, int]
    not_recorded: int
    pooled: FatigueCurveFit | None
    lr_statistic: float | None
    lr_df: int | None
    lr_p: float | None
    break_speed_m_s: float | None
    flags: tuple[dict, ...]


def fatigue_curves_by_gait(
    speed_m_s: Any,
    time_s: Any,
    fatigued: Any,
    gait: Any,
    *,
    time_limit_s: float | None = None,
    min_fish: int = MIN_FISH_PER_GAIT,
    min_fatigued: int = MIN_FATIGUED_PER_GAIT,
    settings: LabSettings = DEFAULT_SETTINGS,
) -> GaitCurves:
    """Fit the censored fatigue curve (:func:`fatigue_curve`) separately for each gait.

    Parameters
    ----------
    speed_m_s, time_s, fatigued
        As for :func:`fatigue_curve`, one per fish. [m/s], [s], [-]
    gait
        The gait each fish's trial ended in (e.g. ``"steady_caudal"``, ``"burst_and_coast"``);
        ``None`` or ``""`` where it was not recorded.
    time_limit_s
        The trials' time limit, if times are to be checked against it. [s]
    min_fish, min_fatigued
        Fewest fish, and fewest that fatigued, for a gait to get its own curve. [-]
    settings
        Lab settings, for the fits' flags.

    Returns
    -------
    GaitCurves

    Raises
    ------
    InputError
        Mismatched lengths (field ``gait``), or as :func:`fatigue_curve`.

    Notes
    -----
    Brett (1964) and Beamish (1978) divide swimming into sustained, prolonged and burst
    performance: within the prolonged range log endurance falls linearly with speed, and the
    line breaks where the fish turn to burst-assisted (unsteady, anaerobically fuelled)
    swimming, whose endurance falls far more steeply (from memory). One line per gait, each by
    the censored normal likelihood of Tobin (1958), keeps the two domains apart. A gait needs
    ``min_fish`` fish, ``min_fatigued`` of them fatigued and two distinct speeds; a gait with
    fewer is named in ``too_few`` rather than fitted. Whether separate curves are needed is the
    likelihood-ratio test against one pooled curve through the same fish (Wilks 1938; nested
    models, 3 parameters per curve).
    """
    u = np.atleast_1d(_validate.positive("speed_m_s", speed_m_s, "m/s")).astype(float)
    t, e = _outcomes(time_s, fatigued)
    raw_gait = gait.to_numpy() if isinstance(gait, pd.Series) else np.asarray(gait, dtype=object)
    labels = np.array(["" if g is None or (isinstance(g, float) and math.isnan(g)) else str(g)
                       for g in np.atleast_1d(raw_gait)], dtype=object)
    if not (u.shape == t.shape == labels.shape):
        raise InputError(f"speed_m_s, time_s and gait must have one value per fish ({t.size}); got "
                         f"{u.size}, {t.size} and {labels.size}", field="gait")
    curves: dict[str, FatigueCurveFit] = {}
    too_few: dict[str, str] = {}
    counts: dict[str, int] = {}
    flags: list[dict] = []
    for name in sorted(set(labels) - {""}):
        sel = labels == name
        counts[name] = int(sel.sum())
        n_fat, n_speeds = int(e[sel].sum()), int(np.unique(u[sel]).size)
        if sel.sum() < min_fish or n_fat < min_fatigued or n_speeds < 2:
            too_few[name] = (f"{int(sel.sum())} fish ({n_fat} fatigued) at {n_speeds} speed(s); a curve of its own "
                             f"needs at least {min_fish} fish, {min_fatigued} fatigued, at two or more speeds")
            continue
        fit = fatigue_curve(u[sel], t[sel], e[sel], time_limit_s=time_limit_s, settings=settings)
        curves[name] = fit
        flags.extend({**f, "message": f"{name}: {f['message']}"} for f in fit.flags)
    pooled = lr = df = p_value = crossing = None
    if len(curves) >= 2:
        sel = np.isin(labels, list(curves))
        pooled = fatigue_curve(u[sel], t[sel], e[sel], time_limit_s=time_limit_s, settings=settings)
        lr = max(0.0, 2.0 * (sum(c.log_likelihood for c in curves.values()) - pooled.log_likelihood))
        df = 3 * (len(curves) - 1)
        p_value = float(stats.chi2.sf(lr, df))
        if len(curves) == 2:
            (c1, c2) = curves.values()
            if c1.slope != c2.slope:
                cross = (c2.intercept - c1.intercept) / (c1.slope - c2.slope)
                if float(u[sel].min()) <= cross <= float(u[sel].max()):
                    crossing = float(cross)
    return GaitCurves(PROTOCOL, curves, too_few, counts, int((labels == "").sum()), pooled, lr, df, p_value,
                      crossing, tuple(flags))


# --------------------------------------------------------------------------------------------
# Speeds derived from the trial
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MaxSustainedSpeed:
    """Highest tested speed that no fish failed within the time limit.

    Attributes
    ----------
    protocol
        ``"endurance"``.
    speed_m_s
        The speed, or None when some fish fatigued at the slowest speed tested. [m/s]
    time_limit_s
        The limit it is sustained for. [s]
    table
        Per tested speed: ``speed_m_s``, ``n_fish``, ``n_fatigued``.
    faster_without_fatigue_m_s
        Tested speeds above the first speed with a fatigue at which no fish fatigued (small
        samples); listed, not used. [m/s]
    """

    protocol: str
    speed_m_s: float | None
    time_limit_s: float
    table: pd.DataFrame = field(repr=False, compare=False)
    faster_without_fatigue_m_s: tuple[float, ...]


def max_sustained_speed(speed_m_s: Any, time_s: Any, fatigued: Any, time_limit_s: float | None) -> MaxSustainedSpeed:
    """Highest tested speed at which no fish fatigued within the time limit.

    Parameters
    ----------
    speed_m_s
        Set (or corrected) speed of each fish. [m/s]
    time_s
        Fatigue time, or the limit for a fish still swimming. [s]
    fatigued
        True where the fish fatigued.
    time_limit_s
        The trial's time limit; required. [s]

    Returns
    -------
    MaxSustainedSpeed

    Notes
    -----
    Our plain rule: take tested speeds in ascending order and stop at the first at which any
    fish fatigued within the limit; the speed before it is the maximum sustained speed for
    that limit. A faster speed without fatigue beyond that point is listed, not used, since it
    contradicts a slower failure. Beamish (1978) used swimming for 200 min without fatigue as
    the sustained range (from memory); the limit here is whatever the trial used.
    """
    limit = _time_limit(time_limit_s)
    u = np.atleast_1d(_validate.positive("speed_m_s", speed_m_s, "m/s")).astype(float)
    t, e = _outcomes(time_s, fatigued)
    if u.shape != t.shape:
        raise InputError(f"speed_m_s must have one value per fish ({t.size}); got {u.size}", field="speed_m_s")
    failed = e & (t <= limit)
    speeds = np.unique(u)
    table = pd.DataFrame({
        "speed_m_s": speeds,
        "n_fish": [int(np.sum(u == s)) for s in speeds],
        "n_fatigued": [int(np.sum(failed & (u == s))) for s in speeds],
    })
    first_fail = np.flatnonzero(table["n_fatigued"].to_numpy() > 0)
    if first_fail.size == 0:
        best, later = float(speeds[-1]), ()
    else:
        k = int(first_fail[0])
        best = float(speeds[k - 1]) if k > 0 else None
        later = tuple(float(s) for s, n in zip(speeds[k + 1:], table["n_fatigued"].to_numpy()[k + 1:], strict=True)
                      if n == 0)
    return MaxSustainedSpeed(PROTOCOL, best, limit, table, later)


@dataclass(frozen=True)
class SpeedAtShare:
    """Speed at which a given share of fish fatigue within the time limit (from a fit).

    Attributes
    ----------
    protocol
        ``"endurance"``.
    speed_m_s
        The speed, or None when the fitted endurance does not fall with speed. [m/s]
    se_m_s
        Its delta-method standard error, or None. [m/s]
    share
        Share of fish fatigued within the limit (0.5 for half). [-]
    time_limit_s
        The limit. [s]
    within_tested
        True when the speed lies within the tested speeds (not extrapolated).
    flags
        FIT_POORLY_CONSTRAINED when no such speed exists.
    """

    protocol: str
    speed_m_s: float | None
    se_m_s: float | None
    share: float
    time_limit_s: float
    within_tested: bool
    flags: tuple[dict, ...]


def speed_half_fatigued(fit: FatigueCurveFit, time_limit_s: float | None, *, share: float = 0.5) -> SpeedAtShare:
    """Speed at which half (or ``share``) of the fish fatigue within the time limit.

    Parameters
    ----------
    fit
        A fatigue curve from :func:`fatigue_curve`.
    time_limit_s
        The time limit; required. [s]
    share
        Share of fish fatigued within the limit, strictly between 0 and 1. [-]

    Returns
    -------
    SpeedAtShare

    Notes
    -----
    Under the fitted model P(T ≤ L | U) = Φ((log10 L − a − b U) / σ). Setting it to p::

        U_p = (log10 L − a − σ z_p) / b,   z_p = Φ⁻¹(p)

    so for p = 0.5, U₅₀ = (log10 L − a) / b, where the median endurance equals the limit. The
    standard error is by the delta method with the fit's covariance of (a, b, σ):
    ∂U/∂a = −1/b, ∂U/∂b = −U/b, ∂U/∂σ = −z_p/b.
    """
    if not isinstance(fit, FatigueCurveFit):
        raise InputError(f"fit must be a FatigueCurveFit from fatigue_curve; got {type(fit).__name__}", field="fit")
    limit = _time_limit(time_limit_s)
    p = float(_validate.in_range("share", share, 1e-9, 1 - 1e-9, what="a share strictly between 0 and 1"))
    if fit.slope >= 0:
        note = flag("FIT_POORLY_CONSTRAINED",
                    f"fitted endurance does not fall with speed (slope {fit.slope:.3g}); no speed where "
                    f"{p:.0%} fatigue within {limit:g} s", scope="session")
        return SpeedAtShare(PROTOCOL, None, None, p, limit, False, (note,))
    z = float(stats.norm.ppf(p))
    speed = (math.log10(limit) - fit.intercept - fit.sigma * z) / fit.slope
    se = None
    if fit.covariance is not None:
        grad = np.array([-1.0 / fit.slope, -speed / fit.slope, -z / fit.slope])
        se = float(math.sqrt(grad @ np.asarray(fit.covariance) @ grad))
    inside = min(fit.speeds_m_s) <= speed <= max(fit.speeds_m_s)
    return SpeedAtShare(PROTOCOL, float(speed), se, p, limit, bool(inside), ())
