"""Tests of swimlab.trace: phases, slopes, windows, unit conversion and phase flags.

Outside references: scipy.stats.linregress (slope, intercept, standard error, r), numpy.polyfit
(quadratic coefficient and sliding-window slopes), statsmodels OLS (t statistic of the quadratic
term), swimlab.oxygen.convert element by element (the own-temperature conversion).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from swimlab import oxygen, trace
from swimlab.errors import InputError
from swimlab.settings import DEFAULT_SETTINGS, LabSettings
from swimlab.sim import simulate_trial


def _sawtooth(n_cycles=5, period=600, flush=200, slope=-0.002, noise=0.02, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n_cycles * period, dtype=float)
    pos = t % period
    pump = pos < flush
    y = np.where(pump, 9.0 + 0.005 * pos, 10.0 + slope * (pos - flush)) + rng.normal(0, noise, t.size)
    return t, pump, y


# --- phases -----------------------------------------------------------------------------------


def test_pump_phases_small_hand_example():
    t = np.arange(12.0)
    pump = np.array([1, 1, 0, 0, 0, 0, 1, 1, 0, 0, 0, 0], dtype=bool)
    table = trace.phases_from_pump(t, pump, wait_s=2.0)
    assert list(table.columns) == trace.PHASE_COLUMNS
    assert table[["cycle", "phase", "i_start", "i_stop"]].values.tolist() == [
        [1, "flush", 0, 2], [1, "wait", 2, 4], [1, "measure", 4, 6],
        [2, "flush", 6, 8], [2, "wait", 8, 10], [2, "measure", 10, 12],
    ]
    assert table["start_s"].tolist() == [0, 2, 4, 6, 8, 10]
    assert table["end_s"].tolist() == [1, 3, 5, 7, 9, 11]
    assert set(table["method"]) == {"pump"}


def test_pump_trace_starting_closed_is_cycle_one_without_flush():
    t = np.arange(10.0)
    pump = np.array([0, 0, 0, 0, 1, 1, 0, 0, 0, 0], dtype=bool)
    table = trace.phases_from_pump(t, pump, wait_s=1.0)
    assert table[["cycle", "phase"]].values.tolist() == [
        [1, "wait"], [1, "measure"], [2, "flush"], [2, "wait"], [2, "measure"]]


def test_pump_accepts_zero_one_and_rejects_other_values():
    t = np.arange(6.0)
    a = trace.phases_from_pump(t, [1, 1, 0, 0, 0, 0], 1.0)
    b = trace.phases_from_pump(t, np.array([True, True, False, False, False, False]), 1.0)
    pd.testing.assert_frame_equal(a, b)
    with pytest.raises(InputError, match="reading 3") as info:
        trace.phases_from_pump(t, [1, 1, 2, 0, 0, 0], 1.0)
    assert info.value.field == "pump" and info.value.row == 3
    with pytest.raises(InputError, match="6 times"):
        trace.phases_from_pump(t, [1, 0], 1.0)


def test_time_must_increase_and_be_finite():
    with pytest.raises(InputError, match="reading 3") as info:
        trace.phases_from_pump([0.0, 1.0, 1.0, 2.0], [1, 0, 0, 0], 0.0)
    assert info.value.row == 3
    with pytest.raises(InputError, match="finite"):
        trace.phases_from_pump([0.0, np.nan, 2.0], [1, 0, 0], 0.0)


def test_schedule_matches_pump_of_a_simulated_trial():
    trial = simulate_trial(seed=2, speeds_m_s=(0.3,), step_duration_s=3600.0)
    c = trial.truth.cycle
    by_pump = trace.phases_from_pump(trial.time_s, trial.pump, c["wait_s"])
    by_schedule = trace.phases_from_schedule(trial.time_s, c["flush_s"], c["wait_s"], c["measure_s"])
    cols = ["cycle", "phase", "i_start", "i_stop"]
    pd.testing.assert_frame_equal(by_pump[cols], by_schedule[cols])


def test_schedule_started_late_labels_earlier_readings_as_end_of_a_cycle():
    t = np.arange(100.0)
    table = trace.phases_from_schedule(t, 10.0, 5.0, 15.0, start_s=20.0)
    assert table.iloc[0][["cycle", "phase", "i_start", "i_stop"]].tolist() == [1, "wait", 0, 5]
    assert table.iloc[1][["cycle", "phase", "i_start", "i_stop"]].tolist() == [1, "measure", 5, 20]
    assert table.iloc[2][["cycle", "phase", "i_start"]].tolist() == [2, "flush", 20]


def test_schedule_longer_than_trace_is_refused_with_both_durations():
    t = np.arange(0.0, 500.0)
    with pytest.raises(InputError, match="longer than the trace") as info:
        trace.phases_from_schedule(t, 300.0, 60.0, 600.0)
    assert "960 s" in str(info.value) and "499 s" in str(info.value)
    assert info.value.field == "protocol.cycle"


def test_shape_finds_the_pump_cycles_of_a_noisy_trial():
    trial = simulate_trial(seed=4, speeds_m_s=(0.3, 0.6), step_duration_s=3600.0)
    conc = trace.concentration_from_trace(trial.oxygen_pct, "% air saturation", trial.temperature_c)
    wait = trial.truth.cycle["wait_s"]
    by_pump = trace.phases_from_pump(trial.time_s, trial.pump, wait)
    by_shape = trace.phases_from_shape(trial.time_s, conc["A"], wait)
    assert set(by_shape["method"]) == {"shape"}
    mp = by_pump[(by_pump.phase == "measure") & (by_pump.cycle >= 2)].set_index("cycle")
    ms = by_shape[(by_shape.phase == "measure") & (by_shape.cycle >= 2)].set_index("cycle")
    assert list(ms.index) == list(mp.index)
    # a flush found ends within one wait of the pump's stop, so the wait still covers it
    fp = by_pump[(by_pump.phase == "flush") & (by_pump.cycle >= 2)].set_index("cycle")
    fs = by_shape[by_shape.phase == "flush"].set_index("cycle").loc[fp.index]
    assert ((fs.end_s - fp.end_s).abs() <= wait).all(), fs.end_s - fp.end_s
    # The first flush restores nothing (water starts at air saturation), so shape finds cycles
    # from the second on; every later measure phase found overlaps the pump's by >= 90 %.
    lo = np.maximum(ms.i_start, mp.i_start)
    hi = np.minimum(ms.i_stop, mp.i_stop)
    overlap = (hi - lo) / (mp.i_stop - mp.i_start)
    assert (overlap >= 0.9).all(), overlap
    # ... and a slope fitted on it agrees with the pump phase's within 3 standard errors.
    sp = trace.fit_slopes(trial.time_s, conc, by_pump).set_index("cycle").loc[mp.index]
    ss = trace.fit_slopes(trial.time_s, conc, by_shape).set_index("cycle").loc[ms.index]
    z = (ss.slope_mg_l_s - sp.slope_mg_l_s) / sp.slope_se_mg_l_s
    assert (z.abs() < 3).all(), z


def _assert_tiles(table: pd.DataFrame, n: int) -> None:
    assert table["i_start"].iloc[0] == 0 and table["i_stop"].iloc[-1] == n
    assert (table["i_start"].to_numpy()[1:] == table["i_stop"].to_numpy()[:-1]).all()
    assert (table["i_stop"] > table["i_start"]).all()
    rank = table["phase"].map({"flush": 0, "wait": 1, "measure": 2}).to_numpy()
    cycle = table["cycle"].to_numpy()
    same_cycle = np.diff(cycle) == 0
    assert (np.diff(cycle) >= 0).all() and (np.diff(cycle) <= 1).all()
    assert (np.diff(rank)[same_cycle] > 0).all()  # flush, wait, measure in order within a cycle
    assert (rank[1:][~same_cycle] == 0).all()  # a new cycle starts with a flush


@settings(max_examples=60, deadline=None)
@given(st.lists(st.booleans(), min_size=2, max_size=200), st.floats(0, 20), st.floats(0.1, 3.0))
def test_pump_phases_tile_the_trace(pump, wait, dt):
    t = np.arange(len(pump)) * dt
    table = trace.phases_from_pump(t, np.array(pump), wait)
    _assert_tiles(table, len(pump))
    # every flush reading is a flush and no other is
    labels = np.repeat(table["phase"].to_numpy(), table["i_stop"] - table["i_start"])
    assert ((labels == "flush") == np.array(pump)).all()


@settings(max_examples=60, deadline=None)
@given(st.floats(1, 50), st.floats(0, 50), st.floats(1, 50), st.floats(-100, 100))
def test_schedule_phases_tile_the_trace(flush, wait, measure, start):
    t = np.arange(0.0, 600.0, 0.7)
    period = flush + wait + measure
    if start + period > t[-1]:
        with pytest.raises(InputError):
            trace.phases_from_schedule(t, flush, wait, measure, start)
        return
    table = trace.phases_from_schedule(t, flush, wait, measure, start)
    _assert_tiles(table, t.size)
    assert table["cycle"].iloc[0] == 1


# --- slopes -----------------------------------------------------------------------------------


def test_slopes_match_scipy_linregress_per_phase():
    t, pump, y = _sawtooth(seed=3)
    phases = trace.phases_from_pump(t, pump, 30.0)
    out = trace.fit_slopes(t, {"A": y}, phases)
    measure = phases[phases.phase == "measure"].reset_index(drop=True)
    assert len(out) == len(measure)
    for k, row in measure.iterrows():
        x = t[row.i_start:row.i_stop]
        yy = y[row.i_start:row.i_stop]
        ref = stats.linregress(x, yy)
        got = out.iloc[k]
        assert got.slope_mg_l_s == pytest.approx(ref.slope, rel=1e-10)
        assert got.slope_se_mg_l_s == pytest.approx(ref.stderr, rel=1e-8)
        assert got.r2 == pytest.approx(ref.rvalue ** 2, rel=1e-10)
        assert got.o2_start_mg_l == pytest.approx(ref.intercept + ref.slope * x[0], rel=1e-12)
        assert got.o2_end_mg_l == pytest.approx(ref.intercept + ref.slope * x[-1], rel=1e-12)
        resid = yy - (ref.intercept + ref.slope * x)
        assert got.residual_sd_mg_l == pytest.approx(np.sqrt(np.sum(resid ** 2) / (x.size - 2)), rel=1e-8)
        assert got.n_points == x.size


def test_lowest_pct_is_the_fitted_line_in_pct_at_constant_temperature():
    # At one temperature % and mg/L are proportional, so the lowest fitted end in % equals the
    # linregress line of the % readings at the phase's last reading.
    t, pump, y = _sawtooth(seed=6)
    pct = y * 10.4
    pct_gap = pct.copy()
    phases = trace.phases_from_pump(t, pump, 30.0)
    measure = phases[phases.phase == "measure"].reset_index(drop=True)
    pct_gap[measure.i_stop.iloc[1] - 1] = np.nan  # the end reading missing: ratio from the sums
    out = trace.fit_slopes(t, {"A": y}, phases, oxygen_pct={"A": pct_gap})
    for k, row in measure.iterrows():
        x = t[row.i_start:row.i_stop]
        ref = stats.linregress(x, pct[row.i_start:row.i_stop])
        assert out.iloc[k].o2_min_pct_air_sat == pytest.approx(ref.intercept + ref.slope * x[-1], rel=1e-9)


@pytest.mark.parametrize("gaps", [[250, 251, 300, 1400, 1999],  # some phases have gaps
                                  [250, 900, 1400, 1999, 2600, 2999]])  # every phase has one
def test_slopes_with_missing_readings_match_linregress_on_the_rest(gaps):
    t, pump, y = _sawtooth(seed=5)
    y = y.copy()
    y[gaps] = np.nan
    phases = trace.phases_from_pump(t, pump, 30.0)
    out = trace.fit_slopes(t, {"A": y}, phases)
    measure = phases[phases.phase == "measure"].reset_index(drop=True)
    for k, row in measure.iterrows():
        x = t[row.i_start:row.i_stop]
        yy = y[row.i_start:row.i_stop]
        ok = np.isfinite(yy)
        ref = stats.linregress(x[ok], yy[ok])
        assert out.iloc[k].slope_mg_l_s == pytest.approx(ref.slope, rel=1e-10)
        assert out.iloc[k].slope_se_mg_l_s == pytest.approx(ref.stderr, rel=1e-8)
        assert out.iloc[k].n_points == ok.sum()


def test_curvature_matches_statsmodels_and_polyfit():
    from statsmodels.regression.linear_model import OLS

    rng = np.random.default_rng(8)
    t = np.arange(1200.0)
    pump = (t % 600) < 100
    pos = t % 600
    y = 10 - 0.002 * pos + 1.5e-6 * (pos - 300) ** 2 + rng.normal(0, 0.02, t.size)
    phases = trace.phases_from_pump(t, pump, 50.0)
    out = trace.fit_slopes(t, {"A": y}, phases)
    for k, row in phases[phases.phase == "measure"].reset_index(drop=True).iterrows():
        x = t[row.i_start:row.i_stop]
        yy = y[row.i_start:row.i_stop]
        xc = x - x.mean()
        fit = OLS(yy, np.column_stack([np.ones_like(xc), xc, xc ** 2])).fit()
        assert out.iloc[k].curvature_t == pytest.approx(fit.tvalues[2], rel=1e-7)
        c2, c1, _ = np.polyfit(x, yy, 2)
        b = stats.linregress(x, yy).slope
        assert out.iloc[k].curvature_slope_change == pytest.approx(2 * c2 * (x[-1] - x[0]) / abs(b), rel=1e-6)


@settings(max_examples=40, deadline=None)
@given(st.floats(-50, 50), st.floats(0.1, 10), st.integers(0, 10_000))
def test_slope_invariant_to_offset_and_scales_with_oxygen(offset, scale, seed):
    t, pump, y = _sawtooth(n_cycles=3, seed=seed)
    phases = trace.phases_from_pump(t, pump, 30.0)
    base = trace.fit_slopes(t, {"A": y}, phases)
    shifted = trace.fit_slopes(t, {"A": y + offset}, phases)
    scaled = trace.fit_slopes(t, {"A": y * scale}, phases)
    for col in ("slope_mg_l_s", "slope_se_mg_l_s", "r2", "curvature_t"):
        np.testing.assert_allclose(shifted[col], base[col], rtol=1e-6, atol=1e-12)
    np.testing.assert_allclose(shifted["o2_start_mg_l"], base["o2_start_mg_l"] + offset, rtol=1e-9)
    np.testing.assert_allclose(scaled["slope_mg_l_s"], base["slope_mg_l_s"] * scale, rtol=1e-9)
    np.testing.assert_allclose(scaled["slope_se_mg_l_s"], base["slope_se_mg_l_s"] * scale, rtol=1e-9)
    np.testing.assert_allclose(scaled["r2"], base["r2"], rtol=1e-9)


def test_r2_and_relative_se_identity_behind_the_acceptance_rule():
    # For a straight-line fit R² = 1 / (1 + (n − 2) · relative_se²), the identity the docstring
    # of fit_slopes rests on (it follows from R² = Sxy²/(Sxx Syy) and SE² = SSres/((n−2) Sxx)).
    t, pump, y = _sawtooth(seed=11, noise=0.2)
    out = trace.fit_slopes(t, {"A": y}, trace.phases_from_pump(t, pump, 30.0))
    n = out.n_points.to_numpy()
    np.testing.assert_allclose(out.r2, 1 / (1 + (n - 2) * out.relative_se ** 2), rtol=1e-9)


def _one_phase(slope, noise, n=600, seed=0, extra=None):
    rng = np.random.default_rng(seed)
    t = np.arange(n + 100, dtype=float)
    pump = t < 50
    y = 9.0 + slope * t + rng.normal(0, noise, t.size)
    if extra is not None:
        y = y + extra(t)
    phases = trace.phases_from_pump(t, pump, 50.0)
    return trace.fit_slopes(t, {"A": y}, phases).iloc[0]


def test_small_slope_with_sensor_noise_is_accepted_though_r2_is_low():
    # total fall 0.3 mg/L over 600 readings, noise 0.02 mg/L = the sensor's: R² < 0.95 but the
    # slope is pinned to well under 5 %.
    row = _one_phase(-0.0005, 0.02)
    assert row.r2 < DEFAULT_SETTINGS.r2_min
    assert row.relative_se < DEFAULT_SETTINGS.slope_relative_se_max
    assert row.noise_ratio < 1.5
    assert row.accepted and row.rejected_by == ""


def test_big_clean_slope_is_accepted():
    row = _one_phase(-0.003, 0.02)
    assert row.r2 > 0.99 and row.accepted and row.rejected_by == ""


def test_small_slope_with_scatter_above_sensor_noise_is_rejected_with_both_codes():
    row = _one_phase(-0.0005, 0.08)
    assert not row.accepted
    assert row.rejected_by == "PHASE_POOR_FIT,PHASE_EXCESS_SCATTER"


def test_tiny_slope_is_rejected_as_noisy():
    row = _one_phase(-0.00002, 0.02)
    assert not row.accepted
    assert row.rejected_by.split(",")[0] == "PHASE_NOISY_SLOPE"


def test_big_slope_with_bursts_is_accepted_but_flagged_for_scatter():
    burst = lambda t: -0.5 * np.clip((t - 300) / 60, 0, 1)  # noqa: E731 - a 0.5 mg/L step over 60 s
    row = _one_phase(-0.01, 0.02, extra=burst)
    assert row.r2 >= DEFAULT_SETTINGS.r2_min and row.noise_ratio > DEFAULT_SETTINGS.noise_ratio_max
    assert row.accepted
    flags = trace.phase_flags(pd.DataFrame([row]), pd.DataFrame(columns=trace.PHASE_COLUMNS))
    assert [f["code"] for f in flags] == ["PHASE_EXCESS_SCATTER"]
    assert "accepted on R²" in flags[0]["message"]


def test_phase_of_three_readings_is_reported_too_few_points():
    t = np.arange(10.0)
    pump = np.array([1] * 5 + [0] * 5, dtype=bool)
    phases = trace.phases_from_pump(t, pump, wait_s=2.0)
    measure = phases[phases.phase == "measure"]
    assert (measure.i_stop - measure.i_start).tolist() == [3]
    y = 9.0 - 0.01 * t
    out = trace.fit_slopes(t, {"A": y}, phases)
    row = out.iloc[0]
    assert not row.accepted and row.rejected_by == "PHASE_TOO_FEW_POINTS" and row.n_points == 3
    assert row.slope_mg_l_s == pytest.approx(-0.01)
    flags = trace.phase_flags(out, phases)
    assert [f["code"] for f in flags] == ["PHASE_TOO_FEW_POINTS"]
    assert "3 readings" in flags[0]["message"] and "fewer than 30" in flags[0]["message"]
    assert flags[0]["channel"] == "A" and flags[0]["cycle"] == 1


def test_all_missing_channel_is_refused_naming_it():
    t, pump, y = _sawtooth(n_cycles=2)
    phases = trace.phases_from_pump(t, pump, 30.0)
    with pytest.raises(InputError, match="channel 'B'") as info:
        trace.fit_slopes(t, {"A": y, "B": np.full(t.size, np.nan)}, phases)
    assert info.value.field == "oxygen_mg_l.B"


def test_channel_of_wrong_length_and_table_without_measure_are_refused():
    t, pump, y = _sawtooth(n_cycles=2)
    phases = trace.phases_from_pump(t, pump, 30.0)
    with pytest.raises(InputError, match="readings"):
        trace.fit_slopes(t, {"A": y[:-1]}, phases)
    with pytest.raises(InputError, match="no measure phase"):
        trace.fit_slopes(t, {"A": y}, phases[phases.phase != "measure"])
    broken = phases.copy()
    broken.loc[2, "i_stop"] = t.size + 10
    with pytest.raises(InputError, match="row 3"):
        trace.fit_slopes(t, {"A": y}, broken)


def test_temperature_columns_use_the_channel_or_the_only_probe():
    t, pump, y = _sawtooth(n_cycles=2)
    phases = trace.phases_from_pump(t, pump, 30.0)
    temp = 15.0 + t / 1000.0
    own = trace.fit_slopes(t, {"A": y}, phases, temperature_c={"A": temp})
    shared = trace.fit_slopes(t, {"A": y}, phases, temperature_c={"probe": temp})
    pd.testing.assert_frame_equal(own, shared)
    measure = phases[phases.phase == "measure"]
    expected = [temp[a:b].mean() for a, b in zip(measure.i_start, measure.i_stop, strict=True)]
    np.testing.assert_allclose(own.temperature_mean_c, expected)
    np.testing.assert_allclose(own.temperature_change_c, (measure.i_stop - 1 - measure.i_start) / 1000.0)
    with pytest.raises(InputError, match="no temperature readings for channel 'A'"):
        trace.fit_slopes(t, {"A": y}, phases, temperature_c={"B": temp, "C": temp})


# --- steepest windows -------------------------------------------------------------------------


@pytest.mark.parametrize("gaps", [[], [180, 181, 1300], [180, 700, 1300]])  # none, some, every phase
def test_steepest_window_matches_brute_force_polyfit(gaps):
    rng = np.random.default_rng(12)
    t = np.arange(1500.0)
    pump = (t % 500) < 100
    pos = t % 500
    y = 10 - 0.001 * pos - 0.3 * np.clip((pos - 250) / 40, 0, 1) + rng.normal(0, 0.02, t.size)
    y[gaps] = np.nan
    phases = trace.phases_from_pump(t, pump, 20.0)
    out = trace.steepest_window_slopes(t, {"A": y}, phases, 60.0)
    for k, row in phases[phases.phase == "measure"].reset_index(drop=True).iterrows():
        best, start, count = np.inf, None, 0
        for i in range(row.i_start, row.i_stop):
            end = i + 61
            if end > row.i_stop:
                break
            x, yy = t[i:end], y[i:end]
            ok = np.isfinite(yy)
            count += 1
            slope = np.polyfit(x[ok], yy[ok], 1)[0]
            if slope < best:
                best, start = slope, t[i]
        got = out.iloc[k]
        assert got.n_windows == count
        assert got.slope_mg_l_s == pytest.approx(best, rel=1e-7)
        assert got.window_start_s == start
        assert got.window_s == 60.0
        x, yy = t[int(start):int(start) + 61], y[int(start):int(start) + 61]
        ok = np.isfinite(yy)
        assert got.r2 == pytest.approx(stats.linregress(x[ok], yy[ok]).rvalue ** 2, rel=1e-7)


def test_window_longer_than_phase_gives_no_window():
    t, pump, y = _sawtooth(n_cycles=2)
    phases = trace.phases_from_pump(t, pump, 30.0)
    out = trace.steepest_window_slopes(t, {"A": y}, phases, 5000.0)
    assert (out.n_windows == 0).all() and out.slope_mg_l_s.isna().all()
    with pytest.raises(InputError, match="window_s"):
        trace.steepest_window_slopes(t, {"A": y}, phases, 0.0)


# --- concentration ----------------------------------------------------------------------------


def test_concentration_uses_each_readings_own_temperature():
    n = 50
    pct = np.linspace(100, 90, n)
    temp = np.linspace(14.0, 16.0, n)
    out = trace.concentration_from_trace({"A": pct}, "% air saturation", {"A": temp}, 5.0, 100000.0)
    expected = np.array([oxygen.convert(p, "% air saturation", "mg/L", tt, 5.0, 100000.0)
                         for p, tt in zip(pct, temp, strict=True)])
    np.testing.assert_allclose(out["A"], expected, rtol=1e-12)
    at_mean = np.asarray(oxygen.convert(pct, "% air saturation", "mg/L", temp.mean(), 5.0, 100000.0))
    assert np.max(np.abs(at_mean - out["A"])) > 0.1  # 2 °C changes solubility by ~5 %


def test_concentration_other_units_and_missing_readings():
    temp = np.array([10.0, 10.0, 20.0, np.nan])
    kpa = np.array([20.0, np.nan, 18.0, 19.0])
    out = trace.concentration_from_trace({"A": kpa}, "kPa", temp, 0.0, 101325.0)
    assert np.isnan(out["A"][1]) and np.isnan(out["A"][3])
    assert out["A"][0] == pytest.approx(oxygen.convert(20.0, "kPa", "mg/L", 10.0), rel=1e-12)
    assert out["A"][2] == pytest.approx(oxygen.convert(18.0, "kPa", "mg/L", 20.0), rel=1e-12)
    same = trace.concentration_from_trace({"A": np.array([8.0, 7.5])}, "mg/L", None)
    np.testing.assert_array_equal(same["A"], [8.0, 7.5])


def test_concentration_refuses_negative_and_impossible_readings():
    with pytest.raises(InputError, match="reading 2") as info:
        trace.concentration_from_trace({"B": np.array([90.0, -1.0])}, "% air saturation", 15.0)
    assert info.value.field == "oxygen.B" and info.value.row == 2
    with pytest.raises(InputError, match="beyond 300"):
        trace.concentration_from_trace({"B": np.array([90.0, 400.0])}, "% air saturation", 15.0)
    with pytest.raises(ValueError, match="unit"):
        trace.concentration_from_trace({"B": np.array([90.0])}, "furlongs", 15.0)
    with pytest.raises(InputError, match="needs the water temperature") as info:
        trace.concentration_from_trace({"B": np.array([90.0])}, "% air saturation", None)
    assert info.value.field == "temperature_c.B"
    with pytest.raises(InputError, match="channel 'B'"):
        trace.concentration_from_trace({"B": np.array([90.0])}, "% air saturation", 55.0)  # beyond 40 °C


# --- flags ------------------------------------------------------------------------------------


def test_flags_for_floor_temperature_and_curvature_on_a_constructed_table():
    t = np.arange(800.0)
    pump = t < 100
    pos = t - 100
    y = 9.0 - 0.002 * pos - np.where(pos > 0, 1e-6 * pos ** 2, 0)  # curved (slope +50 %), no noise
    temp = np.where(pos > 0, 15.0 + pos / 1000.0, 15.0)
    pct = y / 10.0 * 100.0
    phases = trace.phases_from_pump(t, pump, 10.0)
    out = trace.fit_slopes(t, {"A": y}, phases, temperature_c={"A": temp}, oxygen_pct={"A": pct})
    flags = trace.phase_flags(out, phases, time_s=t, oxygen_pct={"A": pct})
    codes = sorted(f["code"] for f in flags)
    # The curvature also leaves residuals 1.8 × the sensor's noise floor (above the default 1.5).
    assert codes == ["FLUSH_NOT_RESTORED", "OXYGEN_BELOW_FLOOR", "PHASE_CURVED", "PHASE_EXCESS_SCATTER",
                     "TEMPERATURE_DRIFT_PHASE"]
    assert all(f["where"] == "chamber A, cycle 1" for f in flags)
    strict = LabSettings.from_dict({"oxygen_floor_pct_air_sat": 10.0, "flush_restore_pct_air_sat": 50.0,
                                    "temperature_drift_phase_max_c": 5.0, "curvature_slope_change_max": 10.0,
                                    "noise_ratio_max": 3.0})
    assert trace.phase_flags(out, phases, time_s=t, oxygen_pct={"A": pct}, settings=strict) == []


# --- channels side by side ---------------------------------------------------------------------


def test_each_channel_keeps_order_and_equals_the_plain_loop():
    import threading

    names = []

    def work(c):
        names.append(threading.current_thread().name)
        return c * 3

    items = list(range(40))
    assert trace.each_channel(work, items) == [c * 3 for c in items]
    assert trace.each_channel(work, [7]) == [21]
    assert trace.each_channel(work, []) == []


def test_each_channel_raises_the_error_of_a_channel():
    def work(c):
        if c == "B":
            raise InputError("bad channel", field=f"oxygen.{c}")
        return c

    with pytest.raises(InputError, match="bad channel"):
        trace.each_channel(work, ["A", "B", "C"])


def test_each_channel_called_inside_itself_runs_the_inner_loop_plainly():
    # Both workers busy with outer items that each fan out again: without the guard the inner
    # calls would wait for workers that are waiting for them.
    def inner(c):
        return c + 1

    def outer(c):
        return sum(trace.each_channel(inner, [c, c, c]))

    import threading

    result = []
    runner = threading.Thread(target=lambda: result.append(trace.each_channel(outer, [1, 2, 3, 4])),
                              daemon=True)
    runner.start()
    runner.join(timeout=30)
    assert not runner.is_alive(), "each_channel waited on itself"
    assert result == [[6, 9, 12, 15]]


def test_slopes_and_windows_of_many_channels_equal_those_of_each_channel_alone():
    trial = simulate_trial(seed=11, channels=list("ABCD"), speeds_m_s=[0.2, 0.4], step_duration_s=1800.0)
    conc = trace.concentration_from_trace(trial.oxygen_pct, "% air saturation", trial.temperature_c,
                                          trial.truth.salinity, trial.truth.pressure_pa)
    phases = trace.phases_from_pump(trial.time_s, trial.pump, trial.truth.cycle["wait_s"])
    together = trace.fit_slopes(trial.time_s, conc, phases, temperature_c=trial.temperature_c,
                                oxygen_pct=trial.oxygen_pct)
    windows = trace.steepest_window_slopes(trial.time_s, conc, phases, 60.0)
    for c in "ABCD":
        alone_conc = trace.concentration_from_trace({c: trial.oxygen_pct[c]}, "% air saturation",
                                                    {c: trial.temperature_c[c]}, trial.truth.salinity,
                                                    trial.truth.pressure_pa)
        np.testing.assert_array_equal(alone_conc[c], conc[c])
        alone = trace.fit_slopes(trial.time_s, {c: conc[c]}, phases, temperature_c={c: trial.temperature_c[c]},
                                 oxygen_pct={c: trial.oxygen_pct[c]})
        pd.testing.assert_frame_equal(together[together.channel == c].reset_index(drop=True), alone)
        alone_w = trace.steepest_window_slopes(trial.time_s, {c: conc[c]}, phases, 60.0)
        pd.testing.assert_frame_equal(windows[windows.channel == c].reset_index(drop=True), alone_w)
