"""Plotly figure builders: tables and arrays in, a figure out.

No streamlit here, and no science: every number drawn comes from
:func:`swimlab.analysis.analyse` (or the arrays it holds). Long oxygen traces are drawn
downsampled (MinMax-LTTB, Steinarsson 2013 with a min-max preselection; ``tsdownsample``) so that a
72-hour trace stays responsive in the browser; the full data are used for every number.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import plotly.graph_objects as go

DEFAULT_MAX_POINTS = 4000
"""Points drawn per channel of an oxygen trace."""

PHASE_COLOURS = {
    "flush": "rgba(66, 133, 244, 0.10)",
    "wait": "rgba(150, 150, 150, 0.10)",
    "measure": "rgba(255, 193, 7, 0.16)",
}
"""Band colours of the flush / wait / measure phases (our own choice)."""

CHANNEL_COLOURS = ["#1f5fa8", "#c0392b", "#1e8449", "#7d3c98", "#b9770e", "#117a65", "#5d6d7e", "#a93226"]
"""Line colours of the oxygen channels, in channel order (our own choice)."""

FIT_COLOURS = {"exponential": "#1f5fa8", "power": "#c0392b"}

SVG_CONFIG = {"toImageButtonOptions": {"format": "svg", "scale": 1}, "displaylogo": False}
"""Plotly config: the camera button saves the figure as SVG in the browser."""


def downsample_indices(x: np.ndarray, y: np.ndarray, n_out: int = DEFAULT_MAX_POINTS) -> np.ndarray:
    """Return the indices of at most ``n_out`` points that keep the trace's visible shape.

    Uses MinMax-LTTB from ``tsdownsample`` (NaN-aware when ``y`` holds gaps) and always keeps
    the lowest and highest reading. ``x`` must be increasing. Short series are returned whole.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape:
        raise ValueError(f"x and y must have the same length; got {x.size} and {y.size}")
    if x.size <= n_out or n_out < 3:
        return np.arange(x.size)
    from tsdownsample import MinMaxLTTBDownsampler, NaNMinMaxLTTBDownsampler

    finite_x = np.isfinite(x)
    if not finite_x.all():
        keep = np.flatnonzero(finite_x)
        sub = downsample_indices(x[keep], y[keep], n_out)
        return keep[sub]
    has_gaps = bool(np.isnan(y).any())
    sampler = NaNMinMaxLTTBDownsampler() if has_gaps else MinMaxLTTBDownsampler()
    idx = np.asarray(sampler.downsample(x, y, n_out=int(n_out) - 2), dtype=np.int64)
    # LTTB picks by triangle area, which may drop the lowest reading (the one nearest the oxygen
    # floor): always draw the lowest and highest readings too.
    if has_gaps and np.isfinite(y).any():
        extremes = [int(np.nanargmin(y)), int(np.nanargmax(y))]
    elif not has_gaps:
        extremes = [int(np.argmin(y)), int(np.argmax(y))]
    else:
        extremes = []
    return np.unique(np.concatenate([idx, np.asarray(extremes, dtype=np.int64)]))


def _phase_band_traces(phases: pd.DataFrame, x_scale: float) -> list[go.Scatter]:
    """One filled trace per phase kind (flush / wait / measure), drawn on a hidden 0-1 axis."""
    traces = []
    if phases is None or phases.empty:
        return traces
    for kind, colour in PHASE_COLOURS.items():
        part = phases[phases["phase"] == kind]
        if part.empty:
            continue
        s = part["start_s"].to_numpy(dtype=float) / x_scale
        e = part["end_s"].to_numpy(dtype=float) / x_scale
        gap = np.full(s.size, np.nan)
        xs = np.column_stack([s, s, e, e, s, gap]).ravel().astype(np.float32)
        ys = np.tile(np.array([0, 1, 1, 0, 0, np.nan], dtype=np.float32), s.size)
        traces.append(go.Scatter(
            x=xs, y=ys, yaxis="y2", mode="lines", fill="toself", fillcolor=colour,
            line={"width": 0}, name=kind, legendgroup="phases", hoverinfo="name",
            hoveron="fills", showlegend=True,
        ))
    return traces


def _fit_line_traces(measure: pd.DataFrame, x_scale: float, colours: Mapping[str, str],
                     intercept_at_phase_start: bool, channel_index: Mapping[str, int]) -> list[go.Scatter]:
    """Fitted straight lines of the measure phases, used and not used, with R² on hover.

    Each phase is three points (start, middle, end) and a gap. ``customdata`` per point is
    ``[cycle, r2, mo2_mg_kg_h, channel number]`` (numbers, so the figure stays compact); see
    :func:`phase_of_point`.
    """
    if measure is None or measure.empty or "slope_mg_l_s" not in measure:
        return []
    ends_given = {"o2_start_mg_l", "o2_end_mg_l"} <= set(measure.columns)
    if not ends_given and "intercept_mg_l" not in measure:
        return []
    traces = []
    used_col = measure["used"] if "used" in measure else pd.Series(True, index=measure.index)
    for used in (True, False):
        part = measure[used_col.astype(bool) == used]
        anchor = part["o2_start_mg_l"] if ends_given else part["intercept_mg_l"]
        part = part[np.isfinite(part["slope_mg_l_s"].astype(float)) & np.isfinite(anchor.astype(float))]
        for channel, rows in part.groupby("channel", sort=True):
            s = rows["start_s"].to_numpy(dtype=float)
            e = rows["end_s"].to_numpy(dtype=float)
            n = s.size
            if ends_given:  # the fitted values at the phase's first and last reading
                y0 = rows["o2_start_mg_l"].to_numpy(dtype=float)
                y1 = rows["o2_end_mg_l"].to_numpy(dtype=float)
            else:
                slope = rows["slope_mg_l_s"].to_numpy(dtype=float)
                t0 = s if intercept_at_phase_start else np.zeros(n)
                y0 = rows["intercept_mg_l"].to_numpy(dtype=float) + slope * (s - t0)
                y1 = y0 + slope * (e - s)
            gap = np.full(n, np.nan)
            xs = (np.column_stack([s, 0.5 * (s + e), e, gap]).ravel() / x_scale).astype(np.float32)
            ys = np.column_stack([y0, 0.5 * (y0 + y1), y1, gap]).ravel().astype(np.float32)
            mo2 = rows["mo2_mg_kg_h"].to_numpy(dtype=float) if "mo2_mg_kg_h" in rows else np.full(n, np.nan)
            per_phase = np.column_stack([rows["cycle"].to_numpy(dtype=float), rows["r2"].to_numpy(dtype=float), mo2,
                                         np.full(n, float(channel_index.get(str(channel), -1)))])
            custom = np.repeat(per_phase, 4, axis=0).astype(np.float32)
            custom[3::4] = np.nan
            extra = {}
            if not used:
                why = [_why_not_used(row) for row in rows.itertuples(index=False)]
                extra["text"] = [t for w in why for t in (w, w, w, "")]
            name = f"fit {channel}" + ("" if used else " (not used)")
            traces.append(go.Scatter(
                x=xs, y=ys, mode="lines+markers", name=name, connectgaps=False,
                line={"color": _shade(colours.get(str(channel), "#333333"), 0.55), "width": 3.5 if used else 2.5,
                      "dash": "solid" if used else "dot"},
                marker={"size": 4, "opacity": 0.6},
                customdata=custom, legendgroup=f"fit-{used}",
                hovertemplate=(f"chamber {channel}, cycle %{{customdata[0]:.0f}}<br>R² %{{customdata[1]:.4f}}"
                               "<br>MO2 %{customdata[2]:.1f} mg O2/kg/h"
                               + ("" if used else "<br>not used: %{text}") + "<extra></extra>"),
                **extra,
            ))
    return traces


def phase_of_point(customdata: Sequence[float] | None, channels: Sequence[str]) -> tuple[str, int] | None:
    """The (channel, cycle) of a point of a fitted line, from its ``customdata`` (None for other points).

    ``channels`` are the channel labels in the order they were given to :func:`trace_figure`.
    """
    if customdata is None or len(customdata) < 4:
        return None
    try:
        cycle, index = float(customdata[0]), float(customdata[3])
    except (TypeError, ValueError):
        return None
    if not (np.isfinite(cycle) and np.isfinite(index)) or not 0 <= int(index) < len(channels):
        return None
    return str(channels[int(index)]), int(cycle)


def _why_not_used(row: Any) -> str:
    parts = []
    if bool(getattr(row, "excluded", False)):
        parts.append(f"excluded ({getattr(row, 'exclusion_reason', '') or 'no reason'})")
    rejected = getattr(row, "rejected_by", "")
    if isinstance(rejected, list | tuple):
        rejected = ", ".join(map(str, rejected))
    if rejected and str(rejected) != "nan":
        parts.append(f"rejected by {rejected}")
    return "; ".join(parts) or "not used"


def trace_figure(
    time_s: np.ndarray,
    series: Mapping[str, np.ndarray],
    *,
    unit: str = "mg/L",
    phases: pd.DataFrame | None = None,
    measure: pd.DataFrame | None = None,
    floor: float | None = None,
    max_points: int = DEFAULT_MAX_POINTS,
    intercept_at_phase_start: bool = False,
    highlight: tuple[str, int] | None = None,
    title: str | None = None,
) -> go.Figure:
    """Draw oxygen against time, one line per channel, with phases shaded and fitted lines.

    Parameters
    ----------
    time_s
        Time on the trace clock. [s]
    series
        Oxygen per channel, on ``time_s``. [``unit``]
    unit
        Unit of ``series`` for the axis title (the fitted lines are in mg/L: pass mg/L series
        when ``measure`` is given).
    phases
        Table with ``cycle, phase, start_s, end_s`` (flush / wait / measure bands).
    measure
        Table with ``channel, cycle, start_s, end_s, slope_mg_l_s, r2, used`` and either the
        fitted values at the phase's ends ``o2_start_mg_l, o2_end_mg_l`` or ``intercept_mg_l``.
    floor
        Oxygen floor drawn as a dashed line. [``unit``]
    max_points
        Points drawn per channel (MinMax-LTTB downsampling); the figure says when it is downsampled.
    intercept_at_phase_start
        Whether ``intercept_mg_l`` is the fitted value at the phase's start (True) or at time 0
        of the trace clock (False).
    highlight
        (channel, cycle) of a phase to outline.
    """
    t = np.asarray(time_s, dtype=float)
    span_h = (np.nanmax(t) - np.nanmin(t)) / 3600.0 if t.size else 0.0
    x_scale, x_title = (3600.0, "Time [h]") if span_h > 3 else (60.0, "Time [min]")
    colours = {str(ch): CHANNEL_COLOURS[i % len(CHANNEL_COLOURS)] for i, ch in enumerate(series)}
    fig = go.Figure()
    for band in _phase_band_traces(phases, x_scale):
        fig.add_trace(band)
    downsampled = False
    for channel, values in series.items():
        y = np.asarray(values, dtype=float)
        if y.shape != t.shape:
            raise ValueError(f"channel {channel!r}: {y.size} oxygen values for {t.size} times")
        idx = downsample_indices(t, y, max_points)
        downsampled |= idx.size < t.size
        fig.add_trace(go.Scatter(
            x=(t[idx] / x_scale).astype(np.float32), y=y[idx].astype(np.float32), mode="lines",
            name=f"chamber {channel}",
            line={"color": _rgba(colours[str(channel)], 0.55), "width": 1.0},
            hovertemplate=f"chamber {channel}<br>%{{x:.2f}}<br>%{{y:.3f}} {unit}<extra></extra>",
        ))
    index = {str(ch): i for i, ch in enumerate(series)}
    for line in _fit_line_traces(measure, x_scale, colours, intercept_at_phase_start, index):
        fig.add_trace(line)
    if floor is not None and np.isfinite(floor):
        fig.add_hline(y=floor, line={"color": "#b03a2e", "dash": "dash", "width": 1},
                      annotation_text="oxygen floor", annotation_position="bottom right")
    if highlight is not None and measure is not None and not measure.empty:
        hit = measure[(measure["channel"].astype(str) == str(highlight[0])) & (measure["cycle"] == highlight[1])]
        for row in hit.itertuples(index=False):
            fig.add_vrect(x0=row.start_s / x_scale, x1=row.end_s / x_scale, line={"color": "#111", "width": 2},
                          fillcolor="rgba(0,0,0,0)")
    note = f" (drawn: ≤{max_points} points per chamber; numbers use every reading)" if downsampled else ""
    fig.update_layout(
        title={"text": (title or "Oxygen") + note, "font": {"size": 14}},
        xaxis={"title": x_title},
        yaxis={"title": f"Oxygen [{unit}]"},
        yaxis2={"range": [0, 1], "overlaying": "y", "visible": False, "fixedrange": True},
        hovermode="closest", template="plotly_white", height=460,
        legend={"orientation": "h", "y": -0.18}, margin={"l": 60, "r": 20, "t": 50, "b": 40},
        dragmode="zoom",
    )
    return fig


def _fish_steps(steps: pd.DataFrame, fish_id: str) -> pd.DataFrame:
    part = steps[steps["fish_id"].astype(str) == str(fish_id)] if "fish_id" in steps else steps
    return part.sort_values("corrected_speed_cm_s")


GROUP_WARNING = ("Group trial: MO2 per capita (group MO2 ÷ summed mass).<br>Schooling changes the cost of swimming: "
                 "not comparable with fish swum alone.")
"""The warning every figure of a group trial carries (see :data:`swimlab.checks.GROUP_CAVEAT`)."""


def _group_size(part: pd.DataFrame) -> int:
    """Fish in the chamber of a step table's rows (1 for a fish alone)."""
    if "n_fish" not in part or part.empty:
        return 1
    values = pd.to_numeric(part["n_fish"], errors="coerce").dropna()
    return int(values.max()) if len(values) else 1


def _mark_group(fig: go.Figure, n_fish: int) -> None:
    """Put the group-trial warning on a figure, above the plot, and say per capita on the MO2 axis."""
    if n_fish <= 1:
        return
    fig.add_annotation(text=f"⚠ {n_fish} fish swum together. {GROUP_WARNING}", xref="paper", yref="paper", x=0.0, y=1.0,
                       xanchor="left", yanchor="bottom", showarrow=False, align="left",
                       font={"size": 11, "color": "#9a3412"}, bgcolor="#fff7ed", bordercolor="#9a3412", borderwidth=1)
    fig.update_layout(margin={"t": 90})


def speed_mo2_figure(steps: pd.DataFrame, fits: Any | None, fish_id: str, *,
                     measure: pd.DataFrame | None = None, n_curve: int = 120) -> go.Figure:
    """Draw MO2 against corrected speed for one fish with both model fits and their bands.

    Parameters
    ----------
    steps
        Step table with ``fish_id, step, corrected_speed_cm_s, mo2_mg_kg_h, mo2_sd_mg_kg_h``.
    fits
        The fish's speed–metabolism fits: ``.exponential`` and ``.power`` with ``.predict(speed_m_s)``
        and ``.band(speed_m_s) -> (lo, hi)``, and ``.best`` naming the chosen model. None when no
        fit was possible.
    measure
        Optional phase table (``fish_id, step, mo2_mg_kg_h, used``) to show single phases.
    """
    part = _fish_steps(steps, fish_id)
    fig = go.Figure()
    if measure is not None and not measure.empty and {"step", "mo2_mg_kg_h"} <= set(measure.columns):
        speed_of_step = dict(zip(part["step"], part["corrected_speed_cm_s"], strict=False))
        m = measure[(measure["fish_id"].astype(str) == str(fish_id))] if "fish_id" in measure else measure
        if "used" in m:
            m = m[m["used"].astype(bool)]
        x = m["step"].map(speed_of_step)
        fig.add_trace(go.Scatter(x=x, y=m["mo2_mg_kg_h"], mode="markers", name="single phases",
                                 marker={"size": 5, "color": "rgba(90,90,90,0.45)"},
                                 hovertemplate="step %{text}<br>%{y:.1f} mg O2/kg/h<extra></extra>",
                                 text=m["step"]))
    err = part["mo2_sd_mg_kg_h"] if "mo2_sd_mg_kg_h" in part else None
    fig.add_trace(go.Scatter(
        x=part["corrected_speed_cm_s"], y=part["mo2_mg_kg_h"], mode="markers", name="step mean ± SD",
        marker={"size": 9, "color": "#111"},
        error_y={"type": "data", "array": err, "visible": True, "color": "#555"} if err is not None else None,
        hovertemplate="%{x:.1f} cm/s<br>MO2 %{y:.1f} mg O2/kg/h<extra></extra>",
    ))
    if fits is not None and len(part):
        top = float(np.nanmax(part["corrected_speed_cm_s"])) * 1.1
        grid_cm_s = np.linspace(0.0, top, n_curve)
        grid_m_s = grid_cm_s / 100.0
        best = getattr(fits, "best", None)
        best_name = best if isinstance(best, str) else getattr(best, "name", getattr(best, "model", None))
        for name in ("exponential", "power"):
            model = getattr(fits, name, None)
            if model is None:
                continue
            try:
                y = np.asarray(model.predict(grid_m_s), dtype=float)
                lo, hi = (np.asarray(v, dtype=float) for v in model.band(grid_m_s))
            except (ValueError, TypeError, ArithmeticError):
                continue
            colour = FIT_COLOURS[name]
            chosen = " (chosen)" if best_name == name else ""
            aicc = getattr(model, "aicc", None)
            label = f"{name} fit{chosen}" + (f", AICc {aicc:.1f}" if isinstance(aicc, float) and np.isfinite(aicc) else "")
            rgba = _rgba(colour, 0.14)
            fig.add_trace(go.Scatter(x=np.concatenate([grid_cm_s, grid_cm_s[::-1]]),
                                     y=np.concatenate([hi, lo[::-1]]), fill="toself", fillcolor=rgba,
                                     line={"width": 0}, hoverinfo="skip", name=f"{name} 95 % band",
                                     legendgroup=name, showlegend=True))
            fig.add_trace(go.Scatter(x=grid_cm_s, y=y, mode="lines", name=label, legendgroup=name,
                                     line={"color": colour, "width": 3 if chosen else 2,
                                           "dash": "solid" if name == "exponential" else "dash"},
                                     hovertemplate="%{x:.1f} cm/s<br>%{y:.1f} mg O2/kg/h<extra>" + name + "</extra>"))
    n_fish = _group_size(part)
    who = f"group {fish_id} ({n_fish} fish, per capita)" if n_fish > 1 else f"fish {fish_id}"
    fig.update_layout(
        title={"text": f"MO2 against corrected speed – {who}", "font": {"size": 14}},
        xaxis={"title": "Corrected speed [cm/s]", "rangemode": "tozero"},
        yaxis={"title": "MO2 per capita [mg O2/kg/h]" if n_fish > 1 else "MO2 [mg O2/kg/h]", "rangemode": "tozero"},
        template="plotly_white", height=420, legend={"orientation": "h", "y": -0.2},
        margin={"l": 60, "r": 20, "t": 50, "b": 40},
    )
    _mark_group(fig, n_fish)
    return fig


def cot_figure(steps: pd.DataFrame, results: pd.DataFrame | None, fish_id: str) -> go.Figure:
    """Draw gross and net cost of transport against corrected speed, with Uopt marked.

    ``results`` rows ``quantity == "uopt"`` (value in the unit its ``unit`` column names, cm/s
    or m/s) and ``"cotmin"`` are shown when present.
    """
    part = _fish_steps(steps, fish_id)
    fig = go.Figure()
    for column, name, dash in (("cot_gross_mg_kg_km", "gross COT", "solid"), ("cot_net_mg_kg_km", "net COT", "dot")):
        if column in part and part[column].notna().any():
            fig.add_trace(go.Scatter(x=part["corrected_speed_cm_s"], y=part[column], mode="lines+markers",
                                     name=name, line={"dash": dash, "width": 2},
                                     hovertemplate="%{x:.1f} cm/s<br>%{y:.1f} mg O2/kg/km<extra>" + name + "</extra>"))
    uopt = _result_value(results, fish_id, "uopt")
    if uopt is not None:
        value, unit = uopt
        cm_s = value * 100.0 if unit.strip() in ("m/s", "m s-1") else value
        fig.add_vline(x=cm_s, line={"color": "#1e8449", "dash": "dash", "width": 2},
                      annotation_text=f"Uopt {cm_s:.1f} cm/s", annotation_position="top")
    n_fish = _group_size(part)
    who = f"group {fish_id} ({n_fish} fish, per capita)" if n_fish > 1 else f"fish {fish_id}"
    fig.update_layout(
        title={"text": f"Cost of transport – {who}", "font": {"size": 14}},
        xaxis={"title": "Corrected speed [cm/s]", "rangemode": "tozero"},
        yaxis={"title": "Cost of transport [mg O2/kg/km]", "rangemode": "tozero"},
        template="plotly_white", height=420, legend={"orientation": "h", "y": -0.2},
        margin={"l": 60, "r": 20, "t": 50, "b": 40},
    )
    _mark_group(fig, n_fish)
    return fig


def _result_value(results: pd.DataFrame | None, fish_id: str, quantity: str) -> tuple[float, str] | None:
    if results is None or results.empty:
        return None
    hit = results[(results["fish_id"].astype(str) == str(fish_id)) & (results["quantity"] == quantity)]
    if hit.empty:
        return None
    value = float(hit["value"].iloc[0])
    if not np.isfinite(value):
        return None
    return value, str(hit["unit"].iloc[0]) if "unit" in hit else ""


def _shade(hex_colour: str, factor: float) -> str:
    """A darker shade of ``hex_colour`` (each channel times ``factor``)."""
    h = hex_colour.lstrip("#")
    r, g, b = (int(int(h[i:i + 2], 16) * factor) for i in (0, 2, 4))
    return f"#{r:02x}{g:02x}{b:02x}"


def _rgba(hex_colour: str, alpha: float) -> str:
    h = hex_colour.lstrip("#")
    r, g, b = (int(h[i:i + 2], 16) for i in (0, 2, 4))
    return f"rgba({r},{g},{b},{alpha})"


def calibration_figure(points: Sequence[Mapping[str, float]]) -> go.Figure:
    """Draw the flume's speed calibration points (motor setting against measured speed)."""
    frame = pd.DataFrame(list(points), columns=["motor_setting", "speed_cm_s"]).dropna()
    fig = go.Figure(go.Scatter(x=frame["motor_setting"], y=frame["speed_cm_s"], mode="markers+lines",
                               marker={"size": 8}, name="calibration"))
    fig.update_layout(title={"text": "Speed calibration", "font": {"size": 14}},
                      xaxis={"title": "Motor setting [controller units]"},
                      yaxis={"title": "Measured speed [cm/s]", "rangemode": "tozero"},
                      template="plotly_white", height=300, margin={"l": 60, "r": 20, "t": 40, "b": 40})
    return fig


def figure_payload_bytes(fig: go.Figure) -> int:
    """Return the size of the figure's JSON as sent to the browser. [bytes]"""
    return len(fig.to_json().encode("utf-8"))


# --------------------------------------------------------------------------------------------
# Protocols beyond the step test (each figure's title names its protocol)
# --------------------------------------------------------------------------------------------

PROTOCOL_COLOURS = ["#1f5fa8", "#c0392b", "#1e8449", "#7d3c98", "#b9770e", "#566573", "#c2185b", "#212121"]
"""Colours of the speeds or fish in the protocol figures (our own choice: eight hues far apart, so
that neighbouring speeds never share a colour family; beyond eight, lines are also dashed)."""


def _own(table: pd.DataFrame | None, fish_id: str) -> pd.DataFrame:
    if table is None or table.empty:
        return pd.DataFrame()
    return table[table["fish_id"].astype(str) == str(fish_id)]


def ramp_mo2_figure(protocol: Any, fish_id: str) -> go.Figure | None:
    """Ramp test: MO2 of each measure phase along the ramp against speed, with the ramp Umax marked.

    ``protocol`` is an analysis's :class:`swimlab.protocol_analysis.ProtocolResults`.
    """
    own = _own(protocol.tables.get("ramp_phases"), fish_id)
    if own.empty:
        return None
    speed = own["corrected_speed_cm_s"].fillna(own["set_speed_cm_s"])
    used = own["used"].astype(bool)
    fig = go.Figure()
    for mask, name, symbol in ((used, "accepted phase", "circle"), (~used, "phase not used", "circle-open")):
        if mask.any():
            fig.add_trace(go.Scatter(x=speed[mask], y=own.loc[mask, "mo2_mg_kg_h"], mode="markers", name=name,
                                     marker={"symbol": symbol, "size": 8, "color": PROTOCOL_COLOURS[0]},
                                     hovertemplate="%{x:.1f} cm/s<br>MO2 %{y:.1f}<extra></extra>"))
    summary = protocol.ramp.get(fish_id)
    if summary is not None:
        umax = summary.umax_corrected_m_s if summary.umax_corrected_m_s is not None else summary.on_set_speed.umax_m_s
        fig.add_vline(x=umax * 100, line={"dash": "dash", "color": "#333"},
                      annotation_text=f"ramp Umax {umax * 100:.1f} cm/s", annotation_position="top left")
    fig.update_layout(title=f"Ramp test, fish {fish_id}: MO2 along the ramp",
                      xaxis={"title": "Speed on the ramp, blocking-corrected [cm/s]"},
                      yaxis={"title": "MO2 [mg O2/kg/h]", "rangemode": "tozero"}, template="plotly_white")
    return fig


def epoc_figure(protocol: Any, fish_id: str) -> go.Figure | None:
    """Post-exercise recovery: MO2 after exhaustion, the fitted decay, the baseline and the EPOC between."""
    own = _own(protocol.tables.get("recovery_curve"), fish_id)
    res = protocol.recovery.get(fish_id)
    if own.empty or res is None:
        return None
    t_min = own["time_after_exhaustion_min"].to_numpy(dtype=float)
    top = float(t_min.max()) * 1.05
    grid = np.linspace(0.0, top, 200)
    base = res.baseline_mg_kg_h
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=[0, top], y=[base, base], mode="lines", name=f"baseline ({res.baseline_method})",
                             line={"dash": "dash", "color": "#555"}))
    if res.fit is not None:
        fig.add_trace(go.Scatter(x=grid, y=np.asarray(res.fit.mo2(grid * 60.0)), mode="lines",
                                 name=f"fitted {res.fit.model.replace('_', '-')} decay", fill="tonexty",
                                 fillcolor="rgba(31, 95, 168, 0.15)", line={"color": PROTOCOL_COLOURS[0], "width": 2}))
    fig.add_trace(go.Scatter(x=t_min, y=own["mo2_mg_kg_h"], mode="markers", name="accepted phase",
                             marker={"size": 7, "color": PROTOCOL_COLOURS[1]},
                             hovertemplate="%{x:.0f} min<br>MO2 %{y:.1f}<extra></extra>"))
    for t_s, label in ((res.t50_s, "50 %"), (res.t95_s, "95 %")):
        if t_s is not None and t_s / 60.0 <= top:
            fig.add_vline(x=t_s / 60.0, line={"dash": "dot", "color": "#999"}, annotation_text=label)
    fig.update_layout(title=f"Post-exercise recovery (EPOC), fish {fish_id}",
                      xaxis={"title": "Time after exhaustion [min]", "rangemode": "tozero"},
                      yaxis={"title": "MO2 [mg O2/kg/h]", "rangemode": "tozero"}, template="plotly_white")
    return fig


def kaplan_meier_figure(summary: Any) -> go.Figure | None:
    """Endurance: Kaplan–Meier share still swimming against time, one step line per set speed.

    ``summary`` is a :class:`swimlab.protocol_analysis.EnduranceSummary`; censored fish are
    marked with a cross at their time.
    """
    if summary is None or summary.kaplan_meier.empty:
        return None
    fig = go.Figure()
    limit_min = summary.time_limit_s / 60.0
    for i, (speed, part) in enumerate(summary.kaplan_meier.groupby("set_speed_cm_s", sort=True)):
        colour = PROTOCOL_COLOURS[i % len(PROTOCOL_COLOURS)]
        dash = ("solid", "dash", "dot")[(i // len(PROTOCOL_COLOURS)) % 3]
        x = np.r_[0.0, part["time_min"].to_numpy(dtype=float)]
        y = np.r_[1.0, part["share_swimming"].to_numpy(dtype=float)]
        if x[-1] < limit_min:
            x, y = np.r_[x, limit_min], np.r_[y, y[-1]]
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", line_shape="hv", name=f"{speed:g} cm/s (set)",
                                 line={"color": colour, "width": 2, "dash": dash}, legendgroup=str(speed)))
        cens = part[part["censored"] > 0]
        if len(cens):
            fig.add_trace(go.Scatter(x=cens["time_min"], y=cens["share_swimming"], mode="markers", showlegend=False,
                                     marker={"symbol": "cross-thin", "size": 11, "line": {"width": 2, "color": colour}},
                                     legendgroup=str(speed), hovertemplate="censored at %{x:.0f} min<extra></extra>"))
    fig.update_layout(title="Endurance: share of fish still swimming (Kaplan–Meier)",
                      xaxis={"title": "Time at the set speed [min]", "range": [0, limit_min * 1.03]},
                      yaxis={"title": "Share still swimming [-]", "range": [-0.03, 1.05]}, template="plotly_white")
    return fig


GAIT_NAMES = {"pectoral": "pectoral", "steady_caudal": "steady caudal", "burst_and_coast": "burst-and-coast",
              "": "gait not recorded"}
"""Legend names of the gaits an endurance trial can end in."""


def fatigue_curve_figure(summary: Any) -> go.Figure | None:
    """Endurance: time to fatigue against speed (log time), censored fish open, and the fitted curves.

    With gaits recorded (``summary.by_gait``), each gait has its own colour and its own censored
    fit where it has enough trials; the pooled fit is drawn thin and dotted for comparison.
    """
    if summary is None or summary.fish.empty:
        return None
    fish = summary.fish
    use_cor = fish["corrected_speed_cm_s"].notna().all()
    speed = fish["corrected_speed_cm_s"] if use_cor else fish["set_speed_cm_s"]
    fig = go.Figure()
    done = fish["fatigued"].astype(bool)
    by_gait = getattr(summary, "by_gait", None)
    gaits = fish["gait"].fillna("").astype(str) if "gait" in fish and by_gait is not None else pd.Series("", index=fish.index)
    order = [g for g in ("pectoral", "steady_caudal", "burst_and_coast") if (gaits == g).any()]
    order += sorted(set(gaits) - set(order) - {""}) + ([""] if (gaits == "").any() else [])
    for k, g in enumerate(order):
        colour = PROTOCOL_COLOURS[k % len(PROTOCOL_COLOURS)] if by_gait is not None else PROTOCOL_COLOURS[0]
        label = GAIT_NAMES.get(g, g) if by_gait is not None else ""
        for mask, name, symbol in ((done, "fatigued", "circle"),
                                   (~done, "still swimming at the limit (censored)", "triangle-up-open")):
            sel = mask & (gaits == g)
            if sel.any():
                fig.add_trace(go.Scatter(x=speed[sel], y=fish.loc[sel, "time_min"], mode="markers",
                                         name=f"{label}: {name}" if label else name, legendgroup=g,
                                         marker={"symbol": symbol, "size": 9, "color": colour},
                                         text=fish.loc[sel, "fish_id"],
                                         hovertemplate="%{text}: %{y:.1f} min<extra></extra>"))
        curve = by_gait.curves.get(g) if by_gait is not None else None
        if curve is not None:
            own = speed[gaits == g]
            grid = np.linspace(float(own.min()) * 0.97, float(own.max()) * 1.03, 60)
            fig.add_trace(go.Scatter(x=grid, y=np.asarray(curve.median_time_s(grid / 100.0)) / 60.0, mode="lines",
                                     name=f"{label}: median endurance (censored fit)", legendgroup=g,
                                     line={"color": colour, "width": 3}))
    fit = summary.fatigue_curve
    if fit is not None:
        grid = np.linspace(float(speed.min()) * 0.95, float(speed.max()) * 1.05, 100)
        pooled = by_gait is not None and bool(by_gait.curves)
        fig.add_trace(go.Scatter(x=grid, y=np.asarray(fit.median_time_s(grid / 100.0)) / 60.0, mode="lines",
                                 name="all fish pooled: median endurance" if pooled else "median endurance (censored fit)",
                                 line={"color": "#777" if pooled else PROTOCOL_COLOURS[1],
                                       "width": 1.5 if pooled else 2, "dash": "dot" if pooled else "solid"}))
    if by_gait is not None and by_gait.break_speed_m_s is not None and by_gait.lr_p is not None and by_gait.lr_p < 0.05:
        fig.add_vline(x=by_gait.break_speed_m_s * 100.0, line={"color": "#555", "dash": "dashdot", "width": 1},
                      annotation_text=f"curves meet at {by_gait.break_speed_m_s * 100:.0f} cm/s",
                      annotation_position="top")
    x_ends = [float(speed.min()) * 0.95, float(speed.max()) * 1.05]
    fig.add_trace(go.Scatter(x=x_ends, y=[summary.time_limit_s / 60.0] * 2, mode="lines", name="time limit",
                             line={"dash": "dash", "color": "#555"}))
    fig.update_layout(title="Endurance: fatigue curve" + (" per gait" if by_gait is not None and by_gait.curves else ""),
                      xaxis={"title": "Speed, blocking-corrected [cm/s]" if use_cor else "Set speed [cm/s]",
                             "range": x_ends},
                      yaxis={"title": "Time to fatigue [min]", "type": "log"}, template="plotly_white",
                      legend={"orientation": "h", "y": -0.25})
    return fig


def gait_figure(protocol: Any, fish_id: str) -> go.Figure | None:
    """Gait: bursts per minute at each step against speed, with the gait transition speed Up–c marked."""
    own = _own(protocol.tables.get("gait_steps"), fish_id)
    if own.empty:
        return None
    fig = go.Figure(go.Bar(x=own["speed_cm_s"], y=own["bursts_per_min"].fillna(0.0), name="bursts per minute",
                           marker={"color": PROTOCOL_COLOURS[2]}, width=1.5,
                           hovertemplate="step %{customdata}: %{y:.2f} /min<extra></extra>", customdata=own["step"]))
    g = protocol.gait.get(fish_id)
    if g is not None and g.upc_m_s is not None:
        fig.add_vline(x=g.upc_m_s * 100, line={"dash": "dash", "color": "#333"},
                      annotation_text=f"Up–c {g.upc_m_s * 100:.1f} cm/s", annotation_position="top left")
    fig.update_layout(title=f"Gait, fish {fish_id}: bursts per minute at each step",
                      xaxis={"title": "Speed, blocking-corrected [cm/s]"},
                      yaxis={"title": "Bursts per minute [1/min]", "rangemode": "tozero"}, template="plotly_white")
    return fig


def frequency_speed_figure(protocol: Any, fish_id: str) -> go.Figure | None:
    """Kinematics: tail-beat frequency against speed, the fish's line and Bainbridge's (1958) relation."""
    own = _own(protocol.tables.get("kinematics"), fish_id)
    res = protocol.kinematics.get(fish_id)
    if own.empty or res is None:
        return None
    fig = go.Figure(go.Scatter(x=own["speed_cm_s"], y=own["frequency_hz"], mode="markers", name="tail-beat record",
                               marker={"size": 8, "color": PROTOCOL_COLOURS[0]},
                               hovertemplate="%{x:.1f} cm/s: %{y:.2f} Hz<extra></extra>"))
    grid = np.linspace(0.0, float(own["speed_cm_s"].max()) * 1.1, 50)
    if res.line is not None:  # drawn over the speeds with tail beats only
        beating = own[own["frequency_hz"] > 0]["speed_cm_s"]
        span = np.linspace(float(beating.min()), float(beating.max()), 20)
        fig.add_trace(go.Scatter(x=span, y=np.asarray(res.line.frequency_hz(span / 100.0)), mode="lines",
                                 name="frequency–speed line", line={"color": PROTOCOL_COLOURS[0]}))
    # Bainbridge (1958): U = ¼ L (3f − 4), i.e. f = (4 U / L + 4) / 3
    length_cm = res.body_length_m * 100.0
    fig.add_trace(go.Scatter(x=grid, y=(4.0 * grid / length_cm + 4.0) / 3.0, mode="lines",
                             name="Bainbridge (1958), for comparison", line={"dash": "dot", "color": "#777"}))
    fig.update_layout(title=f"Kinematics, fish {fish_id}: tail-beat frequency against speed",
                      xaxis={"title": "Speed, blocking-corrected [cm/s]", "rangemode": "tozero"},
                      yaxis={"title": "Tail-beat frequency [Hz]", "rangemode": "tozero"}, template="plotly_white")
    return fig
