"""The session: one validated value holding everything a person entered for one trial.

A :class:`Session` is what the lab book stores, what a bundle carries, and what
:func:`swimlab.analysis.analyse` reads. It holds no derived numbers: only what was entered or
recorded, plus references to raw logger files by their SHA-256 checksum.

Units are in the field names at this boundary (``mass_g``, ``speed_cm_s``), because these are
the values people type; the science modules receive SI values through the ``*_si`` helpers.

Validation gives every problem at once: :func:`validate_session` returns the session (or
``None``) and a list of :class:`Problem` with the dotted field path and what is valid.
"""

from __future__ import annotations

import datetime as dt
import uuid
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from swimlab.errors import InputError

SCHEMA_VERSION = 1

PROTOCOL_TYPES = ("step_ucrit", "ramp", "endurance", "repeat_ucrit", "recovery")
PROTOCOL_LABELS = {
    "step_ucrit": "Step test (Ucrit)",
    "ramp": "Ramp / constant acceleration (Umax)",
    "endurance": "Fixed-speed endurance",
    "repeat_ucrit": "Repeat step test (Ucrit, second swim)",
    "recovery": "Post-exercise recovery (EPOC)",
}
PHASE_SOURCES = ("pump", "schedule", "shape")
BACKGROUND_METHODS = ("none", "constant", "linear", "exponential")
EVENT_KINDS = (
    "gait_change",
    "burst",
    "rear_grid_contact",
    "stimulus",
    "fatigue",
    "adverse_event",
    "impingement",
    "note",
)
STATUSES = ("draft", "submitted", "approved", "returned")
RECOVERY_BASELINES = {
    "pre_exercise": "routine MO2 of the measure phases before the exercise began",
    "smr": "standard metabolic rate (entered, or this session's SMR)",
    "fitted_asymptote": "the asymptote of the decay fitted to the recovery phases",
}
"""Baselines an EPOC can be measured from (the keys of :data:`swimlab.protocols.recovery.BASELINE_METHODS`)."""


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", validate_assignment=False, frozen=False)


# --------------------------------------------------------------------------------------------
# Water, flume, fish
# --------------------------------------------------------------------------------------------


class WaterConditions(_Model):
    """Water in the respirometer during the trial."""

    temperature_c: float = Field(ge=-2, le=40, description="Water temperature [°C]")
    salinity: float = Field(0.0, ge=0, le=42, description="Practical salinity [-]")
    barometric_pressure_kpa: float = Field(
        101.325, ge=80, le=110, description="Barometric pressure [kPa]"
    )


class CalibrationPoint(_Model):
    """One point of the flume's speed calibration."""

    motor_setting: float = Field(description="Motor or controller setting [as on the controller]")
    speed_cm_s: float = Field(ge=0, description="Measured water speed [cm/s]")


class FlumeCharacterisation(_Model):
    """How and when the flume's flow was characterised (versioned with the flume)."""

    version: int = Field(1, ge=1)
    date: dt.date | None = None
    instrument: str = ""
    uniformity_pct: float | None = Field(None, ge=0, le=100, description="Cross-section speed uniformity [%]")
    turbulence_intensity_pct: float | None = Field(None, ge=0, le=100, description="Turbulence intensity [%]")
    notes: str = ""


class Flume(_Model):
    """The swim tunnel: working section, respirometer volume and speed calibration."""

    name: str = Field(min_length=1)
    section_shape: Literal["rectangular", "circular"] = "rectangular"
    section_width_cm: float | None = Field(None, gt=0, le=500)
    section_height_cm: float | None = Field(None, gt=0, le=500)
    section_diameter_cm: float | None = Field(None, gt=0, le=500)
    section_length_cm: float | None = Field(None, gt=0, le=2000)
    respirometer_volume_l: float = Field(gt=0, le=10000, description="Total closed volume [L]")
    calibration: list[CalibrationPoint] = Field(default_factory=list)
    characterisation: FlumeCharacterisation = Field(default_factory=FlumeCharacterisation)


class Fish(_Model):
    """One fish in the trial."""

    fish_id: str = Field(min_length=1)
    species: str = ""
    chamber: str = Field("A", min_length=1, description="Oxygen channel of its respirometer")
    mass_g: float = Field(gt=0, le=100000)
    total_length_cm: float = Field(gt=0, le=300)
    fork_length_cm: float | None = Field(None, gt=0, le=300)
    body_depth_cm: float = Field(gt=0, le=100)
    body_width_cm: float = Field(gt=0, le=100)
    sex: Literal["", "female", "male", "unknown"] = ""
    notes: str = ""


# --------------------------------------------------------------------------------------------
# Protocol
# --------------------------------------------------------------------------------------------


class SpeedStep(_Model):
    """One speed step of a step protocol (set speed from the calibration)."""

    speed_cm_s: float = Field(ge=0, le=500, description="Set water speed [cm/s]")
    duration_min: float = Field(gt=0, le=24 * 60, description="Step duration [min]")
    motor_setting: float | None = None


class CycleTiming(_Model):
    """How flush / wait / measure phases are found in the trace."""

    source: Literal["pump", "schedule", "shape"] = "schedule"
    flush_s: float | None = Field(None, gt=0)
    wait_s: float = Field(60.0, ge=0)
    measure_s: float | None = Field(None, gt=0)
    start_s: float = Field(0.0, ge=0, description="Start of the first flush on the trace clock [s]")


class FatigueCriterion(_Model):
    """What counted as fatigue (it changes the result, so it is data)."""

    description: str = "Fish rests on the rear grid and does not resume swimming"
    rest_on_grid_s: float | None = Field(10.0, gt=0, description="Time resting on the grid [s]")
    stimulus: str = ""
    stimulus_limit: int | None = Field(None, ge=0, description="Stimuli before fatigue is called")


class Protocol(_Model):
    """The swimming protocol; the type decides which fields are required."""

    type: Literal["step_ucrit", "ramp", "endurance", "repeat_ucrit", "recovery"]
    start_s: float = Field(0.0, ge=0, description="Start of the first step on the trace clock [s]")
    steps: list[SpeedStep] = Field(default_factory=list)
    ramp_rate_cm_s_per_min: float | None = Field(None, gt=0)
    ramp_start_speed_cm_s: float | None = Field(None, ge=0)
    set_speed_cm_s: float | None = Field(None, gt=0)
    time_limit_min: float | None = Field(None, gt=0)
    rest_interval_min: float | None = Field(None, gt=0, description="Rest before a repeat swim [min]")
    first_swim_session_id: str | None = None
    cycle: CycleTiming = Field(default_factory=CycleTiming)
    fatigue_criterion: FatigueCriterion = Field(default_factory=FatigueCriterion)
    fatigue_time_s: float | None = Field(
        None, ge=0, description="Fatigue on the trace clock [s]; None if not reached or not recorded"
    )
    recovery_baseline: Literal["pre_exercise", "smr", "fitted_asymptote"] | None = Field(
        None, description="Baseline of a recovery (EPOC) analysis; see RECOVERY_BASELINES"
    )
    recovery_baseline_mg_kg_h: float | None = Field(
        None, gt=0, le=5000,
        description="Entered SMR used as the recovery baseline (e.g. from another trial) [mg O2 kg-1 h-1]",
    )


class TrialConditions(_Model):
    """Conditions before and around the trial."""

    acclimation_temperature_c: float | None = Field(None, ge=-2, le=40)
    acclimation_days: float | None = Field(None, ge=0)
    fasting_h: float | None = Field(None, ge=0)
    habituation_min: float | None = Field(None, ge=0)
    habituation_speed_cm_s: float | None = Field(None, ge=0)
    time_of_day: str = ""
    photoperiod: str = ""
    treatment: str = Field("", description="Treatment or group label, for comparisons across sessions")
    animal_care_approval: str = Field(
        "", description="Animal-care committee and approved protocol or licence number covering the trial"
    )


class SensorCalibration(_Model):
    """The oxygen sensor's calibration record."""

    sensor: str = ""
    date: dt.date | None = None
    zero_point_pct: float = 0.0
    span_point_pct: float = 100.0
    temperature_c: float | None = Field(None, ge=-2, le=40)
    barometric_pressure_kpa: float | None = Field(None, ge=80, le=110)
    salinity: float | None = Field(None, ge=0, le=42)
    drift_check_pct: float | None = Field(
        None, description="Reading in air-saturated water at the end of the trial [% air saturation]"
    )


class Blank(_Model):
    """A background (blank) run: the respirometer without the fish."""

    channel: str = "A"
    when: Literal["before", "after", "during"] = "before"
    time_s: float = Field(description="Mid-time of the blank on the trace clock [s]; negative before")
    slope_mg_l_h: float | None = Field(None, description="Oxygen slope, entered [mg/L/h]; negative = decline")
    raw_file_sha256: str | None = None


class Event(_Model):
    """A time-stamped observation."""

    time_s: float = Field(ge=0, description="Time on the trace clock [s]")
    kind: Literal[
        "gait_change", "burst", "rear_grid_contact", "stimulus", "fatigue",
        "adverse_event", "impingement", "note",
    ]
    fish_id: str = ""
    description: str = ""
    count: int | None = Field(None, ge=0)


class TailBeatRecord(_Model):
    """Tail beats counted at one speed step: over a counting window, or over video frames."""

    step: int = Field(ge=1, description="Speed step (1-based; 1 for an endurance swim)")
    fish_id: str = ""
    tail_beat_count: int = Field(ge=0, description="Full tail-beat cycles counted [-]")
    window_s: float | None = Field(None, gt=0, le=3600, description="Counting window [s]")
    frames: int | None = Field(None, gt=0, description="Video frames spanned by the counted beats [-]")
    frame_rate_hz: float | None = Field(None, gt=0, le=100000, description="Video frame rate [1/s]")
    amplitude_cm: float | None = Field(None, ge=0, le=300, description="Peak-to-peak tail-tip amplitude [cm]")


class RawFileRef(_Model):
    """A raw logger file, stored unchanged by checksum."""

    sha256: str = Field(pattern=r"^[0-9a-f]{64}$")
    name: str
    role: Literal["trial", "blank"] = "trial"
    mapping: dict[str, Any] | None = None


class PhaseExclusion(_Model):
    """A phase a person excluded, with the reason kept."""

    channel: str
    cycle: int = Field(ge=1)
    reason: str = Field(min_length=3)
    by: str = ""
    at: dt.datetime | None = None


# --------------------------------------------------------------------------------------------
# Session
# --------------------------------------------------------------------------------------------


class Session(_Model):
    """Everything entered for one trial."""

    schema_version: int = SCHEMA_VERSION
    session_id: str = Field(default_factory=lambda: uuid.uuid4().hex[:12])
    title: str = Field(min_length=1)
    study: str = ""
    lab: str = ""
    operator: str = ""
    trial_date: dt.date | None = None
    water: WaterConditions
    flume: Flume
    fish: list[Fish] = Field(min_length=1)
    protocol: Protocol
    conditions: TrialConditions = Field(default_factory=TrialConditions)
    sensor: SensorCalibration | None = None
    blanks: list[Blank] = Field(default_factory=list)
    background_method: Literal["none", "constant", "linear", "exponential"] = "linear"
    events: list[Event] = Field(default_factory=list)
    kinematics: list[TailBeatRecord] = Field(default_factory=list)
    raw_files: list[RawFileRef] = Field(default_factory=list)
    exclusions: list[PhaseExclusion] = Field(default_factory=list)
    settings: dict[str, float | None] = Field(default_factory=dict)
    notes: str = ""

    @field_validator("session_id")
    @classmethod
    def _id_is_plain(cls, value: str) -> str:
        if not value.replace("-", "").replace("_", "").isalnum():
            raise ValueError("may hold only letters, digits, '-' and '_'")
        return value

    # -- conveniences ---------------------------------------------------------------------
    def to_json_dict(self) -> dict[str, Any]:
        """Return a JSON-safe dict (dates as ISO strings)."""
        return self.model_dump(mode="json")

    @classmethod
    def from_json_dict(cls, data: dict[str, Any]) -> Session:
        """Validate ``data``; on failure raise :class:`InputError` listing every problem."""
        session, problems = validate_session(data)
        if session is None:
            raise InputError(
                "the session is not valid: " + "; ".join(str(p) for p in problems),
                field=problems[0].field if problems else None,
            )
        return session

    def trial_files(self) -> list[RawFileRef]:
        """Raw files holding the trial's trace."""
        return [ref for ref in self.raw_files if ref.role == "trial"]

    def fish_by_chamber(self) -> dict[str, Fish]:
        """Fish keyed by their oxygen channel."""
        return {fish.chamber: fish for fish in self.fish}


class Problem(BaseModel):
    """One validation problem: where and what is valid."""

    field: str
    message: str

    def __str__(self) -> str:
        return f"{self.field}: {self.message}"


def _loc_to_path(loc: tuple) -> str:
    return ".".join(str(part) for part in loc)


def validate_session(data: dict[str, Any]) -> tuple[Session | None, list[Problem]]:
    """Validate a session dict and report every problem at once.

    Returns
    -------
    session, problems
        ``session`` is ``None`` when any problem makes the value unusable. Field problems come
        from the types and ranges above; cross-field problems (what a protocol type needs,
        fish in the working section, chamber labels, duplicate ids) from :func:`cross_checks`.
    """
    try:
        session = Session.model_validate(data)
    except ValidationError as exc:
        problems = [
            Problem(field=_loc_to_path(err["loc"]) or "(session)", message=_plain(err))
            for err in exc.errors()
        ]
        return None, problems
    problems = cross_checks(session)
    return (None if problems else session), problems


def _plain(err: dict) -> str:
    msg = err.get("msg", "invalid")
    value = err.get("input")
    if err.get("type") == "missing":
        return "is required"
    if isinstance(value, str | int | float) and not isinstance(value, bool):
        return f"{msg} (got {value!r})"
    return msg


def cross_checks(session: Session) -> list[Problem]:
    """Problems that involve more than one field."""
    problems: list[Problem] = []
    add = lambda field, message: problems.append(Problem(field=field, message=message))  # noqa: E731

    flume = session.flume
    if flume.section_shape == "rectangular":
        for name in ("section_width_cm", "section_height_cm"):
            if getattr(flume, name) is None:
                add(f"flume.{name}", "is required for a rectangular working section")
    elif flume.section_diameter_cm is None:
        add("flume.section_diameter_cm", "is required for a circular working section")

    ids = [fish.fish_id for fish in session.fish]
    for i, fish in enumerate(session.fish):
        if ids.count(fish.fish_id) > 1:
            add(f"fish.{i}.fish_id", f"fish id {fish.fish_id!r} is used more than once")
        if fish.body_depth_cm >= fish.total_length_cm:
            add(f"fish.{i}.body_depth_cm", "must be smaller than the total length")
        if flume.section_shape == "rectangular" and flume.section_height_cm and flume.section_width_cm:
            if fish.body_depth_cm >= flume.section_height_cm or fish.body_width_cm >= flume.section_width_cm:
                add(f"fish.{i}", "the fish is larger than the working section")
        if flume.section_shape == "circular" and flume.section_diameter_cm:
            if max(fish.body_depth_cm, fish.body_width_cm) >= flume.section_diameter_cm:
                add(f"fish.{i}", "the fish is larger than the working section")
        fish_volume_l = fish.mass_g / 1000.0
        if fish_volume_l >= flume.respirometer_volume_l:
            add(f"fish.{i}.mass_g", "the fish's volume is not smaller than the respirometer volume")

    protocol = session.protocol
    if protocol.type in ("step_ucrit", "repeat_ucrit"):
        if len(protocol.steps) < 1:
            add("protocol.steps", "a step protocol needs at least one speed step")
    if protocol.type == "ramp":
        if protocol.ramp_rate_cm_s_per_min is None:
            add("protocol.ramp_rate_cm_s_per_min", "a ramp protocol needs a ramp rate")
    if protocol.type == "endurance":
        if protocol.set_speed_cm_s is None:
            add("protocol.set_speed_cm_s", "an endurance protocol needs a set speed")
        if protocol.time_limit_min is None:
            add("protocol.time_limit_min", "an endurance protocol needs a time limit")
    if protocol.type == "repeat_ucrit" and protocol.rest_interval_min is None:
        add("protocol.rest_interval_min", "a repeat swim needs the rest interval since the first swim")
    if protocol.first_swim_session_id is not None and protocol.first_swim_session_id == session.session_id:
        add("protocol.first_swim_session_id", "names this session itself; give the session of the first swim")
    if (protocol.type == "endurance" and protocol.time_limit_min is not None
            and protocol.fatigue_time_s is not None
            and protocol.fatigue_time_s - protocol.start_s > protocol.time_limit_min * 60.0 + 1e-9):
        add("protocol.fatigue_time_s",
            f"fatigue {protocol.fatigue_time_s - protocol.start_s:g} s after the start is beyond the time limit "
            f"of {protocol.time_limit_min:g} min; a fish still swimming at the limit has no fatigue time")
    if protocol.recovery_baseline_mg_kg_h is not None and protocol.recovery_baseline != "smr":
        add("protocol.recovery_baseline_mg_kg_h",
            "an entered baseline is an SMR; set the recovery baseline to 'smr' or leave the value out")
    n_steps = len(protocol.steps)
    for i, record in enumerate(session.kinematics):
        where = f"kinematics.{i}"
        if record.window_s is None and record.frames is None:
            add(f"{where}.window_s", "a tail-beat count needs its counting window [s] (or video frames and the frame rate)")
        if record.window_s is not None and record.frames is not None:
            add(f"{where}.frames", "give either a counting window or video frames, not both")
        if record.frames is not None and record.frame_rate_hz is None:
            add(f"{where}.frame_rate_hz", "video frames need the frame rate [1/s]")
        if protocol.type == "endurance":
            if record.step != 1:
                add(f"{where}.step", f"an endurance swim has one speed, step 1; got step {record.step}")
        elif n_steps == 0:
            add(f"{where}.step", f"a {protocol.type} protocol has no speed steps for tail-beat records")
        elif record.step > n_steps:
            add(f"{where}.step", f"the protocol has {n_steps} step(s); got step {record.step}")
        if record.fish_id and record.fish_id not in ids:
            add(f"{where}.fish_id", f"no fish with id {record.fish_id!r}; fish are {ids}")
        if not record.fish_id and len(ids) > 1:
            add(f"{where}.fish_id", f"the session holds {len(ids)} fish; say which fish was counted")
    cycle = protocol.cycle
    if cycle.source == "schedule":
        if cycle.flush_s is None:
            add("protocol.cycle.flush_s", "a cycle schedule needs the flush duration")
        if cycle.measure_s is None:
            add("protocol.cycle.measure_s", "a cycle schedule needs the measure duration")

    chambers = {fish.chamber for fish in session.fish}
    for i, blank in enumerate(session.blanks):
        if blank.slope_mg_l_h is None and blank.raw_file_sha256 is None:
            add(f"blanks.{i}", "a blank needs an entered slope or a raw blank file")
        if blank.channel not in chambers:
            add(f"blanks.{i}.channel", f"no fish uses channel {blank.channel!r}; channels are {sorted(chambers)}")
    shas = {ref.sha256 for ref in session.raw_files}
    for i, blank in enumerate(session.blanks):
        if blank.raw_file_sha256 is not None and blank.raw_file_sha256 not in shas:
            add(f"blanks.{i}.raw_file_sha256", "names a raw file that the session does not hold")
    for i, exclusion in enumerate(session.exclusions):
        if exclusion.channel not in chambers:
            add(f"exclusions.{i}.channel", f"no fish uses channel {exclusion.channel!r}")
    for i, event in enumerate(session.events):
        if event.fish_id and event.fish_id not in ids:
            add(f"events.{i}.fish_id", f"no fish with id {event.fish_id!r}; fish are {ids}")

    from swimlab.settings import LabSettings  # local: settings has no session dependency

    try:
        LabSettings.from_dict(session.settings)
    except InputError as exc:
        add("settings", exc.reason)
    return problems


def step_table(session: Session) -> list[dict[str, float]]:
    """Return the step schedule on the trace clock: step number, start, end, set speed [SI]."""
    rows = []
    start = session.protocol.start_s
    for number, step in enumerate(session.protocol.steps, start=1):
        end = start + step.duration_min * 60.0
        rows.append(
            {"step": number, "start_s": start, "end_s": end, "set_speed_m_s": step.speed_cm_s / 100.0}
        )
        start = end
    return rows
