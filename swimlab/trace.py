"""Phases and slopes of an oxygen trace (intermittent-flow respirometry).

A trace is a set of readings on one clock: ``time_s`` (seconds since the first reading, strictly
increasing) and, per respirometer channel, the oxygen level and the water temperature. The cycle
of intermittent-flow respirometry is *flush* (the pump exchanges the respirometer's water),
*wait* (the respirometer is closed; readings settle after the flush) and *measure* (the closed
respirometer's oxygen falls; its slope gives the fish's oxygen uptake). Steffensen (1989) and
Svendsen, Bushnell & Steffensen (2016) describe the method.

Every function here works on whole arrays: the phases of a trace are found from run lengths and
running maxima, and the statistics of every (channel, phase) pair come from segment sums
(:func:`numpy.add.reduceat`) and cumulative sums, with no Python loop over phases. Loops run over
channels only where a channel's own inputs differ.

Phase tables have the columns of :data:`PHASE_COLUMNS`: ``cycle`` (1-based), ``phase``
(``"flush"``, ``"wait"`` or ``"measure"``), ``start_s`` and ``end_s`` (times of the phase's first
and last reading [s]), ``i_start`` and ``i_stop`` (a Python slice ``i_start:i_stop`` into the
trace arrays) and ``method`` (``"pump"``, ``"schedule"`` or ``"shape"``). The phases of a table
tile the trace: every reading belongs to exactly one phase.

A cycle starts with a flush. Readings before the trace's first flush form cycle 1 on their own
(a wait and measure phase without a flush), so cycle numbers follow the flushes that are in the
file.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from swimlab import _validate, checks
from swimlab._parallel import each_channel
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS, LabSettings

__all__ = [
    "PHASE_COLUMNS",
    "PHASE_NAMES",
    "SLOPE_COLUMNS",
    "WINDOW_COLUMNS",
    "concentration_from_trace",
    "fit_slopes",
    "phase_flags",
    "phases_from_pump",
    "phases_from_schedule",
    "phases_from_shape",
    "steepest_window_slopes",
]

PHASE_COLUMNS = ["cycle", "phase", "start_s", "end_s", "i_start", "i_stop", "method"]
"""Columns of a phase table."""

PHASE_NAMES = ("flush", "wait", "measure")
"""Names of the phases of one cycle, in their order."""

SLOPE_COLUMNS = [
    "channel", "cycle", "start_s", "end_s", "n_points", "slope_mg_l_s", "slope_se_mg_l_s", "r2",
    "residual_sd_mg_l", "relative_se", "noise_ratio", "curvature_t", "curvature_slope_change",
    "o2_start_mg_l", "o2_end_mg_l", "o2_min_mg_l", "o2_min_pct_air_sat", "temperature_mean_c",
    "temperature_change_c", "accepted", "rejected_by",
]
"""Columns of the table returned by :func:`fit_slopes`."""

WINDOW_COLUMNS = ["channel", "cycle", "window_s", "window_start_s", "n_windows", "slope_mg_l_s", "r2"]
"""Columns of the table returned by :func:`steepest_window_slopes`."""

_FLUSH, _WAIT, _MEASURE = 0, 1, 2
_NAMES = np.array(PHASE_NAMES, dtype=object)

_FLUSH_END_WINDOW_S = 10.0
"""Length of the end of a flush whose mean reading is taken as the oxygen the flush restored.
[s] Common practice: a short mean avoids one noisy reading deciding the check."""


# --- validation -----------------------------------------------------------------------------


def _time(time_s: Any) -> np.ndarray:
    t = _validate.as_float_array("time_s", time_s)
    if t.ndim != 1 or t.size < 2:
        raise InputError(f"time_s must be a 1-D array of at least 2 readings; got shape {t.shape}",
                         field="time_s")
    bad = ~np.isfinite(t)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"reading {i + 1} has a time that is not a finite number ({t[i]!r})",
                         field="time_s", row=i + 1)
    step = np.diff(t)
    if (step <= 0).any():
        i = int(np.flatnonzero(step <= 0)[0]) + 1
        raise InputError(
            f"times must increase from reading to reading; reading {i + 1} at {t[i]!r} s follows "
            f"{t[i - 1]!r} s", field="time_s", row=i + 1)
    return t


def _channel_array(name: str, channel: str, value: Any, n: int) -> np.ndarray:
    arr = _validate.as_float_array(f"{name}[{channel!r}]", value)
    if arr.shape != (n,):
        raise InputError(
            f"channel {channel!r} has {arr.size} readings of {name} but the trace has {n} times",
            field=f"{name}.{channel}")
    return arr


def _channels(name: str, values: Mapping[str, Any], n: int, *, allow_empty: bool = False) -> dict:
    if not isinstance(values, Mapping):
        raise InputError(f"{name} must be a dict of channel -> readings; got {type(values).__name__}",
                         field=name)
    if not values and not allow_empty:
        raise InputError(f"{name} has no channels", field=name)
    out = {}
    for channel, value in values.items():
        arr = _channel_array(name, str(channel), value, n)
        if not (np.isfinite(arr[:64]).any() or np.isfinite(arr).any()):
            raise InputError(
                f"channel {channel!r} has no finite {name} reading (all {n} are missing); check "
                f"the column mapping, or leave the channel out", field=f"{name}.{channel}")
        out[str(channel)] = arr
    return out


def _temperature_for(temperature_c: Any, channel: str, n: int) -> np.ndarray | None:
    """The temperature readings that belong to ``channel`` (its own, or the only probe's)."""
    if temperature_c is None:
        return None
    if isinstance(temperature_c, Mapping):
        if channel in temperature_c:
            return _channel_array("temperature_c", channel, temperature_c[channel], n)
        if len(temperature_c) == 1:
            only = next(iter(temperature_c))
            return _channel_array("temperature_c", str(only), temperature_c[only], n)
        raise InputError(
            f"no temperature readings for channel {channel!r}; temperature channels are "
            f"{sorted(temperature_c)}", field=f"temperature_c.{channel}")
    arr = _validate.as_float_array("temperature_c", temperature_c)
    if arr.ndim == 0:
        return np.full(n, float(arr))
    return _channel_array("temperature_c", channel, arr, n)


def _check_phases(phases: pd.DataFrame, n: int) -> None:
    missing = [c for c in PHASE_COLUMNS if c not in getattr(phases, "columns", [])]
    if missing:
        raise InputError(f"the phase table lacks columns {missing}; expected {PHASE_COLUMNS}",
                         field="phases")
    start = phases["i_start"].to_numpy()
    stop = phases["i_stop"].to_numpy()
    bad = (start < 0) | (stop > n) | (stop <= start)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"phase row {row + 1} has the slice {int(start[row])}:{int(stop[row])}, which is empty "
            f"or outside the trace's {n} readings", field="phases", row=row + 1)
    unknown = ~phases["phase"].isin(PHASE_NAMES).to_numpy()
    if unknown.any():
        row = int(np.flatnonzero(unknown)[0])
        raise InputError(f"phase row {row + 1} is {phases['phase'].iloc[row]!r}; expected one of "
                         f"{list(PHASE_NAMES)}", field="phases", row=row + 1)


# --- phases ---------------------------------------------------------------------------------


def _table_from_labels(time_s: np.ndarray, label: np.ndarray, cycle: np.ndarray, method: str) -> pd.DataFrame:
    """Run-length encode per-reading (cycle, label) into a phase table."""
    n = time_s.size
    change = np.flatnonzero((label[1:] != label[:-1]) | (cycle[1:] != cycle[:-1])) + 1
    starts = np.concatenate(([0], change))
    stops = np.concatenate((change, [n]))
    return _phase_frame(time_s, cycle[starts], label[starts], starts, stops, method)


def _phase_frame(time_s: np.ndarray, cycle: np.ndarray, label: np.ndarray, starts: np.ndarray,
                 stops: np.ndarray, method: str) -> pd.DataFrame:
    """The phase table of runs of readings [starts, stops) with their cycle and label codes."""
    return pd.DataFrame({
        "cycle": cycle.astype(np.int64),
        "phase": _NAMES[label],
        "start_s": time_s[starts],
        "end_s": time_s[stops - 1],
        "i_start": starts.astype(np.int64),
        "i_stop": stops.astype(np.int64),
        "method": method,
    }, columns=PHASE_COLUMNS)


def _table_from_flush(time_s: np.ndarray, flush: np.ndarray, wait_s: float, method: str) -> pd.DataFrame:
    """Phase table from a per-reading flush mask, working on its runs only."""
    n = flush.size
    edges = np.flatnonzero(flush[1:] != flush[:-1]) + 1
    starts = np.concatenate(([0], edges))
    stops = np.concatenate((edges, [n]))
    is_flush = flush[starts]
    cycle = np.cumsum(is_flush) + (0 if flush[0] else 1)
    # a closed run is the wait until wait_s after its first reading, then the measure phase
    split = np.searchsorted(time_s, time_s[starts] + wait_s, side="left")
    split = np.where(is_flush, stops, np.clip(split, starts, stops))
    first_label = np.where(is_flush, _FLUSH, _WAIT)
    row_start = np.stack((starts, split), axis=1).ravel()
    row_stop = np.stack((split, stops), axis=1).ravel()
    row_label = np.stack((first_label, np.full(starts.size, _MEASURE)), axis=1).ravel()
    row_cycle = np.repeat(cycle, 2)
    keep = row_stop > row_start
    return _phase_frame(time_s, row_cycle[keep], row_label[keep], row_start[keep], row_stop[keep], method)


def phases_from_pump(time_s: Any, pump: Any, wait_s: float) -> pd.DataFrame:
    """Phases of a trace from the logged flush-pump signal.

    Parameters
    ----------
    time_s
        Time of each reading since the first, strictly increasing. [s]
    pump
        Flush pump state at each reading: True (or 1) = on (flush), False (or 0) = off (closed).
    wait_s
        Wait after the pump stops before a measure phase begins. [s]

    Returns
    -------
    Phase table with the columns of :data:`PHASE_COLUMNS`, method ``"pump"``.

    Notes
    -----
    Readings with the pump on are the flush. The closed period begins at the first reading with
    the pump off (the moment the pump stopped lies between that reading and the one before; the
    later reading is taken so that the wait is never shorter than asked). Readings less than
    ``wait_s`` after it are the wait, the rest of the closed period until the pump starts again
    is the measure phase. A closed period at the start of the trace is timed from the first
    reading. Intermittent-flow cycle as in Svendsen et al. (2016).
    """
    t = _time(time_s)
    wait = float(_validate.non_negative("wait_s", wait_s, "s"))
    raw = pump.to_numpy() if isinstance(pump, pd.Series) else np.asarray(pump)
    if raw.shape != t.shape:
        raise InputError(f"pump has {raw.size} readings but the trace has {t.size} times", field="pump")
    if raw.dtype == bool:
        flush = raw
    else:
        values = _validate.as_float_array("pump", raw)
        bad = ~np.isin(values, (0.0, 1.0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"pump state at reading {i + 1} is {values[i]!r}; expected on/off "
                             f"(True/False or 1/0)", field="pump", row=i + 1)
        flush = values == 1.0
    return _table_from_flush(t, flush, wait, "pump")


def phases_from_schedule(time_s: Any, flush_s: float, wait_s: float, measure_s: float,
                         start_s: float = 0.0) -> pd.DataFrame:
    """Phases of a trace from a fixed cycle: flush, wait and measure of set durations.

    Parameters
    ----------
    time_s
        Time of each reading since the first, strictly increasing. [s]
    flush_s, wait_s, measure_s
        Durations of the flush, wait and measure phases of every cycle. [s]
    start_s
        Time at which a flush begins, on the trace clock. [s]

    Returns
    -------
    Phase table with the columns of :data:`PHASE_COLUMNS`, method ``"schedule"``.

    Notes
    -----
    A reading at time t lies ``(t − start_s) mod (flush_s + wait_s + measure_s)`` into its cycle;
    the first ``flush_s`` of a cycle are the flush, the next ``wait_s`` the wait, the rest the
    measure phase. The schedule runs backwards from ``start_s`` as well, so readings before it
    belong to the end of an earlier cycle. Raises :class:`~swimlab.errors.InputError` when one
    whole cycle starting at ``start_s`` does not fit in the trace.
    """
    t = _time(time_s)
    flush = float(_validate.non_negative("flush_s", flush_s, "s"))
    wait = float(_validate.non_negative("wait_s", wait_s, "s"))
    measure = float(_validate.positive("measure_s", measure_s, "s"))
    start = float(_validate.finite("start_s", start_s, "s"))
    period = flush + wait + measure
    if start + period > t[-1]:
        raise InputError(
            f"the cycle schedule is longer than the trace: one cycle of flush {flush:g} s + wait "
            f"{wait:g} s + measure {measure:g} s = {period:g} s starting at {start:g} s ends at "
            f"{start + period:g} s, but the trace ends at {t[-1]:g} s", field="protocol.cycle")
    k = np.floor((t - start) / period)
    position = (t - start) - k * period
    label = np.where(position < flush, _FLUSH, np.where(position < flush + wait, _WAIT, _MEASURE))
    cycle = (k - k[0] + 1).astype(np.int64)
    return _table_from_labels(t, label.astype(np.int8), cycle, "schedule")


def phases_from_shape(time_s: Any, oxygen: Any, wait_s: float, *, min_rise: float | None = None,
                      smooth_points: int = 31) -> pd.DataFrame:
    """Phases of a trace from the shape of one channel's oxygen: a flush is where oxygen rises.

    Parameters
    ----------
    time_s
        Time of each reading since the first, strictly increasing. [s]
    oxygen
        Oxygen readings of one channel (any unit; missing readings as NaN). [unit of oxygen]
    wait_s
        Wait after a flush ends before a measure phase begins. [s]
    min_rise
        Smallest rise of oxygen that counts as a flush, in the unit of ``oxygen``. None takes the
        larger of five times the reading-to-reading noise and a quarter of the trace's range
        (2nd to 98th percentile). [unit of oxygen]
    smooth_points
        Readings in the centred least-squares window that estimates the rate of change. [-]

    Returns
    -------
    Phase table with the columns of :data:`PHASE_COLUMNS`, method ``"shape"``.

    Notes
    -----
    The rate of change at each reading is the least-squares slope over ``smooth_points``
    readings centred on it (a convolution). Runs of readings with a positive rate are candidate
    flushes; a run is a flush when the moving mean of oxygen rises by at least ``min_rise``
    across it. The flushes found then split the trace as :func:`phases_from_pump` does. The
    noise is estimated robustly as 1.4826 · MAD of successive differences / √2 (the MAD of a
    normal sample, Hampel 1974). This is a heuristic of our own for traces without a pump
    signal; the pump signal or a fixed schedule, where they exist, are more reliable.
    """
    t = _time(time_s)
    y = _channel_array("oxygen", "shape", oxygen, t.size)
    wait = float(_validate.non_negative("wait_s", wait_s, "s"))
    ok = np.isfinite(y)
    if ok.sum() < 2:
        raise InputError("the oxygen trace used to find phases has fewer than 2 finite readings",
                         field="oxygen")
    if not ok.all():
        y = np.interp(t, t[ok], y[ok])
    h = max(1, int(smooth_points) // 2)
    k = np.arange(-h, h + 1, dtype=float)
    kernel = k / np.sum(k * k)
    padded = np.pad(y, h, mode="edge")
    rate = np.convolve(padded, kernel[::-1], mode="valid")
    mean = np.convolve(padded, np.full(2 * h + 1, 1.0 / (2 * h + 1)), mode="valid")
    if min_rise is None:
        diffs = np.diff(y)
        noise = 1.4826 * np.median(np.abs(diffs - np.median(diffs))) / np.sqrt(2.0)
        spread = np.percentile(mean, 98) - np.percentile(mean, 2)
        rise_needed = max(5.0 * noise, 0.25 * spread)
    else:
        rise_needed = float(_validate.positive("min_rise", min_rise))
    rising = rate > 0
    edges = np.diff(rising.astype(np.int8))
    starts = np.flatnonzero(edges == 1) + 1
    stops = np.flatnonzero(edges == -1) + 1
    if rising[0]:
        starts = np.concatenate(([0], starts))
    if rising[-1]:
        stops = np.concatenate((stops, [t.size]))
    rise = mean[stops - 1] - mean[starts]
    keep = rise >= rise_needed
    starts, stops = starts[keep], stops[keep]
    if starts.size:
        # A flush's rise slows as the water nears air saturation, so the rate's sign ends the
        # run too early; the flush is taken to last until the moving mean peaks, before the
        # next rise.
        span_end = np.concatenate((starts[1:], [t.size]))
        lengths = span_end - stops
        has_span = lengths > 0
        s0, length = stops[has_span], lengths[has_span]
        idx = np.arange(length.sum()) + np.repeat(s0 - (np.cumsum(length) - length), length)
        offsets = np.cumsum(length) - length
        values = mean[idx]
        peak = np.maximum.reduceat(values, offsets)
        seg_id = np.repeat(np.arange(s0.size), length)
        at_peak = np.where(values == peak[seg_id], np.arange(idx.size), idx.size)
        first = np.minimum.reduceat(at_peak, offsets)
        new_stop = stops.copy()
        new_stop[has_span] = idx[first] + 1
        stops = np.maximum(stops, new_stop)
    marks = np.zeros(t.size + 1, dtype=np.int64)
    np.add.at(marks, starts, 1)
    np.add.at(marks, stops, -1)
    flush = np.cumsum(marks[:-1]) > 0
    return _table_from_flush(t, flush, wait, "shape")


# --- segment statistics ---------------------------------------------------------------------


class _Segments:
    """The measure phases of a phase table, gathered into one contiguous index.

    Readings of the measure phases are gathered (``index``) so that every phase is a contiguous
    run starting at ``offsets``; sums per phase are one :func:`numpy.add.reduceat`. The time of
    each gathered reading, centred on its phase's mean time (``tc``), and its powers are shared
    by every channel.
    """

    def __init__(self, phases: pd.DataFrame, t: np.ndarray) -> None:
        _check_phases(phases, t.size)
        is_measure = phases["phase"].to_numpy() == "measure"
        if not is_measure.any():
            raise InputError("the phase table has no measure phase", field="phases")
        self.cycle = phases["cycle"].to_numpy(dtype=np.int64)[is_measure]
        self.i_start = phases["i_start"].to_numpy(dtype=np.int64)[is_measure]
        self.i_stop = phases["i_stop"].to_numpy(dtype=np.int64)[is_measure]
        self.lengths = self.i_stop - self.i_start
        self.offsets = np.cumsum(self.lengths) - self.lengths
        total = int(self.lengths.sum())
        self.index = np.arange(total, dtype=np.int64) + np.repeat(self.i_start - self.offsets, self.lengths)
        self.size = self.cycle.size
        self.total = total
        tg = t[self.index]
        self.tg = tg
        self.tmean = self.sum(tg) / self.lengths
        self.tc = tg - self.spread(self.tmean)
        self.first_t = t[self.i_start]
        self.last_t = t[self.i_stop - 1]
        self._powers: tuple | None = None

    def sum(self, x: np.ndarray) -> np.ndarray:
        return np.add.reduceat(x, self.offsets, axis=-1)

    def spread(self, per_phase: np.ndarray) -> np.ndarray:
        """Repeat a per-phase value for each of the phase's readings."""
        return np.repeat(per_phase, self.lengths, axis=-1)

    def powers(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """tc², Σtc², Σtc³, Σtc⁴ per phase (for channels without missing readings)."""
        if self._powers is None:
            tc2 = self.tc * self.tc
            self._powers = (tc2, self.sum(tc2), self.sum(tc2 * self.tc), self.sum(tc2 * tc2))
        return self._powers


def _weighted_moments(tc: np.ndarray, yg: np.ndarray, offsets: np.ndarray, lengths: np.ndarray,
                      quadratic: bool) -> dict[str, np.ndarray]:
    """Centred sums per run of ``yg`` (runs at ``offsets``), missing readings at zero weight."""
    finite = np.isfinite(yg)
    w = finite.astype(float)
    y0 = np.where(finite, yg, 0.0)

    def total(x: np.ndarray) -> np.ndarray:
        return np.add.reduceat(x, offsets)

    n = total(w)
    with np.errstate(invalid="ignore", divide="ignore"):
        tbar = total(w * tc) / n
        ybar = total(y0) / n
    u = (tc - np.repeat(np.nan_to_num(tbar), lengths)) * w
    v = (y0 - np.repeat(np.nan_to_num(ybar), lengths)) * w
    u2 = u * u
    out = {"n": n, "tbar": tbar, "ybar": ybar, "sxx": total(u2), "sxy": total(u * v)}
    if quadratic:
        out.update(syy=total(v * v), su3=total(u2 * u), su4=total(u2 * u2), su2y=total(u2 * v))
    return out


def _moments(seg: _Segments, y: np.ndarray, *, quadratic: bool = True) -> dict[str, np.ndarray]:
    """Centred sums of one channel's measure phases; missing readings get zero weight.

    Phases without a missing reading take the fast path (shared time sums); only the phases
    that have one are summed again with weights.
    """
    yg = y[seg.index]
    sy = seg.sum(yg)
    gap = ~np.isfinite(sy)
    if gap.all():
        return _weighted_moments(seg.tc, yg, seg.offsets, seg.lengths, quadratic)
    n = seg.lengths.astype(float)
    ybar = sy / n
    v = yg
    v -= seg.spread(ybar)  # yg is a fresh copy: centre it in place
    tc2, sxx, su3, su4 = seg.powers()
    buffer = np.multiply(seg.tc, v)
    out = {"n": n, "tbar": np.zeros(seg.size), "ybar": ybar, "sxx": sxx, "sxy": seg.sum(buffer)}
    if quadratic:
        np.multiply(v, v, out=buffer)
        syy = seg.sum(buffer)
        np.multiply(tc2, v, out=buffer)
        out.update(syy=syy, su3=su3, su4=su4, su2y=seg.sum(buffer))
    if gap.any():
        lengths = seg.lengths[gap]
        offsets = np.cumsum(lengths) - lengths
        rows = np.arange(lengths.sum()) + np.repeat(seg.offsets[gap] - offsets, lengths)
        redo = _weighted_moments(seg.tc[rows], y[seg.index[rows]], offsets, lengths, quadratic)
        for key, value in redo.items():
            full = np.array(out[key], dtype=float, copy=True)
            full[gap] = value
            out[key] = full
    return out


def _fitted_ends(seg: _Segments, m: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(m["n"] >= 2, m["sxy"] / m["sxx"], np.nan)
        centre = seg.tmean + np.nan_to_num(m["tbar"])
        start = m["ybar"] + slope * (seg.first_t - centre)
        end = m["ybar"] + slope * (seg.last_t - centre)
    return slope, start, end


def _pct_of_fit(seg: _Segments, conc: np.ndarray, pct: np.ndarray, start: np.ndarray,
                end: np.ndarray) -> np.ndarray:
    """The lower fitted end of each phase in % air saturation.

    Each fitted end is converted with the ratio % / (mg/L) of the reading at that end, i.e. at
    that reading's own temperature; where that reading is missing, with the ratio of the
    phase's sums over readings that have both.
    """
    first, last = seg.i_start, seg.i_stop - 1
    with np.errstate(invalid="ignore", divide="ignore"):
        r_first = pct[first] / conc[first]
        r_last = pct[last] / conc[last]
        lost = ~(np.isfinite(r_first) & np.isfinite(r_last))
        if lost.any():
            pg, cg = pct[seg.index], conc[seg.index]
            both = np.isfinite(pg) & np.isfinite(cg)
            ratio = seg.sum(np.where(both, pg, 0.0)) / seg.sum(np.where(both, cg, 0.0))
            r_first = np.where(np.isfinite(r_first), r_first, ratio)
            r_last = np.where(np.isfinite(r_last), r_last, ratio)
        return np.fmin(start * r_first, end * r_last)


def _temperature_stats(seg: _Segments, temp: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    tg = temp[seg.index]
    total = seg.sum(tg)
    if np.isfinite(total).all():
        mean = total / seg.lengths
        change = np.maximum.reduceat(tg, seg.offsets) - np.minimum.reduceat(tg, seg.offsets)
        return mean, change
    ok = np.isfinite(tg)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = seg.sum(np.where(ok, tg, 0.0)) / seg.sum(ok.astype(float))
    hi = np.maximum.reduceat(np.where(ok, tg, -np.inf), seg.offsets)
    lo = np.minimum.reduceat(np.where(ok, tg, np.inf), seg.offsets)
    return mean, np.where(np.isfinite(hi), hi - lo, np.nan)


def fit_slopes(
    time_s: Any,
    oxygen_mg_l: Mapping[str, Any],
    phases: pd.DataFrame,
    *,
    temperature_c: Mapping[str, Any] | Any | None = None,
    oxygen_pct: Mapping[str, Any] | None = None,
    settings: LabSettings = DEFAULT_SETTINGS,
) -> pd.DataFrame:
    """Least-squares slope of oxygen in every measure phase of every channel, with its checks.

    Parameters
    ----------
    time_s
        Time of each reading since the first, strictly increasing. [s]
    oxygen_mg_l
        Oxygen concentration per channel, one reading per time; missing readings as NaN. [mg/L]
    phases
        Phase table (:data:`PHASE_COLUMNS`); only its measure phases are fitted.
    temperature_c
        Water temperature per channel (a dict; a single probe may serve every channel), or one
        value for all. None leaves the temperature columns NaN. [°C]
    oxygen_pct
        The same readings in % air saturation per channel, for the oxygen floor; None leaves
        ``o2_min_pct_air_sat`` NaN. [% air saturation]
    settings
        Lab settings: ``r2_min``, ``slope_relative_se_max``, ``noise_ratio_max``,
        ``min_points_per_phase``, ``sensor_noise_mg_l``.

    Returns
    -------
    One row per (channel, measure phase) with the columns of :data:`SLOPE_COLUMNS`, sorted by
    channel and cycle:

    ``n_points`` finite readings; ``slope_mg_l_s`` [mg L⁻¹ s⁻¹] (negative = decline),
    ``slope_se_mg_l_s`` its standard error, ``r2``; ``residual_sd_mg_l`` [mg/L];
    ``relative_se`` = SE / |slope|; ``noise_ratio`` = residual SD / ``sensor_noise_mg_l``;
    ``curvature_t``, the t statistic of the quadratic term when a second-degree polynomial is
    fitted to the same readings, and ``curvature_slope_change``, the change of the quadratic
    fit's slope from the phase's first to its last reading as a share of |slope|; ``o2_start_mg_l``,
    ``o2_end_mg_l`` and ``o2_min_mg_l``, the fitted line at the phase's first and last reading
    and the lower of the two (from the line, so that one noisy reading does not decide the
    oxygen floor); ``o2_min_pct_air_sat`` the same in % air saturation, each end converted with
    the ratio of ``oxygen_pct`` to concentration of the reading at that end; ``temperature_mean_c``
    and ``temperature_change_c`` (highest minus lowest reading in the phase) [°C];
    ``accepted`` and ``rejected_by`` (rule codes joined by ",", "" when accepted). Statistics
    that need more readings than a phase has (a slope needs 2, its SE and R² 3, the quadratic
    term 4) are NaN, and such a phase is rejected with PHASE_TOO_FEW_POINTS.

    Notes
    -----
    Ordinary least squares with centred sums per phase: b = Sxy / Sxx,
    SE(b) = √(SSres / (n − 2) / Sxx), R² = Sxy² / (Sxx Syy), SSres = Syy − b Sxy
    (e.g. Draper & Smith 1998, ch. 1). The quadratic term is fitted on the polynomial
    p₂ = u² − (Σu³/Σu²) u − Σu²/n, orthogonal to 1 and u (u = t − t̄), so its coefficient and t
    statistic equal those of t² in y = a + b t + c t² (Draper & Smith 1998, ch. 12).

    **Acceptance.** A phase is accepted when

        n ≥ min_points_per_phase  and  relative_se ≤ slope_relative_se_max
        and (R² ≥ r2_min  or  noise_ratio ≤ noise_ratio_max).

    R² alone misjudges phases: for a straight line R² = 1 / (1 + (n − 2) · relative_se²), so a
    slope that the readings pin down well (small relative SE) still has a low R² when the whole
    fall over the phase is small against the sensor's noise, as in a large swim-tunnel
    respirometer with a small fish; and a large, clean fall passes R² even when a burst of
    activity scatters the readings. The rule therefore asks two questions: is the slope precise
    (relative SE, always), and is the scatter about the line either small against the fall (R²)
    or no more than the sensor's own noise (noise ratio)? A small noisy slope whose scatter is
    sensor noise is accepted when its SE is small enough; a big clean slope is accepted by R²;
    a small slope whose scatter exceeds the sensor's is not. With the default settings
    (30 points, R² 0.95, 5 %) R² ≥ 0.95 already implies relative SE ≤ 4.3 %, so the rule equals
    "R² ≥ r2_min, or relative SE and noise ratio both within limits"; it differs only when a lab
    allows phases of fewer than about 25 readings, where a high R² no longer guarantees a
    precise slope. ``rejected_by`` lists every failed test: PHASE_TOO_FEW_POINTS, or those of
    PHASE_NOISY_SLOPE, PHASE_POOR_FIT and PHASE_EXCESS_SCATTER (the last two together when
    neither route passed). Thresholds are common practice (see :mod:`swimlab.settings`).
    """
    t = _time(time_s)
    n_read = t.size
    oxygen = _channels("oxygen_mg_l", oxygen_mg_l, n_read)
    pct = _channels("oxygen_pct", oxygen_pct, n_read) if oxygen_pct is not None else None
    if pct is not None:
        missing = sorted(set(oxygen) - set(pct))
        if missing:
            raise InputError(f"oxygen_pct lacks channels {missing}", field="oxygen_pct")
    seg = _Segments(phases, t)
    min_points = int(settings.min_points_per_phase)
    duration = seg.last_t - seg.first_t

    # Temperature sums once per probe (one probe may serve every channel).
    probe_of: dict[str, int | None] = {}
    probes: dict[int, np.ndarray] = {}
    for channel in oxygen:
        temp = _temperature_for(temperature_c, channel, n_read)
        if temp is None:
            probe_of[channel] = None
            continue
        key = id(temp) if not isinstance(temperature_c, Mapping) else id(
            temperature_c.get(channel, next(iter(temperature_c.values()))))
        probe_of[channel] = key
        probes.setdefault(key, temp)
    seg.powers()  # shared by the channels' threads: computed once, before them
    keys = list(probes)
    by_probe = dict(zip(keys, each_channel(lambda k: _temperature_stats(seg, probes[k]), keys), strict=True))
    temp_stats = {c: None if k is None else by_probe[k] for c, k in probe_of.items()}

    def one(channel: str) -> dict[str, np.ndarray]:
        y = oxygen[channel]
        m = _moments(seg, y)
        n, sxx, sxy, syy = m["n"], m["sxx"], m["sxy"], m["syy"]
        slope, o2_start, o2_end = _fitted_ends(seg, m)
        with np.errstate(invalid="ignore", divide="ignore"):
            enough = n >= 3
            ss_res = np.clip(syy - slope * sxy, 0.0, None)
            s2 = np.where(enough, ss_res / (n - 2), np.nan)
            se = np.sqrt(s2 / sxx)
            r2 = np.where(enough, np.where(syy > 0, sxy * sxy / (sxx * syy), 0.0), np.nan)
            resid_sd = np.sqrt(s2)
            rel_se = se / np.abs(slope)
            alpha = m["su3"] / sxx
            spp = m["su4"] - alpha * m["su3"] - sxx * sxx / n
            spy = m["su2y"] - alpha * sxy
            c = spy / spp
            ss_res2 = np.clip(ss_res - c * spy, 0.0, None)
            s2_quad = np.where(n >= 4, ss_res2 / (n - 3), np.nan)
            curv_t = np.where(s2_quad > 0, c / np.sqrt(s2_quad / spp), np.where(c == 0, 0.0, np.inf * np.sign(c)))
            curv_t = np.where(n >= 4, curv_t, np.nan)
            curv_change = 2.0 * c * duration / np.abs(slope)
        if pct is not None:
            pct_min = _pct_of_fit(seg, y, pct[channel], o2_start, o2_end)
        else:
            pct_min = np.full(seg.size, np.nan)
        stats = temp_stats[channel]
        t_mean, t_change = stats if stats is not None else (np.full(seg.size, np.nan),) * 2

        noise_ratio = resid_sd / float(settings.sensor_noise_mg_l)
        too_few = n < max(min_points, 3)
        with np.errstate(invalid="ignore"):
            noisy = ~(rel_se <= settings.slope_relative_se_max)
            shape_fail = ~(r2 >= settings.r2_min) & ~(noise_ratio <= settings.noise_ratio_max)
        accepted = ~too_few & ~noisy & ~shape_fail
        codes = np.full(seg.size, "", dtype=object)
        codes[~too_few & noisy] = "PHASE_NOISY_SLOPE"
        codes[~too_few & noisy & shape_fail] = "PHASE_NOISY_SLOPE,PHASE_POOR_FIT,PHASE_EXCESS_SCATTER"
        codes[~too_few & ~noisy & shape_fail] = "PHASE_POOR_FIT,PHASE_EXCESS_SCATTER"
        codes[too_few] = "PHASE_TOO_FEW_POINTS"
        return {
            "channel": np.full(seg.size, channel, dtype=object), "cycle": seg.cycle,
            "start_s": seg.first_t, "end_s": seg.last_t, "n_points": n.astype(np.int64),
            "slope_mg_l_s": slope, "slope_se_mg_l_s": se, "r2": r2, "residual_sd_mg_l": resid_sd,
            "relative_se": rel_se, "noise_ratio": noise_ratio, "curvature_t": curv_t,
            "curvature_slope_change": curv_change, "o2_start_mg_l": o2_start, "o2_end_mg_l": o2_end,
            "o2_min_mg_l": np.fmin(o2_start, o2_end), "o2_min_pct_air_sat": pct_min,
            "temperature_mean_c": t_mean, "temperature_change_c": t_change, "accepted": accepted,
            "rejected_by": codes,
        }

    parts = each_channel(one, sorted(oxygen))

    out = pd.DataFrame({name: np.concatenate([part[name] for part in parts]) for name in SLOPE_COLUMNS},
                       columns=SLOPE_COLUMNS)
    if not (np.diff(seg.cycle) > 0).all():  # a hand-edited table: order rows by cycle
        out = out.sort_values(["channel", "cycle"], kind="stable").reset_index(drop=True)
    return out


def steepest_window_slopes(time_s: Any, oxygen_mg_l: Mapping[str, Any], phases: pd.DataFrame,
                           window_s: float) -> pd.DataFrame:
    """Steepest least-squares slope over any window of ``window_s`` inside each measure phase.

    Parameters
    ----------
    time_s
        Time of each reading since the first, strictly increasing. [s]
    oxygen_mg_l
        Oxygen concentration per channel; missing readings as NaN. [mg/L]
    phases
        Phase table (:data:`PHASE_COLUMNS`).
    window_s
        Length of the window: it holds the readings from its first reading's time to that time
        plus ``window_s``. [s]

    Returns
    -------
    One row per (channel, measure phase), columns :data:`WINDOW_COLUMNS`: the window's start
    time, ``n_windows`` (windows that fit in the phase; 0 leaves slope and R² NaN because the
    phase is shorter than the window), the most negative slope [mg L⁻¹ s⁻¹] and its R².

    Notes
    -----
    A window may start at any reading of the phase and must end within it. Each window's slope
    is the least-squares slope of its readings (at least 3 finite), from differences of
    cumulative sums of readings centred on their phase. The steepest slope of a sliding window
    within a closed phase estimates maximum MO2 during activity (Zhang, Gilbert & Farrell
    2019).
    """
    t = _time(time_s)
    window = float(_validate.positive("window_s", window_s, "s"))
    oxygen = _channels("oxygen_mg_l", oxygen_mg_l, t.size)
    seg = _Segments(phases, t)
    frame = _window_frame(seg.tg, seg.tc, seg.offsets, seg.lengths, window)
    def one(channel: str) -> pd.DataFrame:
        yg = oxygen[channel][seg.index]
        gap = ~np.isfinite(seg.sum(yg))
        if gap.any() and not gap.all():
            # phases without a gap on the fast path; those with one again, with weights
            best, count, start, r2 = _best_windows(seg.tc, np.nan_to_num(yg), seg.offsets, seg.lengths, frame)
            lengths = seg.lengths[gap]
            offsets = np.cumsum(lengths) - lengths
            sub = np.arange(lengths.sum()) + np.repeat(seg.offsets[gap] - offsets, lengths)
            sub_frame = _window_frame(seg.tg[sub], seg.tc[sub], offsets, lengths, window)
            for full, part in zip((best, count, start, r2),
                                  _best_windows(seg.tc[sub], yg[sub], offsets, lengths, sub_frame), strict=True):
                full[gap] = part
        else:
            best, count, start, r2 = _best_windows(seg.tc, yg, seg.offsets, seg.lengths, frame)
        return pd.DataFrame({
            "channel": channel,
            "cycle": seg.cycle,
            "window_s": window,
            "window_start_s": start,
            "n_windows": count,
            "slope_mg_l_s": best,
            "r2": r2,
        }, columns=WINDOW_COLUMNS)

    out = pd.concat(each_channel(one, list(oxygen)), ignore_index=True)
    return out.sort_values(["channel", "cycle"], kind="stable").reset_index(drop=True)


def _cums(x: np.ndarray) -> np.ndarray:
    out = np.empty(x.size + 1)
    out[0] = 0.0
    np.cumsum(x, out=out[1:])
    return out


def _window_frame(tg: np.ndarray, tc: np.ndarray, offsets: np.ndarray, lengths: np.ndarray,
                  window: float) -> dict[str, np.ndarray]:
    """Window ends and time sums of every window start (shared by channels)."""
    total = tg.size
    seg_end = np.repeat(offsets + lengths, lengths)
    tol = 1e-9 * max(window, 1.0)
    j = np.searchsorted(tg, tg + window - tol, side="left")
    complete = j < seg_end
    j = np.minimum(j + 1, total)  # exclusive end: the reading at or just past start + window
    nn = (j - np.arange(total)).astype(float)
    c_u = _cums(tc)
    su = c_u[j] - c_u[:-1]
    c_uu = _cums(tc * tc)
    sxx = (c_uu[j] - c_uu[:-1]) - su * su / nn
    return {"j": j, "complete": complete, "nn": nn, "su": su, "sxx": sxx, "tg": tg}


def _best_windows(tc: np.ndarray, yg: np.ndarray, offsets: np.ndarray, lengths: np.ndarray,
                  frame: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Steepest window of each run: slope, number of windows, start time, R².

    ``yg`` is changed in place (the caller passes a fresh array).
    """
    j, complete = frame["j"], frame["complete"]
    total = yg.size
    rank = np.arange(total)
    sy = np.add.reduceat(yg, offsets)

    def window_sum(x: np.ndarray) -> np.ndarray:
        c = _cums(x)
        return c[j] - c[:-1]

    if np.isfinite(sy).all():
        v = yg  # a fresh array from the caller: centre it in place
        v -= np.repeat(sy / lengths, lengths)
        nn, su, sxx = frame["nn"], frame["su"], frame["sxx"]
        sv = window_sum(v)
        sxy = window_sum(tc * v)
        sxy -= su * sv / nn
    else:
        ok = np.isfinite(yg)
        w = ok.astype(float)
        ybar = np.add.reduceat(np.where(ok, yg, 0.0), offsets) / np.maximum(np.add.reduceat(w, offsets), 1.0)
        v = np.where(ok, yg - np.repeat(ybar, lengths), 0.0)
        uw = tc * w
        nn = window_sum(w)
        su = window_sum(uw)
        sv = window_sum(v)
        with np.errstate(invalid="ignore", divide="ignore"):
            sxx = window_sum(uw * tc) - su * su / nn
            sxy = window_sum(uw * v) - su * sv / nn
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = sxy / sxx
    valid = complete & (nn >= 3) & (sxx > 0)
    masked = np.where(valid, slope, np.inf)
    best = np.minimum.reduceat(masked, offsets)
    count = np.add.reduceat(valid.view(np.int8), offsets, dtype=np.int64)
    is_best = valid & (masked == np.repeat(best, lengths))
    where = np.minimum.reduceat(np.where(is_best, rank, total), offsets)
    has = count > 0
    pick = np.where(has, where, 0)
    # Syy only for the chosen windows: gather their readings (a small share of the trace)
    w_len = np.where(has, j[pick] - pick, 0)
    w_off = np.cumsum(w_len) - w_len
    w_idx = np.arange(w_len.sum()) + np.repeat(pick - w_off, w_len)
    syy = np.zeros(offsets.size)
    if has.any():
        syy[has] = np.add.reduceat(v[w_idx] ** 2, w_off[has])
    syy = syy - sv[pick] ** 2 / nn[pick]
    with np.errstate(invalid="ignore", divide="ignore"):
        r2 = np.where(has, np.where(syy > 0, sxy[pick] ** 2 / (sxx[pick] * syy), 0.0), np.nan)
    start = np.where(has, frame["tg"][pick], np.nan)
    return np.where(has, best, np.nan), count, start, r2


# --- units ----------------------------------------------------------------------------------


def concentration_from_trace(trace_oxygen: Mapping[str, Any], unit: str, temperature_c: Mapping[str, Any] | Any,
                             salinity: float = 0.0, pressure_pa: float = 101325.0) -> dict[str, np.ndarray]:
    """Oxygen concentration of every reading, each converted at its own logged temperature.

    Parameters
    ----------
    trace_oxygen
        Oxygen readings per channel in ``unit``; missing readings as NaN. [unit]
    unit
        Unit of the readings: one of :data:`swimlab.oxygen.UNITS` or an alias.
    temperature_c
        Logged water temperature per channel (a dict; a single probe may serve every channel),
        or one value for all. [°C]
    salinity
        Practical salinity of the water. [-]
    pressure_pa
        Barometric pressure at the water's surface. [Pa]

    Returns
    -------
    dict channel -> concentration [mg/L]; a reading that is missing, or whose temperature is
    missing, stays NaN.

    Notes
    -----
    Converted with :func:`swimlab.oxygen.convert` (Garcia & Gordon 1992 solubility with the
    barometric and water-vapour correction). Every reading uses its own temperature, not the
    phase's mean: a temperature change within a phase changes the solubility and so the
    concentration that a given % air saturation represents. Every unit of a logger is a
    constant multiple of mg/L at fixed temperature, salinity and pressure, so the factor is
    computed once per distinct logged temperature (loggers log temperature at a fixed
    resolution, and it changes slowly: runs of equal readings are found first) and applied to
    the readings.
    """
    from swimlab import oxygen as ox

    source = ox.canonical_unit(unit, "unit")
    if not isinstance(trace_oxygen, Mapping) or not trace_oxygen:
        raise InputError("trace_oxygen must be a dict of channel -> readings with at least one channel",
                         field="trace_oxygen")
    n = np.asarray(trace_oxygen[next(iter(trace_oxygen))]).size
    values = _channels("oxygen", trace_oxygen, n)
    cache: dict[int, tuple] = {}

    def factors(channel: str) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
        """Per run of equal temperatures: mg/L per unit, % air saturation per unit, run length."""
        raw = temperature_c.get(channel) if isinstance(temperature_c, Mapping) else temperature_c
        temp = _temperature_for(temperature_c, channel, n)
        if temp is None:
            raise InputError(f"converting channel {channel!r} from {source!r} to mg/L needs the water "
                             f"temperature; none was given", field=f"temperature_c.{channel}")
        key = id(raw) if raw is not None else id(temp)
        if key in cache:
            return cache[key]
        change = np.flatnonzero(temp[1:] != temp[:-1]) + 1  # NaN != NaN: each NaN is its own run
        starts = np.concatenate(([0], change))
        lengths = np.diff(np.concatenate((starts, [n])))
        run_t = temp[starts]
        inverse, levels = pd.factorize(run_t, sort=False, use_na_sentinel=True)
        levels = np.asarray(levels, dtype=float)
        if levels.size == 0:
            raise InputError(f"channel {channel!r} has no finite temperature reading",
                             field=f"temperature_c.{channel}")
        try:
            to_mg = np.asarray(ox.convert(np.ones(levels.size), source, ox.MG_L, levels, salinity,
                                          pressure_pa), dtype=float)
            to_pct = (np.ones(levels.size) if source == ox.PERCENT_AIR_SATURATION else
                      np.asarray(ox.convert(np.ones(levels.size), source, ox.PERCENT_AIR_SATURATION,
                                            levels, salinity, pressure_pa), dtype=float))
        except InputError as exc:
            raise InputError(f"channel {channel!r}: {exc}", field=f"temperature_c.{channel}") from exc
        to_mg = np.append(to_mg, np.nan)[inverse]  # sentinel -1 -> NaN (missing temperature)
        to_pct = np.append(to_pct, np.nan)[inverse]
        cache[key] = (to_mg, None if source == ox.PERCENT_AIR_SATURATION else to_pct, lengths)
        return cache[key]

    def first(mask: np.ndarray) -> int:
        return int(np.flatnonzero(mask)[0])

    def one(channel: str) -> np.ndarray:
        y = values[channel]
        low = np.fmin.reduce(y)  # NaN (missing readings) skipped; NaN only when all are missing
        if low < 0:
            i = first(y < 0)
            raise InputError(f"channel {channel!r} reading {i + 1} is {y[i]!r} {source}; oxygen "
                             f"cannot be negative", field=f"oxygen.{channel}", row=i + 1)
        if source == ox.MG_L:
            return y.copy()
        to_mg, to_pct, lengths = factors(channel)
        if to_pct is None:
            too_high = np.fmax.reduce(y) > ox.MAX_PERCENT_AIR_SATURATION
            over = y > ox.MAX_PERCENT_AIR_SATURATION if too_high else None
        else:
            over = y * np.repeat(to_pct, lengths) > ox.MAX_PERCENT_AIR_SATURATION
            over = over if over.any() else None
        if over is not None:
            i = first(over)
            raise InputError(
                f"channel {channel!r} reading {i + 1} is {y[i]!r} {source}, beyond "
                f"{ox.MAX_PERCENT_AIR_SATURATION:g} % air saturation; check the unit of the column",
                field=f"oxygen.{channel}", row=i + 1)
        result = np.repeat(to_mg, lengths)
        result *= y
        return result

    if source != ox.MG_L:
        # The factors once per probe, before the channels' threads (one probe may serve all).
        each_channel(factors, list(values))
    channels = list(values)
    return dict(zip(channels, each_channel(one, channels), strict=True))


# --- flags ----------------------------------------------------------------------------------


def _where(channel: str, cycle: int) -> str:
    return f"chamber {channel}, cycle {cycle}"


def phase_flags(
    slopes: pd.DataFrame,
    phases: pd.DataFrame,
    *,
    time_s: Any = None,
    oxygen_pct: Mapping[str, Any] | None = None,
    temperature_c: Any = None,
    settings: LabSettings = DEFAULT_SETTINGS,
) -> list[dict]:
    """Flags of the measure phases: fit quality, oxygen floor, flush, temperature drift.

    Parameters
    ----------
    slopes
        Table from :func:`fit_slopes`.
    phases
        The phase table the slopes were fitted on.
    time_s
        Time of each reading; needed with ``oxygen_pct`` for the flush check. [s]
    oxygen_pct
        Oxygen per channel in % air saturation; None skips FLUSH_NOT_RESTORED. [% air saturation]
    temperature_c
        Accepted for symmetry with :func:`fit_slopes`; the phase temperatures are read from
        ``slopes``. [°C]
    settings
        Lab settings with the thresholds.

    Returns
    -------
    list of :func:`swimlab.checks.flag` dicts, scope ``"phase"``.

    Notes
    -----
    - PHASE_TOO_FEW_POINTS, PHASE_NOISY_SLOPE, PHASE_POOR_FIT, PHASE_EXCESS_SCATTER: one flag per
      code in ``rejected_by``; an accepted phase whose scatter exceeds ``noise_ratio_max`` times
      the sensor noise (accepted on R²) gets PHASE_EXCESS_SCATTER as a warning.
    - PHASE_CURVED: |curvature t| > ``curvature_t_max`` and the quadratic fit's slope changes by
      more than ``curvature_slope_change_max`` of the slope across the phase (both, so that a
      trivial but well-measured curvature is not flagged).
    - OXYGEN_BELOW_FLOOR: the fitted line's lowest % air saturation in the phase is below
      ``oxygen_floor_pct_air_sat``.
    - FLUSH_NOT_RESTORED: the mean reading of the last 10 s of the cycle's flush is below
      ``flush_restore_pct_air_sat`` (the level the flush left in the respirometer); cycles without
      a flush are not checked.
    - TEMPERATURE_DRIFT_PHASE: highest minus lowest temperature reading in the phase is above
      ``temperature_drift_phase_max_c``.
    Thresholds are common practice (:mod:`swimlab.settings`).
    """
    flags: list[dict] = []
    if slopes.empty:
        return flags
    s = settings
    ch = slopes["channel"].to_numpy()
    cy = slopes["cycle"].to_numpy()

    def add(code: str, mask: np.ndarray, text) -> None:
        for k in np.flatnonzero(mask):
            flags.append(checks.flag(code, text(k), scope="phase", where=_where(ch[k], int(cy[k])),
                                     channel=str(ch[k]), cycle=int(cy[k])))

    rejected = slopes["rejected_by"].to_numpy().astype(str)
    n = slopes["n_points"].to_numpy()
    r2 = slopes["r2"].to_numpy()
    rse = slopes["relative_se"].to_numpy()
    ratio = slopes["noise_ratio"].to_numpy()
    accepted = slopes["accepted"].to_numpy().astype(bool)
    rejected_u = rejected.astype("U")

    def contains(code: str) -> np.ndarray:
        return np.char.find(rejected_u, code) >= 0

    add("PHASE_TOO_FEW_POINTS", contains("PHASE_TOO_FEW_POINTS"),
        lambda k: f"{int(n[k])} readings in the measure phase, fewer than {s.min_points_per_phase}; "
                  f"no slope is used.")
    add("PHASE_NOISY_SLOPE", contains("PHASE_NOISY_SLOPE"),
        lambda k: f"Slope standard error is {100 * rse[k]:.1f} % of the slope, above "
                  f"{100 * s.slope_relative_se_max:g} %; the phase is not used.")
    add("PHASE_POOR_FIT", contains("PHASE_POOR_FIT"),
        lambda k: f"R² {r2[k]:.3f} < {s.r2_min:g} and scatter {ratio[k]:.1f}× the sensor noise "
                  f"(limit {s.noise_ratio_max:g}×); the phase is not used.")
    scatter_rejected = contains("PHASE_EXCESS_SCATTER")
    add("PHASE_EXCESS_SCATTER", scatter_rejected,
        lambda k: f"Residual scatter {ratio[k]:.1f}× the sensor noise of {s.sensor_noise_mg_l:g} mg/L "
                  f"(limit {s.noise_ratio_max:g}×) with R² {r2[k]:.3f}; the phase is not used.")
    with np.errstate(invalid="ignore"):
        loud = accepted & (ratio > s.noise_ratio_max)
    add("PHASE_EXCESS_SCATTER", loud,
        lambda k: f"Residual scatter {ratio[k]:.1f}× the sensor noise of {s.sensor_noise_mg_l:g} mg/L "
                  f"(limit {s.noise_ratio_max:g}×); accepted on R² {r2[k]:.3f}, but the decline "
                  f"was not steady.")
    curv_t = slopes["curvature_t"].to_numpy()
    curv_change = slopes["curvature_slope_change"].to_numpy()
    with np.errstate(invalid="ignore"):
        curved = (n >= s.min_points_per_phase) & (np.abs(curv_t) > s.curvature_t_max) & (
            np.abs(curv_change) > s.curvature_slope_change_max)
    add("PHASE_CURVED", curved,
        lambda k: f"Quadratic term t = {curv_t[k]:.1f} (limit {s.curvature_t_max:g}); the slope "
                  f"changes by {100 * curv_change[k]:+.0f} % across the phase (limit "
                  f"{100 * s.curvature_slope_change_max:g} %).")
    pct_min = slopes["o2_min_pct_air_sat"].to_numpy()
    with np.errstate(invalid="ignore"):
        low = pct_min < s.oxygen_floor_pct_air_sat
    add("OXYGEN_BELOW_FLOOR", low,
        lambda k: f"Oxygen fell to {pct_min[k]:.1f} % air saturation, below the floor of "
                  f"{s.oxygen_floor_pct_air_sat:g} %.")
    t_change = slopes["temperature_change_c"].to_numpy()
    with np.errstate(invalid="ignore"):
        drift = t_change > s.temperature_drift_phase_max_c
    add("TEMPERATURE_DRIFT_PHASE", drift,
        lambda k: f"Temperature changed by {t_change[k]:.2f} °C within the phase (limit "
                  f"{s.temperature_drift_phase_max_c:g} °C).")
    if oxygen_pct is not None and time_s is not None:
        flags.extend(_flush_flags(time_s, oxygen_pct, phases, slopes, s))
    return flags


def _flush_flags(time_s: Any, oxygen_pct: Mapping[str, Any], phases: pd.DataFrame,
                 slopes: pd.DataFrame, s: LabSettings) -> list[dict]:
    t = _time(time_s)
    _check_phases(phases, t.size)
    flush = phases[phases["phase"].to_numpy() == "flush"]
    if flush.empty:
        return []
    stop = flush["i_stop"].to_numpy(dtype=np.int64)
    start = flush["i_start"].to_numpy(dtype=np.int64)
    # first reading of the last _FLUSH_END_WINDOW_S of each flush
    tail_start = np.searchsorted(t, t[stop - 1] - _FLUSH_END_WINDOW_S, side="left")
    tail_start = np.maximum(tail_start, start)
    cycles = flush["cycle"].to_numpy()
    measured = set(zip(slopes["channel"].astype(str), slopes["cycle"].astype(int), strict=True))
    lengths = stop - tail_start
    offsets = np.cumsum(lengths) - lengths
    tail = np.arange(lengths.sum()) + np.repeat(tail_start - offsets, lengths)
    flags = []
    for channel, values in _channels("oxygen_pct", oxygen_pct, t.size).items():
        v = values[tail]
        ok = np.isfinite(v)
        count = np.add.reduceat(ok.astype(float), offsets)
        with np.errstate(invalid="ignore", divide="ignore"):
            level = np.add.reduceat(np.where(ok, v, 0.0), offsets) / count
            short = level < s.flush_restore_pct_air_sat
        for k in np.flatnonzero(short):
            cycle = int(cycles[k])
            if (channel, cycle) not in measured:
                continue
            flags.append(checks.flag(
                "FLUSH_NOT_RESTORED",
                f"The flush left oxygen at {level[k]:.1f} % air saturation, below "
                f"{s.flush_restore_pct_air_sat:g} %; the measure phase starts from depleted water.",
                scope="phase", where=_where(channel, cycle), channel=channel, cycle=cycle))
    return flags
