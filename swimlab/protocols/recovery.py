"""Post-exercise recovery: excess post-exercise oxygen consumption (EPOC) and its time course.

After exhaustion the fish's MO2 is high and falls back towards a baseline over minutes to hours.
EPOC is the oxygen taken up above the baseline during that return, per kg of fish. It is found
here two ways from a recovery schedule of measure phases after exhaustion:

- by trapezoids through the measured MO2 above the baseline, over the recorded span;
- from a fitted one- or two-phase exponential decay (scipy ``curve_fit``; the better by AICc),
  integrated from exhaustion to infinity, and over the recorded span for comparison.

Recovery times to 50 % and 95 % of the way back to baseline come from the fitted curve. Helpers
add EPOC to the aerobic cost of the swim (total oxygen cost; Lee et al. 2003) and give a cost of
transport that includes EPOC.

MO2 is in mg O2 kg⁻¹ h⁻¹ and time in s, so areas are divided by 3600 s/h to give mg O2 kg⁻¹.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import optimize

from swimlab import _validate
from swimlab.checks import flag
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS

__all__ = [
    "BASELINE_METHODS",
    "DECAY_MODELS",
    "DecayFit",
    "EpocResult",
    "epoc",
    "aicc",
    "aerobic_oxygen_cost",
    "OxygenCost",
    "total_oxygen_cost",
    "CostOfTransportWithEpoc",
    "cost_of_transport_with_epoc",
]

PROTOCOL = "recovery"
"""Name of the protocol, as in :data:`swimlab.session.PROTOCOL_TYPES`."""

BASELINE_METHODS = {
    "pre_exercise": "routine MO2 measured before the exercise (Lee et al. 2003 used routine MO2)",
    "smr": "the fish's standard metabolic rate (Zhang et al. 2018 followed recovery to SMR)",
    "fitted_asymptote": "the asymptote of the fitted decay, MO2 = a + b·exp(−c t) (as in the "
    "Silurus asotus EPOC study, Acta Hydrobiologica Sinica 2008, where a is resting MO2)",
}
"""How the baseline was obtained; ``fitted_asymptote`` takes it from the fit itself."""

DECAY_MODELS = ("one_phase", "two_phase")
"""Recovery-curve models :func:`epoc` fits."""

_S_PER_H = 3600.0
"""Seconds in one hour. [s/h] Definition."""
_M_PER_KM = 1000.0
"""Metres in one kilometre. [m/km] Definition."""


def aicc(rss: float, n: int, n_params: int) -> float | None:
    """AICc of a least-squares fit with Gaussian errors, or None when n ≤ K + 1.

    Parameters
    ----------
    rss
        Residual sum of squares. [data units²]
    n
        Number of points. [-]
    n_params
        Parameters of the curve; the error variance adds one more (K = n_params + 1). [-]

    Notes
    -----
    log L = −n/2 (ln 2π + ln(RSS/n) + 1); AIC = −2 log L + 2K; AICc = AIC + 2K(K+1)/(n−K−1)
    (Hurvich & Tsai 1989; Burnham & Anderson 2002, eq. 2.14, from memory).
    """
    k = n_params + 1
    if n - k - 1 <= 0 or rss <= 0:
        return None
    loglik = -0.5 * n * (math.log(2 * math.pi) + math.log(rss / n) + 1.0)
    return -2.0 * loglik + 2.0 * k + 2.0 * k * (k + 1) / (n - k - 1)


@dataclass(frozen=True)
class DecayFit:
    """A fitted recovery curve MO2(t) = B + Σ A_i exp(−k_i t), t from exhaustion.

    Attributes
    ----------
    model
        ``"one_phase"`` or ``"two_phase"`` (fast phase first).
    asymptote_mg_kg_h
        B: the baseline, fixed or fitted. [mg O2 kg⁻¹ h⁻¹]
    asymptote_se
        Its standard error when fitted, else None. [mg O2 kg⁻¹ h⁻¹]
    amplitudes_mg_kg_h, amplitudes_se
        A_i and their standard errors (None if not estimable). [mg O2 kg⁻¹ h⁻¹]
    rates_per_s, rates_se
        k_i and their standard errors. [1/s]
    rss
        Residual sum of squares. [(mg O2 kg⁻¹ h⁻¹)²]
    n
        Phases fitted. [-]
    n_params
        Curve parameters fitted. [-]
    aicc
        AICc (None when there are too few phases for it).
    """

    model: str
    asymptote_mg_kg_h: float
    asymptote_se: float | None
    amplitudes_mg_kg_h: tuple[float, ...]
    amplitudes_se: tuple[float | None, ...]
    rates_per_s: tuple[float, ...]
    rates_se: tuple[float | None, ...]
    rss: float
    n: int
    n_params: int
    aicc: float | None

    def excess(self, time_s: Any) -> Any:
        """Fitted MO2 above the asymptote, Σ A_i exp(−k_i t). [mg O2 kg⁻¹ h⁻¹]"""
        t = _validate.finite("time_s", time_s, "s")
        out = sum(a * np.exp(-k * t) for a, k in zip(self.amplitudes_mg_kg_h, self.rates_per_s, strict=True))
        return _validate.like_input(np.asarray(out, dtype=float), time_s)

    def mo2(self, time_s: Any) -> Any:
        """Fitted MO2, B + Σ A_i exp(−k_i t). [mg O2 kg⁻¹ h⁻¹]"""
        return self.asymptote_mg_kg_h + self.excess(time_s)

    def area_mg_kg(self, start_s: float = 0.0, end_s: float = math.inf) -> float:
        """∫ Σ A_i exp(−k_i t) dt from ``start_s`` to ``end_s`` = Σ A_i/k_i (e^{−k_i t₀} − e^{−k_i t₁}). [mg O2 kg⁻¹]"""
        total = 0.0
        for a, k in zip(self.amplitudes_mg_kg_h, self.rates_per_s, strict=True):
            tail = 0.0 if math.isinf(end_s) else math.exp(-k * end_s)
            total += a / k * (math.exp(-k * start_s) - tail)
        return total / _S_PER_H

    def time_to_recovery_s(self, fraction: float) -> float:
        """Time from exhaustion until the fitted excess has fallen by ``fraction`` of its value at t = 0. [s]

        One phase: t = −ln(1 − fraction)/k (ln 2/k for 50 %, ln 20/k for 95 %). Two phases: the
        root of excess(t) = (1 − fraction)·excess(0), bracketed by the slower phase's time.
        """
        p = float(_validate.in_range("fraction", fraction, 1e-9, 1 - 1e-9, what="a share strictly between 0 and 1"))
        if len(self.rates_per_s) == 1:
            return -math.log(1.0 - p) / self.rates_per_s[0]
        start = float(self.excess(0.0))
        target = (1.0 - p) * start
        upper = -math.log(1.0 - p) / min(self.rates_per_s)
        if float(self.excess(upper)) - target >= 0:  # only when the phases coincide
            return upper
        return float(optimize.brentq(lambda t: float(self.excess(t)) - target, 0.0, upper, xtol=1e-9))


@dataclass(frozen=True)
class EpocResult:
    """EPOC of one recovery record.

    Attributes
    ----------
    protocol
        ``"recovery"``.
    baseline_mg_kg_h
        Baseline MO2 the excess is measured from. [mg O2 kg⁻¹ h⁻¹]
    baseline_method
        A key of :data:`BASELINE_METHODS`.
    epoc_trapezoid_mg_kg
        ∫ (MO2 − baseline) dt by trapezoids over the recorded span (below-baseline phases count
        negative). [mg O2 kg⁻¹]
    epoc_fit_mg_kg
        Area under the fitted excess from exhaustion to infinity, Σ A_i/k_i; None without a fit.
        [mg O2 kg⁻¹]
    epoc_fit_recorded_mg_kg
        Area under the fitted excess over the recorded span (comparable with the trapezoids).
        [mg O2 kg⁻¹]
    model
        The chosen decay model, or None.
    fit
        The chosen :class:`DecayFit`, or None.
    candidates
        Every model fitted, with its AICc.
    t50_s, t95_s
        Fitted times from exhaustion to 50 % and 95 % of the way back to baseline. [s]
    peak_excess_mg_kg_h
        Largest recorded MO2 − baseline. [mg O2 kg⁻¹ h⁻¹]
    recorded_start_s, recorded_end_s
        First and last phase times after exhaustion. [s]
    n_phases
        Measure phases used. [-]
    flags
        RECOVERY_INCOMPLETE when the record ends before the fitted 95 % time;
        FIT_POORLY_CONSTRAINED when no curve could be fitted.
    """

    protocol: str
    baseline_mg_kg_h: float
    baseline_method: str
    epoc_trapezoid_mg_kg: float
    epoc_fit_mg_kg: float | None
    epoc_fit_recorded_mg_kg: float | None
    model: str | None
    fit: DecayFit | None
    candidates: tuple[DecayFit, ...] = field(repr=False)
    t50_s: float | None
    t95_s: float | None
    peak_excess_mg_kg_h: float
    recorded_start_s: float
    recorded_end_s: float
    n_phases: int
    flags: tuple[dict, ...]


def _se_list(pcov: np.ndarray | None, n: int) -> list[float | None]:
    if pcov is None:
        return [None] * n
    diag = np.diag(pcov)
    return [float(math.sqrt(v)) if np.isfinite(v) and v >= 0 else None for v in diag]


def _fit_decay(model: str, t_h: np.ndarray, y: np.ndarray, baseline: float | None) -> DecayFit | None:
    """Fit one model on time in hours (for conditioning); rates are returned per second."""
    n_phase = 1 if model == "one_phase" else 2
    free_b = baseline is None
    n_params = 2 * n_phase + (1 if free_b else 0)
    if y.size <= n_params:
        return None
    b0 = float(np.min(y)) * 0.95 if free_b else float(baseline)
    excess = y - b0
    span = float(t_h[-1] - t_h[0]) or 1.0
    k0 = 3.0 / span
    pos = excess > 0
    if pos.sum() >= 2:
        slope, intercept = np.polyfit(t_h[pos], np.log(excess[pos]), 1)
        if slope < 0:
            k0 = -slope
            a0 = math.exp(intercept)
        else:
            a0 = float(excess.max())
    else:
        a0 = max(float(excess.max()), 1e-6)

    def curve(t, *p):
        amps, rates = p[0:2 * n_phase:2], p[1:2 * n_phase:2]
        out = sum(a * np.exp(-k * t) for a, k in zip(amps, rates, strict=True))
        return out + (p[-1] if free_b else baseline)

    if n_phase == 1:
        starts = [[a0, k0]]
    else:
        starts = [[0.5 * a0, 3 * k0, 0.5 * a0, k0 / 3], [0.8 * a0, 5 * k0, 0.2 * a0, k0 / 2],
                  [0.3 * a0, 2 * k0, 0.7 * a0, k0 / 5]]
    best = None
    for s in starts:
        p0 = list(s) + ([b0] if free_b else [])
        lower = [0.0, 1e-9] * n_phase + ([0.0] if free_b else [])
        upper = [np.inf] * (2 * n_phase) + ([np.inf] if free_b else [])
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                popt, pcov = optimize.curve_fit(curve, t_h, y, p0=p0, bounds=(lower, upper), maxfev=5000)
        except (RuntimeError, ValueError):
            continue
        rss = float(np.sum((y - curve(t_h, *popt)) ** 2))
        if best is None or rss < best[2]:
            best = (popt, pcov, rss)
    if best is None:
        return None
    popt, pcov, rss = best
    ses = _se_list(pcov if np.all(np.isfinite(pcov)) else None, len(popt))
    amps = [float(popt[2 * i]) for i in range(n_phase)]
    rates_h = [float(popt[2 * i + 1]) for i in range(n_phase)]
    amp_se = [ses[2 * i] for i in range(n_phase)]
    rate_se_h = [ses[2 * i + 1] for i in range(n_phase)]
    order = np.argsort(rates_h)[::-1]  # fast phase first
    amps = [amps[i] for i in order]
    amp_se = [amp_se[i] for i in order]
    rates = [rates_h[i] / _S_PER_H for i in order]
    rate_se = [None if rate_se_h[i] is None else rate_se_h[i] / _S_PER_H for i in order]
    return DecayFit(
        model=model,
        asymptote_mg_kg_h=float(popt[-1]) if free_b else float(baseline),
        asymptote_se=ses[-1] if free_b else None,
        amplitudes_mg_kg_h=tuple(amps),
        amplitudes_se=tuple(amp_se),
        rates_per_s=tuple(rates),
        rates_se=tuple(rate_se),
        rss=rss,
        n=int(y.size),
        n_params=n_params,
        aicc=aicc(rss, int(y.size), n_params),
    )


def _choose(fits: list[DecayFit]) -> DecayFit | None:
    if not fits:
        return None
    scored = [f for f in fits if f.aicc is not None]
    if scored:
        return min(scored, key=lambda f: f.aicc)
    return next((f for f in fits if f.model == "one_phase"), fits[0])


def epoc(
    time_s: Any,
    mo2_mg_kg_h: Any,
    baseline_mg_kg_h: float | None,
    *,
    baseline_method: str,
    models: tuple[str, ...] = DECAY_MODELS,
) -> EpocResult:
    """EPOC, recovery times and the fitted recovery curve after exhaustion.

    Parameters
    ----------
    time_s
        Time of each measure phase (its mid-time) after exhaustion, ascending, at least three.
        [s]
    mo2_mg_kg_h
        MO2 of each phase. [mg O2 kg⁻¹ h⁻¹]
    baseline_mg_kg_h
        The baseline MO2 (pre-exercise routine MO2 or SMR); None with
        ``baseline_method="fitted_asymptote"``. [mg O2 kg⁻¹ h⁻¹]
    baseline_method
        How the baseline was obtained: a key of :data:`BASELINE_METHODS`.
    models
        Decay models to try, from :data:`DECAY_MODELS`; an empty tuple gives the trapezoid EPOC
        only.

    Returns
    -------
    EpocResult

    Raises
    ------
    InputError
        Fewer than three phases, times not ascending or negative, MO2 not positive, lengths
        that differ, a baseline missing (or given with ``fitted_asymptote``).
    ValueError
        An unknown ``baseline_method`` or model (the message lists the valid ones).

    Notes
    -----
    Trapezoids: EPOC ≈ Σ ½ (e_i + e_{i+1}) (t_{i+1} − t_i) / 3600 with e = MO2 − baseline, over
    the recorded span only (the time from exhaustion to the first phase is not included).

    Fitted curve: MO2(t) = B + A e^{−k t} (one phase) or B + A₁ e^{−k₁ t} + A₂ e^{−k₂ t} (two
    phases), with B the baseline (fixed) or fitted (``fitted_asymptote``); least squares with
    A, k ≥ 0; the model with the lower AICc is used (one phase when AICc cannot be computed).
    EPOC = ∫₀^∞ Σ A_i e^{−k_i t} dt = Σ A_i / k_i (÷ 3600 s/h). Recovery to a fraction p of the
    way back: e(t_p) = (1 − p) e(0); for one phase t_p = −ln(1 − p)/k, so t₅₀ = ln 2/k and
    t₉₅ = ln 20/k — the relations behind the EPOC and recovery times reported for Silurus asotus
    in Acta Hydrobiologica Sinica (2008; abstract read; checked in the tests).
    """
    _validate.choice("baseline_method", baseline_method, BASELINE_METHODS)
    for model in models:
        _validate.choice("model", model, DECAY_MODELS)
    t = np.atleast_1d(_validate.non_negative("time_s", time_s, "s")).astype(float)
    y = np.atleast_1d(_validate.positive("mo2_mg_kg_h", mo2_mg_kg_h, "mg O2 kg⁻¹ h⁻¹")).astype(float)
    if t.ndim != 1 or t.shape != y.shape:
        raise InputError(f"time_s and mo2_mg_kg_h must have one value per phase; got {t.size} and {y.size}",
                         field="mo2_mg_kg_h")
    if t.size < 3:
        raise InputError(f"EPOC needs at least three measure phases after exhaustion; got {t.size}", field="time_s")
    steps = np.diff(t)
    if np.any(steps <= 0):
        i = int(np.flatnonzero(steps <= 0)[0]) + 2
        raise InputError(f"phase times must increase; phase {i} at {t[i - 1]:g} s is not after the one before",
                         field="time_s", row=i)
    if baseline_method == "fitted_asymptote":
        if baseline_mg_kg_h is not None:
            raise InputError("give no baseline with baseline_method='fitted_asymptote'; the fit supplies it",
                             field="baseline_mg_kg_h")
        fixed = None
    else:
        if baseline_mg_kg_h is None:
            raise InputError(f"a baseline is required with baseline_method={baseline_method!r} [mg O2 kg⁻¹ h⁻¹]",
                             field="baseline_mg_kg_h")
        fixed = float(_validate.positive("baseline_mg_kg_h", baseline_mg_kg_h, "mg O2 kg⁻¹ h⁻¹").reshape(()))

    t_h = t / _S_PER_H
    fits = [f for f in (_fit_decay(m, t_h, y, fixed) for m in models) if f is not None]
    chosen = _choose(fits)
    flags: list[dict] = []
    if fixed is not None:
        base = fixed
    elif chosen is not None:
        base = chosen.asymptote_mg_kg_h
    else:
        what = "no decay model was asked for" if not models else "too few phases to fit it"
        raise InputError(f"baseline_method='fitted_asymptote' takes the baseline from a fitted decay, but {what}",
                         field="time_s")
    excess = y - base
    trapezoid = float(np.sum(0.5 * (excess[1:] + excess[:-1]) * steps)) / _S_PER_H
    peak = float(excess.max())
    if chosen is not None and (peak <= 0 or sum(chosen.amplitudes_mg_kg_h) <= 0):
        chosen = None
        flags.append(flag("FIT_POORLY_CONSTRAINED", "MO2 never rose above the baseline; no recovery curve fitted",
                          scope="session"))
    elif chosen is None and models:
        flags.append(flag("FIT_POORLY_CONSTRAINED", "no recovery curve could be fitted", scope="session"))
    epoc_fit = epoc_rec = t50 = t95 = None
    if chosen is not None:
        epoc_fit = chosen.area_mg_kg(0.0, math.inf)
        epoc_rec = chosen.area_mg_kg(float(t[0]), float(t[-1]))
        t50 = chosen.time_to_recovery_s(0.5)
        t95 = chosen.time_to_recovery_s(0.95)
        if t95 > t[-1]:
            flags.append(flag(
                "RECOVERY_INCOMPLETE",
                f"record ends {t[-1] / 60:.0f} min after exhaustion, before the fitted 95 % recovery time "
                f"{t95 / 60:.0f} min; {100 * (1 - epoc_rec / epoc_fit) if epoc_fit else 0:.0f} % of the fitted EPOC "
                "lies outside the record",
                scope="session",
            ))
    return EpocResult(
        protocol=PROTOCOL,
        baseline_mg_kg_h=float(base),
        baseline_method=baseline_method,
        epoc_trapezoid_mg_kg=trapezoid,
        epoc_fit_mg_kg=epoc_fit,
        epoc_fit_recorded_mg_kg=epoc_rec,
        model=None if chosen is None else chosen.model,
        fit=chosen,
        candidates=tuple(fits),
        t50_s=t50,
        t95_s=t95,
        peak_excess_mg_kg_h=peak,
        recorded_start_s=float(t[0]),
        recorded_end_s=float(t[-1]),
        n_phases=int(t.size),
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------------------------
# Total oxygen cost and cost of transport with EPOC
# --------------------------------------------------------------------------------------------


def aerobic_oxygen_cost(mo2_mg_kg_h: Any, duration_s: Any, *, baseline_mg_kg_h: float | None = None) -> float:
    """Oxygen taken up while swimming, summed over steps (gross, or net of a baseline).

    Parameters
    ----------
    mo2_mg_kg_h
        MO2 during each step (or phase). [mg O2 kg⁻¹ h⁻¹]
    duration_s
        Time swum in each step. [s]
    baseline_mg_kg_h
        Baseline to subtract for the net cost, or None for the gross cost. [mg O2 kg⁻¹ h⁻¹]

    Returns
    -------
    float
        Σ (MO2_i − baseline) · d_i / 3600. [mg O2 kg⁻¹]
    """
    mo2 = np.atleast_1d(_validate.positive("mo2_mg_kg_h", mo2_mg_kg_h, "mg O2 kg⁻¹ h⁻¹"))
    dur = np.atleast_1d(_validate.positive("duration_s", duration_s, "s"))
    if mo2.shape != dur.shape:
        raise InputError(f"mo2_mg_kg_h and duration_s must have one value per step; got {mo2.size} and {dur.size}",
                         field="duration_s")
    base = 0.0
    if baseline_mg_kg_h is not None:
        base = float(_validate.positive("baseline_mg_kg_h", baseline_mg_kg_h, "mg O2 kg⁻¹ h⁻¹").reshape(()))
    return float(np.sum((mo2 - base) * dur)) / _S_PER_H


@dataclass(frozen=True)
class OxygenCost:
    """Aerobic cost of a swim plus EPOC (Lee et al. 2003: total oxygen cost = aerobic + EPOC).

    Attributes
    ----------
    protocol
        ``"recovery"``.
    aerobic_mg_kg, epoc_mg_kg, total_mg_kg
        The parts and their sum. [mg O2 kg⁻¹]
    epoc_share
        EPOC / total. [-]
    """

    protocol: str
    aerobic_mg_kg: float
    epoc_mg_kg: float
    total_mg_kg: float
    epoc_share: float


def total_oxygen_cost(aerobic_mg_kg: float, epoc_mg_kg: float) -> OxygenCost:
    """Total oxygen cost of a swim: the aerobic cost while swimming plus EPOC after it.

    Parameters
    ----------
    aerobic_mg_kg
        Oxygen taken up while swimming (:func:`aerobic_oxygen_cost`). [mg O2 kg⁻¹]
    epoc_mg_kg
        EPOC (:func:`epoc`), zero or more. [mg O2 kg⁻¹]

    Notes
    -----
    Lee et al. (2003) estimated the total oxygen cost of swimming to Ucrit as the aerobic oxygen
    cost plus EPOC (their Fig. 2 caption, read).
    """
    aer = float(_validate.positive("aerobic_mg_kg", aerobic_mg_kg, "mg O2 kg⁻¹").reshape(()))
    ex = float(_validate.non_negative("epoc_mg_kg", epoc_mg_kg, "mg O2 kg⁻¹").reshape(()))
    total = aer + ex
    return OxygenCost(PROTOCOL, aer, ex, total, ex / total)


@dataclass(frozen=True)
class CostOfTransportWithEpoc:
    """Cost of transport of a swim with and without its EPOC.

    Attributes
    ----------
    protocol
        ``"recovery"``.
    distance_m
        Distance swum through the water. [m]
    cot_aerobic_mg_kg_km, cot_total_mg_kg_km
        Aerobic cost and aerobic cost + EPOC per km. [mg O2 kg⁻¹ km⁻¹]
    cot_aerobic_j_kg_m, cot_total_j_kg_m
        The same as energy per metre. [J kg⁻¹ m⁻¹]
    oxycaloric_j_per_mg_o2
        Oxycaloric equivalent used. [J/mg]
    """

    protocol: str
    distance_m: float
    cot_aerobic_mg_kg_km: float
    cot_total_mg_kg_km: float
    cot_aerobic_j_kg_m: float
    cot_total_j_kg_m: float
    oxycaloric_j_per_mg_o2: float


def cost_of_transport_with_epoc(
    aerobic_mg_kg: float,
    epoc_mg_kg: float,
    distance_m: float,
    *,
    oxycaloric_j_per_mg_o2: float = DEFAULT_SETTINGS.oxycaloric_j_per_mg_o2,
) -> CostOfTransportWithEpoc:
    """Cost of transport of a whole swim, counting the EPOC it caused.

    Parameters
    ----------
    aerobic_mg_kg
        Oxygen taken up while swimming. [mg O2 kg⁻¹]
    epoc_mg_kg
        EPOC after the swim. [mg O2 kg⁻¹]
    distance_m
        Distance swum through the water (Σ U_i d_i for steps; :func:`swimlab.protocols.ramp.distance_m`
        for a ramp). [m]
    oxycaloric_j_per_mg_o2
        Energy per mg of oxygen (lab setting). [J/mg]

    Notes
    -----
    COT = oxygen cost / distance (Schmidt-Nielsen 1972, from memory), here with the total
    oxygen cost of Lee et al. (2003): COT_total = (aerobic + EPOC) / d. In mg O2 kg⁻¹ km⁻¹ and,
    with the oxycaloric equivalent Q_ox, in J kg⁻¹ m⁻¹ = mg O2 kg⁻¹ m⁻¹ · Q_ox.
    """
    cost = total_oxygen_cost(aerobic_mg_kg, epoc_mg_kg)
    d = float(_validate.positive("distance_m", distance_m, "m").reshape(()))
    q = float(_validate.positive("oxycaloric_j_per_mg_o2", oxycaloric_j_per_mg_o2, "J/mg").reshape(()))
    per_km = _M_PER_KM / d
    return CostOfTransportWithEpoc(
        protocol=PROTOCOL,
        distance_m=d,
        cot_aerobic_mg_kg_km=cost.aerobic_mg_kg * per_km,
        cot_total_mg_kg_km=cost.total_mg_kg * per_km,
        cot_aerobic_j_kg_m=cost.aerobic_mg_kg * q / d,
        cot_total_j_kg_m=cost.total_mg_kg * q / d,
        oxycaloric_j_per_mg_o2=q,
    )
