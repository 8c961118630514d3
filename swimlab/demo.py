"""Demo sessions of an invented study, made by the simulator with known truth.

The scenario is invented for the demo: the *Brackwater Station fish physiology group* runs the
study *BW-26: swimming energetics of hatchery salmonids and coastal cod*. Lab, study, people and
fish labels are made up; the numbers come from :func:`swimlab.sim.simulate_trial`, and the truth
that made each trial is written beside its bundle (``demo_sessions/truth/<name>.json``) so that a
reader can compare what swimlab recovers with what was put in.

Run ``python -m swimlab.demo demo_sessions`` to (re)write the bundles.
"""

from __future__ import annotations

import json
import sys
from dataclasses import dataclass, field
from datetime import date, datetime
from pathlib import Path
from typing import Any

import numpy as np

from swimlab import sim
from swimlab.io.bundle import write_bundle
from swimlab.io.logger import sha256_hex
from swimlab.session import Session

LAB = "Brackwater Station fish physiology group (invented for the demo)"
STUDY = "BW-26 swimming energetics (invented demo study)"


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


STEP_S = 1800.0
FLUSH_S = 180.0
WAIT_S = 60.0

TRIALS = (
    DemoTrial(
        name="bw26-t01-clean-ucrit",
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
        name="bw26-c02-seawater",
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
        name="bw26-t03-large-fish",
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
        name="bw26-t04-struggling",
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
                       "habituation_speed_cm_s": 5.0, "time_of_day": "08:00", "photoperiod": "12L:12D"},
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
            {"time_s": (cycle - 1) * cycle_s + FLUSH_S + WAIT_S + trial.measure_s / 2, "kind": "burst",
             "fish_id": trial.fish_id, "description": "Bursts and struggling against the rear grid", "count": 6}
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


def write_all(folder: str | Path) -> list[Path]:
    """Write every demo bundle (and its truth) into ``folder``."""
    folder = Path(folder)
    (folder / "truth").mkdir(parents=True, exist_ok=True)
    written = []
    for trial in TRIALS:
        session, raw, truth = build(trial)
        path = write_bundle(session, raw, folder / trial.name, created_at="2026-03-31T12:00:00+00:00") if _takes_created_at() else write_bundle(session, raw, folder / trial.name)
        (folder / "truth" / f"{trial.name}.json").write_text(json.dumps(truth, indent=2, default=_json_default) + "\n")
        written.append(Path(path))
    return written


def _takes_created_at() -> bool:
    import inspect

    return "created_at" in inspect.signature(write_bundle).parameters


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
