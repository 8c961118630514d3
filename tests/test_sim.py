"""Tests of swimlab.sim: the simulated trial's file, its physics and its fault record.

Outside references: pandas.read_csv for the file; the mass balance of a closed respirometer
(oxygen removed = MO2 × time, Steffensen 1989) worked by hand from the file's readings and
swimlab.oxygen.solubility; the steady-state offset of a first-order discrete lag
(y − x = r·Δt·α/(1 − α) for a ramp of slope −r, α = e^(−Δt/τ); Oppenheim & Schafer 2010, ch. 2,
first-order recursion).
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from swimlab import oxygen
from swimlab.errors import InputError
from swimlab.sim import GLITCH_KINDS, mo2_curve, simulate_trial


def test_same_seed_same_file_other_seed_other_noise():
    a = simulate_trial(seed=1, speeds_m_s=(0.3,), step_duration_s=1800.0)
    b = simulate_trial(seed=1, speeds_m_s=(0.3,), step_duration_s=1800.0)
    c = simulate_trial(seed=2, speeds_m_s=(0.3,), step_duration_s=1800.0)
    assert a.csv_bytes == b.csv_bytes
    assert a.csv_bytes != c.csv_bytes


def test_file_layout_and_values_equal_the_returned_readings():
    trial = simulate_trial(seed=5, channels=("A", "B"), speeds_m_s=(0.3, 0.5), step_duration_s=1800.0)
    text = trial.csv_bytes.decode("utf-8")
    header = text.split("\n", 1)[0]
    assert header == "time,O2 A [% air saturation],Temperature A [°C],O2 B [% air saturation],Temperature B [°C],pump"
    frame = pd.read_csv(io.BytesIO(trial.csv_bytes))
    assert len(frame) == trial.time_s.size == 3600
    assert frame["time"].iloc[0] == "2025-03-04T09:00:00" and frame["time"].iloc[-1] == "2025-03-04T09:59:59"
    clock = pd.to_datetime(frame["time"])
    np.testing.assert_allclose((clock - clock.iloc[0]).dt.total_seconds(), trial.time_s)
    for ch in ("A", "B"):
        np.testing.assert_array_equal(frame[f"O2 {ch} [% air saturation]"], trial.oxygen_pct[ch])
        np.testing.assert_array_equal(frame[f"Temperature {ch} [°C]"], trial.temperature_c[ch])
    np.testing.assert_array_equal(frame["pump"].to_numpy() == 1, trial.pump)
    c = trial.truth.cycle
    period = c["flush_s"] + c["wait_s"] + c["measure_s"]
    np.testing.assert_array_equal(trial.pump, (trial.time_s % period) < c["flush_s"])


def test_mo2_curves_hand_worked():
    # 90·e^(2·0.5) = 90·2.7182818 = 244.645365; 50 + 200·0.5^1.5 = 50 + 200·0.35355339 = 120.710678
    assert mo2_curve(0.5, "exponential", (90.0, 2.0)) == pytest.approx(244.645365, rel=1e-8)
    assert mo2_curve(0.5, "power", (50.0, 200.0, 1.5)) == pytest.approx(120.710678, rel=1e-8)
    with pytest.raises(ValueError, match="valid choices"):
        mo2_curve(0.5, "linear", (1.0, 2.0))
    with pytest.raises(InputError, match="takes"):
        mo2_curve(0.5, "power", (1.0, 2.0))


def test_mass_balance_of_a_closed_phase():
    # No lag, no background, no noise: oxygen removed in a measure phase × water volume equals
    # MO2 × time (Steffensen 1989), worked from the file's readings.
    trial = simulate_trial(seed=0, speeds_m_s=(0.4,), step_duration_s=1800.0, noiseless=True, sensor_lag_s=0.0,
                           background_rate_mg_l_h=0.0, temperature_drift_c_h=0.0)
    truth = trial.truth
    row = truth.phases.iloc[0]
    t = trial.time_s
    inside = (t >= row.measure_start_s) & (t <= row.measure_end_s)
    mg_l = trial.oxygen_pct["A"][inside] / 100.0 * np.asarray(oxygen.solubility(trial.temperature_c["A"][inside]))
    removed_mg = (mg_l[0] - mg_l[-1]) * (30.0 - 0.5)
    expected_mg = row.mo2_mg_h * (row.measure_end_s - row.measure_start_s) / 3600.0
    assert removed_mg == pytest.approx(expected_mg, rel=1e-5)  # 6-decimal file resolution
    assert row.mo2_mg_kg_h == pytest.approx(90.0 * np.exp(2.0 * 0.4), rel=1e-12)


def test_sensor_lag_offsets_a_ramp_by_the_first_order_steady_state():
    kwargs = dict(seed=0, speeds_m_s=(0.5,), step_duration_s=900.0, noiseless=True, background_rate_mg_l_h=0.0,
                  temperature_drift_c_h=0.0)
    fast = simulate_trial(sensor_lag_s=0.0, **kwargs)
    slow = simulate_trial(sensor_lag_s=5.0, **kwargs)
    row = fast.truth.phases.iloc[0]
    inside = (fast.time_s >= row.measure_start_s) & (fast.time_s <= row.measure_end_s)
    r_pct_s = -np.polyfit(fast.time_s[inside], fast.oxygen_pct["A"][inside], 1)[0]
    alpha = np.exp(-1.0 / 5.0)
    offset = slow.oxygen_pct["A"][inside] - fast.oxygen_pct["A"][inside]
    np.testing.assert_allclose(offset, r_pct_s * alpha / (1 - alpha), rtol=2e-3, atol=2e-6)


def test_flush_restores_air_saturation_and_faults_are_recorded():
    trial = simulate_trial(seed=9, channels=("A", "B"), speeds_m_s=(0.3, 0.5), step_duration_s=2700.0,
                           struggling=[("A", 2)], failed_flushes=[4], temperature_excursions=[("B", 5)])
    p = trial.truth.phases.set_index(["channel", "cycle"])
    normal = p[~p.failed_flush & (p.index.get_level_values("cycle") > 1)]
    assert (normal.flush_end_pct_air_sat > 98.0).all()
    assert p.loc[("A", 4), "failed_flush"] and p.loc[("B", 4), "failed_flush"]
    assert p.loc[("A", 4), "flush_end_pct_air_sat"] < p.loc[("A", 3), "o2_min_pct_air_sat"]
    assert p.loc[("A", 2), "struggling"] and not p.loc[("B", 2), "struggling"]
    burst = p.loc[("A", 2), "burst_start_s"]
    assert p.loc[("A", 2), "measure_start_s"] < burst < p.loc[("A", 2), "measure_end_s"]
    assert p.loc[("B", 5), "temperature_range_c"] == pytest.approx(0.5, rel=0.01)
    assert p.loc[("A", 5), "temperature_range_c"] < 0.01
    clean = p[p.clean]
    assert not (clean.struggling | clean.failed_flush).any()
    assert set(p.index[~p.clean]) == {("A", 2), ("A", 4), ("B", 4)}


def test_truth_slopes_are_fish_plus_background():
    trial = simulate_trial(seed=3, speeds_m_s=(0.3,), step_duration_s=1800.0, background_rate_mg_l_h=0.36,
                           background_doubling_time_h=1.0)
    p = trial.truth.phases
    mid = (p.measure_start_s + p.measure_end_s) / 2
    np.testing.assert_allclose(p.background_slope_mg_l_s, -0.36 / 3600 * np.exp2(mid / 3600))
    np.testing.assert_allclose(p.fish_slope_mg_l_s, -p.mo2_mg_h / 3600 / 29.5)
    np.testing.assert_allclose(p.slope_mg_l_s, p.fish_slope_mg_l_s + p.background_slope_mg_l_s)
    blanks = trial.truth.blanks
    assert [b.time_s for b in blanks] == [-3600.0, -1800.0, 3600.0, 5400.0]
    np.testing.assert_allclose([b.slope_mg_l_s for b in blanks],
                               -0.36 / 3600 * np.exp2(np.array([-1.0, -0.5, 1.0, 1.5])))


def test_glitch_lines_are_where_the_truth_says():
    trial = simulate_trial(seed=4, channels=("A", "B"), speeds_m_s=(0.3,), step_duration_s=1800.0, glitches=9)
    g = trial.truth.glitches
    assert sorted(g["kind"].unique()) == sorted(GLITCH_KINDS) and len(g) == 9
    lines = trial.csv_bytes.decode().split("\n")
    assert len(lines) - 2 == trial.time_s.size  # header, readings, final newline
    for row in g.itertuples():
        if row.kind == "blank_value":
            cells = lines[row.line - 1].split(",")
            col = 1 if row.channel == "A" else 3
            assert cells[col] == "" and cells[col + 1] != ""
        elif row.kind == "repeated_line":
            assert lines[row.line - 1] == lines[row.line - 2]
        else:
            stamp = str(pd.Timestamp("2025-03-04T09:00:00") + pd.Timedelta(seconds=int(row.reading)))
            assert stamp.replace(" ", "T") not in trial.csv_bytes.decode()


def test_logger_reader_reports_the_glitches_of_a_simulated_file():
    logger = pytest.importorskip("swimlab.io.logger")
    trial = simulate_trial(seed=4, channels=("A", "B"), speeds_m_s=(0.3,), step_duration_s=1800.0, glitches=9)
    read = logger.read_logger(trial.csv_bytes, name="sim.csv")
    g = trial.truth.glitches
    expected = set(g.loc[g.kind != "missing_line", "line"])
    assert set(read.glitches["line"]) == expected
    assert read.time_s.size == trial.time_s.size - (g.kind == "missing_line").sum()
    assert read.oxygen_unit == "% air saturation" and read.pump is not None


def test_simulator_refuses_bad_set_ups():
    with pytest.raises(InputError, match="does not reach"):
        simulate_trial(seed=0, speeds_m_s=(0.3,), step_duration_s=1800.0, failed_flushes=[30])
    with pytest.raises(InputError, match="does not fit"):
        simulate_trial(seed=0, respirometer_volume_l=0.3, fish_mass_g=500.0)
    with pytest.raises(InputError, match="lacks channels"):
        simulate_trial(seed=0, channels=("A", "B"), fish_mass_g={"A": 100.0})
    with pytest.raises(InputError, match="glitch"):
        simulate_trial(seed=0, speeds_m_s=(0.3,), step_duration_s=1000.0, glitches=200)
    with pytest.raises(InputError, match="shorter than one cycle"):
        simulate_trial(seed=0, speeds_m_s=(0.3,), step_duration_s=100.0)
    with pytest.raises(ValueError, match="valid choices"):
        simulate_trial(seed=0, mo2_model="cubic")
