"""Tests of swimlab.plots: what each figure draws, and the size of a long trace's figure."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from swimlab import plots


def _phases(n_cycles: int, period: float = 600.0, flush: float = 240.0, wait: float = 60.0) -> pd.DataFrame:
    rows = []
    for c in range(n_cycles):
        t0 = c * period
        rows += [
            {"cycle": c + 1, "phase": "flush", "start_s": t0, "end_s": t0 + flush, "method": "schedule"},
            {"cycle": c + 1, "phase": "wait", "start_s": t0 + flush, "end_s": t0 + flush + wait, "method": "schedule"},
            {"cycle": c + 1, "phase": "measure", "start_s": t0 + flush + wait, "end_s": t0 + period, "method": "schedule"},
        ]
    return pd.DataFrame(rows)


def _measure(phases: pd.DataFrame, channels=("A",), used=True) -> pd.DataFrame:
    m = phases[phases["phase"] == "measure"]
    rows = []
    for ch in channels:
        for r in m.itertuples(index=False):
            rows.append({"channel": ch, "cycle": r.cycle, "start_s": r.start_s, "end_s": r.end_s,
                         "slope_mg_l_s": -0.001, "o2_start_mg_l": 9.5, "o2_end_mg_l": 9.2, "r2": 0.987,
                         "mo2_mg_kg_h": 250.0, "used": used, "excluded": not used, "exclusion_reason": "bubbles",
                         "rejected_by": ""})
    return pd.DataFrame(rows)


def _points(trace: go.Scatter) -> int:
    return 0 if trace.x is None else len(trace.x)


# --- downsampling ---------------------------------------------------------------------------


def test_short_series_are_drawn_whole():
    x = np.arange(100.0)
    assert np.array_equal(plots.downsample_indices(x, np.sin(x), 4000), np.arange(100))


@settings(max_examples=25, deadline=None)
@given(n=st.integers(5000, 60000), n_out=st.integers(200, 4000), seed=st.integers(0, 10_000))
def test_downsampling_keeps_the_extremes(n, n_out, seed):
    # LTTB alone may drop the lowest reading; the figure must still show how low oxygen went.
    rng = np.random.default_rng(seed)
    x = np.arange(n, dtype=float)
    y = rng.normal(size=n).cumsum()
    idx = plots.downsample_indices(x, y, n_out)
    assert idx.size <= n_out
    assert np.all(np.diff(idx) > 0)
    assert y[idx].max() == y.max() and y[idx].min() == y.min()


def test_downsampling_handles_gaps():
    x = np.arange(20000.0)
    y = np.sin(x / 500.0)
    y[5000:5100] = np.nan
    idx = plots.downsample_indices(x, y, 1000)
    assert idx.size <= 1000 and np.isfinite(y[idx]).sum() > 900


def test_downsampling_refuses_mismatched_lengths():
    with pytest.raises(ValueError, match="same length"):
        plots.downsample_indices(np.arange(10.0), np.arange(9.0))


# --- the trace figure -----------------------------------------------------------------------


def test_trace_figure_draws_channels_phases_and_fits():
    phases = _phases(6)
    t = np.arange(0.0, 3600.0, 1.0)
    series = {"A": 9.5 - 1e-4 * t, "B": 9.4 - 1e-4 * t}
    fig = plots.trace_figure(t, series, phases=phases, measure=_measure(phases, ("A", "B")), floor=7.8)
    names = [tr.name for tr in fig.data]
    assert {"flush", "wait", "measure", "chamber A", "chamber B", "fit A", "fit B"} <= set(names)
    fit_a = next(tr for tr in fig.data if tr.name == "fit A")
    # three points per phase and a gap after it; ends at the fitted start and end values
    assert _points(fit_a) == 6 * 4
    assert list(fit_a.y[:3]) == pytest.approx([9.5, 9.35, 9.2], rel=1e-6)  # drawn as float32
    assert np.isnan(fit_a.y[3])
    assert fit_a.customdata[0][1] == pytest.approx(0.987)
    assert plots.phase_of_point(fit_a.customdata[5], ["A", "B"]) == ("A", 2)
    fit_b = next(tr for tr in fig.data if tr.name == "fit B")
    assert plots.phase_of_point(fit_b.customdata[0], ["A", "B"]) == ("B", 1)
    assert plots.phase_of_point(fit_b.customdata[3], ["A", "B"]) is None  # the gap after a phase
    assert "R²" in fit_a.hovertemplate
    assert any(getattr(s, "y0", None) == 7.8 for s in fig.layout.shapes)
    assert fig.layout.xaxis.title.text == "Time [min]"


def test_phases_not_used_are_dotted_with_their_reason():
    phases = _phases(2)
    t = np.arange(0.0, 1200.0)
    fig = plots.trace_figure(t, {"A": np.full(t.size, 9.0)}, phases=phases, measure=_measure(phases, used=False))
    line = next(tr for tr in fig.data if tr.name == "fit A (not used)")
    assert line.line.dash == "dot"
    assert "excluded (bubbles)" in line.text[0]


def test_long_trace_is_downsampled_and_stays_small():
    # 72 h at 1 Hz, 8 channels: 259,200 readings per channel.
    t = np.arange(0.0, 72 * 3600.0, 1.0)
    rng = np.random.default_rng(3)
    series = {ch: 9.0 + np.sin(t / 300.0) + rng.normal(0, 0.02, t.size) for ch in "ABCDEFGH"}
    phases = _phases(432)
    fig = plots.trace_figure(t, series, phases=phases, measure=_measure(phases, tuple("ABCDEFGH")), max_points=4000)
    lines = [tr for tr in fig.data if (tr.name or "").startswith("chamber ")]
    assert len(lines) == 8 and all(_points(tr) <= 4000 for tr in lines)
    assert "numbers use every reading" in fig.layout.title.text
    assert fig.layout.xaxis.title.text == "Time [h]"
    # 8 × 4000 points plus 432 cycles of bands and 3456 fitted lines, sent as float32 binary
    # arrays: about 1 MB (benchmarks/bench_app.py); 2 MB leaves room for plotly's own overhead.
    assert plots.figure_payload_bytes(fig) < 2_000_000


def test_highlighted_phase_is_outlined():
    phases = _phases(3)
    t = np.arange(0.0, 1800.0)
    fig = plots.trace_figure(t, {"A": np.full(t.size, 9.0)}, phases=phases, measure=_measure(phases), highlight=("A", 2))
    rects = [s for s in fig.layout.shapes if s.type == "rect"]
    assert len(rects) == 1 and rects[0].x0 == pytest.approx(900 / 60) and rects[0].x1 == pytest.approx(1200 / 60)


def test_trace_figure_refuses_misaligned_channels():
    with pytest.raises(ValueError, match="channel 'A'"):
        plots.trace_figure(np.arange(10.0), {"A": np.arange(9.0)})


# --- speed–MO2 and COT ----------------------------------------------------------------------


@dataclass(frozen=True)
class _Line:
    """A test double of a fitted model: MO2 = a + b·U, band ± 10."""

    a: float
    b: float
    aicc: float = 12.0

    def predict(self, speed_m_s):
        return self.a + self.b * np.asarray(speed_m_s)

    def band(self, speed_m_s):
        y = self.predict(speed_m_s)
        return y - 10.0, y + 10.0


@dataclass(frozen=True)
class _Fits:
    exponential: _Line
    power: _Line
    best: str = "exponential"


def _steps() -> pd.DataFrame:
    speed = np.array([10.0, 20.0, 30.0, 40.0])
    return pd.DataFrame({
        "fish_id": "KB-03", "step": [1, 2, 3, 4], "set_speed_cm_s": speed, "corrected_speed_cm_s": speed * 1.02,
        "mo2_mg_kg_h": [120.0, 150.0, 200.0, 280.0], "mo2_sd_mg_kg_h": [5.0, 6.0, 8.0, 9.0],
        "cot_gross_mg_kg_km": [333.0, 208.0, 185.0, 194.0], "cot_net_mg_kg_km": [50.0, 60.0, 80.0, 120.0],
    })


def test_speed_mo2_figure_draws_points_fits_and_bands():
    fits = _Fits(_Line(100.0, 400.0), _Line(90.0, 420.0))
    fig = plots.speed_mo2_figure(_steps(), fits, "KB-03")
    names = [tr.name for tr in fig.data]
    assert "step mean ± SD" in names
    assert any(n.startswith("exponential fit (chosen)") for n in names)
    assert any(n.startswith("power fit") and "chosen" not in n for n in names)
    curve = next(tr for tr in fig.data if (tr.name or "").startswith("exponential fit"))
    # the curve is drawn against speed in cm/s from a model of speed in m/s
    assert curve.x[-1] == pytest.approx(40.8 * 1.1)
    assert curve.y[-1] == pytest.approx(100.0 + 400.0 * 40.8 * 1.1 / 100.0)
    band = next(tr for tr in fig.data if tr.name == "exponential 95 % band")
    assert max(band.y) == pytest.approx(curve.y[-1] + 10.0)
    points = next(tr for tr in fig.data if tr.name == "step mean ± SD")
    assert list(points.error_y.array) == [5.0, 6.0, 8.0, 9.0]


def test_speed_mo2_figure_without_fits_has_points_only():
    fig = plots.speed_mo2_figure(_steps(), None, "KB-03")
    assert [tr.name for tr in fig.data] == ["step mean ± SD"]


def test_cot_figure_marks_uopt():
    results = pd.DataFrame([{"fish_id": "KB-03", "quantity": "uopt", "value": 31.0, "unit": "cm/s"}])
    fig = plots.cot_figure(_steps(), results, "KB-03")
    assert {tr.name for tr in fig.data} == {"gross COT", "net COT"}
    lines = [s for s in fig.layout.shapes if s.type == "line"]
    assert len(lines) == 1 and lines[0].x0 == pytest.approx(31.0)
    in_m_s = pd.DataFrame([{"fish_id": "KB-03", "quantity": "uopt", "value": 0.31, "unit": "m/s"}])
    assert [s.x0 for s in plots.cot_figure(_steps(), in_m_s, "KB-03").layout.shapes] == [pytest.approx(31.0)]


def test_cot_figure_without_uopt_has_no_marker():
    fig = plots.cot_figure(_steps(), pd.DataFrame(columns=["fish_id", "quantity", "value", "unit"]), "KB-03")
    assert len(fig.layout.shapes) == 0


def test_calibration_figure_plots_the_points():
    fig = plots.calibration_figure([{"motor_setting": 10, "speed_cm_s": 12.0}, {"motor_setting": 20, "speed_cm_s": 25.0}])
    assert list(fig.data[0].x) == [10, 20] and list(fig.data[0].y) == [12.0, 25.0]


def test_kaplan_meier_speeds_never_share_a_line_style():
    # Each set speed's step line differs from every other in colour or dash (twelve speeds).
    from types import SimpleNamespace

    rows = [{"set_speed_cm_s": 20.0 + 5 * k, "time_min": t, "share_swimming": s, "censored": 0}
            for k in range(12) for t, s in ((10.0, 0.5), (20.0, 0.0))]
    summary = SimpleNamespace(kaplan_meier=pd.DataFrame(rows), time_limit_s=3600.0)
    fig = plots.kaplan_meier_figure(summary)
    styles = [(tr.line.color, tr.line.dash) for tr in fig.data if tr.mode == "lines"]
    assert len(styles) == 12 and len(set(styles)) == 12
