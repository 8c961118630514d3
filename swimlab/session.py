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

SCHEMA_VERSION = 2

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
GROUP_FATIGUE_DEFINITIONS = {
    "first_fish": "the group's fatigue is the first fish of the group to meet the fatigue criterion",
    "half_group": "the group's fatigue is when half the fish (rounded up) have met the fatigue criterion",
    "last_fish": "the group's fatigue is the last fish of the group to meet the fatigue criterion",
    "stated": "the group's fatigue as the operator states it (give the description)",
}
"""How a group trial's fatigue is called (a recorded field of every group; it changes Ucrit)."""
GROUP_PROTOCOLS = ("step_ucrit",)
"""Protocol types a group trial can be analysed in (the step test); others are refused at entry."""
GAITS = {
    "pectoral": "pectoral-fin (labriform) swimming",
    "steady_caudal": "steady body–caudal-fin swimming",
    "burst_and_coast": "burst-and-coast (unsteady, burst-assisted) swimming",
}
"""Gaits an event can record as the gait the fish swims in from then on."""
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
    gait: Literal["pectoral", "steady_caudal", "burst_and_coast"] | None = Field(
        None, description="For a gait_change: the gait the fish swims in from this time on (see GAITS)"
    )


class FishGroup(_Model):
    """Several fish swum together in one respirometer (a group trial).

    The chamber's MO2 is the group's: it is computed with the fish's summed mass and volume and
    given per capita (per fish and per kg). The fatigue definition is required: whether the
    group fatigued with its first fish, half of it or its last fish changes the group's Ucrit.
    """

    group_id: str = Field(min_length=1, description="Label of the group (not a fish id)")
    chamber: str = Field(min_length=1, description="Oxygen channel of the respirometer the group shares")
    fish_ids: list[str] = Field(default_factory=list, description="The fish swum together (two or more)")
    fatigue_definition: Literal["first_fish", "half_group", "last_fish", "stated"] | None = Field(
        None, description="How the group's fatigue was called (see GROUP_FATIGUE_DEFINITIONS); required"
    )
    fatigue_description: str = Field("", description="The stated definition, when fatigue_definition is 'stated'")


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
    groups: list[FishGroup] = Field(default_factory=list)
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
        """Fish keyed by their oxygen channel (one fish per chamber; see :meth:`units`)."""
        return {fish.chamber: fish for fish in self.fish}

    def units(self) -> list[AnalysisUnit]:
        """What each chamber's MO2 belongs to: one fish, or a group of fish swum together.

        In the order of :attr:`fish` (a group where its first fish is listed). A valid session
        has one unit per chamber.
        """
        by_fish = {fid: g for g in self.groups for fid in g.fish_ids}
        out: list[AnalysisUnit] = []
        seen: set[str] = set()
        fish_of = {f.fish_id: f for f in self.fish}
        for fish in self.fish:
            group = by_fish.get(fish.fish_id)
            if group is None:
                out.append(AnalysisUnit(fish.fish_id, fish.chamber, (fish,), None))
            elif group.group_id not in seen:
                seen.add(group.group_id)
                members = tuple(fish_of[f] for f in group.fish_ids if f in fish_of)
                out.append(AnalysisUnit(group.group_id, group.chamber, members, group))
        return out

    def unit_ids(self) -> list[str]:
        """Ids of :meth:`units`: fish ids, and group ids for fish swum together."""
        return [u.unit_id for u in self.units()]

    def group_of(self, fish_id: str) -> FishGroup | None:
        """The group a fish was swum in, or None when it swam alone."""
        return next((g for g in self.groups if fish_id in g.fish_ids), None)

    def group_fatigue_from_events(self, group: FishGroup) -> float | None:
        """The group's fatigue time read from its fish's fatigue events by its definition. [s]

        None when too few of its fish fatigued, or for the ``stated`` definition (see
        :func:`group_fatigue_time_s`).
        """
        times = [e.time_s for e in self.events if e.kind == "fatigue" and e.fish_id in group.fish_ids]
        return group_fatigue_time_s(group.fatigue_definition or "", times, len(group.fish_ids))


class AnalysisUnit:
    """One chamber's subject: a single fish or a group (see :meth:`Session.units`).

    Attributes
    ----------
    unit_id
        The fish id, or the group id.
    chamber
        The oxygen channel.
    fish
        The fish in the chamber.
    group
        The :class:`FishGroup`, or None for a fish alone.
    """

    __slots__ = ("unit_id", "chamber", "fish", "group")

    def __init__(self, unit_id: str, chamber: str, fish: tuple[Fish, ...], group: FishGroup | None):
        self.unit_id, self.chamber, self.fish, self.group = unit_id, chamber, fish, group

    @property
    def is_group(self) -> bool:
        return self.group is not None

    @property
    def n_fish(self) -> int:
        return len(self.fish)

    @property
    def mass_g(self) -> float:
        """Summed mass of the fish in the chamber. [g]"""
        return float(sum(f.mass_g for f in self.fish))

    @property
    def total_length_cm(self) -> float:
        """Mean total length of the fish in the chamber (body length for BL/s of a group). [cm]"""
        return float(sum(f.total_length_cm for f in self.fish) / len(self.fish))

    def __repr__(self) -> str:
        kind = f"group of {self.n_fish}" if self.is_group else "fish"
        return f"AnalysisUnit({self.unit_id!r}, chamber {self.chamber!r}, {kind})"


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

    _group_checks(session, add)

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
    group_ids = [g.group_id for g in session.groups]
    for i, event in enumerate(session.events):
        if event.fish_id and event.fish_id not in ids and event.fish_id not in group_ids:
            add(f"events.{i}.fish_id", f"no fish with id {event.fish_id!r}; fish are {ids}"
                + (f", groups are {group_ids}" if group_ids else ""))
        if event.gait is not None and event.kind != "gait_change":
            add(f"events.{i}.gait", f"a gait is recorded on a gait_change event; this event is a {event.kind}")

    from swimlab.settings import LabSettings  # local: settings has no session dependency

    try:
        LabSettings.from_dict(session.settings)
    except InputError as exc:
        add("settings", exc.reason)
    return problems


def group_fatigue_time_s(definition: str, fatigue_times_s: list[float], n_fish: int) -> float | None:
    """The group's fatigue time from its fish's fatigue times and the group's definition.

    Parameters
    ----------
    definition
        A key of :data:`GROUP_FATIGUE_DEFINITIONS`.
    fatigue_times_s
        Fatigue time of each fish that fatigued (fish still swimming are left out). [s]
    n_fish
        Fish in the group. [-]

    Returns
    -------
    The first time (``first_fish``), the ⌈n/2⌉-th time (``half_group``), the last time when
    every fish fatigued (``last_fish``); None when too few fish fatigued, or for ``stated``
    (the operator's own call: ``protocol.fatigue_time_s``). [s]
    """
    times = sorted(float(t) for t in fatigue_times_s)
    if definition == "first_fish":
        return times[0] if times else None
    if definition == "half_group":
        k = -(-n_fish // 2)
        return times[k - 1] if len(times) >= k else None
    if definition == "last_fish":
        return times[-1] if len(times) >= n_fish else None
    return None


def _group_checks(session: Session, add) -> None:
    """Problems of group trials: who is in which group, the fatigue definition, shared chambers."""
    fish_of = {f.fish_id: (i, f) for i, f in enumerate(session.fish)}
    ids = list(fish_of)
    in_group: dict[str, int] = {}
    group_ids: list[str] = []
    chambers_of_groups: dict[str, int] = {}
    definitions = sorted(GROUP_FATIGUE_DEFINITIONS)
    for j, group in enumerate(session.groups):
        where = f"groups.{j}"
        if group.group_id in group_ids:
            add(f"{where}.group_id", f"group id {group.group_id!r} is used more than once")
        if group.group_id in fish_of:
            add(f"{where}.group_id", f"group id {group.group_id!r} is also a fish id; give the group its own label")
        group_ids.append(group.group_id)
        if group.chamber in chambers_of_groups:
            add(f"{where}.chamber", f"chamber {group.chamber!r} already holds group "
                f"{session.groups[chambers_of_groups[group.chamber]].group_id!r}; one group per chamber")
        chambers_of_groups.setdefault(group.chamber, j)
        if len(group.fish_ids) < 2:
            add(f"{where}.fish_ids", f"a group holds two or more fish; got {len(group.fish_ids)}")
        if len(set(group.fish_ids)) != len(group.fish_ids):
            add(f"{where}.fish_ids", "names a fish more than once")
        for fid in group.fish_ids:
            if fid not in fish_of:
                add(f"{where}.fish_ids", f"no fish with id {fid!r}; fish are {ids}")
                continue
            if fid in in_group and in_group[fid] != j:
                add(f"{where}.fish_ids", f"fish {fid!r} is already in group "
                    f"{session.groups[in_group[fid]].group_id!r}; a fish swims in one group")
            in_group.setdefault(fid, j)
            i, fish = fish_of[fid]
            if fish.chamber != group.chamber:
                add(f"fish.{i}.chamber", f"fish {fid!r} is in group {group.group_id!r} of chamber {group.chamber!r} "
                    f"but its chamber is {fish.chamber!r}")
        members = [fish_of[f][1] for f in dict.fromkeys(group.fish_ids) if f in fish_of]
        if members and sum(f.mass_g for f in members) / 1000.0 >= session.flume.respirometer_volume_l:
            add(f"{where}.fish_ids", "the group's summed fish volume is not smaller than the respirometer volume")
        if group.fatigue_definition is None:
            add(f"{where}.fatigue_definition",
                f"a group trial needs its fatigue definition, one of {definitions} (e.g. first_fish: the first fish "
                "to fatigue ends the group's swim)")
        elif group.fatigue_definition == "stated" and not group.fatigue_description.strip():
            add(f"{where}.fatigue_description", "a stated fatigue definition needs its description")
    if session.groups and session.protocol.type not in GROUP_PROTOCOLS:
        add("groups", f"a group trial can be analysed in the step test ({', '.join(GROUP_PROTOCOLS)}); this session's "
            f"protocol is {session.protocol.type}: swim each fish alone or use a step test")
    # fish sharing a chamber must be recorded as one group
    by_chamber: dict[str, list[str]] = {}
    for fish in session.fish:
        by_chamber.setdefault(fish.chamber, []).append(fish.fish_id)
    for chamber, members in by_chamber.items():
        if len(members) < 2:
            continue
        j = chambers_of_groups.get(chamber)
        outside = members if j is None else [m for m in members if m not in session.groups[j].fish_ids]
        for fid in outside:
            i = fish_of[fid][0]
            add(f"fish.{i}.chamber", f"fish {members} share chamber {chamber!r}: record fish swum together as a group "
                "(groups: group id, chamber, fish ids, fatigue definition), or give each fish its own chamber")
    for chamber in chambers_of_groups:
        if chamber not in by_chamber:
            j = chambers_of_groups[chamber]
            add(f"groups.{j}.chamber", f"no fish uses chamber {chamber!r}")
    # the group's fatigue time must agree with its fish's fatigue events under its definition
    p = session.protocol
    for group in session.groups:
        if group.fatigue_definition in (None, "stated"):
            continue
        derived = session.group_fatigue_from_events(group)
        if derived is not None and p.fatigue_time_s is not None and abs(derived - p.fatigue_time_s) > 1.0:
            add("protocol.fatigue_time_s",
                f"{p.fatigue_time_s:g} s, but by group {group.group_id!r}'s definition ({group.fatigue_definition}) "
                f"its fish's fatigue events give {derived:g} s; correct one of them")


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
