"""Tests of analyse(session, raw_files): the whole pipeline against simulated truth.

The simulator (swimlab.sim) knows the true MO2 of every phase and the true speed–MO2 curve, so
these tests check that the orchestration recovers what was put in. Brett's (1964) Ucrit is worked
by hand from the schedule in the test, independently of swimlab.performance.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from swimlab import sim
from swimlab.analysis import analyse
from swimlab.demo import DEMO_NAMES, TRIALS, demo_bundle_paths
from swimlab.errors import InputError
from swimlab.io.bundle import read_bundle
from swimlab.io.logger import sha256_hex
from swimlab.session import Session

DEMO = Path(__file__).resolve().parents[1] / "demo_sessions"

SPEEDS = (0.15, 0.25, 0.35, 0.45, 0.55, 0.65)
STEP_S = 1800.0
A_TRUE, B_TRUE = 80.0, 2.0  # exponential MO2 = a·e^(bU) [mg O2 kg⁻¹ h⁻¹], U in m/s
FATIGUE_S = 5 * STEP_S + 0.4 * STEP_S  # 40 % into the sixth step


def _session_dict(sha: str, *, blanks, mass_g=400.0, chamber="A") -> dict:
    return {
        "title": "pipeline test",
        "water": {"temperature_c": 15.0},
        "flume": {"name": "test tunnel", "section_width_cm": 25, "section_height_cm": 25,
                  "respirometer_volume_l": 60.0},
        "fish": [{"fish_id": "F1", "chamber": chamber, "mass_g": mass_g, "total_length_cm": 32,
                  "body_depth_cm": 7, "body_width_cm": 3.6}],
        "protocol": {"type": "step_ucrit", "steps": [{"speed_cm_s": u * 100, "duration_min": STEP_S / 60} for u in SPEEDS],
                     "cycle": {"source": "pump", "wait_s": 60}, "fatigue_time_s": FATIGUE_S},
        "sensor": {"sensor": "test probe"},
        "blanks": blanks,
        "raw_files": [{"sha256": sha, "name": "trial.csv"}],
    }


@pytest.fixture(scope="module")
def simulated():
    trial = sim.simulate_trial(
        seed=7, speeds_m_s=SPEEDS, step_duration_s=STEP_S, flush_s=240, wait_s=60, measure_s=600,
        respirometer_volume_l=60.0, fish_mass_g=400.0, mo2_model="exponential", mo2_params=(A_TRUE, B_TRUE),
        sensor_noise_pct=0.1, background_rate_mg_l_h=0.03,
    )
    sha = sha256_hex(trial.csv_bytes)
    blanks = [{"channel": "A", "time_s": b.time_s, "slope_mg_l_h": b.slope_mg_l_s * 3600.0} for b in trial.truth.blanks]
    session = Session.from_json_dict(_session_dict(sha, blanks=blanks))
    return trial, session, {sha: trial.csv_bytes}


@pytest.fixture(scope="module")
def analysis(simulated):
    _, session, raw = simulated
    return analyse(session, raw, n_boot=300)


def test_step_mo2_within_3_percent_of_truth(simulated, analysis):
    trial = simulated[0]
    truth = trial.truth.steps.set_index("step")["mo2_mg_kg_h"]
    steps = analysis.steps.set_index("step")
    # Steps before fatigue; the acceptance for step means is 3 %.
    for step in range(1, 6):
        assert steps.loc[step, "mo2_mg_kg_h"] == pytest.approx(truth.loc[step], rel=0.03)


def test_every_clean_phase_within_three_standard_errors(simulated, analysis):
    truth = simulated[0].truth.phases.set_index("cycle")
    measure = analysis.measure.set_index("cycle")
    clean = truth.index[truth["clean"]]
    used = measure.loc[measure.index.intersection(clean)]
    assert len(used) >= 10
    err = (used["mo2_mg_kg_h"] - truth.loc[used.index, "mo2_mg_kg_h"]).abs()
    assert (err <= 3 * used["mo2_se_mg_kg_h"]).all()


def test_ucrit_matches_brett_worked_by_hand(analysis):
    # Brett (1964): Ucrit = U_i + (t_i / t_ii) · ΔU. Fatigue 40 % into step 6 (0.65 m/s):
    # U_i = 0.55 m/s, ΔU = 0.10 m/s, t_i / t_ii = 0.4 → 0.59 m/s on set speeds.
    assert analysis.result("F1", "ucrit_set") == pytest.approx(59.0, rel=0.01)
    # On blocking-corrected speeds it is larger by the solid-blocking factor (never smaller).
    factor = analysis.steps["corrected_speed_cm_s"].iloc[0] / analysis.steps["set_speed_cm_s"].iloc[0]
    assert factor > 1.0
    assert analysis.result("F1", "ucrit") == pytest.approx(59.0 * factor, rel=0.01)


def test_smr_recovers_the_true_curve_intercept(analysis):
    # The simulated MO2 curve is a·e^(bU) with a = 80: SMR by extrapolation to zero speed.
    # Blocking rescales speed, not the intercept, so the true SMR is a itself.
    smr = analysis.results.set_index("quantity").loc["smr"]
    assert smr["value"] == pytest.approx(A_TRUE, rel=0.10)
    assert smr["ci_low"] <= A_TRUE <= smr["ci_high"]


def test_uopt_is_the_minimum_of_gross_cost_of_transport(analysis):
    # Checked against scipy's bounded scalar minimiser on the chosen fit's COT = MO2(U)/U.
    fits = analysis.fits["F1"]
    best = getattr(fits, fits.best)
    found = minimize_scalar(lambda u: float(best.predict(u)) / u, bounds=(0.05, 3.0), method="bounded",
                            options={"xatol": 1e-7})
    assert analysis.result("F1", "uopt") == pytest.approx(found.x * 100.0, rel=1e-4)
    # The simulated curve is exponential and the fit chooses it; for MO2 = a·e^(bU),
    # COT ∝ e^(bU)/U is smallest at U = 1/b.
    assert fits.best == "exponential"
    assert analysis.result("F1", "uopt") == pytest.approx(100.0 / best.params["b"], rel=1e-9)


def test_cost_of_transport_is_mo2_over_speed(analysis):
    steps = analysis.steps.dropna(subset=["mo2_mg_kg_h"])
    speed_km_h = steps["corrected_speed_cm_s"] / 100.0 * 3.6
    np.testing.assert_allclose(steps["cot_gross_mg_kg_km"], steps["mo2_mg_kg_h"] / speed_km_h, rtol=1e-12)


def test_analysis_is_deterministic_and_json_safe(simulated, analysis):
    _, session, raw = simulated
    again = analyse(session, raw, n_boot=300)
    first = json.dumps(analysis.to_json_dict(), sort_keys=True)
    assert first == json.dumps(again.to_json_dict(), sort_keys=True)


def test_no_flags_on_a_clean_simulated_trial(analysis):
    serious = analysis.flags[analysis.flags["severity"].isin(["invalid", "warning"])]
    assert serious.empty, serious[["code", "where", "message"]].to_string()


def test_volume_ratio_flag_once_per_fish_with_the_fish_volume_taken_out(simulated):
    # A 4 kg fish (4 L at 1000 kg/m³) in 60 L: (60 − 4) / 4 = 14 (docs/nomenclature.md), worked by
    # hand, below the guidance of 20 (common practice); one flag, naming the fish.
    trial, _, raw = simulated
    sha = next(iter(raw))
    session = Session.from_json_dict(_session_dict(sha, blanks=[], mass_g=4000.0))
    result = analyse(session, raw, n_boot=0)
    assert result.fish.set_index("fish_id").loc["F1", "volume_ratio"] == pytest.approx(14.0, rel=1e-12)
    ratio = result.flags[result.flags["code"] == "VOLUME_RATIO_OUTSIDE_GUIDANCE"]
    assert len(ratio) == 1
    assert ratio["where"].iloc[0] == "fish F1" and "ratio 14 " in ratio["message"].iloc[0]


def test_session_without_trace_still_gives_geometry(simulated):
    _, session, _ = simulated
    bare = session.model_copy(update={"raw_files": []})
    result = analyse(bare, {})
    assert result.measure.empty
    assert result.fish["blocking_ratio"].iloc[0] > 0
    assert result.steps["reynolds"].notna().all()


def test_missing_raw_file_names_the_field(simulated):
    _, session, _ = simulated
    with pytest.raises(InputError, match="raw_files"):
        analyse(session, {})


def test_chamber_without_channel_is_refused(simulated):
    trial, _, raw = simulated
    sha = next(iter(raw))
    session = Session.from_json_dict(_session_dict(sha, blanks=[], chamber="B"))
    with pytest.raises(InputError, match="fish.chamber"):
        analyse(session, raw)


# --- the demo sessions -----------------------------------------------------------------------

DEMO_PATHS = demo_bundle_paths(DEMO)


def test_there_are_at_least_four_demo_sessions():
    assert len(DEMO_PATHS) >= 4
    assert {p.name for p in DEMO_PATHS} == set(DEMO_NAMES)
    assert {t.name for t in TRIALS} <= set(DEMO_NAMES)  # the four step tests are kept


@pytest.fixture(scope="module")
def demo_results():
    out = {}
    for path in DEMO_PATHS:
        contents = read_bundle(path)
        if contents.session.protocol.type == "step_ucrit":
            out[path.name] = (contents.session, analyse(contents.session, contents.raw_files, n_boot=200))
    return out


def _codes(analysis) -> set[str]:
    return set(analysis.flags["code"])


def test_demo_clean_trial_has_no_warnings_and_recovers_its_truth(demo_results):
    session, result = demo_results["bw26-t01-clean-ucrit"]
    assert not (result.flags["severity"].isin(["invalid", "warning"])).any()
    truth = json.loads((DEMO / "truth" / "bw26-t01-clean-ucrit.json").read_text())
    assert result.result("BW26-T01", "smr") == pytest.approx(truth["mo2_params"][0], rel=0.10)
    # Resting phases before the first step give SMR by the methods of Chabot et al. (2016) too.
    assert result.result("BW26-T01", "smr_quantile") is not None
    assert result.result("BW26-T01", "smr_mlnd") is not None


def test_demo_seawater_trial_uses_seawater_properties(demo_results):
    session, result = demo_results["bw26-c02-seawater"]
    assert session.water.salinity == pytest.approx(33.0)
    assert result.water["density_kg_m3"] > 1020.0  # TEOS-10 seawater, not fresh water
    assert result.water["o2_solubility_mg_l"] < 9.5  # salting-out lowers solubility


def test_demo_large_fish_is_flagged_for_blocking(demo_results):
    _, result = demo_results["bw26-t03-large-fish"]
    assert "BLOCKING_BEYOND_LIMIT" in _codes(result)
    assert not result.fish["blocking_within_limit"].iloc[0]


def test_demo_struggling_trial_has_welfare_flags_first_and_a_kept_exclusion(demo_results):
    _, result = demo_results["bw26-t04-struggling"]
    codes = _codes(result)
    assert {"OXYGEN_BELOW_FLOOR", "FLUSH_NOT_RESTORED", "PHASE_EXCLUDED"} <= codes
    assert bool(result.flags["welfare"].iloc[0])  # welfare flags sort first
    excluded = result.measure[result.measure["excluded"]]
    assert list(excluded["cycle"]) == [17]
    assert "struggled" in excluded["exclusion_reason"].iloc[0]
    # The simulator put two-minute bursts into cycles 14 and 17: neither is used for MO2, and
    # the curve through the remaining phases recovers the true SMR (a = 75 in the truth file).
    truth = json.loads((DEMO / "truth" / "bw26-t04-struggling.json").read_text())
    assert truth["struggling_cycles"] == [14, 17]
    measure = result.measure.set_index("cycle")
    assert not measure.loc[[14, 17], "used"].any()
    assert measure.drop(index=[14, 17]).query("step > 0 and o2_min_pct_air_sat > 80")["used"].all()
    assert result.result("BW26-T04", "smr") == pytest.approx(truth["mo2_params"][0], rel=0.10)


def test_fish_sharing_a_chamber_without_a_group_are_refused_at_entry(simulated):
    # A shared chamber's uptake belongs to all its fish; it is analysed only as a recorded group
    # (tests/test_group_trials.py), never with one fish's mass.
    _, session, raw = simulated
    data = session.to_json_dict()
    data["fish"].append({**data["fish"][0], "fish_id": "F2"})
    with pytest.raises(InputError, match="share chamber") as info:
        Session.from_json_dict(data)
    assert info.value.field == "fish.0.chamber"
