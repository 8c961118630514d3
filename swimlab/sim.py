"""Simulated swim-tunnel trials with known truth, for tests, benchmarks and the demo.

:func:`simulate_trial` runs a fish (one per channel) through a step schedule of swimming speeds
in an intermittent-flow respirometer and writes what an oxygen logger would record: a CSV file
with a header line, an ISO date-time column ``time``, per channel an oxygen column in
% air saturation and a temperature column, and the flush pump's state. It also returns the
readings and the truth (true MO2 and slopes per phase, the step schedule, where faults were put,
the background model), so a test can check an analysis against what actually happened.

The model, in the respirometer's water (concentration C, mg/L):

- closed (wait, measure): dC/dt = −MO2(U) / (3600 (V_resp − V_fish)) − r_bg(t), with the
  fish's volume V_fish = mass / (1 kg/L);
- flush: dC/dt = (C_sat(T) − C) / τ_flush − (the same uptake): first-order exchange with
  air-saturated water (a well-mixed respirometer flushed at a constant rate);
- MO2(U) is a true speed–MO2 curve: ``"exponential"`` a·e^(bU) or ``"power"`` a + b·U^c
  [mg O2 kg⁻¹ h⁻¹, U in m/s], times an individual factor per channel;
- background r_bg(t) = r₀ · 2^(t / t_double) [mg L⁻¹ s⁻¹], microbial growth over the trial
  (Rodgers, Tenzing & Clark 2016 found background changing non-linearly over time);
- temperature T(t) = T₀ + drift · t, plus optional excursions within chosen measure phases;
- the sensor sees C through a first-order lag (time constant τ_sensor) and reports
  % air saturation = 100 · C_lagged / C_sat(T_logged) plus white noise, rounded to the logger's
  resolution (an optode compensating with its own temperature reading);
- faults: struggling phases (bursts of raised MO2), failed flushes (pump on, no exchange),
  temperature excursions, and glitch lines in the file (an empty oxygen cell, a repeated line,
  a missing line).

The solution is exact per reading for the closed periods (the uptake integrated analytically)
and for the flushes (exponential relaxation towards an equilibrium held at its mid-flush value).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize, signal

from swimlab import _validate, oxygen
from swimlab.errors import InputError
from swimlab.uptake import BlankRun

__all__ = [
    "MO2_MODELS",
    "ProtocolTrial",
    "SimulatedTrial",
    "TrialTruth",
    "mo2_curve",
    "simulate_endurance_trial",
    "simulate_ramp_trial",
    "simulate_recovery_trial",
    "simulate_trial",
]

MO2_MODELS = ("exponential", "power")
"""Valid ``mo2_model`` values of :func:`simulate_trial`."""

GLITCH_KINDS = ("blank_value", "repeated_line", "missing_line")
"""Kinds of glitch line the simulator writes, in the order it cycles through them."""

_DEFAULT_START = datetime(2025, 3, 4, 9, 0, 0)


def mo2_curve(speed_m_s: Any, model: str, params: Sequence[float]) -> Any:
    """True MO2 of the simulator at a swimming speed.

    Parameters
    ----------
    speed_m_s
        Swimming speed. [m/s]
    model
        ``"exponential"``: MO2 = a·e^(bU), params (a, b); ``"power"``: MO2 = a + b·U^c,
        params (a, b, c).
    params
        Parameters of the model. [a in mg O2 kg⁻¹ h⁻¹, b in s/m (exponential) or
        mg O2 kg⁻¹ h⁻¹ (m/s)⁻ᶜ (power), c -]

    Returns
    -------
    MO2. [mg O2 kg⁻¹ h⁻¹]
    """
    _validate.choice("MO2 model", model, MO2_MODELS)
    u = _validate.non_negative("speed_m_s", speed_m_s, "m/s")
    p = [float(x) for x in params]
    if model == "exponential":
        if len(p) != 2:
            raise InputError(f"the exponential MO2 model takes (a, b); got {params!r}", field="mo2_params")
        value = p[0] * np.exp(p[1] * u)
    else:
        if len(p) != 3:
            raise InputError(f"the power MO2 model takes (a, b, c); got {params!r}", field="mo2_params")
        value = p[0] + p[1] * u ** p[2]
    return _validate.like_input(value, speed_m_s)


@dataclass(frozen=True)
class TrialTruth:
    """What happened in a simulated trial.

    Attributes
    ----------
    phases
        One row per (channel, cycle) with a measure phase: ``channel``, ``cycle``,
        ``measure_start_s``, ``measure_end_s`` (first and last reading), ``step`` (0 = no fish or
        across a change of speed), ``speed_m_s``, ``fish_present``, ``mo2_mg_kg_h`` and
        ``mo2_mg_h`` (the steady MO2; 0 without the fish), ``fish_slope_mg_l_s``,
        ``background_slope_mg_l_s`` (at the phase's mid-time), ``slope_mg_l_s`` (their sum),
        ``o2_min_pct_air_sat`` (lowest true % air saturation in the phase),
        ``flush_end_pct_air_sat`` (true % at the end of the cycle's flush; NaN without one),
        ``temperature_range_c``, and the faults ``struggling``, ``failed_flush``,
        ``temperature_excursion``, ``straddles_step``; ``clean`` = no fault that changes the
        phase's slope (struggling, failed flush, straddling a step) and the fish present.
    steps
        The step schedule: ``step``, ``speed_m_s``, ``start_s``, ``end_s``, ``mo2_mg_kg_h``.
    glitches
        The glitch lines written in the file: ``line`` (1-based line number in the file, the
        header being line 1; for a missing line, the line number the reading would have had),
        ``kind`` (one of :data:`GLITCH_KINDS`), ``reading`` (0-based reading index), ``channel``.
    chambers
        Per channel: ``respirometer_volume_l``, ``fish_mass_g``, ``fish_id``.
    blanks
        Background runs as a person would enter them, exact values of the background model at
        ``entered_blank_times_s`` (:class:`swimlab.uptake.BlankRun`, source ``"entered"``).
    background
        ``rate_mg_l_h`` (initial rate of decline), ``doubling_time_h`` (None = constant).
    mo2_model, mo2_params
        The true speed–MO2 curve (:func:`mo2_curve`).
    individual_factor
        Per channel, the factor applied to the curve.
    cycle
        ``flush_s``, ``wait_s``, ``measure_s``.
    columns
        File columns: ``time``, ``oxygen`` {channel: column}, ``temperature`` {channel: column},
        ``pump``, ``oxygen_unit``.
    start_time, salinity, pressure_pa, sample_interval_s
        Clock start, water salinity [-], barometric pressure [Pa], reading interval [s].
    """

    phases: pd.DataFrame
    steps: pd.DataFrame
    glitches: pd.DataFrame
    chambers: dict
    blanks: tuple
    background: dict
    mo2_model: str
    mo2_params: tuple
    individual_factor: dict
    cycle: dict
    columns: dict
    start_time: datetime
    salinity: float
    pressure_pa: float
    sample_interval_s: float


@dataclass(frozen=True)
class SimulatedTrial:
    """A simulated trial: the logger file's bytes, the readings, and the truth.

    Attributes
    ----------
    csv_bytes
        The logger file (UTF-8 CSV).
    time_s
        Time of each reading since the first. [s]
    oxygen_pct
        Per channel, the oxygen readings as written in the file (before glitch lines were
        added). [% air saturation]
    temperature_c
        Per channel, the temperature readings as written. [°C]
    pump
        Flush pump state per reading (True = on).
    truth
        :class:`TrialTruth`.
    """

    csv_bytes: bytes
    time_s: np.ndarray
    oxygen_pct: dict
    temperature_c: dict
    pump: np.ndarray
    truth: TrialTruth = field(repr=False)


def _per_channel(name: str, value: Any, channels: Sequence[str]) -> dict[str, Any]:
    if isinstance(value, Mapping):
        missing = [c for c in channels if c not in value]
        if missing:
            raise InputError(f"{name} lacks channels {missing}", field=name)
        return {c: value[c] for c in channels}
    return {c: value for c in channels}


def _pairs(name: str, value: Iterable | None, channels: Sequence[str]) -> set[tuple[str, int]]:
    """Fault locations: cycle numbers (every channel) or (channel, cycle) pairs."""
    out: set[tuple[str, int]] = set()
    for item in value or ():
        if isinstance(item, tuple | list):
            channel, cycle = str(item[0]), int(item[1])
            if channel not in channels:
                raise InputError(f"{name} names channel {channel!r}; channels are {list(channels)}", field=name)
            out.add((channel, cycle))
        else:
            out.update((c, int(item)) for c in channels)
    return out


def _format(values: np.ndarray, decimals: int) -> list[str]:
    spec = f".{int(decimals)}f"
    return [format(v, spec) for v in values.tolist()]


def simulate_trial(
    *,
    seed: int,
    channels: Sequence[str] = ("A",),
    speeds_m_s: Sequence[float] = (0.2, 0.35, 0.5, 0.65),
    step_duration_s: float | Sequence[float] = 1800.0,
    blank_cycles_before: int = 0,
    blank_cycles_after: int = 0,
    flush_s: float = 240.0,
    wait_s: float = 60.0,
    measure_s: float = 600.0,
    sample_interval_s: float = 1.0,
    respirometer_volume_l: float | Mapping[str, float] = 30.0,
    fish_mass_g: float | Mapping[str, float] = 500.0,
    mo2_model: str = "exponential",
    mo2_params: Sequence[float] = (90.0, 2.0),
    individual_factor: float | Mapping[str, float] = 1.0,
    temperature_c: float = 15.0,
    temperature_drift_c_h: float = 0.01,
    temperature_noise_c: float = 0.0,
    salinity: float = 0.0,
    pressure_pa: float = 101325.0,
    sensor_noise_pct: float = 0.2,
    sensor_lag_s: float = 5.0,
    flush_time_constant_s: float = 40.0,
    background_rate_mg_l_h: float = 0.1,
    background_doubling_time_h: float | None = 12.0,
    entered_blank_times_s: Sequence[float] | None = None,
    struggling: Iterable | None = None,
    burst_factor: float = 6.0,
    burst_s: float = 120.0,
    failed_flushes: Iterable | None = None,
    temperature_excursions: Iterable | None = None,
    excursion_c: float = 0.5,
    glitches: int = 0,
    noiseless: bool = False,
    oxygen_decimals: int = 3,
    temperature_decimals: int = 2,
    start_time: datetime = _DEFAULT_START,
    speed_profile: Callable[[np.ndarray], np.ndarray] | None = None,
    mo2_profile: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> SimulatedTrial:
    """Simulate one swim-tunnel trial in an intermittent-flow respirometer.

    Parameters
    ----------
    seed
        Seed of the random generator (noise, burst positions, glitch lines).
    channels
        Channel labels; each channel is a respirometer with its own fish and sensor.
    speeds_m_s
        Speed of each step. [m/s]
    step_duration_s
        Duration of every step, or of each. [s]
    blank_cycles_before, blank_cycles_after
        Cycles logged without the fish before and after the steps (trace blanks).
    flush_s, wait_s, measure_s
        The cycle; the trace starts with a flush at time 0. [s]
    sample_interval_s
        Time between readings. [s]
    respirometer_volume_l, fish_mass_g
        Per channel (a dict) or for all. [L], [g]
    mo2_model, mo2_params
        True speed–MO2 curve, see :func:`mo2_curve`.
    individual_factor
        Factor on the curve per channel (a dict) or for all. [-]
    temperature_c, temperature_drift_c_h, temperature_noise_c
        Start temperature, its drift, and the logged reading's noise sd. [°C], [°C/h], [°C]
    salinity, pressure_pa
        Practical salinity [-] and barometric pressure [Pa].
    sensor_noise_pct
        Sensor noise, sd of one reading. [% air saturation]
    sensor_lag_s
        Time constant of the sensor's first-order response (0 = none). [s]
    flush_time_constant_s
        Time constant of the flush's exchange of water. [s]
    background_rate_mg_l_h, background_doubling_time_h
        Background rate of oxygen decline at time 0 (positive = decline) and its doubling time
        (None = constant). [mg L⁻¹ h⁻¹], [h]
    entered_blank_times_s
        Times of the blanks returned in ``truth.blanks``; None gives one and half an hour
        before the trace and after its end. [s]
    struggling
        Cycles (all channels) or (channel, cycle) pairs whose measure phase has a burst of
        activity: MO2 × ``burst_factor`` for ``burst_s`` at a random time inside the phase.
    failed_flushes
        Cycles or (channel, cycle) pairs whose flush runs the pump but exchanges no water.
    temperature_excursions
        Cycles or (channel, cycle) pairs whose measure phase has a temperature excursion: a
        steady rise of ``excursion_c`` across the phase, back to the trend over the next flush
        (a heater overshooting). [°C]
    glitches
        Number of glitch lines written in the file.
    noiseless
        No sensor or temperature noise, and readings written to 6 decimals.
    oxygen_decimals, temperature_decimals
        Resolution of the logged readings.
    start_time
        Clock time of the first reading.
    speed_profile
        Water speed at each time [m/s] from the time since the first reading [s], replacing the
        steps' constant speeds (the steps still say when the fish is in the respirometer and
        number the phases); e.g. a ramp. None: each step's speed.
    mo2_profile
        True MO2 [mg O2 kg⁻¹ h⁻¹] from (time [s], speed [m/s]) at each reading, replacing the
        speed–MO2 curve (times the individual factor); e.g. a recovery after exhaustion. None:
        :func:`mo2_curve` of the speed.

    With a profile, a phase's true MO2 (and speed) in ``truth.phases`` is its mean over the
    phase's readings, since it is not constant.

    Returns
    -------
    :class:`SimulatedTrial`.
    """
    rng = np.random.default_rng(seed)
    channels = [str(c) for c in channels]
    if not channels or len(set(channels)) != len(channels):
        raise InputError(f"channels must be distinct labels; got {channels}", field="channels")
    speeds = _validate.non_negative("speeds_m_s", speeds_m_s, "m/s").reshape(-1)
    durations = np.broadcast_to(_validate.positive("step_duration_s", step_duration_s, "s"), speeds.shape).astype(float)
    flush = float(_validate.positive("flush_s", flush_s, "s"))
    wait = float(_validate.non_negative("wait_s", wait_s, "s"))
    measure = float(_validate.positive("measure_s", measure_s, "s"))
    dt = float(_validate.positive("sample_interval_s", sample_interval_s, "s"))
    period = flush + wait + measure
    volume = {c: float(_validate.positive(f"respirometer_volume_l[{c}]", v, "L"))
              for c, v in _per_channel("respirometer_volume_l", respirometer_volume_l, channels).items()}
    mass = {c: float(_validate.positive(f"fish_mass_g[{c}]", v, "g"))
            for c, v in _per_channel("fish_mass_g", fish_mass_g, channels).items()}
    factor = {c: float(_validate.positive(f"individual_factor[{c}]", v))
              for c, v in _per_channel("individual_factor", individual_factor, channels).items()}
    for c in channels:
        if mass[c] / 1000.0 >= volume[c]:
            raise InputError(f"the fish of channel {c!r} ({mass[c]:g} g) does not fit {volume[c]:g} L",
                             field=f"fish_mass_g.{c}")
    _validate.choice("MO2 model", mo2_model, MO2_MODELS)
    tau_f = float(_validate.positive("flush_time_constant_s", flush_time_constant_s, "s"))
    tau_s = float(_validate.non_negative("sensor_lag_s", sensor_lag_s, "s"))
    if noiseless:
        sensor_noise_pct, temperature_noise_c = 0.0, 0.0
        oxygen_decimals = temperature_decimals = 6

    before = int(blank_cycles_before) * period
    steps_total = float(durations.sum())
    after = int(blank_cycles_after) * period
    total = before + steps_total + after
    n = int(np.floor(total / dt + 1e-9))
    t = np.arange(n) * dt
    if total < period:
        raise InputError(f"the trial ({total:g} s) is shorter than one cycle ({period:g} s)",
                         field="step_duration_s")

    # schedule of phases (flush first at t = 0)
    k = np.floor(t / period + 1e-12)
    pos = t - k * period
    label = np.where(pos < flush, 0, np.where(pos < flush + wait, 1, 2))
    cycle = k.astype(np.int64) + 1
    pump = label == 0

    step_start = before + np.concatenate(([0.0], np.cumsum(durations)[:-1]))
    step_end = step_start + durations
    step_idx = np.searchsorted(step_start, t, side="right") - 1
    in_steps = (t >= before) & (t < before + steps_total)
    speed_t = np.where(in_steps, speeds[np.clip(step_idx, 0, speeds.size - 1)], 0.0)
    if speed_profile is not None:
        speed_t = np.where(in_steps, np.broadcast_to(np.asarray(speed_profile(t), dtype=float), t.shape), 0.0)
        if np.any(~np.isfinite(speed_t) | (speed_t < 0)):
            raise InputError("speed_profile must give a finite speed, zero or more [m/s], at every time",
                             field="speed_profile")

    struggle_at = _pairs("struggling", struggling, channels)
    failed_at = _pairs("failed_flushes", failed_flushes, channels)
    excursion_at = _pairs("temperature_excursions", temperature_excursions, channels)

    rate0 = float(_validate.non_negative("background_rate_mg_l_h", background_rate_mg_l_h, "mg/L/h")) / 3600.0
    td = None if background_doubling_time_h is None else float(
        _validate.positive("background_doubling_time_h", background_doubling_time_h, "h")) * 3600.0

    def bg_integral(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """Oxygen removed by background between times a and b. [mg/L]"""
        if td is None:
            return rate0 * (b - a)
        return rate0 * td / np.log(2.0) * (np.exp2(b / td) - np.exp2(a / td))

    def bg_rate(x: np.ndarray) -> np.ndarray:
        return rate0 * (np.exp2(x / td) if td is not None else np.ones_like(x))

    cycles_all = np.unique(cycle)
    measure_rows = np.flatnonzero(label == 2)
    m_cycles = cycle[measure_rows]
    m_first = measure_rows[np.r_[0, np.flatnonzero(np.diff(m_cycles)) + 1]]
    m_last = measure_rows[np.r_[np.flatnonzero(np.diff(m_cycles)), m_cycles.size - 1]]
    m_cycle_ids = cycle[m_first]

    temperature_true = temperature_c + temperature_drift_c_h * t / 3600.0
    sat_cache: dict[str, np.ndarray] = {}
    result_pct: dict[str, np.ndarray] = {}
    result_temp: dict[str, np.ndarray] = {}
    phase_rows = []
    seg_change = np.flatnonzero(np.diff(label) != 0) + 1
    seg_start = np.r_[0, seg_change]
    seg_stop = np.r_[seg_change, n]
    flush_last = {int(cycle[s1 - 1]): int(s1 - 1) for s0, s1 in zip(seg_start, seg_stop, strict=True)
                  if label[s0] == 0}

    for c in channels:
        v_water = volume[c] - mass[c] / 1000.0
        if mo2_profile is None:
            mo2_kg_h = np.where(in_steps, factor[c] * np.asarray(mo2_curve(speed_t, mo2_model, mo2_params)), 0.0)
        else:
            true_mo2 = np.broadcast_to(np.asarray(mo2_profile(t, speed_t), dtype=float), t.shape)
            if np.any(~np.isfinite(true_mo2[in_steps]) | (true_mo2[in_steps] <= 0)):
                raise InputError("mo2_profile must give a finite MO2 above zero [mg O2 kg-1 h-1] while the fish is in",
                                 field="mo2_profile")
            mo2_kg_h = np.where(in_steps, factor[c] * true_mo2, 0.0)
        fish_rate = mo2_kg_h * mass[c] / 1000.0 / 3600.0 / np.where(in_steps, v_water, volume[c])
        burst = np.zeros(n, dtype=bool)
        burst_where = {}
        for (ch, cyc) in sorted(struggle_at):
            if ch != c:
                continue
            hit = np.flatnonzero(m_cycle_ids == cyc)
            if hit.size == 0:
                raise InputError(f"struggling cycle {cyc} has no measure phase in the trial", field="struggling")
            a, b = t[m_first[hit[0]]], t[m_last[hit[0]]]
            length = min(burst_s, 0.5 * (b - a))
            begin = rng.uniform(a + 0.2 * (b - a), b - 0.2 * (b - a) - length)
            burst |= (t >= begin) & (t < begin + length)
            burst_where[cyc] = (begin, begin + length)
        fish_rate = np.where(burst, fish_rate * burst_factor, fish_rate)

        temp = temperature_true.copy()
        for (ch, cyc) in excursion_at:
            if ch != c:
                continue
            hit = np.flatnonzero(m_cycle_ids == cyc)
            if hit.size == 0:
                raise InputError(f"temperature excursion cycle {cyc} has no measure phase",
                                 field="temperature_excursions")
            a, b = t[m_first[hit[0]]], t[m_last[hit[0]]]
            inside = (t >= a) & (t <= b)
            temp[inside] += excursion_c * (t[inside] - a) / (b - a)
            back = (t > b) & (t <= b + flush)
            temp[back] += excursion_c * (1.0 - (t[back] - b) / flush)
        logged_t = temp + (rng.normal(0.0, temperature_noise_c, n) if temperature_noise_c > 0 else 0.0)
        t_text = _format(logged_t, temperature_decimals)
        logged_t = np.array(t_text, dtype=float)
        sat_true = np.asarray(oxygen.solubility(temp, salinity, pressure_pa), dtype=float)
        sat_logged = np.asarray(oxygen.solubility(logged_t, salinity, pressure_pa), dtype=float)

        # integrate per phase segment
        conc = np.empty(n)
        current = sat_true[0]
        fish_cum = np.concatenate(([0.0], np.cumsum(fish_rate * dt)))
        for s0, s1 in zip(seg_start, seg_stop, strict=True):
            idx = np.arange(s0, s1)
            failed = label[s0] == 0 and (c, int(cycle[s0])) in failed_at
            if label[s0] != 0 or failed:
                # closed: C(t_i) = C(t_s0) − ∫ uptake
                taken = (fish_cum[idx] - fish_cum[s0]) + bg_integral(t[s0], t[idx])
                conc[idx] = current - taken
                step_taken = fish_rate[s1 - 1] * dt + bg_integral(t[s1 - 1], t[s1 - 1] + dt)
                current = conc[s1 - 1] - step_taken
            else:
                mid = (s0 + s1 - 1) // 2
                r = fish_rate[mid] + bg_rate(t[mid])
                c_eq = sat_true[mid] - tau_f * r
                decay = np.exp(-(t[idx] - t[s0]) / tau_f)
                conc[idx] = c_eq + (current - c_eq) * decay
                current = c_eq + (current - c_eq) * np.exp(-(t[s1 - 1] + dt - t[s0]) / tau_f)
        if tau_s > 0:
            alpha = np.exp(-dt / tau_s)
            sensed, _ = signal.lfilter([1.0 - alpha], [1.0, -alpha], conc, zi=[alpha * conc[0]])
        else:
            sensed = conc
        pct = 100.0 * sensed / sat_logged
        if sensor_noise_pct > 0:
            pct = pct + rng.normal(0.0, sensor_noise_pct, n)
        o_text = _format(pct, oxygen_decimals)
        result_pct[c] = np.array(o_text, dtype=float)
        result_temp[c] = logged_t
        sat_cache[c + "_o"] = np.asarray(o_text, dtype=object)
        sat_cache[c + "_t"] = np.asarray(t_text, dtype=object)
        true_pct = 100.0 * conc / sat_true

        # truth per measure phase
        for j, cyc in enumerate(m_cycle_ids):
            i0, i1 = m_first[j], m_last[j]
            a, b = t[i0], t[i1]
            mid_t = 0.5 * (a + b)
            present = bool(in_steps[i0] and in_steps[i1])
            s_a = int(step_idx[i0]) if in_steps[i0] else -1
            s_b = int(step_idx[i1]) if in_steps[i1] else -1
            straddles = bool((in_steps[i0] or in_steps[i1]) and s_a != s_b)
            step = s_a + 1 if present and not straddles else 0
            steady = mo2_profile is None and speed_profile is None
            level = float(mo2_kg_h[i0]) if steady else float(np.mean(mo2_kg_h[i0:i1 + 1]))
            mo2_true = level if present and not straddles else 0.0
            water = v_water if present else volume[c]
            fish_slope = -mo2_true * mass[c] / 1000.0 / 3600.0 / water if present else 0.0
            bg_slope = -float(bg_rate(np.array([mid_t]))[0])
            last = flush_last.get(int(cyc))
            flush_end = float(true_pct[last]) if last is not None else np.nan
            phase_rows.append({
                "channel": c,
                "cycle": int(cyc),
                "measure_start_s": float(a),
                "measure_end_s": float(b),
                "step": step,
                "speed_m_s": (float(speed_t[i0]) if speed_profile is None else float(np.mean(speed_t[i0:i1 + 1])))
                if present else 0.0,
                "fish_present": present,
                "mo2_mg_kg_h": mo2_true,
                "mo2_mg_h": mo2_true * mass[c] / 1000.0,
                "fish_slope_mg_l_s": fish_slope,
                "background_slope_mg_l_s": bg_slope,
                "slope_mg_l_s": fish_slope + bg_slope,
                "o2_min_pct_air_sat": float(true_pct[i0:i1 + 1].min()),
                "flush_end_pct_air_sat": flush_end,
                "temperature_range_c": float(np.ptp(temp[i0:i1 + 1])),
                "struggling": (c, int(cyc)) in struggle_at,
                "burst_start_s": burst_where.get(int(cyc), (np.nan, np.nan))[0],
                "failed_flush": (c, int(cyc)) in failed_at,
                "temperature_excursion": (c, int(cyc)) in excursion_at,
                "straddles_step": straddles,
            })

    truth_phases = pd.DataFrame(phase_rows)
    truth_phases["clean"] = (truth_phases["fish_present"] & ~truth_phases["struggling"]
                             & ~truth_phases["failed_flush"] & ~truth_phases["straddles_step"])
    for name, found in (("failed_flushes", failed_at), ("temperature_excursions", excursion_at)):
        missing = sorted(p for p in found if p[1] not in set(m_cycle_ids))
        if missing:
            raise InputError(f"{name} names cycles {missing} that the trial does not reach (it has "
                             f"cycles 1–{int(cycles_all.max())})", field=name)

    steps = pd.DataFrame({
        "step": np.arange(1, speeds.size + 1),
        "speed_m_s": speeds,
        "start_s": step_start,
        "end_s": step_end,
        "mo2_mg_kg_h": np.asarray(mo2_curve(speeds, mo2_model, mo2_params), dtype=float),
    })

    # the file
    columns = {
        "time": "time",
        "oxygen": {c: f"O2 {c} [% air saturation]" for c in channels},
        "temperature": {c: f"Temperature {c} [°C]" for c in channels},
        "pump": "pump",
        "oxygen_unit": oxygen.PERCENT_AIR_SATURATION,
    }
    header = ",".join([columns["time"]]
                      + [x for c in channels for x in (columns["oxygen"][c], columns["temperature"][c])]
                      + [columns["pump"]])
    base = np.datetime64(start_time.replace(tzinfo=None), "ms")
    offsets = np.round(t * 1000.0).astype("timedelta64[ms]")
    unit = "s" if float(dt).is_integer() else "ms"
    stamps = np.datetime_as_string(base + offsets, unit=unit)
    pump_text = np.where(pump, "1", "0")
    parts = [stamps.astype(object)]
    for c in channels:
        parts += [sat_cache[c + "_o"], sat_cache[c + "_t"]]
    parts.append(pump_text.astype(object))
    lines = [",".join(row) for row in zip(*parts, strict=True)]

    glitch_rows = []
    if glitches:
        count = int(glitches)
        if count > n // 10:
            raise InputError(f"at most {n // 10} glitch lines fit this trial; got {count}", field="glitches")
        chosen = np.sort(rng.choice(np.arange(1, n - 1), size=count, replace=False))
        kinds = {int(r): GLITCH_KINDS[i % len(GLITCH_KINDS)] for i, r in enumerate(chosen)}
        which = {int(r): channels[int(rng.integers(len(channels)))] for r in chosen}
        out_lines = [header]
        for i, line in enumerate(lines):
            kind = kinds.get(i)
            if kind is None:
                out_lines.append(line)
                continue
            number = len(out_lines) + 1
            if kind == "missing_line":
                glitch_rows.append({"line": number, "kind": kind, "reading": i, "channel": None})
                continue
            if kind == "repeated_line":
                out_lines += [line, line]
                glitch_rows.append({"line": number + 1, "kind": kind, "reading": i, "channel": None})
                continue
            cells = line.split(",")
            col = 1 + 2 * channels.index(which[i])
            cells[col] = ""
            out_lines.append(",".join(cells))
            glitch_rows.append({"line": number, "kind": kind, "reading": i, "channel": which[i]})
        text = "\n".join(out_lines) + "\n"
    else:
        text = header + "\n" + "\n".join(lines) + "\n"

    if entered_blank_times_s is None:
        entered_blank_times_s = (-3600.0, -1800.0, total + 1800.0, total + 3600.0)
    blank_times = _validate.finite("entered_blank_times_s", entered_blank_times_s, "s").reshape(-1)
    blanks = tuple(BlankRun(c, float(x), -float(bg_rate(np.array([x]))[0]), "entered")
                   for c in channels for x in blank_times)

    truth = TrialTruth(
        phases=truth_phases,
        steps=steps,
        glitches=pd.DataFrame(glitch_rows, columns=["line", "kind", "reading", "channel"]),
        chambers={c: {"respirometer_volume_l": volume[c], "fish_mass_g": mass[c], "fish_id": f"fish-{c}"}
                  for c in channels},
        blanks=blanks,
        background={"rate_mg_l_h": rate0 * 3600.0,
                    "doubling_time_h": None if td is None else td / 3600.0},
        mo2_model=mo2_model,
        mo2_params=tuple(float(p) for p in mo2_params),
        individual_factor=factor,
        cycle={"flush_s": flush, "wait_s": wait, "measure_s": measure},
        columns=columns,
        start_time=start_time,
        salinity=float(salinity),
        pressure_pa=float(pressure_pa),
        sample_interval_s=dt,
    )
    return SimulatedTrial(
        csv_bytes=text.encode("utf-8"),
        time_s=t,
        oxygen_pct=result_pct,
        temperature_c=result_temp,
        pump=pump,
        truth=truth,
    )


# --------------------------------------------------------------------------------------------
# Protocol trials: ramp, endurance, post-exercise recovery
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ProtocolTrial:
    """A simulated trial of a protocol beyond the step test, with the protocol's own truth.

    Attributes
    ----------
    protocol
        ``"ramp"``, ``"endurance"`` or ``"recovery"``.
    simulated
        The :class:`SimulatedTrial` (logger file, readings, per-phase truth).
    start_s
        Start of the ramp, of the set speed, or of the exercise on the trace clock. [s]
    fatigue_time_s
        Fatigue (exhaustion) on the trace clock, or None for a fish still swimming at the
        limit. [s]
    truth
        The protocol's true values: ramp ``umax_m_s``, ``ramp_rate_m_s2``, ``start_speed_m_s``,
        ``time_to_fatigue_s``; endurance ``set_speed_m_s``, ``time_limit_s``, ``time_s``,
        ``fatigued``; recovery ``baseline_mg_kg_h``, ``amplitudes_mg_kg_h``, ``rates_per_s``,
        ``epoc_mg_kg`` (to full recovery), ``epoc_recorded_mg_kg`` (to the end of the record),
        ``t50_s``, ``t95_s``.
    """

    protocol: str
    simulated: SimulatedTrial = field(repr=False)
    start_s: float
    fatigue_time_s: float | None
    truth: dict


def _excess(t: np.ndarray, amplitudes: np.ndarray, rates: np.ndarray) -> np.ndarray:
    return np.sum(amplitudes[:, None] * np.exp(-rates[:, None] * np.atleast_1d(t)[None, :]), axis=0)


def simulate_ramp_trial(
    *,
    seed: int,
    ramp_rate_m_s2: float,
    start_speed_m_s: float,
    time_to_fatigue_s: float,
    rest_s: float = 3600.0,
    after_s: float = 1800.0,
    rest_speed_m_s: float = 0.05,
    **kwargs: Any,
) -> ProtocolTrial:
    """A ramp (constant-acceleration) test: rest, then U = U₀ + a (t − t₀) until fatigue, then rest.

    Parameters
    ----------
    seed
        Seed of the random generator.
    ramp_rate_m_s2, start_speed_m_s
        Rate at which the speed rises, and the speed at the ramp's start. [m/s²], [m/s]
    time_to_fatigue_s
        Time from the ramp's start to fatigue. [s]
    rest_s, after_s
        Rest before the ramp and recovery after fatigue, at ``rest_speed_m_s``. [s]
    rest_speed_m_s
        Speed of the rest periods. [m/s]
    **kwargs
        Passed on to :func:`simulate_trial` (cycle, fish, MO2 curve, noise…).

    Returns
    -------
    ProtocolTrial
        Truth: Umax = U₀ + a · t_fatigue (the definition of a constant acceleration).
    """
    rate = float(_validate.positive("ramp_rate_m_s2", ramp_rate_m_s2, "m/s²"))
    u0 = float(_validate.non_negative("start_speed_m_s", start_speed_m_s, "m/s"))
    t_fat = float(_validate.positive("time_to_fatigue_s", time_to_fatigue_s, "s"))
    rest = float(_validate.positive("rest_s", rest_s, "s"))
    after = float(_validate.positive("after_s", after_s, "s"))
    u_rest = float(_validate.non_negative("rest_speed_m_s", rest_speed_m_s, "m/s"))
    end = rest + t_fat

    def speed(t: np.ndarray) -> np.ndarray:
        return np.where((t >= rest) & (t < end), u0 + rate * (t - rest), u_rest)

    simulated = simulate_trial(seed=seed, speeds_m_s=(u_rest, u0, u_rest), step_duration_s=(rest, t_fat, after),
                               speed_profile=speed, **kwargs)
    truth = {"umax_m_s": u0 + rate * t_fat, "ramp_rate_m_s2": rate, "start_speed_m_s": u0,
             "time_to_fatigue_s": t_fat}
    return ProtocolTrial("ramp", simulated, rest, end, truth)


def simulate_endurance_trial(
    *,
    seed: int,
    set_speed_m_s: float,
    time_limit_s: float,
    fatigue_after_s: float | None,
    rest_s: float = 1800.0,
    after_s: float = 1200.0,
    rest_speed_m_s: float = 0.05,
    **kwargs: Any,
) -> ProtocolTrial:
    """A fixed-speed endurance swim: rest, the set speed until fatigue or the time limit, rest.

    Parameters
    ----------
    seed
        Seed of the random generator.
    set_speed_m_s
        The set speed. [m/s]
    time_limit_s
        The trial's time limit. [s]
    fatigue_after_s
        Time from the start of the set speed to fatigue, or None (or a time beyond the limit)
        for a fish still swimming when the limit ends. [s]
    rest_s, after_s, rest_speed_m_s
        Rest before and after, and its speed. [s], [s], [m/s]
    **kwargs
        Passed on to :func:`simulate_trial`.

    Returns
    -------
    ProtocolTrial
        Truth: ``time_s`` = fatigue time, or the limit for a fish still swimming (censored).
    """
    u = float(_validate.positive("set_speed_m_s", set_speed_m_s, "m/s"))
    limit = float(_validate.positive("time_limit_s", time_limit_s, "s"))
    fatigued = fatigue_after_s is not None and float(fatigue_after_s) <= limit
    swim = float(_validate.positive("fatigue_after_s", fatigue_after_s, "s")) if fatigued else limit
    rest = float(_validate.positive("rest_s", rest_s, "s"))
    simulated = simulate_trial(seed=seed, speeds_m_s=(rest_speed_m_s, u, rest_speed_m_s),
                               step_duration_s=(rest, swim, after_s), **kwargs)
    truth = {"set_speed_m_s": u, "time_limit_s": limit, "time_s": swim, "fatigued": fatigued}
    return ProtocolTrial("endurance", simulated, rest, rest + swim if fatigued else None, truth)


def simulate_recovery_trial(
    *,
    seed: int,
    exercise_speeds_m_s: Sequence[float],
    exercise_step_s: float,
    epoc_amplitudes_mg_kg_h: Sequence[float],
    epoc_rates_per_s: Sequence[float],
    rest_s: float = 7200.0,
    recovery_s: float = 14400.0,
    rest_speed_m_s: float = 0.05,
    mo2_model: str = "exponential",
    mo2_params: Sequence[float] = (90.0, 2.0),
    **kwargs: Any,
) -> ProtocolTrial:
    """Rest, exercise to exhaustion in speed steps, then recovery with a known EPOC.

    Parameters
    ----------
    seed
        Seed of the random generator.
    exercise_speeds_m_s, exercise_step_s
        Speeds of the exercise steps and the duration of each; exhaustion is at the end of the
        last. [m/s], [s]
    epoc_amplitudes_mg_kg_h, epoc_rates_per_s
        After exhaustion MO2(t) = B + Σ A_i e^(−k_i t), t from exhaustion, with B the MO2 at
        rest, ``mo2_curve(rest_speed_m_s)``. [mg O2 kg⁻¹ h⁻¹], [1/s]
    rest_s, recovery_s, rest_speed_m_s
        Rest before the exercise, recovery after it, and their speed. [s], [s], [m/s]
    mo2_model, mo2_params
        MO2 before exhaustion (:func:`mo2_curve`).
    **kwargs
        Passed on to :func:`simulate_trial`.

    Returns
    -------
    ProtocolTrial
        Truth: the baseline B, EPOC = Σ A_i / k_i / 3600 s/h (the integral of the excess from
        exhaustion to infinity) [mg O2 kg⁻¹], the same to the end of the record, and the times at
        which the excess has fallen to 50 % and 5 % of its value at exhaustion [s].
    """
    speeds = _validate.positive("exercise_speeds_m_s", exercise_speeds_m_s, "m/s").reshape(-1)
    step = float(_validate.positive("exercise_step_s", exercise_step_s, "s"))
    amps = _validate.positive("epoc_amplitudes_mg_kg_h", epoc_amplitudes_mg_kg_h, "mg O2 kg-1 h-1").reshape(-1)
    rates = _validate.positive("epoc_rates_per_s", epoc_rates_per_s, "1/s").reshape(-1)
    if amps.shape != rates.shape:
        raise InputError("give one rate per amplitude", field="epoc_rates_per_s")
    rest = float(_validate.positive("rest_s", rest_s, "s"))
    rec = float(_validate.positive("recovery_s", recovery_s, "s"))
    exhaustion = rest + step * speeds.size
    baseline = float(mo2_curve(float(rest_speed_m_s), mo2_model, mo2_params))

    def mo2(t: np.ndarray, u: np.ndarray) -> np.ndarray:
        before = np.asarray(mo2_curve(u, mo2_model, mo2_params), dtype=float)
        after = baseline + _excess(np.clip(t - exhaustion, 0.0, None), amps, rates)
        return np.where(t >= exhaustion, after, before)

    simulated = simulate_trial(
        seed=seed, speeds_m_s=(rest_speed_m_s, *speeds, rest_speed_m_s),
        step_duration_s=(rest, *([step] * speeds.size), rec), mo2_model=mo2_model, mo2_params=mo2_params,
        mo2_profile=mo2, **kwargs)

    def time_to(fraction: float) -> float:
        target = (1.0 - fraction) * float(amps.sum())
        # Σ A_i e^(−k_i t) ≤ (Σ A_i) e^(−k_min t), so the excess is below the target by 1.5 × this time
        upper = -1.5 * np.log(1.0 - fraction) / float(rates.min())
        return float(optimize.brentq(lambda x: float(_excess(np.array([x]), amps, rates)[0]) - target, 0.0, upper,
                                     xtol=1e-6))

    truth = {
        "baseline_mg_kg_h": baseline,
        "amplitudes_mg_kg_h": [float(a) for a in amps],
        "rates_per_s": [float(k) for k in rates],
        "epoc_mg_kg": float(np.sum(amps / rates)) / 3600.0,
        "epoc_recorded_mg_kg": float(np.sum(amps / rates * (1.0 - np.exp(-rates * rec)))) / 3600.0,
        "t50_s": time_to(0.5),
        "t95_s": time_to(0.95),
    }
    return ProtocolTrial("recovery", simulated, rest, exhaustion, truth)
