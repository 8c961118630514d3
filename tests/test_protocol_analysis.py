"""Tests of the protocol stage of analyse(): ramp, endurance, repeat swim, recovery, gait, kinematics.

Outside references: simulated trials whose truth the test knows (swimlab.sim: the ramp's speed
law, the EPOC curve put in, the fatigue times put in); values worked by hand from the
definitions (Umax = U₀ + a·t, Farrell 2008; recovery ratio Ucrit₂/Ucrit₁, Jain, Birtwell &
Farrell 1998; Brett's 1964 Ucrit; St = f·A/U, Taylor, Nudds & Thomas 2003; Bainbridge's 1958
U = ¼ L (3f − 4)); statsmodels' Kaplan–Meier (SurvfuncRight) and OLS, numpy's trapezoid rule and
Welch's (1947) degrees of freedom worked by hand. The invented scenario is the *Fellside
hatchery lab* (made up), its fish labelled FH-…
"""

from __future__ import annotations

import copy
import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.duration.survfunc import SurvfuncRight

from swimlab import sim
from swimlab.analysis import analyse
from swimlab.errors import InputError
from swimlab.io.bundle import read_bundle
from swimlab.protocol_analysis import QUANTITY_LABELS, endurance_summary, repeat_pairs
from swimlab.session import Session, validate_session

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_sessions"
CYCLE = {"flush_s": 180.0, "wait_s": 60.0, "measure_s": 360.0}
STEP_S = 1200.0


def _doc(*, fish=None, protocol=None, raw=None, blanks=(), **extra) -> dict:
    """A session document of the invented Fellside hatchery lab (a 30 L tunnel, 20 × 20 cm section)."""
    fish = fish or [{"fish_id": "FH-1", "chamber": "A", "mass_g": 420.0, "total_length_cm": 32.0,
                     "body_depth_cm": 7.0, "body_width_cm": 3.6, "species": "Salmo trutta"}]
    doc = {
        "title": "Fellside protocol test (invented)",
        "lab": "Fellside hatchery lab (invented)",
        "water": {"temperature_c": 12.0},
        "flume": {"name": "FH tunnel", "section_width_cm": 20, "section_height_cm": 20, "respirometer_volume_l": 30.0},
        "fish": fish,
        "protocol": protocol,
        "sensor": {"sensor": "test probe"},
        "blanks": list(blanks),
        "raw_files": [] if raw is None else [{"sha256": hashlib.sha256(raw).hexdigest(), "name": "trial.csv"}],
    }
    doc.update(extra)
    return doc


def _blanks(simulated) -> list[dict]:
    return [{"channel": "A", "time_s": b.time_s, "slope_mg_l_h": b.slope_mg_l_s * 3600.0} for b in simulated.truth.blanks]


def _raw(simulated) -> dict[str, bytes]:
    return {hashlib.sha256(simulated.csv_bytes).hexdigest(): simulated.csv_bytes}


def _step_protocol(speeds_cm_s, fatigue_fraction, start_s=0.0, **extra) -> dict:
    n = len(speeds_cm_s)
    return {"type": "step_ucrit", "start_s": start_s,
            "steps": [{"speed_cm_s": u, "duration_min": STEP_S / 60} for u in speeds_cm_s],
            "cycle": {"source": "pump", "wait_s": 60.0},
            "fatigue_time_s": start_s + (n - 1 + fatigue_fraction) * STEP_S, **extra}


def _problem_fields(analysis) -> set[str]:
    return {p.field for p in analysis.protocol.problems}


def _parts(analysis) -> set[str]:
    r = analysis.protocol.results
    return set(r["part"]) if not r.empty else set()


SIM = {"sample_interval_s": 2.0, "sensor_noise_pct": 0.1, "respirometer_volume_l": 30.0, "fish_mass_g": 420.0,
       "background_rate_mg_l_h": 0.03, **CYCLE}


# =============================================================================================
# Ramp
# =============================================================================================


@pytest.fixture(scope="module")
def ramp_trial():
    trial = sim.simulate_ramp_trial(seed=31, ramp_rate_m_s2=1.5 / 100 / 60, start_speed_m_s=0.15,
                                    time_to_fatigue_s=2400.0, rest_s=2400.0, after_s=1200.0,
                                    mo2_model="exponential", mo2_params=(70.0, 2.2), **SIM)
    session = Session.from_json_dict(_doc(
        protocol={"type": "ramp", "start_s": trial.start_s, "ramp_rate_cm_s_per_min": 1.5,
                  "ramp_start_speed_cm_s": 15.0, "cycle": {"source": "pump", "wait_s": 60.0},
                  "fatigue_time_s": trial.fatigue_time_s},
        raw=trial.simulated.csv_bytes, blanks=_blanks(trial.simulated)))
    return trial, session, analyse(session, _raw(trial.simulated), n_boot=50)


def test_ramp_umax_on_set_and_corrected_speed(ramp_trial):
    trial, _, analysis = ramp_trial
    pr = analysis.protocol
    # Hand-worked (Farrell 2008, constant acceleration): Umax = 15 cm/s + 1.5 cm/s/min × 40 min = 75 cm/s.
    assert pr.result("FH-1", "ramp_umax_set") == pytest.approx(75.0, rel=1e-12)
    assert trial.truth["umax_m_s"] * 100 == pytest.approx(75.0, rel=1e-12)
    # The corrected Umax is the set Umax times (1 + ε_s) of Bell & Terhune (1970), as in the fish table.
    eps = float(analysis.fish["blocking_epsilon"].iloc[0])
    assert pr.result("FH-1", "ramp_umax") == pytest.approx(75.0 * (1 + eps), rel=1e-9)
    assert pr.result("FH-1", "ramp_umax_bl") == pytest.approx(75.0 * (1 + eps) / 32.0, rel=1e-9)
    assert pr.result("FH-1", "ramp_time_to_fatigue") == pytest.approx(40.0)
    # never shown as a step Ucrit: no Ucrit in the step results, flagged as not comparable
    assert not set(analysis.results["quantity"]) & {"ucrit", "ucrit_set", "ucrit_bl"}
    assert "PROTOCOL_NOT_COMPARABLE" in set(analysis.flags["code"])
    assert all(label.startswith("Ramp") for label in pr.results["label"])


def test_ramp_mo2_along_the_ramp_matches_the_simulated_truth(ramp_trial):
    trial, _, analysis = ramp_trial
    table = analysis.protocol.tables["ramp_phases"].set_index("cycle")
    truth = trial.simulated.truth.phases.set_index("cycle")
    assert len(table) >= 3
    # the mid-time speed of a phase on a linear ramp is its mean speed (the simulator's truth)
    np.testing.assert_allclose(table["set_speed_cm_s"], truth.loc[table.index, "speed_m_s"] * 100, rtol=1e-3)
    used = table[table["used"]]
    # 5 %: a phase's slope under rising MO2 weights its middle; truth is the phase mean
    np.testing.assert_allclose(used["mo2_mg_kg_h"], truth.loc[used.index, "mo2_mg_kg_h"], rtol=0.05)
    assert analysis.protocol.result("FH-1", "ramp_mo2_max") == pytest.approx(used["mo2_mg_kg_h"].max())


def test_ramp_without_a_rate_is_refused_at_entry(ramp_trial):
    _, session, _ = ramp_trial
    doc = session.to_json_dict()
    doc["protocol"]["ramp_rate_cm_s_per_min"] = None
    result, problems = validate_session(doc)
    assert result is None
    assert [(p.field, p.message) for p in problems] == [
        ("protocol.ramp_rate_cm_s_per_min", "a ramp protocol needs a ramp rate")]


def test_ramp_without_a_fatigue_time_computes_no_umax(ramp_trial):
    _, session, _ = ramp_trial
    doc = session.to_json_dict()
    doc["protocol"]["fatigue_time_s"] = None
    bare = Session.from_json_dict({**doc, "raw_files": [], "blanks": []})
    analysis = analyse(bare, {})
    assert analysis.protocol.results.empty
    assert "FATIGUE_NOT_RECORDED" in set(analysis.flags["code"])


# =============================================================================================
# Endurance
# =============================================================================================

LIMIT_MIN = 90.0
# (set speed cm/s, fatigue after the start [s] or None for still swimming at the limit)
ENDURANCE_FISH = [(45.0, None), (45.0, None), (55.0, 3600.0), (55.0, None), (65.0, 1500.0), (65.0, 900.0),
                  (65.0, 2100.0)]


def _endurance_session(i: int, speed_cm_s: float, fatigue_s: float | None, *, limit_min: float = LIMIT_MIN) -> Session:
    start = 600.0
    events = [] if fatigue_s is None else [
        {"time_s": start + fatigue_s, "kind": "fatigue", "fish_id": f"FH-E{i}", "description": "on the grid 10 s"}]
    return Session.from_json_dict(_doc(
        session_id=f"fh-e{i}",
        fish=[{"fish_id": f"FH-E{i}", "chamber": "A", "mass_g": 400.0 + 5 * i, "total_length_cm": 31.0 + 0.2 * i,
               "body_depth_cm": 6.8, "body_width_cm": 3.5, "species": "Salmo trutta"}],
        protocol={"type": "endurance", "start_s": start, "set_speed_cm_s": speed_cm_s, "time_limit_min": limit_min,
                  "cycle": {"source": "pump", "wait_s": 60.0}},
        events=events))


@pytest.fixture(scope="module")
def endurance_items():
    items = []
    for i, (u, t) in enumerate(ENDURANCE_FISH, start=1):
        session = _endurance_session(i, u, t)
        items.append((session, analyse(session, {})))
    return items


def test_endurance_time_to_fatigue_or_censored_at_the_limit(endurance_items):
    for (session, analysis), (_, fatigue) in zip(endurance_items, ENDURANCE_FISH, strict=True):
        fid = session.fish[0].fish_id
        pr = analysis.protocol
        outcome = pr.endurance[fid]
        if fatigue is None:
            assert not outcome.fatigued and outcome.time_s == LIMIT_MIN * 60
            assert pr.result(fid, "endurance_fatigued") == 0.0
            note = pr.results.set_index("quantity").loc["endurance_time", "note"]
            assert "censored" in note
            assert "ENDURANCE_CENSORED" in set(analysis.flags["code"])
        else:
            assert outcome.fatigued and outcome.time_s == fatigue
            assert pr.result(fid, "endurance_time") == pytest.approx(fatigue / 60)
            assert "ENDURANCE_CENSORED" not in set(analysis.flags["code"])
        assert pr.result(fid, "endurance_speed_set") == session.protocol.set_speed_cm_s
        assert pr.result(fid, "endurance_speed") > session.protocol.set_speed_cm_s  # blocking raises it


def test_endurance_summary_kaplan_meier_matches_statsmodels(endurance_items):
    summary = endurance_summary(endurance_items)
    assert summary is not None and len(summary.fish) == len(ENDURANCE_FISH)
    for speed, part in summary.kaplan_meier.groupby("set_speed_cm_s"):
        chosen = [(t if t is not None else LIMIT_MIN * 60, t is not None) for u, t in ENDURANCE_FISH if u == speed]
        times = np.array([c[0] for c in chosen])
        events = np.array([c[1] for c in chosen], dtype=int)
        if events.sum() == 0:
            assert (part["share_swimming"] == 1.0).all()
            continue
        ref = SurvfuncRight(times, events)  # reference: statsmodels' Kaplan–Meier
        ours = part[part["fatigued"] > 0]
        np.testing.assert_allclose(ours["time_s"], ref.surv_times)
        np.testing.assert_allclose(ours["share_swimming"], ref.surv_prob, rtol=1e-12)


def test_endurance_summary_speeds(endurance_items):
    summary = endurance_summary(endurance_items)
    # Our rule (protocols.endurance): the highest set speed below the first at which a fish fatigued.
    assert summary.max_sustained.speed_m_s == pytest.approx(0.45)
    fit = summary.fatigue_curve
    assert fit is not None and fit.slope < 0 and fit.n_censored == 3
    # U50 = (log10 L − a) / b, where the fitted median endurance equals the limit
    expected = (math.log10(LIMIT_MIN * 60) - fit.intercept) / fit.slope
    assert summary.half_fatigued.speed_m_s == pytest.approx(expected, rel=1e-12)
    assert float(fit.median_time_s(summary.half_fatigued.speed_m_s)) == pytest.approx(LIMIT_MIN * 60, rel=1e-9)


def test_endurance_different_limits_are_censored_at_the_shortest(endurance_items):
    longer = _endurance_session(9, 55.0, 6000.0, limit_min=120.0)  # fatigued after 100 min of a 120 min limit
    summary = endurance_summary([*endurance_items, (longer, analyse(longer, {}))])
    row = summary.fish.set_index("fish_id").loc["FH-E9"]
    assert not row["fatigued"] and row["time_min"] == pytest.approx(LIMIT_MIN)
    assert any("time limits differ" in p for p in summary.problems)


def test_endurance_without_a_time_limit_is_refused_at_entry():
    doc = _endurance_session(1, 45.0, None).to_json_dict()
    doc["protocol"]["time_limit_min"] = None
    _, problems = validate_session(doc)
    assert [p.field for p in problems] == ["protocol.time_limit_min"]
    assert "needs a time limit" in problems[0].message


def test_endurance_fatigue_beyond_the_limit_is_refused_at_entry():
    doc = _endurance_session(1, 45.0, None).to_json_dict()
    doc["protocol"]["fatigue_time_s"] = 600.0 + LIMIT_MIN * 60 + 60.0
    _, problems = validate_session(doc)
    assert [p.field for p in problems] == ["protocol.fatigue_time_s"]
    assert "beyond the time limit" in problems[0].message


def test_endurance_fatigue_event_beyond_the_limit_computes_nothing():
    session = _endurance_session(1, 45.0, LIMIT_MIN * 60 + 120.0)
    analysis = analyse(session, {})
    assert analysis.protocol.results.empty and not analysis.protocol.endurance
    assert _problem_fields(analysis) == {"events.0"}
    assert "beyond the time limit" in analysis.protocol.problems[0].message
    assert "PROTOCOL_RESULT_NOT_COMPUTED" in set(analysis.flags["code"])


# =============================================================================================
# Repeat swim
# =============================================================================================

SPEEDS = (20.0, 30.0, 40.0, 50.0, 60.0, 70.0)


def _swim(session_id, fatigue_fraction, fish_id="FH-P1", treatment="", **protocol):
    """A step test of one fish; with protocol fields (rest interval, first swim) a repeat swim."""
    kind = {"type": "repeat_ucrit"} if protocol else {}
    return Session.from_json_dict(_doc(
        session_id=session_id,
        fish=[{"fish_id": fish_id, "chamber": "A", "mass_g": 460.0, "total_length_cm": 33.0, "body_depth_cm": 7.2,
               "body_width_cm": 3.7}],
        protocol={**_step_protocol(SPEEDS, fatigue_fraction), **kind, **protocol},
        conditions={"treatment": treatment}))


def test_recovery_ratio_hand_worked():
    first = _swim("fh-p1-a", 0.7)
    second = _swim("fh-p1-b", 0.35, rest_interval_min=40.0, first_swim_session_id="fh-p1-a")
    a1 = analyse(first, {})
    a2 = analyse(second, {}, first_swim=a1)
    # Brett (1964) on set speeds: 60 + 0.7·10 = 67 and 60 + 0.35·10 = 63.5 cm/s; both are scaled by
    # the same blocking factor on corrected speed, so RR = 63.5 / 67 (Jain, Birtwell & Farrell 1998).
    pr = a2.protocol
    assert pr.result("FH-P1", "repeat_recovery_ratio") == pytest.approx(63.5 / 67.0, rel=1e-9)
    assert pr.result("FH-P1", "repeat_ucrit_first") == pytest.approx(a1.result("FH-P1", "ucrit"), rel=1e-12)
    assert pr.result("FH-P1", "repeat_ucrit_second") == pytest.approx(a2.result("FH-P1", "ucrit"), rel=1e-12)
    assert pr.first_swim_session_id == "fh-p1-a"
    assert pr.result("FH-P1", "repeat_rest_interval") == 40.0


def test_repeat_pair_of_two_different_fish_computes_nothing():
    first = analyse(_swim("fh-p2-a", 0.7, fish_id="FH-P2"), {})
    second = _swim("fh-p3-b", 0.4, fish_id="FH-P3", rest_interval_min=40.0, first_swim_session_id="fh-p2-a")
    analysis = analyse(second, {}, first_swim=first)
    assert analysis.protocol.results.empty and not analysis.protocol.repeat
    (problem,) = analysis.protocol.problems
    assert problem.field == "fish.0.fish_id"
    assert "two swims of one fish" in problem.message and "'FH-P3'" in problem.message
    assert "PROTOCOL_RESULT_NOT_COMPUTED" in set(analysis.flags["code"])
    # and across sessions the pair is not formed either
    summary = repeat_pairs([(_swim("fh-p2-a", 0.7, fish_id="FH-P2"), first), (second, analysis)])
    assert summary.pairs.empty and "two swims of one fish" in summary.problems[0]


def test_repeat_without_the_first_swim_or_with_another_session_says_so():
    second = _swim("fh-p1-b", 0.35, rest_interval_min=40.0, first_swim_session_id="fh-p1-a")
    assert _problem_fields(analyse(second, {})) == {"first_swim"}
    other = analyse(_swim("fh-other", 0.7), {})
    assert _problem_fields(analyse(second, {}, first_swim=other)) == {"protocol.first_swim_session_id"}
    doc = second.to_json_dict()
    doc["protocol"]["first_swim_session_id"] = doc["session_id"]
    _, problems = validate_session(doc)
    assert [p.field for p in problems] == ["protocol.first_swim_session_id"]


def test_repeat_pairs_group_summary_and_welch_comparison():
    # Four fish per treatment; fatigue fractions set the second-swim Ucrit (first swims at 0.8).
    second_fraction = {"control": (0.75, 0.8, 0.7, 0.78), "exposed": (0.3, 0.45, 0.2, 0.5)}
    items = []
    for treatment, fractions in second_fraction.items():
        for k, frac in enumerate(fractions):
            fid = f"FH-{treatment[0].upper()}{k}"
            first = _swim(f"fh-{treatment}-{k}-a", 0.8, fish_id=fid)
            second = _swim(f"fh-{treatment}-{k}-b", frac, fish_id=fid, rest_interval_min=40.0,
                           first_swim_session_id=first.session_id, treatment=treatment)
            items += [(first, analyse(first, {})), (second, analyse(second, {}))]
    summary = repeat_pairs(items)
    assert len(summary.pairs) == 8 and not summary.problems
    groups = summary.groups.set_index("treatment")
    for treatment, fractions in second_fraction.items():
        ratios = np.array([(60 + 10 * f) / 68.0 for f in fractions])  # hand-worked on set speeds
        g = groups.loc[treatment]
        assert g["mean_ratio"] == pytest.approx(ratios.mean(), rel=1e-9)
        se = ratios.std(ddof=1) / math.sqrt(4)
        assert g["se"] == pytest.approx(se, rel=1e-9)
        assert g["ci_high"] - g["mean_ratio"] == pytest.approx(stats.t.ppf(0.975, 3) * se, rel=1e-9)
    a = np.array([(60 + 10 * f) / 68.0 for f in second_fraction["control"]])
    b = np.array([(60 + 10 * f) / 68.0 for f in second_fraction["exposed"]])
    va, vb = a.var(ddof=1) / 4, b.var(ddof=1) / 4
    welch_df = (va + vb) ** 2 / (va**2 / 3 + vb**2 / 3)  # Welch (1947), worked by hand
    assert summary.comparison["df"] == pytest.approx(welch_df, rel=1e-9)
    assert summary.comparison["t"] == pytest.approx((a.mean() - b.mean()) / math.sqrt(va + vb), rel=1e-9)
    assert summary.comparison["difference"] > 0


# =============================================================================================
# Post-exercise recovery (EPOC)
# =============================================================================================


def _recovery_session(trial, *, baseline="pre_exercise", **protocol) -> Session:
    return Session.from_json_dict(_doc(
        protocol={"type": "recovery", "start_s": trial.start_s, "fatigue_time_s": trial.fatigue_time_s,
                  "steps": [{"speed_cm_s": u, "duration_min": 10.0} for u in (30.0, 45.0, 60.0, 75.0)],
                  "cycle": {"source": "pump", "wait_s": 60.0}, "recovery_baseline": baseline, **protocol},
        raw=trial.simulated.csv_bytes, blanks=_blanks(trial.simulated)))


@pytest.fixture(scope="module")
def recovery_trial():
    # EPOC put in: one phase, A = 200 mg O2 kg-1 h-1, k = 1/2400 s -> EPOC = 200·2400/3600 = 133.3 mg O2 kg-1.
    return sim.simulate_recovery_trial(seed=41, exercise_speeds_m_s=(0.30, 0.45, 0.60, 0.75), exercise_step_s=600.0,
                                       epoc_amplitudes_mg_kg_h=(200.0,), epoc_rates_per_s=(1 / 2400.0,),
                                       rest_s=4800.0, recovery_s=12000.0, mo2_params=(70.0, 2.2), **SIM)


@pytest.fixture(scope="module")
def recovery_analysis(recovery_trial):
    session = _recovery_session(recovery_trial)
    return session, analyse(session, _raw(recovery_trial.simulated), n_boot=50)


def test_epoc_recovers_the_simulated_truth(recovery_trial, recovery_analysis):
    truth = recovery_trial.truth
    assert truth["epoc_mg_kg"] == pytest.approx(200 * 2400 / 3600)
    _, analysis = recovery_analysis
    pr = analysis.protocol
    # 5 %: MO2 from slopes over 6 min phases, with sensor noise; the decay is fitted to them
    assert pr.result("FH-1", "recovery_epoc_fit") == pytest.approx(truth["epoc_mg_kg"], rel=0.05)
    assert pr.result("FH-1", "recovery_t50") * 60 == pytest.approx(truth["t50_s"], rel=0.10)
    assert pr.result("FH-1", "recovery_t95") * 60 == pytest.approx(truth["t95_s"], rel=0.10)
    assert pr.result("FH-1", "recovery_baseline") == pytest.approx(truth["baseline_mg_kg_h"], rel=0.03)
    assert all(label.startswith("Recovery") for label in pr.results["label"])


def test_epoc_baseline_and_trapezoids_follow_the_table(recovery_trial, recovery_analysis):
    session, analysis = recovery_analysis
    m = analysis.measure
    mid = (m["start_s"] + m["end_s"]) / 2
    pre = m[m["used"] & (m["end_s"] <= session.protocol.start_s)]
    # the pre-exercise baseline is the mean of the accepted phases before the exercise
    assert analysis.protocol.result("FH-1", "recovery_baseline") == pytest.approx(pre["mo2_mg_kg_h"].mean(), rel=1e-12)
    curve = analysis.protocol.tables["recovery_curve"]
    after = m[m["used"] & (mid > session.protocol.fatigue_time_s)]
    assert list(curve["cycle"]) == list(after["cycle"])
    # trapezoid EPOC checked with numpy's trapezoid rule over the same table [mg O2 kg-1]
    area = np.trapezoid(curve["excess_mg_kg_h"], curve["time_after_exhaustion_s"]) / 3600.0
    assert analysis.protocol.result("FH-1", "recovery_epoc_trapezoid") == pytest.approx(area, rel=1e-12)


def test_total_oxygen_cost_and_cost_of_transport_with_epoc(recovery_analysis):
    _, analysis = recovery_analysis
    pr = analysis.protocol
    steps = analysis.steps[analysis.steps["step"] <= 4]
    aerobic = float((steps["mo2_mg_kg_h"] * 600.0).sum()) / 3600.0  # Σ MO2·t, by hand
    distance = float((steps["corrected_speed_cm_s"] / 100 * 600.0).sum())
    epoc_fit = pr.result("FH-1", "recovery_epoc_fit")
    assert pr.result("FH-1", "recovery_aerobic_cost") == pytest.approx(aerobic, rel=1e-12)
    assert pr.result("FH-1", "recovery_total_o2_cost") == pytest.approx(aerobic + epoc_fit, rel=1e-12)
    assert pr.result("FH-1", "recovery_cot_total") == pytest.approx((aerobic + epoc_fit) / distance * 1000, rel=1e-12)


def test_epoc_from_an_entered_smr_and_from_the_fitted_asymptote(recovery_trial):
    raw = _raw(recovery_trial.simulated)
    entered = analyse(_recovery_session(recovery_trial, baseline="smr", recovery_baseline_mg_kg_h=70.0), raw, n_boot=20)
    assert entered.protocol.result("FH-1", "recovery_baseline") == 70.0
    assert "SMR as entered" in entered.protocol.results.set_index("quantity").loc["recovery_baseline", "method"]
    fitted = analyse(_recovery_session(recovery_trial, baseline="fitted_asymptote"), raw, n_boot=20)
    # the asymptote of the fit recovers the simulator's resting MO2 (5 %: fitted, not measured)
    assert fitted.protocol.result("FH-1", "recovery_baseline") == pytest.approx(
        recovery_trial.truth["baseline_mg_kg_h"], rel=0.05)


def test_recovery_series_of_fewer_than_three_phases_computes_nothing():
    short = sim.simulate_recovery_trial(seed=42, exercise_speeds_m_s=(0.3, 0.5), exercise_step_s=600.0,
                                        epoc_amplitudes_mg_kg_h=(200.0,), epoc_rates_per_s=(1 / 2400.0,),
                                        rest_s=2400.0, recovery_s=1200.0, mo2_params=(70.0, 2.2), **SIM)
    session = Session.from_json_dict(_doc(
        protocol={"type": "recovery", "start_s": short.start_s, "fatigue_time_s": short.fatigue_time_s,
                  "cycle": {"source": "pump", "wait_s": 60.0}, "recovery_baseline": "pre_exercise"},
        raw=short.simulated.csv_bytes, blanks=_blanks(short.simulated)))
    analysis = analyse(session, _raw(short.simulated), n_boot=20)
    assert analysis.protocol.results.empty and not analysis.protocol.recovery
    (problem,) = analysis.protocol.problems
    assert problem.field == "measure phases after exhaustion (protocol.fatigue_time_s)"
    assert problem.message == "EPOC needs at least three measure phases after exhaustion; got 2"
    assert "PROTOCOL_RESULT_NOT_COMPUTED" in set(analysis.flags["code"])


def test_recovery_without_a_baseline_choice_or_exhaustion_time_says_so(recovery_trial):
    session = _recovery_session(recovery_trial, baseline=None)
    bare = Session.from_json_dict({**session.to_json_dict(), "raw_files": [], "blanks": []})
    assert _problem_fields(analyse(bare, {})) == {"protocol.recovery_baseline"}
    doc = bare.to_json_dict()
    doc["protocol"].update(recovery_baseline="smr", fatigue_time_s=None)
    assert _problem_fields(analyse(Session.from_json_dict(doc), {})) == {"protocol.fatigue_time_s"}
    doc["protocol"].update(recovery_baseline="pre_exercise", recovery_baseline_mg_kg_h=80.0)
    _, problems = validate_session(doc)
    assert [p.field for p in problems] == ["protocol.recovery_baseline_mg_kg_h"]


# =============================================================================================
# Gait and kinematics (no trace needed: the step table gives corrected speeds)
# =============================================================================================

GAIT_SPEEDS = (10.0, 17.0, 24.0, 31.0, 38.0, 45.0)


def _gait_session(kinematics=None, events=None) -> Session:
    start = 600.0
    begin = lambda k: start + (k - 1) * STEP_S  # noqa: E731
    events = events if events is not None else [
        {"time_s": begin(3) + 100.0, "kind": "gait_change", "fish_id": "FH-W1", "description": "pectoral to caudal"},
        {"time_s": begin(5) + 50.0, "kind": "burst", "fish_id": "FH-W1", "count": 4},
        {"time_s": begin(6) + 50.0, "kind": "burst", "fish_id": "FH-W1", "count": 6},
        {"time_s": begin(6) + 600.0, "kind": "fatigue", "fish_id": "FH-W1", "description": "on the grid"},
    ]
    if kinematics is None:
        kinematics = [{"step": k, "tail_beat_count": c, "window_s": 20.0, "amplitude_cm": a}
                      for k, c, a in ((1, 0, None), (2, 0, None), (3, 50, 5.0), (4, 58, 5.1), (5, 66, 5.2))]
        kinematics.append({"step": 6, "tail_beat_count": 37, "frames": 2400, "frame_rate_hz": 240.0,
                           "amplitude_cm": 5.3})
    return Session.from_json_dict(_doc(
        fish=[{"fish_id": "FH-W1", "chamber": "A", "mass_g": 300.0, "total_length_cm": 26.0, "body_depth_cm": 7.0,
               "body_width_cm": 3.2}],
        protocol=_step_protocol(GAIT_SPEEDS, 0.5, start_s=start), events=events, kinematics=kinematics))


@pytest.fixture(scope="module")
def gait_analysis():
    session = _gait_session()
    return session, analyse(session, {})


def test_gait_transition_burst_onset_and_bursts_per_minute(gait_analysis):
    _, analysis = gait_analysis
    pr = analysis.protocol
    corrected = analysis.steps.set_index("step")["corrected_speed_cm_s"]
    assert pr.result("FH-W1", "gait_upc") == pytest.approx(corrected[3], rel=1e-12)
    assert pr.result("FH-W1", "gait_burst_onset") == pytest.approx(corrected[5], rel=1e-12)
    assert pr.result("FH-W1", "gait_upc_share_ucrit") == pytest.approx(corrected[3] / analysis.result("FH-W1", "ucrit"))
    steps = pr.tables["gait_steps"].set_index("step")
    # by hand: 4 bursts over a whole 20 min step = 0.2 /min; 6 bursts in the 10 min swum before fatigue = 0.6 /min
    assert steps.loc[5, "bursts_per_min"] == pytest.approx(0.2)
    assert steps.loc[6, "bursts_per_min"] == pytest.approx(0.6)
    assert steps.loc[3, "share_of_upc"] == pytest.approx(1.0)


def test_kinematics_frequency_strouhal_bainbridge_by_hand(gait_analysis):
    _, analysis = gait_analysis
    table = analysis.protocol.tables["kinematics"].set_index("step")
    u = analysis.steps.set_index("step")["corrected_speed_cm_s"]
    assert table.loc[3, "frequency_hz"] == pytest.approx(50 / 20.0)
    assert table.loc[6, "frequency_hz"] == pytest.approx(37 / (2400 / 240.0))  # frames / frame rate = 10 s
    # St = f·A/U (Taylor, Nudds & Thomas 2003); stride = U/f (Videler & Wardle 1991)
    assert table.loc[4, "strouhal"] == pytest.approx(2.9 * 5.1 / u[4], rel=1e-12)
    assert table.loc[4, "stride_length_cm"] == pytest.approx(u[4] / 2.9, rel=1e-12)
    # Bainbridge (1958): U = ¼ L (3f − 4), L = 26 cm
    assert table.loc[5, "bainbridge_speed_cm_s"] == pytest.approx(0.25 * 26.0 * (3 * 3.3 - 4), rel=1e-12)
    # pectoral swimming: frequency 0, no stride or Strouhal number
    assert table.loc[1, "frequency_hz"] == 0.0 and np.isnan(table.loc[1, "strouhal"])
    assert {"STROUHAL_OUTSIDE_EFFICIENT"} <= set(analysis.flags["code"])


def test_kinematics_frequency_speed_line_matches_statsmodels_ols(gait_analysis):
    _, analysis = gait_analysis
    table = analysis.protocol.tables["kinematics"]
    beating = table[table["frequency_hz"] > 0]
    ols = sm.OLS(beating["frequency_hz"].to_numpy(), sm.add_constant(beating["speed_cm_s"].to_numpy())).fit()
    pr = analysis.protocol
    assert pr.result("FH-W1", "kinematics_fs_intercept") == pytest.approx(ols.params[0], rel=1e-9)
    assert pr.result("FH-W1", "kinematics_fs_slope") == pytest.approx(ols.params[1], rel=1e-9)
    row = pr.results.set_index("quantity").loc["kinematics_fs_slope"]
    low, high = ols.conf_int(0.05)[1]
    assert (row["ci_low"], row["ci_high"]) == pytest.approx((low, high), rel=1e-9)
    assert pr.result("FH-W1", "kinematics_stride_length_line") == pytest.approx(1 / ols.params[1], rel=1e-9)


def test_tail_beat_count_without_a_window_is_refused_at_entry():
    doc = _gait_session().to_json_dict()
    doc["kinematics"] = [{"step": 2, "tail_beat_count": 40, "window_s": None}]
    _, problems = validate_session(doc)
    assert [(p.field, p.message) for p in problems] == [
        ("kinematics.0.window_s", "a tail-beat count needs its counting window [s] (or video frames and the frame rate)")]
    doc["kinematics"] = [{"step": 2, "tail_beat_count": 40, "frames": 300}, {"step": 9, "tail_beat_count": 4,
                                                                               "window_s": 2.0}]
    _, problems = validate_session(doc)
    assert [p.field for p in problems] == ["kinematics.0.frame_rate_hz", "kinematics.1.step"]


def test_gait_without_steps_says_so():
    doc = _gait_session(kinematics=[]).to_json_dict()
    doc["protocol"] = {"type": "ramp", "ramp_rate_cm_s_per_min": 2.0, "cycle": {"source": "pump", "wait_s": 60.0},
                       "start_s": 600.0, "fatigue_time_s": 3000.0}
    analysis = analyse(Session.from_json_dict(doc), {})
    assert _problem_fields(analysis) == {"protocol.steps"}
    assert _parts(analysis) == {"ramp"}


# =============================================================================================
# Names, exports and the demo sessions
# =============================================================================================


def test_every_quantity_label_names_its_protocol():
    prefix = {"ramp": "Ramp", "endurance": "Endurance", "repeat": "Repeat", "recovery": "Recovery", "gait": "Gait",
              "kinematics": "Kinematics", "group": "Group trial"}
    for quantity, label in QUANTITY_LABELS.items():
        assert label.startswith(prefix[quantity.split("_")[0]]), (quantity, label)


def test_protocol_results_are_in_the_json_export(recovery_analysis, gait_analysis):
    for _, analysis in (recovery_analysis, gait_analysis):
        doc = json.loads(json.dumps(analysis.to_json_dict(), allow_nan=False))
        rows = doc["protocol"]["results"]
        assert rows and all(r["protocol"] == analysis.protocol.protocol for r in rows)
    doc = recovery_analysis[1].to_json_dict()["protocol"]
    assert doc["fits"]["FH-1"]["recovery_decay"]["model"] in ("one_phase", "two_phase")


@pytest.fixture(scope="module")
def demo_items():
    items = {}
    for path in sorted(DEMO.iterdir()):
        if not (path / "session.json").is_file() or path.name[5] not in "repvw":
            continue
        contents = read_bundle(path)
        items[path.name] = (contents.session, contents.raw_files)
    analysed = {}
    for name, (session, raw) in sorted(items.items(), key=lambda kv: kv[1][0].protocol.type == "repeat_ucrit"):
        first = session.protocol.first_swim_session_id
        first_analysis = next((a for s, a in analysed.values() if s.session_id == first), None) if first else None
        analysed[name] = (session, analyse(session, raw, n_boot=50, first_swim=first_analysis))
    return analysed


def _truth(name: str) -> dict:
    return json.loads((DEMO / "truth" / f"{name}.json").read_text())


def test_demo_protocol_trials_recover_their_truth(demo_items):
    types = {s.protocol.type for s, _ in demo_items.values()}
    assert types >= {"ramp", "endurance", "repeat_ucrit", "recovery", "step_ucrit"}
    session, ramp_a = demo_items["bw26-r01-ramp"]
    assert ramp_a.protocol.result("BW26-R01", "ramp_umax_set") == pytest.approx(_truth("bw26-r01-ramp")["umax_m_s"] * 100)
    _, rec = demo_items["bw26-v01-recovery-epoc"]
    assert rec.protocol.result("BW26-V01", "recovery_epoc_fit") == pytest.approx(
        _truth("bw26-v01-recovery-epoc")["epoc_mg_kg"], rel=0.05)  # 5 %: as for the simulated test above
    _, second = demo_items["bw26-p02-second-swim"]
    ratio = _truth("bw26-p02-second-swim")["ucrit_set_m_s"] / _truth("bw26-p01-first-swim")["ucrit_set_m_s"]
    assert second.protocol.result("BW26-P01", "repeat_recovery_ratio") == pytest.approx(ratio, rel=1e-9)
    _, gait_a = demo_items["bw26-w01-gait-kinematics"]
    assert gait_a.protocol.gait["BW26-W01"].upc_step == _truth("bw26-w01-gait-kinematics")["upc_step"]
    assert "kinematics" in gait_a.protocol.tables
    summary = endurance_summary(list(demo_items.values()))
    truths = [_truth(n) for n in demo_items if n.endswith("-endurance")]
    assert summary.fish["fatigued"].sum() == sum(t["fatigued"] for t in truths)
    assert 0 < summary.fish["fatigued"].sum() < len(truths)  # some fish still swimming at the limit
    for problem in (p for _, a in demo_items.values() for p in a.protocol.problems):
        pytest.fail(f"demo session with a protocol problem: {problem}")


def test_a_copy_of_a_session_gives_the_same_protocol_results(gait_analysis):
    session, analysis = gait_analysis
    again = analyse(Session.from_json_dict(copy.deepcopy(session.to_json_dict())), {})
    pd.testing.assert_frame_equal(again.protocol.results, analysis.protocol.results)


def test_protocol_problem_reads_as_a_sentence():
    second = _swim("fh-x-b", 0.35, rest_interval_min=40.0, first_swim_session_id="fh-x-a")
    (problem,) = analyse(second, {}).protocol.problems
    assert str(problem).startswith("Repeat swim (recovery ratio): field 'first_swim': the recovery ratio needs")
    with pytest.raises(InputError):
        Session.from_json_dict({**second.to_json_dict(), "kinematics": [{"step": 1, "tail_beat_count": 3}]})


def test_command_line_prints_protocol_results_with_their_names(capsys, tmp_path):
    from swimlab import cli

    # the second swim's bundle finds its first swim beside it, so the recovery ratio is computed
    code = cli.main(["analyse", str(DEMO / "bw26-p02-second-swim"), "--out", str(tmp_path / "p02")])
    out = capsys.readouterr().out
    assert code == 0
    ratio = _truth("bw26-p02-second-swim")["ucrit_set_m_s"] / _truth("bw26-p01-first-swim")["ucrit_set_m_s"]
    assert f"[repeat] BW26-P01  Repeat-swim recovery ratio: {ratio:.4g} -" in out
    code = cli.main(["analyse", str(DEMO / "bw26-r01-ramp"), "--out", str(tmp_path / "r01")])
    out = capsys.readouterr().out
    assert code == 0 and "[ramp] BW26-R01  Ramp Umax (set speed): 75 cm/s" in out
    assert "  BW26-R01  ucrit" not in out  # a ramp prints no step Ucrit
    exported = pd.read_csv(tmp_path / "r01" / "protocol_results.csv")
    assert set(exported["protocol"]) == {"ramp"} and exported["label"].str.startswith("Ramp").all()


def test_protocol_figures_carry_their_protocol_names(ramp_trial, recovery_analysis, gait_analysis, endurance_items):
    from swimlab import plots

    ramp_fig = plots.ramp_mo2_figure(ramp_trial[2].protocol, "FH-1")
    assert ramp_fig.layout.title.text.startswith("Ramp test")
    assert any("ramp Umax" in (a.text or "") for a in ramp_fig.layout.annotations)
    epoc_fig = plots.epoc_figure(recovery_analysis[1].protocol, "FH-1")
    assert epoc_fig.layout.title.text.startswith("Post-exercise recovery (EPOC)")
    assert [t.name for t in epoc_fig.data][:2] == ["baseline (pre_exercise)", "fitted one-phase decay"]
    pr = gait_analysis[1].protocol
    assert plots.gait_figure(pr, "FH-W1").layout.title.text.startswith("Gait")
    tail = plots.frequency_speed_figure(pr, "FH-W1")
    assert tail.layout.title.text.startswith("Kinematics")
    bainbridge = next(t for t in tail.data if t.name.startswith("Bainbridge"))
    # the comparison line is Bainbridge's (1958) U = ¼ L (3f − 4) solved for f, L = 26 cm
    np.testing.assert_allclose(bainbridge.y, (4 * np.asarray(bainbridge.x) / 26.0 + 4) / 3, rtol=1e-12)
    summary = endurance_summary(endurance_items)
    km = plots.kaplan_meier_figure(summary)
    assert km.layout.title.text.startswith("Endurance") and len([t for t in km.data if t.showlegend is not False]) == 3
    assert plots.fatigue_curve_figure(summary).layout.yaxis.type == "log"
    # nothing to draw: None, not an empty figure
    assert plots.ramp_mo2_figure(pr, "FH-W1") is None and plots.epoc_figure(pr, "FH-W1") is None


def test_demo_repeat_pair_gets_a_measurement_interval(demo_items):
    # One flume and one calibration for both swims: the interval is the fatigue-time span's alone.
    # By hand (set speeds, as corrected and set give the same ratio here to 1e-9): each Ucrit moves
    # ΔU / t_ii = 0.10 m/s / 1200 s per second of fatigue time; span 30 s → SE 7.2169e-4 m/s, so
    # the relative SE of the ratio is √((7.2169e-4/U₁)² + (7.2169e-4/U₂)²) on blocking-corrected
    # speeds scaled by the same factor (the ΔU is corrected too).
    _, second = demo_items["bw26-p02-second-swim"]
    rr = second.protocol.repeat["BW26-P01"]
    assert rr.ci_method == "fieller1954" and "cancels" in rr.uncertainty
    _, first = demo_items["bw26-p01-first-swim"]
    u1 = first.ucrit["BW26-P01"]["corrected"]
    se_t = u1.increment_m_s / u1.step_duration_s * 30.0 / math.sqrt(12.0)
    rel = math.hypot(se_t / rr.ucrit_1_m_s, se_t / rr.ucrit_2_m_s)
    assert (rr.ci_high - rr.ci_low) / 2 == pytest.approx(1.959964 * rr.ratio * rel, rel=1e-4)  # Fieller ≈ delta here
    row = second.protocol.results.set_index("quantity").loc["repeat_recovery_ratio"]
    assert row["ci_low"] == pytest.approx(rr.ci_low) and "Fieller (1954)" in row["note"]


def test_repeat_interval_widens_when_the_swims_used_different_flumes(demo_items):
    from dataclasses import replace

    _, second = demo_items["bw26-p02-second-swim"]
    session, _ = demo_items["bw26-p02-second-swim"]
    _, first = demo_items["bw26-p01-first-swim"]
    elsewhere = replace(first, flume_name="another tunnel")
    from swimlab.protocol_analysis import analyse_protocol

    pr, _ = analyse_protocol(session, replace(second, protocol=None), first_swim=elsewhere)
    rr = pr.repeat["BW26-P01"]
    shared = second.protocol.repeat["BW26-P01"]
    assert "two separate speed calibrations" in rr.uncertainty
    # two independent 2 % calibrations: relative SE ≈ 0.02·√2, far above the timing term
    assert rr.se / rr.ratio == pytest.approx(0.02 * math.sqrt(2), rel=0.05)
    assert rr.ci_high - rr.ci_low > 10 * (shared.ci_high - shared.ci_low)


def test_demo_endurance_series_gives_one_fatigue_curve_per_gait(demo_items):
    # The demo's truth: steady caudal swimming on log10 T = 6.2 − 4.0 U, burst-and-coast on the
    # steeper 9.28 − 8.0 U (set speed, m/s). Every trial's gait at the end is read from its events.
    from swimlab.protocol_analysis import gait_curve_sentences, gait_curve_table

    summary = endurance_summary(list(demo_items.values()))
    names = sorted(n for n in demo_items if n.endswith("-endurance"))
    assert list(summary.fish["gait"]) == [_truth(n)["gait_at_end"] for n in names]
    by = summary.by_gait
    assert set(by.curves) == {"steady_caudal", "burst_and_coast"} and not by.too_few
    steady, burst = by.curves["steady_caudal"], by.curves["burst_and_coast"]
    assert burst.slope < steady.slope < 0  # endurance falls faster in the burst-assisted domain
    # Corrected speeds are set speeds × (1 + ε) with ε ≈ 1–2 %, so the true slopes on them are
    # slightly shallower than on set speed; within 3 standard errors of truth (seeded demo):
    for fit, truth in ((steady, -4.0), (burst, -8.0)):
        assert abs(fit.slope - truth) < 3 * fit.slope_se
    table = gait_curve_table(summary)
    assert list(table["gait"]) == ["steady_caudal", "burst_and_coast"] and table["fitted"].all()
    assert any("likelihood ratio" in line for line in gait_curve_sentences(summary))


def test_fatigue_curves_per_gait_on_the_figure_and_the_command_line(demo_items, capsys, tmp_path):
    from swimlab import plots
    from swimlab.cli import main

    summary = endurance_summary(list(demo_items.values()))
    fig = plots.fatigue_curve_figure(summary)
    names = [t.name for t in fig.data]
    assert "steady caudal: median endurance (censored fit)" in names
    assert "burst-and-coast: median endurance (censored fit)" in names
    assert "all fish pooled: median endurance" in names
    bundles = [str(DEMO / n) for n in sorted(demo_items) if n.endswith("-endurance")]
    assert main(["fatigue-curves", *bundles, "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "12 fish, 3 still swimming at the 120 min limit" in out
    assert "per gait: burst-and-coast (unsteady, burst-assisted) swimming: 6 fish (0 censored)" in out
    assert (tmp_path / "fatigue_curves_by_gait.csv").is_file()
    assert main(["fatigue-curves", str(DEMO / "bw26-t01-clean-ucrit")]) == 2
