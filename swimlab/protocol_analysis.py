"""Per-protocol results of one session: the protocol stage of :func:`swimlab.analysis.analyse`.

The science lives in :mod:`swimlab.protocols`; this module only takes what a session recorded
(its protocol fields, event log and tail-beat records) and what the step pipeline derived (the
measure-phase table with MO2, corrected speeds, Ucrit), calls the protocol functions, and lays
their results out as tables whose every row carries the protocol's name.

- **ramp** — Umax on set and on blocking-corrected speed (:func:`swimlab.protocols.ramp.umax`),
  time to fatigue, and MO2 of each measure phase along the ramp at the speed of its mid-time.
- **endurance** — time to fatigue at the set speed, or censored at the time limit for a fish
  still swimming (:func:`swimlab.protocols.endurance.endurance_outcomes`); across sessions,
  :func:`endurance_summary` gives Kaplan–Meier curves, the censored fatigue curve, the maximum
  sustained speed and the speed at which half the fish fatigue.
- **repeat_ucrit** — the recovery ratio Ucrit₂ / Ucrit₁ against the first swim's analysis
  (:func:`swimlab.protocols.repeat.recovery_ratio`); across sessions, :func:`repeat_pairs`.
- **recovery** — EPOC from the measure phases after exhaustion, from the baseline the session
  states (:func:`swimlab.protocols.recovery.epoc`), with the total oxygen cost and a cost of
  transport that includes EPOC when the exercise was a step test with MO2 at every step swum.
- **gait** — from the event log and the step schedule (:func:`swimlab.protocols.gait.gait_summary`).
- **kinematics** — from the session's tail-beat records (:mod:`swimlab.protocols.kinematics`).

Rules of this stage (stated once, here):

- A part that lacks an input, or whose input contradicts itself, computes nothing: it records a
  :class:`ProtocolProblem` naming the field and what is expected, and raises the flag
  PROTOCOL_RESULT_NOT_COMPUTED (or FATIGUE_NOT_RECORDED for a missing fatigue time).
- Speeds are blocking-corrected per fish as in the step table (Bell & Terhune 1970, through
  :func:`swimlab.flume.corrected_speed`); set speeds are given beside them.
- Endurance: a fish's fatigue time is ``protocol.fatigue_time_s`` when the session holds one fish,
  otherwise its first ``fatigue`` event naming it. A fish with no fatigue recorded was still
  swimming when the time limit ended: censored at the limit, and flagged so.
- Recovery: exhaustion is ``protocol.fatigue_time_s``; the exercise began at ``protocol.start_s``.
  The recovery series is every accepted measure phase whose mid-time is after exhaustion, timed
  from exhaustion. The ``pre_exercise`` baseline is the mean MO2 of the accepted phases that end
  before the exercise began; the ``smr`` baseline is the entered value, else this session's SMR
  (low quantile, then MLND, then extrapolated, the first available).
- Kinematics: a record's speed is its step's corrected speed (set speed if no correction); a
  record with no tail beat has frequency 0 and no stride length or Strouhal number; the
  frequency–speed line uses the records with beats.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from scipy import stats

from swimlab import checks, flume
from swimlab._tables import json_records
from swimlab.constants import CM_PER_M
from swimlab.errors import InputError
from swimlab.protocols import endurance, gait, kinematics, ramp, recovery, repeat
from swimlab.session import GAITS, PROTOCOL_LABELS, RECOVERY_BASELINES, Session, step_table

if TYPE_CHECKING:  # pragma: no cover
    from swimlab.analysis import Analysis

__all__ = [
    "PROTOCOL_RESULT_COLUMNS",
    "QUANTITY_LABELS",
    "PART_LABELS",
    "ProtocolProblem",
    "RampSummary",
    "EnduranceOutcome",
    "ProtocolResults",
    "analyse_protocol",
    "EnduranceSummary",
    "endurance_summary",
    "gait_curve_table",
    "gait_curve_sentences",
    "RepeatSummary",
    "repeat_pairs",
]

CM = 1.0 / CM_PER_M  # metres per centimetre
"""Metres per centimetre. [m/cm] Definition."""
S_PER_MIN = 60.0
"""Seconds per minute. [s/min] Definition."""

PROTOCOL_RESULT_COLUMNS = [
    "protocol", "part", "fish_id", "quantity", "label", "value", "unit", "method", "ci_low", "ci_high", "note",
]
"""Columns of :attr:`ProtocolResults.results`: the session's protocol type, the part that gave
the row (ramp, endurance, repeat, recovery, gait, kinematics), and the value with its label."""

PART_LABELS = {
    "ramp": "Ramp test (Umax)",
    "endurance": "Fixed-speed endurance",
    "repeat": "Repeat swim (recovery ratio)",
    "recovery": "Post-exercise recovery (EPOC)",
    "gait": "Gait (from the event log)",
    "kinematics": "Kinematics (tail beats)",
    "group": "Group trial (fish swum together; MO2 per capita)",
}
"""Heading of each part, as tables, plots and exports name it."""

QUANTITY_LABELS = {
    "ramp_umax": "Ramp Umax",
    "ramp_umax_bl": "Ramp Umax",
    "ramp_umax_set": "Ramp Umax (set speed)",
    "ramp_rate": "Ramp rate",
    "ramp_time_to_fatigue": "Ramp time to fatigue",
    "ramp_mo2_max": "Ramp highest MO2",
    "endurance_time": "Endurance time",
    "endurance_fatigued": "Endurance: fatigued within the limit",
    "endurance_speed": "Endurance swimming speed",
    "endurance_speed_bl": "Endurance swimming speed",
    "endurance_speed_set": "Endurance set speed",
    "endurance_mo2_mean": "Endurance mean MO2",
    "repeat_recovery_ratio": "Repeat-swim recovery ratio",
    "repeat_ucrit_first": "Repeat swim: first-swim Ucrit",
    "repeat_ucrit_second": "Repeat swim: second-swim Ucrit",
    "repeat_rest_interval": "Repeat swim: rest interval",
    "recovery_baseline": "Recovery baseline MO2",
    "recovery_epoc_trapezoid": "Recovery EPOC (trapezoids, recorded span)",
    "recovery_epoc_fit": "Recovery EPOC (fitted decay, to full recovery)",
    "recovery_epoc_fit_recorded": "Recovery EPOC (fitted decay, recorded span)",
    "recovery_t50": "Recovery time to 50 %",
    "recovery_t95": "Recovery time to 95 %",
    "recovery_peak_excess": "Recovery peak MO2 above baseline",
    "recovery_aerobic_cost": "Recovery: aerobic cost of the exercise",
    "recovery_total_o2_cost": "Recovery: total oxygen cost (aerobic + EPOC)",
    "recovery_epoc_share": "Recovery: EPOC share of the total cost",
    "recovery_cot_aerobic": "Recovery: cost of transport without EPOC",
    "recovery_cot_total": "Recovery: cost of transport with EPOC",
    "gait_upc": "Gait: pectoral–caudal transition speed Up–c",
    "gait_upc_bl": "Gait: pectoral–caudal transition speed Up–c",
    "gait_upc_share_ucrit": "Gait: Up–c as a share of Ucrit",
    "gait_burst_onset": "Gait: burst-and-coast onset speed",
    "gait_burst_onset_share_ucrit": "Gait: burst-and-coast onset as a share of Ucrit",
    "kinematics_fs_intercept": "Kinematics: frequency–speed line, intercept",
    "kinematics_fs_slope": "Kinematics: frequency–speed line, slope",
    "kinematics_fs_r2": "Kinematics: frequency–speed line, R²",
    "kinematics_stride_length_line": "Kinematics: stride length from the line (1 / slope)",
    "kinematics_tbf_max": "Kinematics: highest tail-beat frequency",
    "group_n_fish": "Group trial: fish swum together",
    "group_mass": "Group trial: summed fish mass",
    "group_water_volume": "Group trial: water volume (respirometer − summed fish volumes)",
    "group_fatigue_time": "Group trial: group fatigue after the first step began",
    "group_mo2_highest_step": "Group trial: highest step-mean group MO2",
    "group_mo2_per_fish_highest_step": "Group trial: highest step-mean MO2 per fish",
    "group_mo2_per_kg_highest_step": "Group trial: highest step-mean MO2 per kg (per capita)",
}
"""Label of each protocol quantity: every label names its protocol, so that no protocol value
reads as a step-test Ucrit."""

_TABLE_COLUMNS = {
    "ramp_phases": ["fish_id", "cycle", "start_s", "end_s", "time_from_ramp_start_s", "set_speed_cm_s",
                    "corrected_speed_cm_s", "mo2_mg_kg_h", "used"],
    "endurance": ["fish_id", "set_speed_cm_s", "corrected_speed_cm_s", "time_s", "time_min", "fatigued",
                  "time_limit_min", "fatigue_from", "gait", "gait_from"],
    "recovery_curve": ["fish_id", "cycle", "time_after_exhaustion_s", "time_after_exhaustion_min", "mo2_mg_kg_h",
                       "baseline_mg_kg_h", "excess_mg_kg_h"],
    "gait_steps": ["fish_id", "step", "start_s", "end_s", "speed_cm_s", "swum_s", "bursts", "bursts_per_min",
                   "share_of_ucrit", "share_of_upc"],
    "group_steps": ["fish_id", "step", "set_speed_cm_s", "corrected_speed_cm_s", "n_fish", "n_phases", "mo2_group_mg_h",
                    "mo2_per_fish_mg_h", "mo2_per_capita_mg_kg_h"],
    "kinematics": ["fish_id", "step", "speed_cm_s", "tail_beat_count", "window_s", "frequency_hz", "amplitude_cm",
                   "stride_length_cm", "stride_length_bl", "strouhal", "strouhal_efficient", "bainbridge_speed_cm_s",
                   "bainbridge_in_range"],
}


@dataclass(frozen=True)
class ProtocolProblem:
    """Why a protocol result was not computed.

    Attributes
    ----------
    part
        ``"ramp"``, ``"endurance"``, ``"repeat"``, ``"recovery"``, ``"gait"`` or ``"kinematics"``.
    fish_id
        The fish concerned, or ``""`` for the whole session.
    field
        Where the missing or contradictory value is (a dotted session path, or ``"first_swim"``).
    message
        What was wrong and what is expected.
    """

    part: str
    fish_id: str
    field: str
    message: str

    def __str__(self) -> str:
        who = f" (fish {self.fish_id})" if self.fish_id else ""
        return f"{PART_LABELS.get(self.part, self.part)}{who}: field {self.field!r}: {self.message}"


@dataclass(frozen=True)
class RampSummary:
    """Umax of one fish in a ramp test.

    Attributes
    ----------
    protocol
        ``"ramp"``.
    fish_id
        The fish.
    on_set_speed
        :class:`swimlab.protocols.ramp.RampResult` on the set (uncorrected) speed.
    umax_corrected_m_s, umax_corrected_bl_s
        Umax after the solid-blocking correction, or None when the correction is not possible
        for this fish. [m/s], [BL/s]
    """

    protocol: str
    fish_id: str
    on_set_speed: ramp.RampResult
    umax_corrected_m_s: float | None
    umax_corrected_bl_s: float | None


@dataclass(frozen=True)
class EnduranceOutcome:
    """One fish of a fixed-speed endurance trial.

    Attributes
    ----------
    protocol
        ``"endurance"``.
    session_id, fish_id, species, treatment
        Where the fish comes from.
    set_speed_m_s, corrected_speed_m_s
        Set speed, and the speed after the blocking correction (None if not possible). [m/s]
    time_s
        Time from the start of the set speed to fatigue, or the time limit if still swimming. [s]
    fatigued
        True when the fish fatigued within the limit; False when censored at the limit.
    time_limit_s
        The trial's time limit. [s]
    fatigue_from
        Where the fatigue time came from: ``"protocol.fatigue_time_s"``, ``"events.<i>"`` or
        ``"none recorded"``.
    gait
        The gait the trial ended in (a key of :data:`swimlab.session.GAITS`), or None when not
        recorded: the gait of the last ``gait_change`` event with a gait, naming the fish, at or
        before fatigue (or the time limit).
    gait_from
        Where it came from (``"events.<i>"``) or ``"not recorded"``.
    """

    protocol: str
    session_id: str
    fish_id: str
    species: str
    treatment: str
    set_speed_m_s: float
    corrected_speed_m_s: float | None
    time_s: float
    fatigued: bool
    time_limit_s: float
    fatigue_from: str
    gait: str | None = None
    gait_from: str = "not recorded"


@dataclass(frozen=True)
class ProtocolResults:
    """Everything the protocol stage derived from one session.

    Attributes
    ----------
    protocol
        The session's protocol type (:data:`swimlab.session.PROTOCOL_TYPES`).
    label
        Its label (:data:`swimlab.session.PROTOCOL_LABELS`).
    results
        One row per value, with the columns of :data:`PROTOCOL_RESULT_COLUMNS`.
    tables
        Per-phase, per-step or per-record tables by name (``ramp_phases``, ``endurance``,
        ``recovery_curve``, ``gait_steps``, ``kinematics``), units in the column names.
    ramp, endurance, repeat, recovery, gait, kinematics
        The protocol functions' result objects per fish id.
    problems
        Why something was not computed.
    first_swim_session_id
        The session of the first swim whose analysis was used for the recovery ratio, or None.
    """

    protocol: str
    label: str
    results: pd.DataFrame
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    ramp: dict[str, RampSummary] = field(default_factory=dict)
    endurance: dict[str, EnduranceOutcome] = field(default_factory=dict)
    repeat: dict[str, repeat.RecoveryRatio] = field(default_factory=dict)
    recovery: dict[str, recovery.EpocResult] = field(default_factory=dict)
    gait: dict[str, gait.GaitResult] = field(default_factory=dict)
    kinematics: dict[str, kinematics.KinematicsResult] = field(default_factory=dict)
    problems: tuple[ProtocolProblem, ...] = ()
    first_swim_session_id: str | None = None

    @property
    def parts(self) -> list[str]:
        """Parts with at least one result, in the order of :data:`PART_LABELS`."""
        found = set(self.results["part"]) if not self.results.empty else set()
        return [p for p in PART_LABELS if p in found]

    def result(self, fish_id: str, quantity: str) -> float | None:
        """One value for one fish, or None."""
        r = self.results
        if r.empty:
            return None
        hit = r[(r["fish_id"].astype(str) == str(fish_id)) & (r["quantity"] == quantity)]
        if hit.empty or pd.isna(hit["value"].iloc[0]):
            return None
        return float(hit["value"].iloc[0])

    def to_json_dict(self) -> dict[str, Any]:
        """A JSON-safe summary: results and tables as records, fits as parameters, problems."""
        fits: dict[str, Any] = {}
        for fid, res in self.recovery.items():
            fit = res.fit
            fits.setdefault(fid, {})["recovery_decay"] = None if fit is None else {
                "model": fit.model, "asymptote_mg_kg_h": fit.asymptote_mg_kg_h,
                "amplitudes_mg_kg_h": list(fit.amplitudes_mg_kg_h), "rates_per_s": list(fit.rates_per_s),
                "aicc": fit.aicc, "n": fit.n,
            }
        for fid, res in self.kinematics.items():
            line = res.line
            fits.setdefault(fid, {})["frequency_speed_line"] = None if line is None else {
                "intercept_hz": line.intercept_hz, "slope_hz_per_m_s": line.slope_hz_per_m_s,
                "intercept_se": line.intercept_se, "slope_se": line.slope_se, "r2": line.r2, "n": line.n,
            }
        return {
            "protocol": self.protocol,
            "label": self.label,
            "first_swim_session_id": self.first_swim_session_id,
            "results": json_records(self.results),
            "tables": {name: json_records(frame) for name, frame in self.tables.items()},
            "fits": fits,
            "problems": [{"part": p.part, "fish_id": p.fish_id, "field": p.field, "message": p.message}
                         for p in self.problems],
        }


# =============================================================================================
# The stage
# =============================================================================================


class _Collector:
    """Rows, tables, problems and flags of one session's protocol stage."""

    def __init__(self, session: Session):
        self.session = session
        self.rows: list[dict] = []
        self.tables: dict[str, list[dict]] = {}
        self.problems: list[ProtocolProblem] = []
        self.flags: list[dict] = []

    def add(self, part: str, fish_id: str, quantity: str, value: float | None, unit: str, method: str,
            ci: tuple[float | None, float | None] | None = None, note: str = "") -> None:
        lo, hi = (None, None) if ci is None else ci
        self.rows.append({
            "protocol": self.session.protocol.type, "part": part, "fish_id": fish_id, "quantity": quantity,
            "label": QUANTITY_LABELS[quantity], "value": np.nan if value is None else float(value), "unit": unit,
            "method": method, "ci_low": np.nan if lo is None else float(lo), "ci_high": np.nan if hi is None else float(hi),
            "note": note,
        })

    def row(self, table: str, **values: Any) -> None:
        self.tables.setdefault(table, []).append(values)

    def problem(self, part: str, fish_id: str, field_: str, message: str) -> None:
        problem = ProtocolProblem(part, fish_id, field_, message)
        self.problems.append(problem)
        self.flags.append(checks.flag(
            "PROTOCOL_RESULT_NOT_COMPUTED", f"{PART_LABELS[part]}: field {field_!r}: {message}",
            scope="fish" if fish_id else "session", where=f"fish {fish_id}" if fish_id else "",
        ))

    def from_error(self, part: str, fish_id: str, exc: InputError, default_field: str) -> None:
        where = exc.field or default_field
        if exc.row is not None:
            where = f"{where} (row {exc.row})"
        self.problem(part, fish_id, where, exc.reason)


def analyse_protocol(session: Session, analysis: Analysis, *, first_swim: Analysis | None = None
                     ) -> tuple[ProtocolResults, list[dict]]:
    """Protocol results of one session from its step-pipeline analysis.

    Parameters
    ----------
    session
        The validated session.
    analysis
        The analysis of the step pipeline (:func:`swimlab.analysis.analyse` before this stage):
        its fish geometry, measure phases with MO2, step table, results and Ucrit.
    first_swim
        For a repeat swim, the analysis of the first swim of the same fish (the session named
        in ``protocol.first_swim_session_id``); None otherwise.

    Returns
    -------
    results, flags
        :class:`ProtocolResults`, and the flags this stage raised (for the analysis's table).
    """
    out = _Collector(session)
    ptype = session.protocol.type
    if ptype == "ramp":
        ramps = _ramp(session, analysis, out)
    else:
        ramps = {}
    endurances = _endurance(session, analysis, out) if ptype == "endurance" else {}
    ratios = _repeat(session, analysis, first_swim, out) if ptype == "repeat_ucrit" else {}
    epocs = _recovery(session, analysis, out) if ptype == "recovery" else {}
    gaits = _gait(session, analysis, out)
    kins = _kinematics(session, analysis, out)
    _group(session, analysis, out)
    tables = {name: pd.DataFrame(rows, columns=_TABLE_COLUMNS[name]) for name, rows in out.tables.items()}
    result = ProtocolResults(
        protocol=ptype,
        label=PROTOCOL_LABELS.get(ptype, ptype),
        results=pd.DataFrame(out.rows, columns=PROTOCOL_RESULT_COLUMNS),
        tables=tables,
        ramp=ramps,
        endurance=endurances,
        repeat=ratios,
        recovery=epocs,
        gait=gaits,
        kinematics=kins,
        problems=tuple(out.problems),
        first_swim_session_id=None if first_swim is None or not ratios else first_swim.session_id,
    )
    return result, out.flags


# --------------------------------------------------------------------------------------------
# Shared helpers
# --------------------------------------------------------------------------------------------


def _section_area_m2(analysis: Analysis) -> float | None:
    fish = analysis.fish
    if fish is None or fish.empty or "section_area_cm2" not in fish:
        return None
    return float(fish["section_area_cm2"].iloc[0]) * CM**2


def _corrected(session_fish, analysis: Analysis, set_speed_m_s: Any) -> np.ndarray | None:
    """Blocking-corrected speed of one fish (Bell & Terhune 1970 via swimlab.flume), or None."""
    area = _section_area_m2(analysis)
    if area is None:
        return None
    try:
        return np.asarray(flume.corrected_speed(
            np.asarray(set_speed_m_s, dtype=float), session_fish.total_length_cm * CM, session_fish.body_depth_cm * CM,
            session_fish.body_width_cm * CM, area), dtype=float)
    except InputError:
        return None


def _used_phases(analysis: Analysis, fish_id: str) -> pd.DataFrame:
    m = analysis.measure
    if m is None or m.empty:
        return pd.DataFrame(columns=["cycle", "start_s", "end_s", "mo2_mg_kg_h", "used"])
    own = m[m["fish_id"].astype(str) == str(fish_id)].copy()
    own["mid_s"] = 0.5 * (own["start_s"].to_numpy(dtype=float) + own["end_s"].to_numpy(dtype=float))
    return own.sort_values("mid_s", kind="stable")


def _step_speeds(analysis: Analysis, fish_id: str) -> dict[int, float]:
    """Corrected speed of each step of one fish (set speed where no correction). [m/s]"""
    s = analysis.steps
    if s is None or s.empty:
        return {}
    own = s[s["fish_id"].astype(str) == str(fish_id)]
    speed = own["corrected_speed_cm_s"].fillna(own["set_speed_cm_s"]) * CM
    return {int(k): float(v) for k, v in zip(own["step"], speed, strict=True)}


def _ucrit_m_s(analysis: Analysis, fish_id: str) -> tuple[float | None, str]:
    """Ucrit of one fish on corrected speed, else on set speed: (value [m/s], basis)."""
    found = (analysis.ucrit or {}).get(fish_id) or {}
    for basis in ("corrected", "set"):
        res = found.get(basis)
        if res is not None and getattr(res, "ucrit_m_s", None) is not None:
            return float(res.ucrit_m_s), basis
    return None, ""


def _gait_at(session: Session, fish_id: str, time_s: float) -> tuple[str | None, str]:
    """The gait a fish swam in at ``time_s``: the last gait_change with a gait at or before it."""
    single = len(session.fish) == 1
    found = [(e.time_s, i, e.gait) for i, e in enumerate(session.events)
             if e.kind == "gait_change" and e.gait is not None and e.time_s <= time_s + 1e-9
             and (e.fish_id == fish_id or (single and not e.fish_id))]
    if not found:
        return None, "not recorded"
    _, i, gait_name = max(found)
    return gait_name, f"events.{i}"


def _fatigue_events(session: Session, fish_id: str) -> list[tuple[int, float]]:
    single = len(session.fish) == 1
    return [(i, e.time_s) for i, e in enumerate(session.events)
            if e.kind == "fatigue" and (e.fish_id == fish_id or (single and not e.fish_id))]


# --------------------------------------------------------------------------------------------
# Group trial
# --------------------------------------------------------------------------------------------


def _group(session: Session, analysis: Analysis, out: _Collector) -> None:
    """Group MO2 and per-capita MO2 (per fish, per kg) of each group trial, step by step.

    The group's MO2 [mg O2 h⁻¹] is the chamber's uptake (the water volume is the respirometer's
    minus the summed fish volumes); per fish it is that over the number of fish, per kg over the
    summed mass. Every row carries :data:`swimlab.checks.GROUP_CAVEAT`'s point in its note.
    """
    groups = getattr(analysis, "groups", None)
    if groups is None or groups.empty:
        return
    steps = analysis.steps
    caveat = "group trial: schooling changes swimming cost; not comparable with fish swum alone"
    for g in groups.itertuples(index=False):
        gid = str(g.group_id)
        definition = str(g.fatigue_definition).replace("_", " ")
        out.add("group", gid, "group_n_fish", float(g.n_fish), "-", f"fish {g.fish_ids} in chamber {g.chamber}",
                note=caveat)
        out.add("group", gid, "group_mass", float(g.mass_g), "g", "sum of the fish's masses", note=caveat)
        out.add("group", gid, "group_water_volume", float(g.water_volume_l), "L",
                "respirometer volume − Σ fish mass / fish density", note=caveat)
        if np.isfinite(g.fatigue_time_s):
            out.add("group", gid, "group_fatigue_time", (float(g.fatigue_time_s) - session.protocol.start_s) / S_PER_MIN,
                    "min", f"fatigue definition: {definition} (from {g.fatigue_from})", note=caveat)
        own = steps[steps["fish_id"].astype(str) == gid] if steps is not None and not steps.empty else pd.DataFrame()
        if own.empty:
            continue
        for r in own.itertuples(index=False):
            out.row("group_steps", fish_id=gid, step=int(r.step), set_speed_cm_s=r.set_speed_cm_s,
                    corrected_speed_cm_s=r.corrected_speed_cm_s, n_fish=int(g.n_fish), n_phases=int(r.n_phases),
                    mo2_group_mg_h=r.mo2_mg_h, mo2_per_fish_mg_h=r.mo2_per_fish_mg_h,
                    mo2_per_capita_mg_kg_h=r.mo2_mg_kg_h)
        swum = own[own["n_phases"] > 0]
        if swum.empty:
            continue
        top = swum.loc[swum["mo2_mg_h"].idxmax()]
        at = f"step {int(top['step'])}, {top['set_speed_cm_s']:g} cm/s set"
        out.add("group", gid, "group_mo2_highest_step", float(top["mo2_mg_h"]), "mg O2 h-1",
                f"group MO2, mean of the step's accepted phases ({at})", note=caveat)
        out.add("group", gid, "group_mo2_per_fish_highest_step", float(top["mo2_per_fish_mg_h"]), "mg O2 h-1",
                f"group MO2 / {int(g.n_fish)} fish ({at})", note=caveat)
        out.add("group", gid, "group_mo2_per_kg_highest_step", float(top["mo2_mg_kg_h"]), "mg O2 kg-1 h-1",
                f"group MO2 / {g.mass_g:g} g summed mass ({at})", note=caveat)


# --------------------------------------------------------------------------------------------
# Ramp
# --------------------------------------------------------------------------------------------


def _ramp(session: Session, analysis: Analysis, out: _Collector) -> dict[str, RampSummary]:
    p = session.protocol
    if p.ramp_rate_cm_s_per_min is None:  # refused at entry; kept for sessions built around validation
        out.problem("ramp", "", "protocol.ramp_rate_cm_s_per_min", "a ramp protocol needs a ramp rate [cm/s per min]")
        return {}
    if p.fatigue_time_s is None:
        out.flags.append(checks.flag("FATIGUE_NOT_RECORDED", "A ramp Umax needs the fatigue time; none was entered."))
        return {}
    t_fat = p.fatigue_time_s - p.start_s
    if t_fat <= 0:
        out.problem("ramp", "", "protocol.fatigue_time_s",
                    f"fatigue at {p.fatigue_time_s:g} s is not after the ramp's start at {p.start_s:g} s")
        return {}
    rate = float(ramp.m_s2_from_cm_s_per_min(p.ramp_rate_cm_s_per_min))
    u0 = 0.0 if p.ramp_start_speed_cm_s is None else p.ramp_start_speed_cm_s * CM
    start_note = "" if p.ramp_start_speed_cm_s is not None else "start speed not entered; taken as 0 cm/s"
    rate_text = f"{p.ramp_rate_cm_s_per_min:g} cm/s per min"
    out_ramps: dict[str, RampSummary] = {}
    calib = analysis.calibration
    for fish in session.fish:
        fid = fish.fish_id
        length = fish.total_length_cm * CM
        on_set = ramp.umax(rate, t_fat, u0, body_length_m=length)
        cor = _corrected(fish, analysis, on_set.umax_m_s)
        u_cor = None if cor is None else float(cor)
        out_ramps[fid] = RampSummary("ramp", fid, on_set, u_cor, None if u_cor is None else u_cor / length)
        method = f"Umax = U₀ + a·t at fatigue (constant acceleration, {rate_text})"
        if u_cor is not None:
            out.add("ramp", fid, "ramp_umax", u_cor / CM, "cm/s", method + ", blocking-corrected speed", note=start_note)
            out.add("ramp", fid, "ramp_umax_bl", u_cor / length, "BL/s", method + ", blocking-corrected speed",
                    note=start_note)
        out.add("ramp", fid, "ramp_umax_set", on_set.umax_m_s / CM, "cm/s", method + ", set speed (uncorrected)",
                note=start_note)
        out.add("ramp", fid, "ramp_rate", p.ramp_rate_cm_s_per_min, "cm/s/min", "as entered")
        out.add("ramp", fid, "ramp_time_to_fatigue", t_fat / S_PER_MIN, "min", "fatigue time − ramp start")
        if calib is not None and not (calib.speed_min - 1e-9 <= on_set.umax_m_s <= calib.speed_max + 1e-9):
            out.flags.append(checks.flag(
                "SPEED_OUTSIDE_CALIBRATION",
                f"Ramp Umax set speed {on_set.umax_m_s / CM:.1f} cm/s lies outside the calibrated "
                f"{calib.speed_min / CM:.1f}–{calib.speed_max / CM:.1f} cm/s.", scope="fish", where=f"fish {fid}"))
        # MO2 of each measure phase lying wholly on the ramp, at the speed of its mid-time (the
        # mean speed of the phase, since the speed rises linearly)
        phases = _used_phases(analysis, fid)
        if phases.empty:
            continue
        on_ramp = phases[(phases["start_s"] >= p.start_s) & (phases["end_s"] <= p.fatigue_time_s)]
        if on_ramp.empty:
            continue
        set_u = np.asarray(ramp.speed_at(on_ramp["mid_s"].to_numpy(dtype=float), rate, u0, p.start_s), dtype=float)
        cor_u = _corrected(fish, analysis, set_u)
        for k, (_, ph) in enumerate(on_ramp.iterrows()):
            out.row("ramp_phases", fish_id=fid, cycle=int(ph["cycle"]), start_s=float(ph["start_s"]),
                    end_s=float(ph["end_s"]), time_from_ramp_start_s=float(ph["mid_s"] - p.start_s),
                    set_speed_cm_s=set_u[k] / CM, corrected_speed_cm_s=np.nan if cor_u is None else cor_u[k] / CM,
                    mo2_mg_kg_h=float(ph["mo2_mg_kg_h"]), used=bool(ph["used"]))
        used = on_ramp[on_ramp["used"].astype(bool)]
        if not used.empty:
            out.add("ramp", fid, "ramp_mo2_max", float(used["mo2_mg_kg_h"].max()), "mg O2 kg-1 h-1",
                    f"highest whole-phase MO2 of {len(used)} accepted phase(s) along the ramp")
    return out_ramps


# --------------------------------------------------------------------------------------------
# Endurance
# --------------------------------------------------------------------------------------------


def _endurance(session: Session, analysis: Analysis, out: _Collector) -> dict[str, EnduranceOutcome]:
    p = session.protocol
    if p.time_limit_min is None or p.set_speed_cm_s is None:  # refused at entry
        missing = "protocol.time_limit_min" if p.time_limit_min is None else "protocol.set_speed_cm_s"
        out.problem("endurance", "", missing, "an endurance trial needs its set speed and its time limit")
        return {}
    limit = p.time_limit_min * S_PER_MIN
    u_set = p.set_speed_cm_s * CM
    single = len(session.fish) == 1
    outcomes: dict[str, EnduranceOutcome] = {}
    for fish in session.fish:
        fid = fish.fish_id
        events = _fatigue_events(session, fid)
        if single and p.fatigue_time_s is not None:
            fatigue, source = p.fatigue_time_s, "protocol.fatigue_time_s"
        elif events:
            fatigue, source = events[0][1], f"events.{events[0][0]}"
        elif not single and p.fatigue_time_s is not None:
            out.problem("endurance", fid, "protocol.fatigue_time_s",
                        f"the session holds {len(session.fish)} fish; record each fish's fatigue as a fatigue event "
                        "naming the fish")
            continue
        else:
            fatigue, source = None, "none recorded"
        elapsed = None if fatigue is None else fatigue - p.start_s
        if elapsed is not None and elapsed <= 0:
            out.problem("endurance", fid, source,
                        f"fatigue at {fatigue:g} s is not after the start of the set speed at {p.start_s:g} s")
            continue
        try:
            times, fatigued = endurance.endurance_outcomes([elapsed], limit)
        except InputError as exc:
            out.problem("endurance", fid, source, exc.reason)
            continue
        t, done = float(times[0]), bool(fatigued[0])
        cor = _corrected(fish, analysis, u_set)
        u_cor = None if cor is None else float(cor)
        gait_end, gait_from = _gait_at(session, fid, p.start_s + t)
        outcome = EnduranceOutcome("endurance", session.session_id, fid, fish.species, session.conditions.treatment,
                                   u_set, u_cor, t, done, limit, source, gait_end, gait_from)
        outcomes[fid] = outcome
        out.row("endurance", fish_id=fid, set_speed_cm_s=u_set / CM,
                corrected_speed_cm_s=np.nan if u_cor is None else u_cor / CM, time_s=t, time_min=t / S_PER_MIN,
                fatigued=done, time_limit_min=p.time_limit_min, fatigue_from=source, gait=gait_end or "",
                gait_from=gait_from)
        gait_note = (f"ended in {GAITS[gait_end]} ({gait_from})" if gait_end else
                     "gait at the end not recorded (no gait_change event with a gait)")
        if done:
            out.add("endurance", fid, "endurance_time", t / S_PER_MIN, "min",
                    f"fatigue time − start of the set speed (fatigue from {source})", note=gait_note)
        else:
            out.add("endurance", fid, "endurance_time", t / S_PER_MIN, "min", "time limit (still swimming)",
                    note=f"censored at the time limit: a lower bound, not a fatigue time; {gait_note}")
            out.flags.append(checks.flag(
                "ENDURANCE_CENSORED",
                f"Fish {fid} has no fatigue recorded within the {p.time_limit_min:g} min limit: taken as still "
                "swimming at the limit (censored).", scope="fish", where=f"fish {fid}"))
        out.add("endurance", fid, "endurance_fatigued", 1.0 if done else 0.0, "-",
                "1 = fatigued within the limit, 0 = still swimming at the limit (censored)")
        if u_cor is not None:
            out.add("endurance", fid, "endurance_speed", u_cor / CM, "cm/s", "set speed, blocking-corrected")
            out.add("endurance", fid, "endurance_speed_bl", u_cor / (fish.total_length_cm * CM), "BL/s",
                    "set speed, blocking-corrected")
        out.add("endurance", fid, "endurance_speed_set", u_set / CM, "cm/s", "as entered")
        phases = _used_phases(analysis, fid)
        if not phases.empty:
            end = p.start_s + t
            swum = phases[phases["used"].astype(bool) & (phases["start_s"] >= p.start_s) & (phases["end_s"] <= end)]
            if not swum.empty:
                values = swum["mo2_mg_kg_h"].to_numpy(dtype=float)
                se = float(values.std(ddof=1) / math.sqrt(values.size)) if values.size > 1 else None
                out.add("endurance", fid, "endurance_mo2_mean", float(values.mean()), "mg O2 kg-1 h-1",
                        f"mean of {values.size} accepted phase(s) at the set speed",
                        note="" if se is None else f"SE {se:.3g} mg O2 kg-1 h-1")
    return outcomes


# --------------------------------------------------------------------------------------------
# Repeat swim
# --------------------------------------------------------------------------------------------


def _ratio_for(first: Analysis, second: Analysis, fish_id: str) -> repeat.RecoveryRatio:
    """Recovery ratio of one fish from the analyses of its two swims (raises InputError)."""
    first_ids = [str(x) for x in first.fish["fish_id"]] if first.fish is not None and not first.fish.empty else []
    if fish_id not in first_ids:
        raise InputError(
            f"a repeat pair compares two swims of one fish; the first swim (session {first.session_id}) holds fish "
            f"{first_ids}, not {fish_id!r}", field="fish_id")
    u2, basis2 = _ucrit_m_s(second, fish_id)
    u1, basis1 = _ucrit_m_s(first, fish_id)
    if u1 is None:
        raise InputError(f"the first swim (session {first.session_id}) gave no Ucrit for fish {fish_id!r}",
                         field="first_swim")
    if u2 is None:
        raise InputError(f"this swim gave no Ucrit for fish {fish_id!r} (see its flags)", field="protocol.fatigue_time_s")
    basis = basis1 if basis1 == basis2 else "set"  # compare like with like: both on set speed
    res1, res2 = first.ucrit[fish_id][basis], second.ucrit[fish_id][basis]
    settings = second.settings
    shared = _shared_calibration(first, second)
    s_cal = 0.0 if shared else settings.speed_calibration_uncertainty_pct / 100.0
    try:
        m1 = repeat.ucrit_measurement_uncertainty(res1.ucrit_m_s, res1.increment_m_s, res1.step_duration_s,
                                                  settings.fatigue_time_uncertainty_s, s_cal)
        m2 = repeat.ucrit_measurement_uncertainty(res2.ucrit_m_s, res2.increment_m_s, res2.step_duration_s,
                                                  settings.fatigue_time_uncertainty_s, s_cal)
    except (InputError, TypeError):  # a result without its step (not a step test): no interval
        return repeat.recovery_ratio(float(res1.ucrit_m_s), float(res2.ucrit_m_s), fish_id_1=fish_id,
                                     fish_id_2=fish_id)
    return repeat.recovery_ratio_from_measurement(m1, m2, shared_calibration=shared, fish_id=fish_id)


def _shared_calibration(first: Analysis, second: Analysis) -> bool:
    """Whether two swims' speeds come from one flume calibration (same flume, same fitted curve)."""
    if getattr(first, "flume_name", "") != getattr(second, "flume_name", ""):
        return False
    c1, c2 = first.calibration, second.calibration
    if c1 is None or c2 is None:
        return c1 is None and c2 is None  # set speeds of one flume's controller, uncalibrated alike
    return tuple(c1.coefficients) == tuple(c2.coefficients)


def _ratio_basis(first: Analysis, second: Analysis, fish_id: str) -> str:
    b1, b2 = _ucrit_m_s(first, fish_id)[1], _ucrit_m_s(second, fish_id)[1]
    return "blocking-corrected speed" if b1 == b2 == "corrected" else "set speed"


def _repeat(session: Session, analysis: Analysis, first_swim: Analysis | None, out: _Collector
            ) -> dict[str, repeat.RecoveryRatio]:
    p = session.protocol
    if p.first_swim_session_id is None:
        out.problem("repeat", "", "protocol.first_swim_session_id",
                    "a repeat swim's recovery ratio needs the session of the first swim; enter its session id")
        return {}
    if first_swim is None:
        out.problem("repeat", "", "first_swim",
                    f"the recovery ratio needs the analysis of the first swim (session {p.first_swim_session_id}); "
                    "analyse this session together with it")
        return {}
    if first_swim.session_id != p.first_swim_session_id:
        out.problem("repeat", "", "protocol.first_swim_session_id",
                    f"the first swim given is session {first_swim.session_id}, but this session names "
                    f"{p.first_swim_session_id}")
        return {}
    ratios: dict[str, repeat.RecoveryRatio] = {}
    for i, fish in enumerate(session.fish):
        fid = fish.fish_id
        try:
            rr = _ratio_for(first_swim, analysis, fid)
        except InputError as exc:
            field_ = f"fish.{i}.fish_id" if exc.field == "fish_id" else (exc.field or "first_swim")
            out.problem("repeat", fid, field_, exc.reason)
            continue
        ratios[fid] = rr
        basis = _ratio_basis(first_swim, analysis, fid)
        rest = f" after {p.rest_interval_min:g} min of rest" if p.rest_interval_min is not None else ""
        if rr.ci_low is not None:
            note = (f"{rr.confidence:.0%} interval by Fieller (1954) from the measurement model: {rr.uncertainty} "
                    f"(fatigue-time span {analysis.settings.fatigue_time_uncertainty_s:g} s); see the study's group "
                    "summary for the spread between fish")
        else:
            note = "no interval: the Ucrit values carry no step to model their uncertainty; see the study's group summary"
        out.add("repeat", fid, "repeat_recovery_ratio", rr.ratio, "-",
                f"Ucrit₂ / Ucrit₁ (Jain, Birtwell & Farrell 1998) on {basis}{rest}"
                + ("; interval: measurement uncertainty only (Fieller 1954)" if rr.ci_low is not None else ""),
                ci=(rr.ci_low, rr.ci_high), note=note)
        out.add("repeat", fid, "repeat_ucrit_first", rr.ucrit_1_m_s / CM, "cm/s",
                f"Brett (1964), {basis}, session {first_swim.session_id}")
        out.add("repeat", fid, "repeat_ucrit_second", rr.ucrit_2_m_s / CM, "cm/s", f"Brett (1964), {basis}, this session")
        if p.rest_interval_min is not None:
            out.add("repeat", fid, "repeat_rest_interval", p.rest_interval_min, "min", "as entered")
        out.flags.extend({**f, "where": f.get("where") or f"fish {fid}"} for f in rr.flags)
    return ratios


# --------------------------------------------------------------------------------------------
# Post-exercise recovery (EPOC)
# --------------------------------------------------------------------------------------------


def _baseline(session: Session, analysis: Analysis, fish_id: str, phases: pd.DataFrame) -> tuple[float | None, str]:
    """The recovery baseline of one fish and how it was obtained (raises InputError when absent)."""
    p = session.protocol
    choice = p.recovery_baseline
    if choice == "fitted_asymptote":
        return None, RECOVERY_BASELINES["fitted_asymptote"]
    if choice == "pre_exercise":
        pre = phases[phases["used"].astype(bool) & (phases["end_s"] <= p.start_s)]
        if pre.empty:
            raise InputError(f"the pre-exercise baseline needs accepted measure phases before the exercise began at "
                             f"{p.start_s:g} s; there are none", field="protocol.recovery_baseline")
        return float(pre["mo2_mg_kg_h"].mean()), f"mean MO2 of {len(pre)} accepted phase(s) before the exercise"
    if p.recovery_baseline_mg_kg_h is not None:
        return float(p.recovery_baseline_mg_kg_h), "SMR as entered"
    res = analysis.results
    for quantity, words in (("smr_quantile", "low-quantile SMR of this session (Chabot et al. 2016)"),
                            ("smr_mlnd", "MLND SMR of this session (Chabot et al. 2016)"),
                            ("smr", "SMR of this session, extrapolated from the speed–MO2 fit")):
        hit = res[(res["fish_id"].astype(str) == str(fish_id)) & (res["quantity"] == quantity)] if not res.empty else res
        if not hit.empty and pd.notna(hit["value"].iloc[0]):
            return float(hit["value"].iloc[0]), words
    raise InputError("the SMR baseline needs an entered SMR (protocol.recovery_baseline_mg_kg_h) or an SMR from this "
                     "session; there is neither", field="protocol.recovery_baseline_mg_kg_h")


def _recovery(session: Session, analysis: Analysis, out: _Collector) -> dict[str, recovery.EpocResult]:
    p = session.protocol
    if p.recovery_baseline is None:
        out.problem("recovery", "", "protocol.recovery_baseline",
                    f"choose the baseline EPOC is measured from: one of {sorted(RECOVERY_BASELINES)}")
        return {}
    if p.fatigue_time_s is None:
        out.problem("recovery", "", "protocol.fatigue_time_s",
                    "a recovery analysis needs the time of exhaustion (the end of the exercise) on the trace clock")
        return {}
    exhaustion = p.fatigue_time_s
    results: dict[str, recovery.EpocResult] = {}
    for fish in session.fish:
        fid = fish.fish_id
        phases = _used_phases(analysis, fid)
        if phases.empty:
            out.problem("recovery", fid, "raw_files", "EPOC needs measure phases after exhaustion; there is no trace")
            continue
        after = phases[phases["used"].astype(bool) & (phases["mid_s"] > exhaustion)]
        try:
            base, how = _baseline(session, analysis, fid, phases)
            res = recovery.epoc(after["mid_s"].to_numpy(dtype=float) - exhaustion,
                                after["mo2_mg_kg_h"].to_numpy(dtype=float), base,
                                baseline_method=p.recovery_baseline)
        except InputError as exc:
            if exc.field in (None, "time_s"):
                out.problem("recovery", fid, "measure phases after exhaustion (protocol.fatigue_time_s)", exc.reason)
            else:
                out.from_error("recovery", fid, exc, "protocol.recovery_baseline")
            continue
        results[fid] = res
        if base is None:
            how = f"asymptote of the fitted {res.model.replace('_', '-')} decay" if res.model else how
        out.add("recovery", fid, "recovery_baseline", res.baseline_mg_kg_h, "mg O2 kg-1 h-1",
                f"{p.recovery_baseline}: {how}")
        out.add("recovery", fid, "recovery_epoc_trapezoid", res.epoc_trapezoid_mg_kg, "mg O2 kg-1",
                f"trapezoids through {res.n_phases} accepted phases above the baseline, "
                f"{res.recorded_start_s / S_PER_MIN:.0f}–{res.recorded_end_s / S_PER_MIN:.0f} min after exhaustion")
        model = "" if res.model is None else res.model.replace("_", "-")
        if res.epoc_fit_mg_kg is not None:
            out.add("recovery", fid, "recovery_epoc_fit", res.epoc_fit_mg_kg, "mg O2 kg-1",
                    f"area under the fitted {model} exponential decay from exhaustion to infinity (AICc choice)")
            out.add("recovery", fid, "recovery_epoc_fit_recorded", res.epoc_fit_recorded_mg_kg, "mg O2 kg-1",
                    f"area under the fitted {model} decay over the recorded span")
            out.add("recovery", fid, "recovery_t50", res.t50_s / S_PER_MIN, "min",
                    f"fitted {model} decay: 50 % of the way back to the baseline")
            out.add("recovery", fid, "recovery_t95", res.t95_s / S_PER_MIN, "min",
                    f"fitted {model} decay: 95 % of the way back to the baseline",
                    note="beyond the record" if res.t95_s > res.recorded_end_s else "")
        out.add("recovery", fid, "recovery_peak_excess", res.peak_excess_mg_kg_h, "mg O2 kg-1 h-1",
                "largest recorded MO2 − baseline")
        out.flags.extend({**f, "where": f.get("where") or f"fish {fid}"} for f in res.flags)
        for _, ph in after.iterrows():
            t_after = float(ph["mid_s"] - exhaustion)
            out.row("recovery_curve", fish_id=fid, cycle=int(ph["cycle"]), time_after_exhaustion_s=t_after,
                    time_after_exhaustion_min=t_after / S_PER_MIN, mo2_mg_kg_h=float(ph["mo2_mg_kg_h"]),
                    baseline_mg_kg_h=res.baseline_mg_kg_h, excess_mg_kg_h=float(ph["mo2_mg_kg_h"]) - res.baseline_mg_kg_h)
        _oxygen_cost(session, analysis, fid, res, out)
    return results


def _oxygen_cost(session: Session, analysis: Analysis, fish_id: str, res: recovery.EpocResult, out: _Collector) -> None:
    """Total oxygen cost and cost of transport with EPOC, when the exercise was a step test with MO2."""
    p = session.protocol
    sched = step_table(session)
    if not sched:
        return
    exhaustion = p.fatigue_time_s
    swum = [(row["step"], row["start_s"], min(row["end_s"], exhaustion)) for row in sched if row["start_s"] < exhaustion]
    if not swum:
        return
    steps = analysis.steps
    own = steps[steps["fish_id"].astype(str) == str(fish_id)].set_index("step") if not steps.empty else steps
    missing = [n for n, _, _ in swum if n not in own.index or pd.isna(own.loc[n, "mo2_mg_kg_h"])]
    if missing:
        out.add("recovery", fish_id, "recovery_aerobic_cost", None, "mg O2 kg-1", "Σ MO2 × time swum per step",
                note=f"not computed: step(s) {missing} swum before exhaustion have no accepted MO2")
        return
    mo2 = np.array([float(own.loc[n, "mo2_mg_kg_h"]) for n, _, _ in swum])
    dur = np.array([b - a for _, a, b in swum])
    speed = np.array([float(own.loc[n, "corrected_speed_cm_s"]) if pd.notna(own.loc[n, "corrected_speed_cm_s"])
                      else float(own.loc[n, "set_speed_cm_s"]) for n, _, _ in swum]) * CM
    aerobic = recovery.aerobic_oxygen_cost(mo2, dur)
    epoc_value = res.epoc_fit_mg_kg if res.epoc_fit_mg_kg is not None else res.epoc_trapezoid_mg_kg
    which = "fitted EPOC" if res.epoc_fit_mg_kg is not None else "trapezoid EPOC"
    if epoc_value < 0:
        out.add("recovery", fish_id, "recovery_total_o2_cost", None, "mg O2 kg-1", "aerobic cost + EPOC",
                note="not computed: MO2 after exhaustion lay below the baseline on the whole (negative EPOC)")
        return
    cot = recovery.cost_of_transport_with_epoc(aerobic, epoc_value, float(np.sum(speed * dur)),
                                               oxycaloric_j_per_mg_o2=analysis.settings.oxycaloric_j_per_mg_o2)
    cost = recovery.total_oxygen_cost(aerobic, epoc_value)
    steps_text = f"{len(swum)} step(s) swum before exhaustion"
    out.add("recovery", fish_id, "recovery_aerobic_cost", cost.aerobic_mg_kg, "mg O2 kg-1",
            f"Σ step MO2 × time swum over {steps_text} (gross)")
    out.add("recovery", fish_id, "recovery_total_o2_cost", cost.total_mg_kg, "mg O2 kg-1",
            f"aerobic cost + {which} (Lee et al. 2003)")
    out.add("recovery", fish_id, "recovery_epoc_share", cost.epoc_share, "-", f"{which} / total oxygen cost")
    out.add("recovery", fish_id, "recovery_cot_aerobic", cot.cot_aerobic_mg_kg_km, "mg O2 kg-1 km-1",
            f"aerobic cost / distance swum ({cot.distance_m:.0f} m through the water)")
    out.add("recovery", fish_id, "recovery_cot_total", cot.cot_total_mg_kg_km, "mg O2 kg-1 km-1",
            f"(aerobic cost + {which}) / distance swum ({cot.distance_m:.0f} m)")


# --------------------------------------------------------------------------------------------
# Gait
# --------------------------------------------------------------------------------------------


def _gait(session: Session, analysis: Analysis, out: _Collector) -> dict[str, gait.GaitResult]:
    if not any(e.kind in ("gait_change", "burst") for e in session.events):
        return {}
    sched = step_table(session)
    if not sched:
        if session.protocol.type != "endurance":
            out.problem("gait", "", "protocol.steps",
                        "gait transition and burst onset speeds need a speed-step schedule; this protocol has none")
        return {}
    events = [e.model_dump() for e in session.events]
    results: dict[str, gait.GaitResult] = {}
    for fish in session.fish:
        fid = fish.fish_id
        speeds = _step_speeds(analysis, fid)
        steps = pd.DataFrame([{"start_s": r["start_s"], "end_s": r["end_s"],
                               "speed_m_s": speeds.get(int(r["step"]), r["set_speed_m_s"])} for r in sched])
        u, _ = _ucrit_m_s(analysis, fid)
        try:
            g = gait.gait_summary(events, steps, ucrit_m_s=u, fish_id=fid, protocol=session.protocol.type)
        except InputError as exc:
            out.from_error("gait", fid, exc, "events")
            continue
        results[fid] = g
        length = fish.total_length_cm * CM
        if g.upc_m_s is not None:
            how = f"speed of step {g.upc_step}, holding the first pectoral–caudal gait change (Drucker & Jensen 1996)"
            out.add("gait", fid, "gait_upc", g.upc_m_s / CM, "cm/s", how + ", blocking-corrected")
            out.add("gait", fid, "gait_upc_bl", g.upc_m_s / length, "BL/s", how + ", blocking-corrected")
            if u is not None:
                out.add("gait", fid, "gait_upc_share_ucrit", g.upc_m_s / u, "-", "Up–c / step-test Ucrit")
        if g.burst_onset_m_s is not None:
            out.add("gait", fid, "gait_burst_onset", g.burst_onset_m_s / CM, "cm/s",
                    f"speed of step {g.burst_onset_step}, the first with bursts recorded")
            if u is not None:
                out.add("gait", fid, "gait_burst_onset_share_ucrit", g.burst_onset_m_s / u, "-",
                        "burst-and-coast onset / step-test Ucrit")
        for _, r in g.steps.iterrows():
            out.row("gait_steps", fish_id=fid, step=int(r["step"]), start_s=float(r["start_s"]), end_s=float(r["end_s"]),
                    speed_cm_s=float(r["speed_m_s"]) / CM, swum_s=float(r["swum_s"]), bursts=int(r["bursts"]),
                    bursts_per_min=_opt(r["bursts_per_min"]), share_of_ucrit=_opt(r["share_of_ucrit"]),
                    share_of_upc=_opt(r["share_of_upc"]))
    return results


def _opt(value: Any) -> float:
    return np.nan if value is None or pd.isna(value) else float(value)


# --------------------------------------------------------------------------------------------
# Kinematics
# --------------------------------------------------------------------------------------------


def _kinematics(session: Session, analysis: Analysis, out: _Collector) -> dict[str, kinematics.KinematicsResult]:
    records = session.kinematics
    if not records:
        return {}
    p = session.protocol
    single = session.fish[0].fish_id if len(session.fish) == 1 else None
    results: dict[str, kinematics.KinematicsResult] = {}
    for fish in session.fish:
        fid = fish.fish_id
        own = [(i, r) for i, r in enumerate(records) if (r.fish_id or single) == fid]
        if not own:
            continue
        length = fish.total_length_cm * CM
        if p.type == "endurance":
            cor = _corrected(fish, analysis, p.set_speed_cm_s * CM)
            speeds = {1: float(cor) if cor is not None else p.set_speed_cm_s * CM}
        else:
            speeds = _step_speeds(analysis, fid)
        rows = []
        try:
            for i, r in own:
                if r.step not in speeds:
                    raise InputError(f"step {r.step} has no speed in this session", field=f"kinematics.{i}.step")
                window = r.window_s if r.window_s is not None else (
                    None if r.frames is None or r.frame_rate_hz is None else r.frames / r.frame_rate_hz)
                if window is None:
                    raise InputError("a tail-beat count needs its counting window [s] (or video frames and the frame "
                                     "rate)", field=f"kinematics.{i}.window_s")
                u = speeds[r.step]
                f = float(kinematics.tail_beat_frequency_hz(r.tail_beat_count, window))
                amp = None if r.amplitude_cm is None else r.amplitude_cm * CM
                stride = float(kinematics.stride_length_m(u, f)) if f > 0 else None
                st = float(kinematics.strouhal_number(f, amp, u)) if amp is not None and f > 0 else None
                rows.append({
                    "step": r.step, "speed_m_s": u, "frequency_hz": f, "amplitude_m": amp,
                    "amplitude_bl": None if amp is None else amp / length,
                    "stride_length_m": stride, "stride_length_bl": None if stride is None else stride / length,
                    "strouhal": st,
                    "strouhal_efficient": None if st is None else bool(
                        kinematics.EFFICIENT_STROUHAL_RANGE[0] <= st <= kinematics.EFFICIENT_STROUHAL_RANGE[1]),
                    "bainbridge_speed_m_s": float(kinematics.bainbridge_speed_m_s(f, length)),
                    "bainbridge_in_range": bool(f >= kinematics.BAINBRIDGE_MIN_FREQUENCY_HZ),
                    "_count": r.tail_beat_count, "_window": window,
                })
        except InputError as exc:
            out.from_error("kinematics", fid, exc, "kinematics")
            continue
        table = pd.DataFrame(rows)
        beating = table[table["frequency_hz"] > 0]
        line = None
        if beating["speed_m_s"].nunique() >= 2:
            line = kinematics.frequency_speed_line(beating["speed_m_s"], beating["frequency_hz"], protocol=p.type)
        with_st = table.dropna(subset=["strouhal"])
        flags = kinematics.strouhal_flags(with_st["strouhal"].to_numpy(dtype=float),
                                          steps=with_st["step"].to_numpy()) if not with_st.empty else []
        flags = [{**f_, "where": f"fish {fid}, {f_['where']}"} for f_ in flags]
        out.flags.extend(flags)
        results[fid] = kinematics.KinematicsResult(p.type, length, table.drop(columns=["_count", "_window"]), line,
                                                   tuple(flags))
        for _, r in table.iterrows():
            out.row("kinematics", fish_id=fid, step=int(r["step"]), speed_cm_s=r["speed_m_s"] / CM,
                    tail_beat_count=int(r["_count"]), window_s=float(r["_window"]), frequency_hz=r["frequency_hz"],
                    amplitude_cm=_scaled(r["amplitude_m"], 1 / CM), stride_length_cm=_scaled(r["stride_length_m"], 1 / CM),
                    stride_length_bl=_scaled(r["stride_length_bl"], 1.0), strouhal=_scaled(r["strouhal"], 1.0),
                    strouhal_efficient=r["strouhal_efficient"], bainbridge_speed_cm_s=r["bainbridge_speed_m_s"] / CM,
                    bainbridge_in_range=bool(r["bainbridge_in_range"]))
        if line is not None:
            how = f"least squares over {line.n} tail-beat record(s) (Bainbridge 1958; Videler & Wardle 1991)"
            slope_ci = line.ci95("slope")
            out.add("kinematics", fid, "kinematics_fs_intercept", line.intercept_hz, "Hz", how, line.ci95("intercept"))
            out.add("kinematics", fid, "kinematics_fs_slope", line.slope_hz_per_m_s * CM, "Hz per cm/s", how,
                    None if slope_ci is None else tuple(v * CM for v in slope_ci))
            out.add("kinematics", fid, "kinematics_fs_r2", line.r2, "-", how)
            if line.stride_length_m is not None:
                out.add("kinematics", fid, "kinematics_stride_length_line", line.stride_length_m / CM, "cm",
                        "1 / slope of the frequency–speed line")
        if not beating.empty:
            out.add("kinematics", fid, "kinematics_tbf_max", float(beating["frequency_hz"].max()), "Hz",
                    "count / counting window")
    return results


def _scaled(value: Any, factor: float) -> Any:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return np.nan
    if isinstance(value, bool | np.bool_):
        return value
    return float(value) * factor


# =============================================================================================
# Across sessions
# =============================================================================================


@dataclass(frozen=True)
class EnduranceSummary:
    """Endurance across fish and sessions.

    Attributes
    ----------
    protocol
        ``"endurance"``.
    fish
        One row per fish: ``session_id``, ``fish_id``, ``species``, ``treatment``,
        ``set_speed_cm_s``, ``corrected_speed_cm_s``, ``time_min``, ``fatigued``,
        ``time_limit_min``.
    time_limit_s
        The common time limit (the shortest, when sessions differ). [s]
    kaplan_meier
        :func:`swimlab.protocols.endurance.kaplan_meier_by_speed` per set speed, with
        ``set_speed_cm_s`` and ``time_min`` added.
    fatigue_curve
        The censored fatigue curve on corrected speed (set speed where not corrected), or None.
    max_sustained
        Maximum sustained speed on set speed for the limit.
    half_fatigued
        Speed at which half the fish fatigue within the limit (from the curve), or None.
    problems
        Why a part was not computed, one sentence each.
    flags
        Flags of the fits.
    by_gait
        :func:`swimlab.protocols.endurance.fatigue_curves_by_gait` on the same speeds, when any
        fish's gait at the end was recorded; else None.
    """

    protocol: str
    fish: pd.DataFrame
    time_limit_s: float
    kaplan_meier: pd.DataFrame
    fatigue_curve: endurance.FatigueCurveFit | None
    max_sustained: endurance.MaxSustainedSpeed
    half_fatigued: endurance.SpeedAtShare | None
    problems: tuple[str, ...]
    flags: tuple[dict, ...]
    by_gait: endurance.GaitCurves | None = None


def endurance_summary(items: Sequence[tuple[Session, Analysis]]) -> EnduranceSummary | None:
    """Kaplan–Meier curves, fatigue curve and speeds of every endurance fish in ``items``.

    Parameters
    ----------
    items
        (session, analysis) pairs; sessions of other protocols are left out.

    Returns
    -------
    EnduranceSummary, or None when no endurance fish is found.

    Notes
    -----
    Fish from sessions with different time limits are censored at the shortest limit (a fish
    that fatigued after it counts as still swimming at it), so that every fish has the same limit
    and the maximum sustained speed refers to it. Kaplan–Meier (Kaplan & Meier 1958) and the
    maximum sustained speed use set speeds, the tested treatments; the fatigue curve (Tobin 1958
    censored regression of log10 time on speed) uses blocking-corrected speed, or set speed for
    every fish when any fish has no corrected speed.
    """
    outcomes: list[EnduranceOutcome] = []
    for session, analysis in items:
        protocol = getattr(analysis, "protocol", None)
        if session.protocol.type != "endurance" or protocol is None:
            continue
        outcomes.extend(protocol.endurance.values())
    if not outcomes:
        return None
    problems: list[str] = []
    limits = sorted({o.time_limit_s for o in outcomes})
    limit = limits[0]
    if len(limits) > 1:
        problems.append(f"time limits differ ({', '.join(f'{x / 60:g}' for x in limits)} min); every fish is censored "
                        f"at the shortest, {limit / 60:g} min")
    times = np.array([min(o.time_s, limit) for o in outcomes])
    fatigued = np.array([o.fatigued and o.time_s <= limit for o in outcomes])
    set_u = np.array([o.set_speed_m_s for o in outcomes])
    have_cor = all(o.corrected_speed_m_s is not None for o in outcomes)
    fit_u = np.array([o.corrected_speed_m_s if have_cor else o.set_speed_m_s for o in outcomes])
    fish = pd.DataFrame({
        "session_id": [o.session_id for o in outcomes], "fish_id": [o.fish_id for o in outcomes],
        "species": [o.species for o in outcomes], "treatment": [o.treatment for o in outcomes],
        "set_speed_cm_s": set_u / CM,
        "corrected_speed_cm_s": [np.nan if o.corrected_speed_m_s is None else o.corrected_speed_m_s / CM for o in outcomes],
        "time_min": times / S_PER_MIN, "fatigued": fatigued, "time_limit_min": limit / S_PER_MIN,
        "gait": [o.gait or "" for o in outcomes],
    })
    km = endurance.kaplan_meier_by_speed(set_u, times, fatigued)
    km.insert(1, "set_speed_cm_s", km["speed_m_s"] / CM)
    km["time_min"] = km["time_s"] / S_PER_MIN
    mss = endurance.max_sustained_speed(set_u, times, fatigued, limit)
    fit = half = None
    flags: list[dict] = []
    try:
        fit = endurance.fatigue_curve(fit_u, times, fatigued, time_limit_s=limit)
        flags.extend(fit.flags)
        half = endurance.speed_half_fatigued(fit, limit)
        flags.extend(half.flags)
    except InputError as exc:
        problems.append(f"no fatigue curve: {exc.reason}")
    if not have_cor:
        problems.append("the fatigue curve uses set speeds: not every fish has a blocking-corrected speed")
    by_gait = None
    gaits = [o.gait for o in outcomes]
    if any(gaits):
        try:
            by_gait = endurance.fatigue_curves_by_gait(fit_u, times, fatigued, gaits, time_limit_s=limit)
            flags.extend(by_gait.flags)  # gaits without a curve of their own: see gait_curve_sentences
        except InputError as exc:
            problems.append(f"no fatigue curves per gait: {exc.reason}")
    return EnduranceSummary("endurance", fish, limit, km, fit, mss, half, tuple(problems), tuple(flags), by_gait)


GAIT_CURVE_COLUMNS = ["gait", "label", "n_fish", "n_fatigued", "n_censored", "intercept_log10_s",
                      "slope_log10_s_per_m_s", "slope_se", "sigma_log10_s", "median_time_at_fastest_min", "fitted"]
"""Columns of :func:`gait_curve_table`."""


def gait_curve_table(summary: EnduranceSummary | None) -> pd.DataFrame:
    """One row per gait of an endurance summary: its censored fatigue curve, or why it has none.

    ``fitted`` is False for a gait with too few trials (its parameters are empty; see
    ``summary.by_gait.too_few``). Parameters are of log10 T [s] = intercept + slope · U [m/s].
    """
    by = None if summary is None else summary.by_gait
    if by is None:
        return pd.DataFrame(columns=GAIT_CURVE_COLUMNS)
    rows = []
    fish = summary.fish
    for gait_name in sorted(by.n_fish, key=lambda g: list(GAITS).index(g) if g in GAITS else 99):
        own = fish[fish["gait"] == gait_name]
        fit = by.curves.get(gait_name)
        fastest = own["corrected_speed_cm_s"].max() if own["corrected_speed_cm_s"].notna().all() else own["set_speed_cm_s"].max()
        rows.append({
            "gait": gait_name, "label": GAITS.get(gait_name, gait_name), "n_fish": int(len(own)),
            "n_fatigued": int(own["fatigued"].sum()), "n_censored": int((~own["fatigued"].astype(bool)).sum()),
            "intercept_log10_s": np.nan if fit is None else fit.intercept,
            "slope_log10_s_per_m_s": np.nan if fit is None else fit.slope,
            "slope_se": np.nan if fit is None or fit.slope_se is None else fit.slope_se,
            "sigma_log10_s": np.nan if fit is None else fit.sigma,
            "median_time_at_fastest_min": np.nan if fit is None else float(fit.median_time_s(fastest * CM)) / S_PER_MIN,
            "fitted": fit is not None,
        })
    return pd.DataFrame(rows, columns=GAIT_CURVE_COLUMNS)


def gait_curve_sentences(summary: EnduranceSummary | None) -> list[str]:
    """Plain sentences on the fatigue curves per gait (for the page, the report and the command line)."""
    by = None if summary is None else summary.by_gait
    if by is None:
        return []
    out = []
    for row in gait_curve_table(summary).itertuples(index=False):
        if row.fitted:
            out.append(f"{row.label}: {row.n_fish} fish ({row.n_censored} censored), log10 T [s] = "
                       f"{row.intercept_log10_s:.3g} {'−' if row.slope_log10_s_per_m_s < 0 else '+'} "
                       f"{abs(row.slope_log10_s_per_m_s) / 100:.3g} × U [cm/s] (slope SE {row.slope_se / 100:.2g}; "
                       f"residual SD {row.sigma_log10_s:.2g} in log10 T)")
        else:
            out.append(f"{row.label}: no curve of its own — {by.too_few[row.gait]}")
    if by.lr_p is not None:
        out.append(f"One curve per gait against one pooled curve: likelihood ratio {by.lr_statistic:.3g} on {by.lr_df} "
                   f"df, p = {by.lr_p:.2g} (Wilks 1938)"
                   + ("; the gaits' fatigue curves differ" if by.lr_p < 0.05 else
                      "; these data do not show the curves to differ"))
    if by.break_speed_m_s is not None:
        if by.lr_p is not None and by.lr_p < 0.05:
            out.append(f"The two gaits' median-endurance lines meet at {by.break_speed_m_s / CM:.1f} cm/s (the break "
                       "between their domains)")
        else:
            out.append(f"The two gaits' lines would meet at {by.break_speed_m_s / CM:.1f} cm/s, but these data do not "
                       "show a break there")
    if by.not_recorded:
        out.append(f"{by.not_recorded} fish without a recorded gait at the end are in the pooled curve only")
    return out


@dataclass(frozen=True)
class RepeatSummary:
    """Recovery ratios of repeat swims across sessions.

    Attributes
    ----------
    protocol
        ``"repeat_ucrit"``.
    pairs
        One row per fish swum twice: ``first_session_id``, ``second_session_id``, ``fish_id``,
        ``species``, ``treatment``, ``rest_interval_min``, ``ucrit_first_cm_s``,
        ``ucrit_second_cm_s``, ``speed_basis``, ``recovery_ratio``.
    groups
        Per treatment: ``treatment``, ``n_pairs``, ``mean_ratio``, ``sd``, ``se``, ``ci_low``,
        ``ci_high`` (95 % t interval), ``p_ratio_equals_1`` (one-sample t test).
    comparison
        With exactly two treatments of at least two pairs each: their difference in mean ratio
        and Welch's t test (``difference``, ``t``, ``df``, ``p``, ``groups``); else None.
    problems
        Repeat swims whose pair could not be formed, one sentence each.
    """

    protocol: str
    pairs: pd.DataFrame
    groups: pd.DataFrame
    comparison: dict[str, Any] | None
    problems: tuple[str, ...]


PAIR_COLUMNS = ["first_session_id", "second_session_id", "fish_id", "species", "treatment", "rest_interval_min",
                "ucrit_first_cm_s", "ucrit_second_cm_s", "speed_basis", "recovery_ratio"]
GROUP_COLUMNS = ["treatment", "n_pairs", "mean_ratio", "sd", "se", "ci_low", "ci_high", "p_ratio_equals_1"]


def repeat_pairs(items: Sequence[tuple[Session, Analysis]]) -> RepeatSummary | None:
    """Pair every repeat swim in ``items`` with its first swim and compare treatments.

    Parameters
    ----------
    items
        (session, analysis) pairs holding both swims of each pair.

    Returns
    -------
    RepeatSummary, or None when ``items`` hold no repeat swim.

    Notes
    -----
    The ratio of each pair is Ucrit₂ / Ucrit₁ (Jain, Birtwell & Farrell 1998), computed here from
    the two analyses. Per treatment (``conditions.treatment`` of the second swim; blank reads
    "not recorded"): mean, SD (n − 1), SE = SD/√n, the 95 % interval mean ± t₀.₉₇₅,ₙ₋₁ · SE and
    a one-sample t test of ratio = 1; between two treatments, Welch's unequal-variance t test
    (scipy.stats).
    """
    by_id = {s.session_id: (s, a) for s, a in items}
    repeats = [(s, a) for s, a in items if s.protocol.type == "repeat_ucrit"]
    if not repeats:
        return None
    rows, problems = [], []
    for session, analysis in repeats:
        first_id = session.protocol.first_swim_session_id
        if first_id is None or first_id not in by_id:
            problems.append(f"session {session.session_id}: its first swim "
                            + (f"(session {first_id}) is not among the sessions" if first_id else "is not named"))
            continue
        first_session, first = by_id[first_id]
        for fish in session.fish:
            try:
                rr = _ratio_for(first, analysis, fish.fish_id)
            except InputError as exc:
                problems.append(f"session {session.session_id}, fish {fish.fish_id}: {exc.reason}")
                continue
            rows.append({
                "first_session_id": first_id, "second_session_id": session.session_id, "fish_id": fish.fish_id,
                "species": fish.species, "treatment": session.conditions.treatment or "not recorded",
                "rest_interval_min": session.protocol.rest_interval_min,
                "ucrit_first_cm_s": rr.ucrit_1_m_s / CM, "ucrit_second_cm_s": rr.ucrit_2_m_s / CM,
                "speed_basis": _ratio_basis(first, analysis, fish.fish_id), "recovery_ratio": rr.ratio,
            })
    pairs = pd.DataFrame(rows, columns=PAIR_COLUMNS)
    groups = []
    for treatment, part in pairs.groupby("treatment", sort=True):
        r = part["recovery_ratio"].to_numpy(dtype=float)
        n = r.size
        mean = float(r.mean())
        sd = float(r.std(ddof=1)) if n > 1 else np.nan
        se = sd / math.sqrt(n) if n > 1 else np.nan
        if n > 1 and sd > 0:
            t = float(stats.t.ppf(0.975, n - 1))
            lo, hi = mean - t * se, mean + t * se
            p = float(stats.ttest_1samp(r, 1.0).pvalue)
        else:
            lo = hi = p = np.nan
        groups.append({"treatment": treatment, "n_pairs": n, "mean_ratio": mean, "sd": sd, "se": se,
                       "ci_low": lo, "ci_high": hi, "p_ratio_equals_1": p})
    groups_frame = pd.DataFrame(groups, columns=GROUP_COLUMNS)
    comparison = None
    if len(groups_frame) == 2 and (groups_frame["n_pairs"] >= 2).all():
        (ga, a), (gb, b) = [(t, part["recovery_ratio"].to_numpy(dtype=float))
                            for t, part in pairs.groupby("treatment", sort=True)]
        test = stats.ttest_ind(a, b, equal_var=False)
        va, vb = a.var(ddof=1) / a.size, b.var(ddof=1) / b.size
        df = (va + vb) ** 2 / (va**2 / (a.size - 1) + vb**2 / (b.size - 1)) if va + vb > 0 else np.nan
        comparison = {"groups": (ga, gb), "difference": float(a.mean() - b.mean()), "t": float(test.statistic),
                      "df": float(df), "p": float(test.pvalue), "method": "Welch's t test (scipy.stats.ttest_ind)"}
    return RepeatSummary("repeat_ucrit", pairs, groups_frame, comparison, tuple(problems))
