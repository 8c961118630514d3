"""Tests of swimlab.uptake: background correction, MO2 and its checks.

Outside references: hand-worked examples of equation 1 of Svendsen, Bushnell & Steffensen (2016)
in tests/data/uptake_mo2_worked.csv; numpy.interp (linear background); numpy.polyfit on
ln(−slope) (exponential background); the standard atomic weight of oxygen (IUPAC) for
µmol conversions; numpy mean / std (ddof 1) for step means.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from swimlab import trace, uptake
from swimlab.errors import InputError
from swimlab.settings import LabSettings
from swimlab.sim import simulate_trial
from swimlab.uptake import BlankRun

DATA = Path(__file__).parent / "data"


# --- MO2 ------------------------------------------------------------------------------------


@pytest.mark.parametrize("row", pd.read_csv(DATA / "uptake_mo2_worked.csv").to_dict("records"))
def test_mo2_hand_worked_examples(row):
    # tolerance 1e-12 relative: the examples are exact decimal arithmetic; only rounding differs.
    mass_kg = row["fish_mass_g"] / 1000.0
    got = uptake.mo2(row["slope_mg_l_s"], row["background_slope_mg_l_s"], row["respirometer_volume_l"] / 1000.0,
                     mass_kg, row["fish_density_kg_m3"])
    assert got == pytest.approx(row["expected_mo2_mg_h"], rel=row["tolerance"], abs=1e-12)
    assert uptake.mass_specific(got, mass_kg) == pytest.approx(row["expected_mo2_mg_kg_h"], rel=row["tolerance"],
                                                               abs=1e-12)


def test_mo2_keeps_series_index_and_refuses_fish_bigger_than_chamber():
    slopes = pd.Series([-0.001, -0.002], index=["c3", "c4"])
    got = uptake.mo2(slopes, 0.0, 0.01, 0.5)
    assert isinstance(got, pd.Series) and list(got.index) == ["c3", "c4"]
    assert got["c4"] == pytest.approx(2 * got["c3"])
    with pytest.raises(InputError, match="not smaller than the respirometer"):
        uptake.mo2(-0.001, 0.0, 0.001, 2.0)
    with pytest.raises(InputError, match="fish_mass_kg"):
        uptake.mo2(-0.001, 0.0, 0.01, 0.0)
    with pytest.raises(InputError, match="slope_mg_l_s"):
        uptake.mo2(np.nan, 0.0, 0.01, 0.5)


def test_scale_to_reference_mass_hand_worked():
    # 200 mg/kg/h for a 0.5 kg fish, b = 0.8, to 1 kg: 200 × 0.5^0.2 = 174.1101127 (hand-worked
    # with ln 0.5 = −0.6931472: exp(−0.1386294) = 0.8705506); allometric form of Clarke & Johnston
    # (1999). Tolerance 1e-7: the hand value has 8 significant figures.
    assert uptake.scale_to_reference_mass(200.0, 0.5, 1.0, 0.8) == pytest.approx(174.1101127, rel=1e-7)
    assert uptake.scale_to_reference_mass(200.0, 1.0, 1.0, 0.8) == 200.0
    # with b = 1 mass-specific MO2 does not depend on mass
    assert uptake.scale_to_reference_mass(200.0, 0.1, 1.0, 1.0) == pytest.approx(200.0)


def test_umol_conversion_uses_the_atomic_weight_of_oxygen():
    # IUPAC standard atomic weight of oxygen, interval [15.99903, 15.99977] (IUPAC 2009, from
    # memory): 1 mg O2 = 1000 / 31.998 µmol. Tolerance 5e-5 relative covers the interval.
    expected = 100.0 * 1000.0 / (2 * 15.999) / 1000.0
    assert uptake.umol_g_h_from_mg_kg_h(100.0) == pytest.approx(expected, rel=5e-5)


# --- background -----------------------------------------------------------------------------


@settings(max_examples=50, deadline=None)
@given(st.lists(st.tuples(st.floats(-1e4, 1e5), st.floats(-1e-3, 0)), min_size=1, max_size=8),
       st.lists(st.floats(-2e4, 2e5), min_size=1, max_size=20))
def test_linear_background_equals_numpy_interp(points, times):
    blanks = [BlankRun("A", t, b) for t, b in points]
    blanks.append(BlankRun("B", 0.0, -1.0))  # another channel's blank is ignored
    got = uptake.background_slope(np.array(times), blanks, "A", "linear")
    pts = pd.DataFrame(points, columns=["t", "b"]).groupby("t")["b"].mean()
    np.testing.assert_allclose(got, np.interp(times, pts.index.to_numpy(), pts.to_numpy()), rtol=1e-12, atol=1e-18)


def test_linear_background_is_held_flat_outside_the_blanks():
    blanks = [BlankRun("A", 0.0, -1e-5), BlankRun("A", 1000.0, -3e-5)]
    got = uptake.background_slope(np.array([-500.0, 500.0, 5000.0]), blanks, "A")
    np.testing.assert_allclose(got, [-1e-5, -2e-5, -3e-5])


def test_constant_none_and_unknown_methods():
    blanks = [BlankRun("A", 0.0, -1e-5), BlankRun("A", 1000.0, -3e-5)]
    np.testing.assert_allclose(uptake.background_slope([1.0, 2.0], blanks, "A", "constant"), [-2e-5, -2e-5])
    np.testing.assert_array_equal(uptake.background_slope([1.0, 2.0], [], "A", "none"), [0.0, 0.0])
    with pytest.raises(ValueError, match="'constant', 'exponential', 'linear', 'none'"):
        uptake.background_slope([1.0], blanks, "A", "cubic")
    with pytest.raises(InputError, match="no blank run for channel 'C'"):
        uptake.background_slope([1.0], blanks, "C", "linear")


def test_exponential_background_recovers_a_growth_curve_and_matches_polyfit():
    rng = np.random.default_rng(3)
    times = np.array([-3600.0, -1800.0, 40000.0, 43000.0, 90000.0])
    true = -2e-5 * np.exp2(times / 43200.0)
    got = uptake.background_slope(np.array([0.0, 43200.0]), [BlankRun("A", t, b) for t, b in zip(times, true,
                                                                                                  strict=True)],
                                  "A", "exponential")
    np.testing.assert_allclose(got, [-2e-5, -4e-5], rtol=1e-10)
    noisy = true * np.exp(rng.normal(0, 0.1, times.size))
    k, a = np.polyfit(times, np.log(-noisy), 1)
    at = np.array([1000.0, 60000.0])
    got = uptake.background_slope(at, [BlankRun("A", t, b) for t, b in zip(times, noisy, strict=True)],
                                  "A", "exponential")
    np.testing.assert_allclose(got, -np.exp(a + k * at), rtol=1e-9)


def test_exponential_background_needs_three_declining_blanks():
    two = [BlankRun("A", 0.0, -1e-5), BlankRun("A", 1000.0, -3e-5)]
    with pytest.raises(InputError, match="at least 3 blank runs"):
        uptake.background_slope([1.0], two, "A", "exponential")
    rising = [*two, BlankRun("A", 2000.0, 1e-6)]
    with pytest.raises(InputError, match="to decline"):
        uptake.background_slope([1.0], rising, "A", "exponential")


def test_blank_run_refuses_non_finite_values():
    with pytest.raises(InputError, match="slope_mg_l_s"):
        BlankRun("A", 0.0, float("nan"))
    with pytest.raises(InputError, match="source"):
        BlankRun("A", 0.0, -1e-5, "guessed")


def test_blank_slopes_from_trace_blank_cycles():
    trial = simulate_trial(seed=21, speeds_m_s=(0.3,), step_duration_s=1800.0, blank_cycles_before=2,
                           blank_cycles_after=2, background_rate_mg_l_h=0.5)
    truth = trial.truth.phases
    conc = trace.concentration_from_trace(trial.oxygen_pct, "% air saturation", trial.temperature_c)
    phases = trace.phases_from_pump(trial.time_s, trial.pump, trial.truth.cycle["wait_s"])
    slopes = trace.fit_slopes(trial.time_s, conc, phases)
    blank_cycles = truth.loc[~truth.fish_present, "cycle"].tolist()
    assert blank_cycles == [1, 2, 5, 6]
    runs = uptake.blank_slopes_from_trace(slopes, "A", cycles=blank_cycles)
    assert [r.source for r in runs] == ["trace"] * 4
    rows = slopes.set_index("cycle").loc[blank_cycles]
    np.testing.assert_allclose([r.time_s for r in runs], (rows.start_s + rows.end_s) / 2)
    true = truth.set_index("cycle").loc[blank_cycles, "background_slope_mg_l_s"].to_numpy()
    se = rows.slope_se_mg_l_s.to_numpy()
    assert np.all(np.abs(np.array([r.slope_mg_l_s for r in runs]) - true) < 3 * se)
    shifted = uptake.blank_slopes_from_trace(slopes, "A", cycles=[1], time_offset_s=-7200.0)
    assert shifted[0].time_s == pytest.approx(runs[0].time_s - 7200.0)
    with pytest.raises(InputError, match="no measure phase in cycles \\[99\\]"):
        uptake.blank_slopes_from_trace(slopes, "A", cycles=[99])


# --- phase_uptake ---------------------------------------------------------------------------


def _slopes_table(slopes, channel="A", accepted=None, se=1e-6):
    n = len(slopes)
    return pd.DataFrame({
        "channel": channel,
        "cycle": np.arange(1, n + 1),
        "start_s": np.arange(n) * 900.0 + 300.0,
        "end_s": np.arange(n) * 900.0 + 899.0,
        "n_points": 600,
        "slope_mg_l_s": slopes,
        "slope_se_mg_l_s": se,
        "accepted": True if accepted is None else accepted,
        "rejected_by": "",
    })


def test_phase_uptake_computes_mo2_and_its_standard_error():
    table = _slopes_table([-0.001, -0.002])
    blanks = [BlankRun("A", 0.0, -1e-4), BlankRun("A", 2000.0, -1e-4)]
    out, flags = uptake.phase_uptake(table, chambers={"A": {"respirometer_volume_l": 30.0, "fish_mass_g": 500.0,
                                                            "fish_id": "F1"}}, blanks=blanks,
                                     background_method="linear")
    water_l = 29.5
    np.testing.assert_allclose(out.mo2_mg_h, [(0.001 - 1e-4) * water_l * 3600, (0.002 - 1e-4) * water_l * 3600])
    np.testing.assert_allclose(out.mo2_mg_kg_h, out.mo2_mg_h / 0.5)
    # SE of MO2 by the linear formula: a slope one SE steeper changes MO2 by one SE
    step = uptake.mo2(-0.001 - 1e-6, -1e-4, 0.03, 0.5) - uptake.mo2(-0.001, -1e-4, 0.03, 0.5)
    assert out.mo2_se_mg_kg_h.iloc[0] == pytest.approx(step / 0.5, rel=1e-9)
    np.testing.assert_allclose(out.background_share, [0.1, 0.05])
    assert out.used.all() and not out.excluded.any()
    assert (out.fish_id == "F1").all()
    assert flags == []
    for col in uptake.UPTAKE_COLUMNS:
        assert col in out.columns


def test_phase_uptake_flags():
    table = pd.concat([_slopes_table([-0.001, -0.0002, -0.00005]),
                       _slopes_table([-0.001], channel="B")], ignore_index=True)
    blanks = [BlankRun("A", 0.0, -1e-4)]
    chambers = {"A": {"respirometer_volume_l": 30.0, "fish_mass_g": 500.0},
                "B": {"respirometer_volume_l": 30.0, "fish_mass_g": 20.0}}
    out, flags = uptake.phase_uptake(table, chambers=chambers, blanks=blanks, background_method="constant",
                                     exclusions={("A", 1): "fish turned around"})
    got = sorted((f["code"], f["channel"], f["cycle"]) for f in flags)
    assert got == [
        ("BACKGROUND_HIGH", "A", 2),
        ("BACKGROUND_MISSING", "B", None),
        ("MO2_NOT_POSITIVE", "A", 3),
        ("PHASE_EXCLUDED", "A", 1),
        ("VOLUME_RATIO_OUTSIDE_GUIDANCE", "B", None),
    ]
    assert out.used.tolist() == [False, True, False, True]
    assert out.exclusion_reason.tolist() == ["fish turned around", "", "", ""]
    assert out.loc[3, "background_slope_mg_l_s"] == 0.0  # no blank for B: no correction
    excluded = [f for f in flags if f["code"] == "PHASE_EXCLUDED"][0]
    assert "fish turned around" in excluded["message"]


def test_phase_uptake_volume_ratio_is_water_over_fish_volume():
    # The ratio of docs/nomenclature.md, (V_resp − V_fish) / V_fish; its guidance 20–500 is common
    # practice. By hand: 20.5 L with a 1 kg fish (1 L at 1000 kg/m³) -> 19.5 L / 1 L = 19.5 < 20,
    # flagged (V_resp / V_fish would be 20.5 and pass); 22 L -> 21, inside.
    table = _slopes_table([-0.001])
    _, flags = uptake.phase_uptake(table, chambers={"A": {"respirometer_volume_l": 20.5, "fish_mass_g": 1000.0}})
    ratio = [f for f in flags if f["code"] == "VOLUME_RATIO_OUTSIDE_GUIDANCE"]
    assert len(ratio) == 1 and "ratio 20 " in ratio[0]["message"]  # 19.5 shown to no decimals
    _, flags = uptake.phase_uptake(table, chambers={"A": {"respirometer_volume_l": 22.0, "fish_mass_g": 1000.0}})
    assert "VOLUME_RATIO_OUTSIDE_GUIDANCE" not in {f["code"] for f in flags}


def test_phase_uptake_refuses_bad_set_up():
    table = _slopes_table([-0.001])
    with pytest.raises(InputError, match="no chamber set-up") as info:
        uptake.phase_uptake(table, chambers={"B": {"respirometer_volume_l": 30.0, "fish_mass_g": 500.0}})
    assert info.value.field == "chambers.A"
    with pytest.raises(InputError, match="does not fit"):
        uptake.phase_uptake(table, chambers={"A": {"respirometer_volume_l": 0.4, "fish_mass_g": 500.0}})
    ok = {"A": {"respirometer_volume_l": 30.0, "fish_mass_g": 500.0}}
    with pytest.raises(InputError, match="cycle 7"):
        uptake.phase_uptake(table, chambers=ok, exclusions={("A", 7): "typo"})
    with pytest.raises(InputError, match="needs a reason"):
        uptake.phase_uptake(table, chambers=ok, exclusions={("A", 1): " "})
    with pytest.raises(ValueError, match="valid choices"):
        uptake.phase_uptake(table, chambers=ok, background_method="spline")


def test_phase_uptake_scales_to_reference_mass_when_set():
    table = _slopes_table([-0.001])
    s = LabSettings.from_dict({"reference_mass_kg": 1.0, "mass_exponent": 0.8})
    out, flags = uptake.phase_uptake(table, chambers={"A": {"respirometer_volume_l": 30.0, "fish_mass_g": 500.0}},
                                     settings=s)
    assert out.mo2_ref_mg_kg_h.iloc[0] == pytest.approx(out.mo2_mg_kg_h.iloc[0] * 0.5 ** 0.2)
    assert "MASS_SCALED" in [f["code"] for f in flags]


# --- steps ----------------------------------------------------------------------------------


def test_steps_of_phases():
    got = uptake.steps_of_phases([0, 100, 250, 400, 700], [50, 180, 350, 500, 800],
                                 [90, 300], [300, 600])
    assert got.tolist() == [0, 1, 0, 2, 0]
    with pytest.raises(InputError, match="in order"):
        uptake.steps_of_phases([0], [1], [300, 90], [600, 300])


def test_step_means_match_numpy():
    table = _slopes_table([-0.001, -0.0011, -0.0009, -0.002, -0.0021, -0.0015])
    out, _ = uptake.phase_uptake(table, chambers={"A": {"respirometer_volume_l": 30.0, "fish_mass_g": 500.0}},
                                 exclusions={("A", 6): "outlier"})
    steps = pd.Series([1, 1, 1, 2, 2, 2], index=out.index)
    means = uptake.step_means(out, steps)
    assert means[["step", "n_phases"]].values.tolist() == [[1, 3], [2, 2]]
    v = out.mo2_mg_kg_h.to_numpy()
    assert means.mo2_mg_kg_h.tolist() == pytest.approx([v[:3].mean(), v[3:5].mean()])
    assert means.mo2_sd_mg_kg_h.tolist() == pytest.approx([v[:3].std(ddof=1), v[3:5].std(ddof=1)])
    assert means.mo2_se_mg_kg_h.tolist() == pytest.approx([v[:3].std(ddof=1) / np.sqrt(3),
                                                           v[3:5].std(ddof=1) / np.sqrt(2)])
    none = uptake.step_means(out, np.zeros(len(out)))
    assert none.empty and "mo2_mg_kg_h" in none.columns
    with pytest.raises(InputError, match="entries"):
        uptake.step_means(out, [1, 2])
