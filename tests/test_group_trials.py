"""Group trials: several fish swum together in one respirometer.

The simulator's chamber holds fish whose summed mass is the group's and whose mass-specific MO2
is the truth (every fish the same), so the group's MO2 per kg of summed mass must recover that
curve, its MO2 per fish must be the chamber's uptake over the number of fish, and the water the
uptake falls in must be the respirometer's volume minus the summed fish volumes (Svendsen,
Bushnell & Steffensen 2016, eq. 1, MO2 = (V_re − V_f) ΔC/Δt, applied with V_f summed; recalled
from memory, as in swimlab.uptake). Brett's (1964) Ucrit is worked by hand from the schedule.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from swimlab import checks, plots, sim
from swimlab.analysis import analyse
from swimlab.errors import InputError
from swimlab.io.logger import sha256_hex
from swimlab.report import group_curve_data, session_report, study_report, study_table
from swimlab.session import (
    GROUP_FATIGUE_DEFINITIONS,
    Session,
    group_fatigue_time_s,
    validate_session,
)

SPEEDS = (0.15, 0.25, 0.35, 0.45, 0.55, 0.65)
STEP_S = 1800.0
REST_S = 3 * 3600.0
A_TRUE, B_TRUE = 90.0, 2.4  # per-capita MO2 = a·e^(bU) [mg O2 kg⁻¹ h⁻¹], U in m/s
MASSES = (100.0, 110.0, 95.0, 105.0)
VOLUME_L = 60.0


def _fish(i: int, mass: float, chamber: str = "A") -> dict:
    return {"fish_id": f"G{i}", "chamber": chamber, "mass_g": mass, "total_length_cm": 20.0,
            "body_depth_cm": 4.4, "body_width_cm": 2.2}


def _doc(sha: str | None = None, *, groups=None, fish=None, fatigue_time_s=REST_S + 4 * STEP_S + 0.5 * STEP_S,
         events=(), blanks=(), ptype="step_ucrit") -> dict:
    doc = {
        "title": "group test",
        "water": {"temperature_c": 12.0},
        "flume": {"name": "test tunnel", "section_width_cm": 25, "section_height_cm": 25,
                  "respirometer_volume_l": VOLUME_L},
        "fish": fish if fish is not None else [_fish(i, m) for i, m in enumerate(MASSES)],
        "groups": groups if groups is not None else [
            {"group_id": "GRP", "chamber": "A", "fish_ids": [f"G{i}" for i in range(len(MASSES))],
             "fatigue_definition": "first_fish"}],
        "protocol": {"type": ptype, "start_s": REST_S, "fatigue_time_s": fatigue_time_s,
                     "steps": [{"speed_cm_s": u * 100, "duration_min": STEP_S / 60} for u in SPEEDS],
                     "cycle": {"source": "pump", "wait_s": 60}},
        "sensor": {"sensor": "test probe"},
        "events": list(events),
        "blanks": list(blanks),
        "raw_files": [] if sha is None else [{"sha256": sha, "name": "group.csv"}],
    }
    if ptype == "endurance":
        doc["protocol"].update(set_speed_cm_s=40.0, time_limit_min=60.0, fatigue_time_s=None)
    return doc


@pytest.fixture(scope="module")
def simulated():
    trial = sim.simulate_trial(
        seed=11, speeds_m_s=(0.05, *SPEEDS), step_duration_s=(REST_S,) + (STEP_S,) * len(SPEEDS), flush_s=240,
        wait_s=60, measure_s=600, respirometer_volume_l=VOLUME_L, fish_mass_g=sum(MASSES),
        mo2_model="exponential", mo2_params=(A_TRUE, B_TRUE), sensor_noise_pct=0.1, background_rate_mg_l_h=0.03,
    )
    sha = sha256_hex(trial.csv_bytes)
    blanks = [{"channel": "A", "time_s": b.time_s, "slope_mg_l_h": b.slope_mg_l_s * 3600.0} for b in trial.truth.blanks]
    session = Session.from_json_dict(_doc(sha, blanks=blanks))
    return trial, session, {sha: trial.csv_bytes}


@pytest.fixture(scope="module")
def analysis(simulated):
    _, session, raw = simulated
    return analyse(session, raw, n_boot=100)


def _problems(doc) -> dict[str, str]:
    session, problems = validate_session(doc)
    assert session is None
    return {p.field: p.message for p in problems}


# --- entry: bad input names the field -------------------------------------------------------------


def test_group_without_fatigue_definition_is_refused_at_entry():
    doc = _doc()
    del doc["groups"][0]["fatigue_definition"]
    problems = _problems(doc)
    assert "groups.0.fatigue_definition" in problems
    assert "first_fish" in problems["groups.0.fatigue_definition"]


def test_fish_in_two_groups_is_refused_at_entry():
    fish = [_fish(0, 100), _fish(1, 100), _fish(2, 100, "B"), _fish(3, 100, "B")]
    groups = [{"group_id": "X", "chamber": "A", "fish_ids": ["G0", "G1"], "fatigue_definition": "first_fish"},
              {"group_id": "Y", "chamber": "B", "fish_ids": ["G2", "G3", "G1"], "fatigue_definition": "last_fish"}]
    problems = _problems(_doc(fish=fish, groups=groups))
    assert "already in group 'X'" in problems["groups.1.fish_ids"]


def test_fish_sharing_a_chamber_without_a_group_are_refused_at_entry():
    problems = _problems(_doc(groups=[]))
    assert {"fish.0.chamber", "fish.1.chamber", "fish.2.chamber", "fish.3.chamber"} <= set(problems)
    assert "record fish swum together as a group" in problems["fish.0.chamber"]


@pytest.mark.parametrize(("change", "field", "words"), [
    (lambda d: d["groups"][0].update(fish_ids=["G0"]), "groups.0.fish_ids", "two or more"),
    (lambda d: d["groups"][0].update(fish_ids=["G0", "G1", "G2", "G3", "G9"]), "groups.0.fish_ids", "no fish"),
    (lambda d: d["groups"][0].update(group_id="G0"), "groups.0.group_id", "also a fish id"),
    (lambda d: d["groups"][0].update(fatigue_definition="stated"), "groups.0.fatigue_description", "description"),
    (lambda d: d["fish"][3].update(chamber="B"), "fish.3.chamber", "its chamber is 'B'"),
    (lambda d: d["groups"][0].update(fatigue_definition="half_group") or d.update(events=[
        {"time_s": REST_S + 100, "kind": "fatigue", "fish_id": "G0"},
        {"time_s": REST_S + 200, "kind": "fatigue", "fish_id": "G1"}]), "protocol.fatigue_time_s", "give 11000"),  # 2nd of 2 fatigues
    (lambda d: d["flume"].update(respirometer_volume_l=0.35), "groups.0.fish_ids", "summed fish volume"),
])
def test_bad_group_input_names_the_field(change, field, words):
    doc = _doc()
    change(doc)
    problems = _problems(doc)
    assert field in problems, problems
    assert words in problems[field]


def test_group_in_a_protocol_other_than_the_step_test_is_refused():
    problems = _problems(_doc(ptype="endurance"))
    assert "step test" in problems["groups"]


# --- the group's fatigue definition -----------------------------------------------------------------


def test_group_fatigue_time_by_definition_worked_by_hand():
    times = [300.0, 100.0, 200.0]
    assert group_fatigue_time_s("first_fish", times, 4) == 100.0
    assert group_fatigue_time_s("half_group", times, 4) == 200.0  # ⌈4/2⌉ = 2nd time
    assert group_fatigue_time_s("half_group", times, 5) == 300.0  # ⌈5/2⌉ = 3rd time
    assert group_fatigue_time_s("last_fish", times, 4) is None  # one fish never fatigued
    assert group_fatigue_time_s("last_fish", times, 3) == 300.0
    assert group_fatigue_time_s("stated", times, 3) is None


@given(st.lists(st.floats(0, 1e5, allow_nan=False), min_size=1, max_size=12), st.integers(1, 12))
def test_first_fish_before_half_before_last(times, extra):
    n = len(times)
    first = group_fatigue_time_s("first_fish", times, n)
    half = group_fatigue_time_s("half_group", times, n)
    last = group_fatigue_time_s("last_fish", times, n)
    assert first <= half <= last
    assert group_fatigue_time_s("last_fish", times, n + extra) is None  # someone still swimming


# --- MO2 with the summed mass and volume -------------------------------------------------------


def test_per_capita_mo2_recovers_the_simulated_truth(analysis):
    steps = analysis.steps.set_index("step")
    assert (analysis.steps["fish_id"] == "GRP").all()
    for step, u in enumerate(SPEEDS[:4], start=1):  # steps swum before fatigue in step 5
        truth = A_TRUE * math.exp(B_TRUE * u)
        # the acceptance for step means is 3 %
        assert steps.loc[step, "mo2_mg_kg_h"] == pytest.approx(truth, rel=0.03)


def test_group_and_per_fish_mo2_are_the_chamber_uptake_over_mass_and_count(analysis):
    m = analysis.measure[analysis.measure["used"]]
    total_kg = sum(MASSES) / 1000.0
    assert np.allclose(m["mo2_mg_h"], m["mo2_mg_kg_h"] * total_kg, rtol=1e-12)
    assert np.allclose(m["mo2_per_fish_mg_h"], m["mo2_mg_h"] / len(MASSES), rtol=1e-12)
    assert (m["n_fish"] == len(MASSES)).all()
    # Svendsen et al. (2016) eq. 1 with the fish's volumes summed (density 1000 kg/m³):
    water_l = VOLUME_L - sum(MASSES) / 1000.0
    hand = -(m["slope_mg_l_s"] - m["background_slope_mg_l_s"]) * water_l * 3600.0
    assert np.allclose(m["mo2_mg_h"], hand, rtol=1e-9)
    g = analysis.groups.iloc[0]
    assert g["water_volume_l"] == pytest.approx(water_l, abs=1e-12)
    assert g["volume_ratio"] == pytest.approx(water_l / (sum(MASSES) / 1000.0))
    steps = analysis.steps
    assert np.allclose(steps["mo2_per_fish_mg_h"], steps["mo2_mg_h"] / 4, equal_nan=True)


def test_one_fishs_mass_would_have_been_four_times_too_high(analysis):
    # What the refusal used to prevent: the group's uptake over one fish's mass.
    step1 = analysis.steps.set_index("step").loc[1]
    wrong = step1["mo2_mg_h"] / (MASSES[0] / 1000.0)
    assert wrong / step1["mo2_mg_kg_h"] == pytest.approx(sum(MASSES) / MASSES[0])


def test_group_ucrit_by_brett_worked_by_hand(analysis):
    # Fatigue (first fish) half way through step 5: U_i = 0.45, ΔU = 0.10 m/s → 0.50 m/s on set speed.
    assert analysis.result("GRP", "ucrit_set") == pytest.approx(50.0, rel=1e-9)
    row = analysis.results.set_index("quantity").loc["ucrit_set"]
    assert "first fish" in row["method"] and "not comparable with fish swum alone" in row["note"]


def test_group_fatigue_from_the_fish_events_when_not_entered(simulated):
    trial, session, raw = simulated
    data = session.to_json_dict()
    data["protocol"]["fatigue_time_s"] = None
    data["groups"][0]["fatigue_definition"] = "half_group"
    t = [REST_S + 4 * STEP_S + f * STEP_S for f in (0.2, 0.6, 0.9)]
    data["events"] = [{"time_s": x, "kind": "fatigue", "fish_id": f"G{i}"} for i, x in enumerate(t)]
    result = analyse(Session.from_json_dict(data), raw, n_boot=20)
    # ⌈4/2⌉ = 2nd fatigue, 60 % into step 5: 0.45 + 0.6 · 0.10 = 0.51 m/s
    assert result.result("GRP", "ucrit_set") == pytest.approx(51.0, rel=1e-9)
    assert result.groups.iloc[0]["fatigue_from"] == "fish fatigue events (half_group)"


def test_group_blocking_sums_the_fishs_corrections(analysis):
    fish = analysis.fish
    g = analysis.groups.iloc[0]
    assert g["blocking_ratio"] == pytest.approx(fish["blocking_ratio"].sum())
    assert g["blocking_epsilon"] == pytest.approx(fish["blocking_epsilon"].sum())
    s = analysis.steps
    assert np.allclose(s["corrected_speed_cm_s"], s["set_speed_cm_s"] * (1 + g["blocking_epsilon"]))
    assert s["drag_mn"].isna().all()  # a school's drag is not each fish's alone


# --- the warning wherever it appears ----------------------------------------------------------------


def test_group_trial_flag_once_with_its_published_source(analysis):
    flags = analysis.flags[analysis.flags["code"] == "GROUP_TRIAL"]
    assert len(flags) == 1
    row = flags.iloc[0]
    assert row["where"] == "group GRP" and row["severity"] == "warning"
    assert "Herskin & Steffensen" in row["source"] and "not comparable with fish swum alone" in row["message"]
    assert checks.RULES["GROUP_TRIAL"].source == "Herskin & Steffensen (1998); Zhang & Lauder (2023)"


def test_single_fish_session_has_no_group_flag_or_rows(simulated):
    trial, session, raw = simulated
    data = session.to_json_dict()
    data["fish"] = [_fish(0, sum(MASSES))]
    data["groups"] = []
    result = analyse(Session.from_json_dict(data), raw, n_boot=20)
    assert not (result.flags["code"] == "GROUP_TRIAL").any()
    assert result.groups.empty and (result.steps["n_fish"] == 1).all()
    assert result.protocol.tables.get("group_steps") is None


def test_protocol_part_and_figures_carry_the_warning(analysis):
    pr = analysis.protocol
    rows = pr.results[pr.results["part"] == "group"]
    assert set(rows["quantity"]) >= {"group_n_fish", "group_mass", "group_mo2_per_fish_highest_step"}
    assert rows["note"].str.contains("not comparable with fish swum alone").all()
    fig = plots.speed_mo2_figure(analysis.steps, analysis.fits["GRP"], "GRP")
    texts = [a.text for a in fig.layout.annotations]
    assert any("Schooling changes the cost of swimming" in t for t in texts)
    assert "per capita" in fig.layout.yaxis.title.text
    single = plots.speed_mo2_figure(analysis.steps.assign(n_fish=1), None, "GRP")
    assert not single.layout.annotations


def test_report_states_the_group_and_its_caveat(simulated, analysis):
    _, session, _ = simulated
    report = session_report(session, analysis)
    text = repr(report.sections)
    assert "swum together as group GRP" in text
    assert "Herskin & Steffensen 1998" in text and "Group trial" in text


def test_group_trial_is_never_pooled_with_single_fish(simulated, analysis):
    trial, session, raw = simulated
    alone = session.to_json_dict()
    alone.update(session_id="alone1", fish=[_fish(0, 410.0)], groups=[])
    single = Session.from_json_dict(alone)
    items = [(session, analysis), (single, analyse(single, raw, n_boot=20))]
    data = group_curve_data(items)
    assert set(data["fish_id"]) == {"alone1/G0"}
    table = study_table(items)
    grp = table[table["fish_id"] == "GRP"].iloc[0]
    assert grp["unit"] == "group" and grp["n_fish"] == 4 and grp["mass_g"] == sum(MASSES)
    report = study_report(items)
    text = repr(report.sections)
    assert "Group trials kept apart" in text and "left out of the spread between fish and of the group curves" in text


def test_every_fatigue_definition_has_words():
    assert set(GROUP_FATIGUE_DEFINITIONS) == {"first_fish", "half_group", "last_fish", "stated"}
    with pytest.raises(InputError):
        Session.from_json_dict({**_doc(), "groups": [{"group_id": "GRP", "chamber": "A",
                                                       "fish_ids": ["G0", "G1", "G2", "G3"]}]})


def test_command_line_warns_on_the_demo_group_trial(capsys, tmp_path):
    from pathlib import Path

    from swimlab.cli import main

    bundle = Path(__file__).resolve().parents[1] / "demo_sessions" / "bw26-g01-group"
    code = main(["analyse", str(bundle), "--out", str(tmp_path / "out")])
    out = capsys.readouterr().out
    assert code == 0
    assert "WARNING group BW26-G01: 4 fish" in out and "fatigue definition half_group" in out
    assert "not comparable with fish swum alone" in out
    assert (tmp_path / "out" / "groups.csv").is_file()
    assert "[group] BW26-G01  Group trial: highest step-mean MO2 per fish" in out


def test_phases_after_a_group_fatigue_read_from_events_are_not_used(simulated):
    trial, session, raw = simulated
    data = session.to_json_dict()
    data["protocol"]["fatigue_time_s"] = None
    t = REST_S + 3 * STEP_S + 0.5 * STEP_S  # the first fish fatigues half way through step 4
    data["events"] = [{"time_s": t, "kind": "fatigue", "fish_id": "G2"}]
    result = analyse(Session.from_json_dict(data), raw, n_boot=20)
    m = result.measure
    mid = (m["start_s"] + m["end_s"]) / 2
    assert (m.loc[mid > t, "step"] == -1).all() and (m.loc[mid > t + 1, "step"] == -1).any()
    assert result.steps.set_index("step").loc[5, "n_phases"] == 0
    assert result.result("GRP", "ucrit_set") == pytest.approx(40.0, rel=1e-9)  # 0.35 + 0.5 · 0.10 m/s


def test_each_group_keeps_its_phases_up_to_its_own_fatigue():
    # Two groups in two chambers, each fatigued by its own first fish (no protocol fatigue time):
    # group A half way through step 4, group B half way through step 6. B's phases in step 5
    # come after A's fatigue but before B's, and stay on B's curve. Brett (1964) by hand:
    # A 0.35 + 0.5 · 0.10 = 0.40 m/s, B 0.55 + 0.5 · 0.10 = 0.60 m/s on set speeds.
    trial = sim.simulate_trial(
        seed=13, channels=("A", "B"), speeds_m_s=(0.05, *SPEEDS), step_duration_s=(REST_S,) + (STEP_S,) * len(SPEEDS),
        flush_s=240, wait_s=60, measure_s=600, respirometer_volume_l=VOLUME_L, fish_mass_g=sum(MASSES),
        mo2_model="exponential", mo2_params=(A_TRUE, B_TRUE), sensor_noise_pct=0.1, background_rate_mg_l_h=0.03,
    )
    sha = sha256_hex(trial.csv_bytes)
    fish = [_fish(i, m) for i, m in enumerate(MASSES)] + [_fish(4 + i, m, "B") for i, m in enumerate(MASSES)]
    groups = [{"group_id": "GA", "chamber": "A", "fish_ids": ["G0", "G1", "G2", "G3"], "fatigue_definition": "first_fish"},
              {"group_id": "GB", "chamber": "B", "fish_ids": ["G4", "G5", "G6", "G7"], "fatigue_definition": "first_fish"}]
    t_a, t_b = REST_S + 3.5 * STEP_S, REST_S + 5.5 * STEP_S
    events = [{"time_s": t_a, "kind": "fatigue", "fish_id": "G1"}, {"time_s": t_b, "kind": "fatigue", "fish_id": "G6"}]
    blanks = [{"channel": ch, "time_s": b.time_s, "slope_mg_l_h": b.slope_mg_l_s * 3600.0}
              for ch in ("A", "B") for b in trial.truth.blanks if b.channel == ch]
    session = Session.from_json_dict(_doc(sha, fish=fish, groups=groups, fatigue_time_s=None, events=events,
                                          blanks=blanks))
    result = analyse(session, {sha: trial.csv_bytes}, n_boot=20)
    m = result.measure
    mid = (m["start_s"] + m["end_s"]) / 2
    in_a, in_b = m["fish_id"] == "GA", m["fish_id"] == "GB"
    assert (m.loc[in_a & (mid > t_a), "step"] == -1).all()
    assert (m.loc[in_b & (mid > t_a) & (mid < t_b - STEP_S / 2), "step"] > 0).any()
    steps = result.steps.set_index(["fish_id", "step"])
    assert steps.loc[("GA", 5), "n_phases"] == 0 and steps.loc[("GB", 5), "n_phases"] > 0
    assert result.result("GA", "ucrit_set") == pytest.approx(40.0, rel=1e-9)
    assert result.result("GB", "ucrit_set") == pytest.approx(60.0, rel=1e-9)
