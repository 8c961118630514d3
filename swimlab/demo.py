"""Demo sessions of an invented study, made by the simulator with known truth.

The scenario is invented for the demo: the *Brackwater Station fish physiology group* runs the
study *BW-26: swimming energetics of hatchery salmonids and coastal cod*. Lab, study, people and
fish labels are made up; the numbers come from :func:`swimlab.sim.simulate_trial`, and the truth
that made each trial is written beside its bundle (``demo_sessions/truth/<name>.json``) so that a
reader can compare what swimlab recovers with what was put in.

Besides the four step tests of :data:`TRIALS`, :data:`PROTOCOL_DEMOS` holds one trial of each
protocol beyond the step test: a ramp test, twelve fixed-speed endurance swims with the gait
each ended in (six in steady caudal swimming, some still swimming at the limit, and six faster
ones in burst-and-coast swimming, on a steeper fatigue curve), a repeat swim pair of one fish, a post-exercise recovery (EPOC), a
step test of a labriform swimmer with gait events and tail-beat records, and a group trial (four
juveniles swum together in one respirometer).

Run ``python -m swimlab.demo demo_sessions`` to (re)write the bundles.
"""

from __future__ import annotations

import json
import shutil
import sys
from dataclasses import dataclass, field
from datetime import date, datetime
from pathlib import Path
from typing import Any

import numpy as np

from swimlab import sim
from swimlab.io.bundle import bundle_files, read_bundle
from swimlab.io.logger import sha256_hex
from swimlab.session import Session

LAB = "Brackwater Station fish physiology group (invented for the demo)"
STUDY = "BW-26 swimming energetics (invented demo study)"
APPROVAL = "Brackwater Station animal-care committee, protocol BW-AC-2026-07 (invented for the demo)"


@dataclass(frozen=True)
class DemoTrial:
    """Recipe of one demo trial."""

    name: str
    title: str
    fish_id: str
    species: str
    mass_g: float
    length_cm: float
    depth_cm: float
    width_cm: float
    temperature_c: float
    salinity: float
    section_cm: tuple[float, float]
    volume_l: float
    speeds_m_s: tuple[float, ...]
    mo2_model: str
    mo2_params: tuple[float, ...]
    fatigue_fraction: float
    operator: str
    seed: int
    rest_h: float = 3.0
    struggling: tuple[int, ...] = ()
    failed_flushes: tuple[int, ...] = ()
    measure_s: float = 660.0
    notes: str = ""
    sim_extra: dict[str, Any] = field(default_factory=dict)
    session_id: str = ""


STEP_S = 1800.0
FLUSH_S = 180.0
WAIT_S = 60.0

TRIALS = (
    DemoTrial(
        name="bw26-t01-clean-ucrit", session_id="eaae9e4d5b25",
        title="BW-26 trout T01: step Ucrit, fresh water 12 °C",
        fish_id="BW26-T01", species="Oncorhynchus mykiss (hatchery)",
        mass_g=410.0, length_cm=32.0, depth_cm=7.0, width_cm=3.6,
        temperature_c=12.0, salinity=0.0, section_cm=(25.0, 25.0), volume_l=90.0,
        speeds_m_s=(0.15, 0.25, 0.35, 0.45, 0.55, 0.65, 0.75),
        mo2_model="exponential", mo2_params=(70.0, 2.2), fatigue_fraction=0.6,
        operator="A. Student", seed=2601,
        notes="Clean trial; overnight habituation at low speed.",
    ),
    DemoTrial(
        name="bw26-c02-seawater", session_id="e79d97a5f0ab",
        title="BW-26 cod C02: step Ucrit, seawater 33, 10 °C",
        fish_id="BW26-C02", species="Gadus morhua (coastal)",
        mass_g=620.0, length_cm=38.0, depth_cm=8.0, width_cm=4.8,
        temperature_c=10.0, salinity=33.0, section_cm=(25.0, 25.0), volume_l=90.0,
        speeds_m_s=(0.10, 0.18, 0.26, 0.34, 0.42, 0.50),
        mo2_model="power", mo2_params=(55.0, 260.0, 2.1), fatigue_fraction=0.35,
        operator="B. Student", seed=2602,
        notes="Seawater trial in the coastal tunnel.",
    ),
    DemoTrial(
        name="bw26-t03-large-fish", session_id="b52a9432b138",
        title="BW-26 trout T03: large fish, blocking beyond the correction's range",
        fish_id="BW26-T03", species="Oncorhynchus mykiss (hatchery)",
        mass_g=1450.0, length_cm=46.0, depth_cm=13.0, width_cm=7.0,
        temperature_c=12.0, salinity=0.0, section_cm=(25.0, 25.0), volume_l=90.0,
        speeds_m_s=(0.15, 0.25, 0.35, 0.45, 0.55),
        mo2_model="exponential", mo2_params=(60.0, 2.0), fatigue_fraction=0.8,
        operator="A. Student", seed=2603,
        notes="Fish too large for this working section; kept to show the blocking flag.",
    ),
    DemoTrial(
        name="bw26-t04-struggling", session_id="76a5fa7fa6ed",
        title="BW-26 trout T04: struggling phases and a failed flush (welfare flag)",
        fish_id="BW26-T04", species="Oncorhynchus mykiss (hatchery)",
        mass_g=520.0, length_cm=34.0, depth_cm=7.4, width_cm=3.9,
        temperature_c=12.0, salinity=0.0, section_cm=(25.0, 25.0), volume_l=90.0,
        speeds_m_s=(0.15, 0.25, 0.35, 0.45, 0.55, 0.65),
        mo2_model="exponential", mo2_params=(75.0, 2.3), fatigue_fraction=0.5,
        operator="B. Student", seed=2604, struggling=(14, 17), failed_flushes=(15, 16, 17, 18, 19, 20, 21, 22),
        notes="Fish struggled in two phases; the flush pump failed for eight cycles and oxygen fell below the floor.",
    ),
)


def build(trial: DemoTrial) -> tuple[Session, dict[str, bytes], dict[str, Any]]:
    """Simulate one demo trial and return its session, raw files and truth."""
    rest_s = trial.rest_h * 3600.0
    cycle_s = FLUSH_S + WAIT_S + trial.measure_s
    speeds = (0.05,) + trial.speeds_m_s
    durations = (rest_s,) + (STEP_S,) * len(trial.speeds_m_s)
    simulated = sim.simulate_trial(
        seed=trial.seed,
        channels=("A",),
        speeds_m_s=speeds,
        step_duration_s=durations,
        flush_s=FLUSH_S, wait_s=WAIT_S, measure_s=trial.measure_s,
        respirometer_volume_l=trial.volume_l,
        fish_mass_g=trial.mass_g,
        mo2_model=trial.mo2_model, mo2_params=trial.mo2_params,
        temperature_c=trial.temperature_c, temperature_drift_c_h=0.02,
        salinity=trial.salinity,
        background_rate_mg_l_h=0.03,
        struggling=trial.struggling or None,
        failed_flushes=trial.failed_flushes or None,
        start_time=datetime(2026, 3, 2 + trial.seed % 10, 8, 0, 0),
        **trial.sim_extra,
    )
    raw = simulated.csv_bytes
    sha = sha256_hex(raw)
    n_steps = len(trial.speeds_m_s)
    fatigue_s = rest_s + (n_steps - 1) * STEP_S + trial.fatigue_fraction * STEP_S
    calibration = [
        {"motor_setting": hz, "speed_cm_s": round(1.6 * hz - 0.8, 1)} for hz in (5, 15, 25, 35, 45, 55)
    ]
    document = {
        **({"session_id": trial.session_id} if trial.session_id else {}),
        "title": trial.title,
        "study": STUDY,
        "lab": LAB,
        "operator": trial.operator,
        "trial_date": date(2026, 3, 2 + trial.seed % 10).isoformat(),
        "water": {"temperature_c": trial.temperature_c, "salinity": trial.salinity,
                  "barometric_pressure_kpa": 101.325},
        "flume": {
            "name": "BW tunnel 2 (90 L)",
            "section_shape": "rectangular",
            "section_width_cm": trial.section_cm[0],
            "section_height_cm": trial.section_cm[1],
            "section_length_cm": 90.0,
            "respirometer_volume_l": trial.volume_l,
            "calibration": calibration,
            "characterisation": {"version": 2, "date": "2026-01-15", "instrument": "propeller flow meter",
                                 "uniformity_pct": 95.0, "turbulence_intensity_pct": 4.0},
        },
        "fish": [{
            "fish_id": trial.fish_id, "species": trial.species, "chamber": "A",
            "mass_g": trial.mass_g, "total_length_cm": trial.length_cm,
            "body_depth_cm": trial.depth_cm, "body_width_cm": trial.width_cm, "sex": "unknown",
        }],
        "protocol": {
            "type": "step_ucrit",
            "start_s": rest_s,
            "steps": [{"speed_cm_s": round(u * 100, 1), "duration_min": STEP_S / 60} for u in trial.speeds_m_s],
            "cycle": {"source": "pump", "wait_s": WAIT_S, "flush_s": FLUSH_S, "measure_s": trial.measure_s},
            "fatigue_criterion": {"description": "Fish rests on the rear grid for 10 s and does not resume "
                                  "swimming after three gentle taps", "rest_on_grid_s": 10,
                                  "stimulus": "gentle tap on the tunnel", "stimulus_limit": 3},
            "fatigue_time_s": fatigue_s,
        },
        "conditions": {"acclimation_temperature_c": trial.temperature_c, "acclimation_days": 21,
                       "fasting_h": 48, "habituation_min": trial.rest_h * 60,
                       "habituation_speed_cm_s": 5.0, "time_of_day": "08:00", "photoperiod": "12L:12D",
                       "animal_care_approval": APPROVAL},
        "sensor": {"sensor": "optical oxygen probe, channel A", "date": "2026-03-01",
                   "zero_point_pct": 0.0, "span_point_pct": 100.0, "temperature_c": trial.temperature_c,
                   "barometric_pressure_kpa": 101.3, "salinity": trial.salinity, "drift_check_pct": 99.6},
        "blanks": [{"channel": "A", "when": "before" if b.time_s < 0 else "after", "time_s": b.time_s,
                    "slope_mg_l_h": b.slope_mg_l_s * 3600.0} for b in simulated.truth.blanks],
        "background_method": "linear",
        "events": [
            {"time_s": rest_s, "kind": "note", "fish_id": trial.fish_id, "description": "Step test started"},
            {"time_s": fatigue_s, "kind": "fatigue", "fish_id": trial.fish_id,
             "description": "Rested on the rear grid 10 s; did not resume after three taps; speed lowered"},
        ] + [
            {"time_s": (cycle - 1) * cycle_s + FLUSH_S + WAIT_S + trial.measure_s / 2, "kind": "rear_grid_contact",
             "fish_id": trial.fish_id, "description": "Struggled against the rear grid (not burst-and-coast swimming)",
             "count": 6}
            for cycle in trial.struggling
        ] + [
            {"time_s": (cycle - 1) * cycle_s + FLUSH_S / 2, "kind": "adverse_event", "fish_id": trial.fish_id,
             "description": "Flush pump ran but did not exchange water (blocked inlet)"}
            for cycle in trial.failed_flushes[:1]
        ],
        "exclusions": [
            {"channel": "A", "cycle": cycle, "reason": "Fish struggled against the rear grid for about two "
             "minutes (seen on video); phase not representative of steady swimming", "by": trial.operator}
            for cycle in trial.struggling[-1:]
        ],
        "raw_files": [{"sha256": sha, "name": f"{trial.name}-oxygen.csv", "role": "trial", "mapping": None}],
        "notes": trial.notes,
    }
    session = Session.from_json_dict(document)
    truth = {
        "note": "Truth used by swimlab.sim to generate this trial (invented demo data).",
        "seed": trial.seed,
        "mo2_model": trial.mo2_model,
        "mo2_params": list(trial.mo2_params),
        "mo2_units": "mg O2 kg-1 h-1 against water speed in m/s (the speed the fish felt)",
        "rest_speed_m_s": 0.05,
        "steps": simulated.truth.steps.to_dict(orient="list"),
        "fatigue_time_s": fatigue_s,
        "struggling_cycles": list(trial.struggling),
        "failed_flush_cycles": list(trial.failed_flushes),
        "background": simulated.truth.background,
    }
    return session, {sha: raw}, truth



# --------------------------------------------------------------------------------------------
# Protocols beyond the step test
# --------------------------------------------------------------------------------------------

P_FLUSH_S, P_WAIT_S, P_MEASURE_S = 180.0, 60.0, 360.0
"""Cycle of the protocol demos in the small tunnel (a 10 min cycle)."""
P_CYCLE_S = P_FLUSH_S + P_WAIT_S + P_MEASURE_S
SMALL_TUNNEL = {
    "name": "BW tunnel 1 (30 L)", "section_shape": "rectangular", "section_width_cm": 20.0,
    "section_height_cm": 20.0, "section_length_cm": 70.0, "respirometer_volume_l": 30.0,
    "calibration": [{"motor_setting": hz, "speed_cm_s": round(1.8 * hz - 1.0, 1)} for hz in (5, 15, 25, 35, 45, 55)],
    "characterisation": {"version": 1, "date": "2026-01-16", "instrument": "propeller flow meter",
                         "uniformity_pct": 96.0, "turbulence_intensity_pct": 3.5},
}
TROUT = "Oncorhynchus mykiss (hatchery)"
WRASSE = "Labrus bergylta (coastal; labriform swimmer)"
FATIGUE = {"description": "Fish rests on the rear grid for 10 s and does not resume swimming after three gentle taps",
           "rest_on_grid_s": 10, "stimulus": "gentle tap on the tunnel", "stimulus_limit": 3}


@dataclass(frozen=True)
class ProtocolDemo:
    """Recipe of one demo trial of a protocol beyond the step test.

    ``kind`` picks the builder: ``ramp``, ``endurance``, ``first_swim``, ``repeat``,
    ``recovery``, ``gait`` or ``group``; ``params`` holds what that builder needs.
    """

    name: str
    session_id: str
    title: str
    kind: str
    fish_id: str
    species: str
    mass_g: float
    length_cm: float
    depth_cm: float
    width_cm: float
    seed: int
    operator: str = "C. Student"
    temperature_c: float = 12.0
    notes: str = ""
    treatment: str = ""
    params: dict[str, Any] = field(default_factory=dict)


ENDURANCE_CURVE = {"intercept_log10_s": 6.2, "slope_log10_s_per_m_s": -4.0, "sigma_log10_s": 0.15}
"""The true fatigue curve of the endurance demo: log10 T[s] = 6.2 − 4.0 U[m/s] + 0.15 ε."""
ENDURANCE_LIMIT_MIN = 120.0


BURST_CURVE = {"intercept_log10_s": 9.28, "slope_log10_s_per_m_s": -8.0, "sigma_log10_s": 0.15}
"""The true fatigue curve of the burst-and-coast endurance demos (above the gait transition):
log10 T[s] = 9.28 − 8.0 U[m/s] + 0.15 ε; it meets :data:`ENDURANCE_CURVE` at 0.77 m/s."""
GAIT_TRANSITION_M_S = 0.77
"""Set speed above which the demo trout turn to burst-and-coast swimming. [m/s] Invented."""


def _endurance_fish() -> list[dict[str, Any]]:
    """Twelve fish: six in steady caudal swimming (two at each of 0.50, 0.62, 0.74 m/s) with
    fatigue times drawn from :data:`ENDURANCE_CURVE`, and six in burst-and-coast swimming (two at
    each of 0.80, 0.88, 0.96 m/s) drawn from :data:`BURST_CURVE`."""
    fish = []
    for curve, seed, speeds, gait, masses, lengths in (
            (ENDURANCE_CURVE, 2650, (0.50, 0.50, 0.62, 0.62, 0.74, 0.74), "steady_caudal",
             (405.0, 440.0, 418.0, 452.0, 396.0, 430.0), (31.5, 33.0, 32.0, 33.5, 31.0, 32.5)),
            (BURST_CURVE, 2670, (0.80, 0.80, 0.88, 0.88, 0.96, 0.96), "burst_and_coast",
             (412.0, 436.0, 401.0, 447.0, 423.0, 409.0), (31.8, 32.8, 31.3, 33.2, 32.4, 31.6))):
        rng = np.random.default_rng(seed)
        for i, speed in enumerate(speeds):
            c = curve
            t = 10 ** (c["intercept_log10_s"] + c["slope_log10_s_per_m_s"] * speed + c["sigma_log10_s"] * rng.normal())
            t = round(float(t) / 10.0) * 10.0  # recorded to 10 s
            fish.append({"speed_m_s": speed, "fatigue_s": t if t <= ENDURANCE_LIMIT_MIN * 60 else None,
                         "mass_g": masses[i], "length_cm": lengths[i], "gait": gait})
    return fish


PROTOCOL_DEMOS = (
    ProtocolDemo(
        name="bw26-r01-ramp", session_id="bw26-r01-ramp",
        title="BW-26 trout R01: ramp test (Umax), 1.5 cm/s per min",
        kind="ramp", fish_id="BW26-R01", species=TROUT, mass_g=420.0, length_cm=32.0, depth_cm=7.0, width_cm=3.6,
        seed=2611, notes="Constant-acceleration test after one hour at 5 cm/s; its Umax is not a step Ucrit.",
        params={"rate_cm_s_per_min": 1.5, "start_cm_s": 15.0, "time_to_fatigue_s": 2400.0, "rest_s": 3600.0,
                "mo2_params": (70.0, 2.2)},
    ),
    *(
        ProtocolDemo(
            name=f"bw26-e{i + 1:02d}-endurance", session_id=f"bw26-e{i + 1:02d}-endurance",
            title=f"BW-26 trout E{i + 1:02d}: endurance at {f['speed_m_s'] * 100:.0f} cm/s, "
                  f"{ENDURANCE_LIMIT_MIN:.0f} min limit" + (" (burst-and-coast)" if f["gait"] == "burst_and_coast" else ""),
            kind="endurance", fish_id=f"BW26-E{i + 1:02d}", species=TROUT, mass_g=f["mass_g"], length_cm=f["length_cm"],
            depth_cm=round(f["length_cm"] * 0.22, 1), width_cm=round(f["length_cm"] * 0.112, 1),
            seed=2621 + i if i < 6 else 2671 + i,
            notes=("Fixed-speed endurance swim; " + ("fatigued within the limit" if f["fatigue_s"] is not None
                                                     else "still swimming when the time limit ended")
                   + ("; steady caudal swimming throughout." if f["gait"] == "steady_caudal" else
                      "; turned to burst-and-coast swimming soon after the set speed was reached.")),
            params={"speed_m_s": f["speed_m_s"], "fatigue_s": f["fatigue_s"], "mo2_params": (70.0, 2.2),
                    "gait": f["gait"]},
        )
        for i, f in enumerate(_endurance_fish())
    ),
    ProtocolDemo(
        name="bw26-p01-first-swim", session_id="bw26-p01-first-swim",
        title="BW-26 trout P01: first of two step tests (repeat swim pair)",
        kind="first_swim", fish_id="BW26-P01", species=TROUT, mass_g=460.0, length_cm=33.0, depth_cm=7.2,
        width_cm=3.7, seed=2631, treatment="control",
        notes="First Ucrit swim of a repeat pair; the second swim followed 40 min later.",
        params={"speeds_cm_s": (20, 30, 40, 50, 60, 70), "fatigue_fraction": 0.7, "rest_s": 3600.0},
    ),
    ProtocolDemo(
        name="bw26-p02-second-swim", session_id="bw26-p02-second-swim",
        title="BW-26 trout P01: second step test after 40 min of rest (repeat swim)",
        kind="repeat", fish_id="BW26-P01", species=TROUT, mass_g=460.0, length_cm=33.0, depth_cm=7.2,
        width_cm=3.7, seed=2632, treatment="control",
        notes="Second Ucrit swim of the same fish, 40 min after fatigue in the first (session bw26-p01-first-swim).",
        params={"speeds_cm_s": (20, 30, 40, 50, 60, 70), "fatigue_fraction": 0.35, "rest_s": 1200.0,
                "first": "bw26-p01-first-swim", "rest_interval_min": 40.0},
    ),
    ProtocolDemo(
        name="bw26-v01-recovery-epoc", session_id="bw26-v01-recovery-epoc",
        title="BW-26 trout V01: post-exercise recovery (EPOC) after a short step test",
        kind="recovery", fish_id="BW26-V01", species=TROUT, mass_g=450.0, length_cm=33.0, depth_cm=7.2, width_cm=3.7,
        seed=2641, notes="Two hours at rest, four 10 min steps to exhaustion, four hours of recovery at 5 cm/s.",
        params={"speeds_m_s": (0.30, 0.45, 0.60, 0.75), "step_s": 600.0, "rest_s": 7200.0, "recovery_s": 14400.0,
                "amplitudes": (220.0,), "rates": (1.0 / 2400.0,), "mo2_params": (70.0, 2.2)},
    ),
    ProtocolDemo(
        name="bw26-w01-gait-kinematics", session_id="bw26-w01-gait-kinematics",
        title="BW-26 wrasse W01: step Ucrit with gait events and tail-beat counts",
        kind="gait", fish_id="BW26-W01", species=WRASSE, mass_g=300.0, length_cm=26.0, depth_cm=7.0, width_cm=3.2,
        seed=2651, operator="A. Student", temperature_c=12.0,
        notes="Pectoral-fin swimming at the two lowest speeds, caudal from the third; burst-and-coast at the last "
              "two. Tail beats counted from video over 20 s at each step.",
        params={"speeds_cm_s": (10, 17, 24, 31, 38, 45), "fatigue_fraction": 0.5, "rest_s": 3600.0,
                "mo2_params": (60.0, 3.0)},
    ),
    ProtocolDemo(
        name="bw26-g01-group", session_id="bw26-g01-group",
        title="BW-26 trout G01: four juveniles swum together (group trial), step Ucrit",
        kind="group", fish_id="BW26-G01", species=TROUT, mass_g=61.0, length_cm=17.5, depth_cm=3.8, width_cm=1.9,
        seed=2661, operator="B. Student",
        notes="Four juvenile trout swum together in tunnel 1 (a group trial). The group's fatigue was called when "
              "half the group had met the fatigue criterion; MO2 is the group's, given per capita.",
        params={"speeds_cm_s": (15, 25, 35, 45, 55, 65), "rest_s": 3600.0, "mo2_params": (95.0, 2.6),
                "fish": (("BW26-G01a", 58.0, 17.2), ("BW26-G01b", 63.0, 17.8), ("BW26-G01c", 60.0, 17.4),
                         ("BW26-G01d", 64.0, 18.0)),
                "fatigue": {"BW26-G01a": (5, 0.4), "BW26-G01b": (6, 0.3), "BW26-G01c": (6, 0.6)},
                "fatigue_definition": "half_group"},
    ),
)
"""One demo trial of each protocol beyond the step test (and a repeat pair, and gait records)."""

DEMO_NAMES = tuple(t.name for t in TRIALS) + tuple(t.name for t in PROTOCOL_DEMOS)
"""Every demo bundle's folder name."""


def _common(demo: ProtocolDemo, simulated: sim.SimulatedTrial, protocol: dict[str, Any], events: list[dict],
            date_day: int) -> tuple[dict[str, Any], str]:
    raw = simulated.csv_bytes
    sha = sha256_hex(raw)
    doc = {
        "session_id": demo.session_id,
        "title": demo.title,
        "study": STUDY,
        "lab": LAB,
        "operator": demo.operator,
        "trial_date": date(2026, 3, date_day).isoformat(),
        "water": {"temperature_c": demo.temperature_c, "salinity": 0.0, "barometric_pressure_kpa": 101.325},
        "flume": dict(SMALL_TUNNEL),
        "fish": [{"fish_id": demo.fish_id, "species": demo.species, "chamber": "A", "mass_g": demo.mass_g,
                  "total_length_cm": demo.length_cm, "body_depth_cm": demo.depth_cm, "body_width_cm": demo.width_cm,
                  "sex": "unknown"}],
        "protocol": {"cycle": {"source": "pump", "wait_s": P_WAIT_S, "flush_s": P_FLUSH_S, "measure_s": P_MEASURE_S},
                     "fatigue_criterion": FATIGUE, **protocol},
        "conditions": {"acclimation_temperature_c": demo.temperature_c, "acclimation_days": 21, "fasting_h": 48,
                       "habituation_min": 60, "habituation_speed_cm_s": 5.0, "time_of_day": "08:00",
                       "photoperiod": "12L:12D", "treatment": demo.treatment,
                       "animal_care_approval": APPROVAL},
        "sensor": {"sensor": "optical oxygen probe, tunnel 1", "date": "2026-03-01", "zero_point_pct": 0.0,
                   "span_point_pct": 100.0, "temperature_c": demo.temperature_c, "barometric_pressure_kpa": 101.3,
                   "salinity": 0.0, "drift_check_pct": 99.7},
        "blanks": [{"channel": "A", "when": "before" if b.time_s < 0 else "after", "time_s": b.time_s,
                    "slope_mg_l_h": b.slope_mg_l_s * 3600.0} for b in simulated.truth.blanks],
        "background_method": "linear",
        "events": events,
        "raw_files": [{"sha256": sha, "name": f"{demo.name}-oxygen.csv", "role": "trial", "mapping": None}],
        "notes": demo.notes,
    }
    return doc, sha


def _sim_kwargs(demo: ProtocolDemo, day: int) -> dict[str, Any]:
    return {"channels": ("A",), "flush_s": P_FLUSH_S, "wait_s": P_WAIT_S, "measure_s": P_MEASURE_S,
            "respirometer_volume_l": SMALL_TUNNEL["respirometer_volume_l"], "fish_mass_g": demo.mass_g,
            "temperature_c": demo.temperature_c, "temperature_drift_c_h": 0.02, "background_rate_mg_l_h": 0.03,
            "sensor_noise_pct": 0.1, "start_time": datetime(2026, 3, day, 8, 0, 0)}


def _step_demo(demo: ProtocolDemo, day: int, protocol_type: str, extra_protocol: dict[str, Any],
               extra_events: list[dict], kinematics: list[dict] | None = None
               ) -> tuple[Session, dict[str, bytes], dict[str, Any]]:
    """A step test in the small tunnel (first swim, second swim, gait demo)."""
    prm = demo.params
    speeds = tuple(u / 100.0 for u in prm["speeds_cm_s"])
    rest, step = prm["rest_s"], 1200.0
    simulated = sim.simulate_trial(seed=demo.seed, speeds_m_s=(0.05, *speeds), step_duration_s=(rest,) + (step,) * len(speeds),
                                   mo2_model="exponential", mo2_params=prm.get("mo2_params", (70.0, 2.2)),
                                   **_sim_kwargs(demo, day))
    fatigue = rest + (len(speeds) - 1 + prm["fatigue_fraction"]) * step
    events = [{"time_s": rest, "kind": "note", "fish_id": demo.fish_id, "description": "Step test started"},
              {"time_s": fatigue, "kind": "fatigue", "fish_id": demo.fish_id,
               "description": "Rested on the rear grid 10 s; did not resume after three taps; speed lowered"},
              *extra_events]
    protocol = {"type": protocol_type, "start_s": rest, "fatigue_time_s": fatigue,
                "steps": [{"speed_cm_s": float(u), "duration_min": step / 60} for u in prm["speeds_cm_s"]],
                **extra_protocol}
    doc, sha = _common(demo, simulated, protocol, sorted(events, key=lambda e: e["time_s"]), day)
    if kinematics:
        doc["kinematics"] = kinematics
    session = Session.from_json_dict(doc)
    ucrit_set = speeds[-2] + prm["fatigue_fraction"] * (speeds[-1] - speeds[-2])
    truth = {"protocol": protocol_type, "fatigue_time_s": fatigue,
             "ucrit_set_m_s": ucrit_set, "mo2_model": "exponential",
             "mo2_params": list(prm.get("mo2_params", (70.0, 2.2))),
             "steps": simulated.truth.steps.to_dict(orient="list")}
    return session, {sha: simulated.csv_bytes}, truth


def _gait_records(demo: ProtocolDemo, rest_s: float) -> tuple[list[dict], list[dict], dict[str, Any]]:
    """Gait events and tail-beat records of the labriform demo, with what they should give."""
    step = 1200.0
    speeds = demo.params["speeds_cm_s"]
    start = lambda k: rest_s + (k - 1) * step  # noqa: E731 — step k's start on the trace clock
    events = [
        {"time_s": start(3) + 240.0, "kind": "gait_change", "fish_id": demo.fish_id,
         "description": "pectoral to caudal (Up-c): tail beats join the pectoral strokes"},
        {"time_s": start(5) + 600.0, "kind": "burst", "fish_id": demo.fish_id,
         "description": "burst-and-coast", "count": 4},
        {"time_s": start(6) + 300.0, "kind": "burst", "fish_id": demo.fish_id,
         "description": "burst-and-coast", "count": 9},
    ]
    length_m = demo.length_cm / 100.0
    records = []
    for k, u_cm in enumerate(speeds, start=1):
        if k <= 2:  # pectoral swimming: no tail beats
            count, amp = 0, None
        else:  # caudal: counts near Bainbridge's (1958) line f = (4U/L + 4)/3, amplitude 0.2 L
            f = (4.0 * u_cm / 100.0 / length_m + 4.0) / 3.0
            count, amp = int(round(f * 20.0)), round(0.2 * demo.length_cm, 1)
        records.append({"step": k, "fish_id": demo.fish_id, "tail_beat_count": count, "window_s": 20.0,
                        "frames": None, "frame_rate_hz": None, "amplitude_cm": amp})
    truth = {"upc_step": 3, "burst_onset_step": 5, "bursts": {"5": 4, "6": 9},
             "tail_beats": "counts f·20 s with f = (4U/L + 4)/3 from the set speed, rounded; none at steps 1–2"}
    return events, records, truth


def _group_demo(demo: ProtocolDemo, day: int) -> tuple[Session, dict[str, bytes], dict[str, Any]]:
    """A step test of fish swum together: the simulator's fish is the group, its mass the summed mass.

    Every fish has the same mass-specific MO2 (the truth), so the group's MO2 per kg of summed
    mass is that curve, and its MO2 per fish is the group's over the number of fish.
    """
    prm = demo.params
    speeds = tuple(u / 100.0 for u in prm["speeds_cm_s"])
    rest, step = prm["rest_s"], 1200.0
    total = sum(m for _, m, _ in prm["fish"])
    kwargs = {**_sim_kwargs(demo, day), "fish_mass_g": total}
    simulated = sim.simulate_trial(seed=demo.seed, speeds_m_s=(0.05, *speeds),
                                   step_duration_s=(rest,) + (step,) * len(speeds), mo2_model="exponential",
                                   mo2_params=prm["mo2_params"], **kwargs)
    fatigue_at = {fid: rest + (k - 1 + frac) * step for fid, (k, frac) in prm["fatigue"].items()}
    from swimlab.session import group_fatigue_time_s

    group_fatigue = group_fatigue_time_s(prm["fatigue_definition"], list(fatigue_at.values()), len(prm["fish"]))
    events = [{"time_s": rest, "kind": "note", "fish_id": demo.fish_id, "description": "Step test of the group started"}]
    events += [{"time_s": t, "kind": "fatigue", "fish_id": fid,
                "description": "Rested on the rear grid 10 s; did not resume after three taps"}
               for fid, t in sorted(fatigue_at.items(), key=lambda kv: kv[1])]
    events.append({"time_s": group_fatigue + 30.0, "kind": "note", "fish_id": demo.fish_id,
                   "description": "Half the group fatigued: speed lowered to 5 cm/s for every fish"})
    protocol = {"type": "step_ucrit", "start_s": rest, "fatigue_time_s": group_fatigue,
                "steps": [{"speed_cm_s": float(u), "duration_min": step / 60} for u in prm["speeds_cm_s"]]}
    doc, sha = _common(demo, simulated, protocol, sorted(events, key=lambda e: e["time_s"]), day)
    doc["fish"] = [{"fish_id": fid, "species": demo.species, "chamber": "A", "mass_g": m, "total_length_cm": length,
                    "body_depth_cm": round(length * 0.217, 1), "body_width_cm": round(length * 0.108, 1),
                    "sex": "unknown"} for fid, m, length in prm["fish"]]
    doc["groups"] = [{"group_id": demo.fish_id, "chamber": "A", "fish_ids": [fid for fid, _, _ in prm["fish"]],
                      "fatigue_definition": prm["fatigue_definition"]}]
    session = Session.from_json_dict(doc)
    k_steps = len(speeds)
    g_step = int((group_fatigue - rest) // step) + 1
    frac = (group_fatigue - rest - (g_step - 1) * step) / step
    truth = {"protocol": "step_ucrit (group trial)", "group_id": demo.fish_id, "n_fish": len(prm["fish"]),
             "summed_mass_g": total, "mo2_model": "exponential", "mo2_params": list(prm["mo2_params"]),
             "mo2_units": "mg O2 kg-1 h-1 per capita (every fish the same), speed in m/s",
             "fish_fatigue_time_s": fatigue_at, "fatigue_definition": prm["fatigue_definition"],
             "group_fatigue_time_s": group_fatigue,
             "ucrit_set_m_s": speeds[g_step - 2] + frac * (speeds[g_step - 1] - speeds[g_step - 2]),
             "n_steps": k_steps, "steps": simulated.truth.steps.to_dict(orient="list")}
    return session, {sha: simulated.csv_bytes}, truth


def build_protocol_demo(demo: ProtocolDemo) -> tuple[Session, dict[str, bytes], dict[str, Any]]:
    """Simulate one protocol demo and return its session, raw files and truth."""
    day = 10 + demo.seed % 20
    prm = demo.params
    if demo.kind == "ramp":
        rate = prm["rate_cm_s_per_min"] / 100.0 / 60.0
        trial = sim.simulate_ramp_trial(seed=demo.seed, ramp_rate_m_s2=rate, start_speed_m_s=prm["start_cm_s"] / 100.0,
                                        time_to_fatigue_s=prm["time_to_fatigue_s"], rest_s=prm["rest_s"], after_s=1800.0,
                                        mo2_model="exponential", mo2_params=prm["mo2_params"], **_sim_kwargs(demo, day))
        protocol = {"type": "ramp", "start_s": trial.start_s, "ramp_rate_cm_s_per_min": prm["rate_cm_s_per_min"],
                    "ramp_start_speed_cm_s": prm["start_cm_s"], "fatigue_time_s": trial.fatigue_time_s}
        events = [{"time_s": trial.start_s, "kind": "note", "fish_id": demo.fish_id, "description": "Ramp started"},
                  {"time_s": trial.fatigue_time_s, "kind": "fatigue", "fish_id": demo.fish_id,
                   "description": "Rested on the rear grid 10 s; did not resume after three taps; speed lowered"}]
        truth = {"protocol": "ramp", **trial.truth, "ramp_start_s": trial.start_s, "fatigue_time_s": trial.fatigue_time_s,
                 "mo2_params": list(prm["mo2_params"])}
    elif demo.kind == "endurance":
        limit_s = ENDURANCE_LIMIT_MIN * 60.0
        trial = sim.simulate_endurance_trial(seed=demo.seed, set_speed_m_s=prm["speed_m_s"], time_limit_s=limit_s,
                                             fatigue_after_s=prm["fatigue_s"], rest_s=1800.0, after_s=1200.0,
                                             mo2_model="exponential", mo2_params=prm["mo2_params"],
                                             **_sim_kwargs(demo, day))
        protocol = {"type": "endurance", "start_s": trial.start_s, "set_speed_cm_s": round(prm["speed_m_s"] * 100, 1),
                    "time_limit_min": ENDURANCE_LIMIT_MIN, "fatigue_time_s": trial.fatigue_time_s}
        events = [{"time_s": trial.start_s, "kind": "note", "fish_id": demo.fish_id,
                   "description": "Set speed reached; endurance swim started"},
                  {"time_s": trial.start_s, "kind": "gait_change", "fish_id": demo.fish_id, "gait": "steady_caudal",
                   "description": "steady body–caudal-fin swimming at the set speed"}]
        if prm["gait"] == "burst_and_coast":
            swum = trial.truth["time_s"]
            events.append({"time_s": trial.start_s + round(min(20.0, swum / 3.0)), "kind": "gait_change",
                           "fish_id": demo.fish_id, "gait": "burst_and_coast",
                           "description": "burst-and-coast: tail-beat bursts between glides"})
        if trial.fatigue_time_s is not None:
            events.append({"time_s": trial.fatigue_time_s, "kind": "fatigue", "fish_id": demo.fish_id,
                           "description": "Rested on the rear grid 10 s; did not resume after three taps; speed lowered"})
        else:
            events.append({"time_s": trial.start_s + limit_s, "kind": "note", "fish_id": demo.fish_id,
                           "description": "Time limit reached with the fish still swimming; speed lowered"})
        truth = {"protocol": "endurance", **trial.truth,
                 "fatigue_curve": ENDURANCE_CURVE if prm["gait"] == "steady_caudal" else BURST_CURVE,
                 "gait_at_end": prm["gait"], "start_s": trial.start_s, "fatigue_time_s": trial.fatigue_time_s}
    elif demo.kind == "recovery":
        trial = sim.simulate_recovery_trial(
            seed=demo.seed, exercise_speeds_m_s=prm["speeds_m_s"], exercise_step_s=prm["step_s"],
            epoc_amplitudes_mg_kg_h=prm["amplitudes"], epoc_rates_per_s=prm["rates"], rest_s=prm["rest_s"],
            recovery_s=prm["recovery_s"], mo2_model="exponential", mo2_params=prm["mo2_params"],
            **_sim_kwargs(demo, day))
        protocol = {"type": "recovery", "start_s": trial.start_s, "fatigue_time_s": trial.fatigue_time_s,
                    "steps": [{"speed_cm_s": round(u * 100, 1), "duration_min": prm["step_s"] / 60}
                              for u in prm["speeds_m_s"]],
                    "recovery_baseline": "pre_exercise"}
        events = [{"time_s": trial.start_s, "kind": "note", "fish_id": demo.fish_id, "description": "Exercise started"},
                  {"time_s": trial.fatigue_time_s, "kind": "fatigue", "fish_id": demo.fish_id,
                   "description": "Exhausted: rested on the rear grid and did not resume; speed lowered to 5 cm/s "
                                  "for recovery"}]
        truth = {"protocol": "recovery", **trial.truth, "exercise_start_s": trial.start_s,
                 "exhaustion_s": trial.fatigue_time_s, "baseline": "pre_exercise (MO2 at rest, 5 cm/s)"}
    elif demo.kind == "first_swim":
        return _step_demo(demo, day, "step_ucrit", {}, [])
    elif demo.kind == "repeat":
        return _step_demo(demo, day - 1 if day > 10 else day, "repeat_ucrit",
                          {"rest_interval_min": prm["rest_interval_min"], "first_swim_session_id": prm["first"]}, [])
    elif demo.kind == "group":
        return _group_demo(demo, day)
    elif demo.kind == "gait":
        events, records, gait_truth = _gait_records(demo, demo.params["rest_s"])
        session, raw, truth = _step_demo(demo, day, "step_ucrit", {}, events, records)
        return session, raw, {**truth, **gait_truth}
    else:  # pragma: no cover - a recipe error
        raise ValueError(f"unknown demo kind {demo.kind!r}")
    doc, sha = _common(demo, trial.simulated, protocol, events, day)
    truth["note"] = "Truth used by swimlab.sim to generate this trial (invented demo data)."
    truth["seed"] = demo.seed
    return Session.from_json_dict(doc), {sha: trial.simulated.csv_bytes}, truth


CREATED_AT = "2026-12-02T02:18:00+00:00"
"""``created_at`` of every demo bundle, so that rewriting them changes nothing that did not change."""


def _write_bundle_folder(session: Session, raw: dict[str, bytes], target: Path) -> Path:
    """Write a bundle folder with a fixed ``created_at``: beside the target, read back, then moved in."""
    files = bundle_files(session, raw, created_at=CREATED_AT)
    temp = target.parent / f".{target.name}.partial"
    if temp.exists():
        shutil.rmtree(temp)
    try:
        for name, data in files.items():
            path = temp / name
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(data)
        read_bundle(temp)  # what was written must read back
        old = target.parent / f".{target.name}.old"
        if target.exists():
            target.rename(old)
        temp.rename(target)
        if old.exists():
            shutil.rmtree(old)
    finally:
        if temp.exists():
            shutil.rmtree(temp, ignore_errors=True)
    return target


def all_demos() -> list[tuple[str, Any]]:
    """(name, recipe) of every demo trial, step tests first."""
    return [(t.name, t) for t in TRIALS] + [(t.name, t) for t in PROTOCOL_DEMOS]


def build_any(recipe: DemoTrial | ProtocolDemo) -> tuple[Session, dict[str, bytes], dict[str, Any]]:
    """Build a step demo (:func:`build`) or a protocol demo (:func:`build_protocol_demo`)."""
    return build(recipe) if isinstance(recipe, DemoTrial) else build_protocol_demo(recipe)


def write_all(folder: str | Path) -> list[Path]:
    """Write every demo bundle (and its truth) into ``folder``, replacing those already there."""
    folder = Path(folder)
    (folder / "truth").mkdir(parents=True, exist_ok=True)
    written = []
    for name, recipe in all_demos():
        session, raw, truth = build_any(recipe)
        path = _write_bundle_folder(session, raw, folder / name)
        (folder / "truth" / f"{name}.json").write_text(json.dumps(truth, indent=2, default=_json_default) + "\n")
        written.append(path)
    return written


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"not JSON serialisable: {type(value)}")


def demo_bundle_paths(folder: str | Path) -> list[Path]:
    """Return the demo bundle folders in ``folder`` (those holding a session.json)."""
    folder = Path(folder)
    if not folder.is_dir():
        return []
    return sorted(p for p in folder.iterdir() if (p / "session.json").is_file())


if __name__ == "__main__":  # pragma: no cover - a maintenance command
    for path in write_all(sys.argv[1] if len(sys.argv) > 1 else "demo_sessions"):
        print(path)
