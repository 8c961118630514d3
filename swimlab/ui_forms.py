"""Grids of the set-up page: session dicts to spreadsheet-style tables and back.

The browser edits a session as a handful of grids (one row for a single record such as the
water conditions, many rows for the fish, speed steps, blanks and events). This module turns a
session dict into those grids, the edited grids back into a session dict, and each validation
:class:`~swimlab.session.Problem` (a dotted field path such as ``fish.1.mass_g``) into the grid,
row and column a person sees (grid "Fish", row 2, column "Mass [g]").

Nothing here imports streamlit, so it is tested on its own. Headers carry units, limits come
from the session model itself (so the grid and the model cannot disagree), and every value is
validated again by :func:`swimlab.session.validate_session` before anything is saved: a grid's
limits are a convenience in the browser, not a guarantee.
"""

from __future__ import annotations

import copy
import datetime as dt
import math
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import pandas as pd
from pydantic import BaseModel

from swimlab import session as sm

# --------------------------------------------------------------------------------------------
# Grid layout
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GridColumn:
    """One column of a grid.

    ``kind`` is ``"number"``, ``"integer"``, ``"text"``, ``"choice"`` or ``"date"``. Limits and
    whether a value is required are read from the session model by :func:`column_limits`.
    """

    field: str
    label: str
    kind: str = "number"
    help: str = ""
    options: tuple[str, ...] = ()


@dataclass(frozen=True)
class GridSection:
    """One grid: where its values live in the session dict and what its columns are.

    ``path`` is the dotted path of the record (one row) or list of records (many rows);
    ``""`` is the session itself.
    """

    name: str
    title: str
    path: str
    model: type[BaseModel]
    many: bool
    columns: tuple[GridColumn, ...]
    optional: bool = False
    """For a one-row record that may be absent (the sensor calibration): an empty row means None."""

    def labels(self) -> list[str]:
        return [column.label for column in self.columns]

    def column(self, field_name: str) -> GridColumn | None:
        for column in self.columns:
            if column.field == field_name:
                return column
        return None


_C = GridColumn

SECTIONS: dict[str, GridSection] = {
    s.name: s
    for s in [
        GridSection("trial", "Trial", "", sm.Session, False, (
            _C("title", "Title", "text", "A short name for this trial, e.g. the fish and the date."),
            _C("study", "Study", "text"),
            _C("lab", "Lab", "text"),
            _C("operator", "Operator", "text", "Who ran the trial."),
            _C("trial_date", "Date", "date"),
            _C("background_method", "Background correction", "choice",
               "How blank slopes are carried between blanks in time.", sm.BACKGROUND_METHODS),
            _C("notes", "Notes", "text"),
        )),
        GridSection("water", "Water", "water", sm.WaterConditions, False, (
            _C("temperature_c", "Temperature [°C]"),
            _C("salinity", "Practical salinity [-]", help="0 for fresh water."),
            _C("barometric_pressure_kpa", "Barometric pressure [kPa]"),
        )),
        GridSection("flume", "Flume", "flume", sm.Flume, False, (
            _C("name", "Flume", "text", "The swim tunnel's name in the lab."),
            _C("section_shape", "Section shape", "choice", options=("rectangular", "circular")),
            _C("section_width_cm", "Section width [cm]"),
            _C("section_height_cm", "Section height [cm]"),
            _C("section_diameter_cm", "Section diameter [cm]", help="Circular sections only."),
            _C("section_length_cm", "Section length [cm]"),
            _C("respirometer_volume_l", "Respirometer volume [L]",
               help="Whole closed volume: working section, pipes and pump."),
        )),
        GridSection("characterisation", "Flow characterisation", "flume.characterisation",
                    sm.FlumeCharacterisation, False, (
            _C("version", "Version [-]", "integer"),
            _C("date", "Date", "date"),
            _C("instrument", "Instrument", "text"),
            _C("uniformity_pct", "Speed uniformity [%]"),
            _C("turbulence_intensity_pct", "Turbulence intensity [%]"),
            _C("notes", "Notes", "text"),
        )),
        GridSection("calibration", "Speed calibration", "flume.calibration", sm.CalibrationPoint, True, (
            _C("motor_setting", "Motor setting [controller units]"),
            _C("speed_cm_s", "Measured speed [cm/s]"),
        )),
        GridSection("fish", "Fish", "fish", sm.Fish, True, (
            _C("fish_id", "Fish id", "text"),
            _C("species", "Species", "text"),
            _C("chamber", "Chamber", "text", "Oxygen channel of the fish's respirometer (A, B, ...)."),
            _C("mass_g", "Mass [g]"),
            _C("total_length_cm", "Total length [cm]"),
            _C("fork_length_cm", "Fork length [cm]"),
            _C("body_depth_cm", "Body depth [cm]"),
            _C("body_width_cm", "Body width [cm]"),
            _C("sex", "Sex", "choice", options=("", "female", "male", "unknown")),
            _C("notes", "Notes", "text"),
        )),
        GridSection("protocol", "Protocol", "protocol", sm.Protocol, False, (
            _C("start_s", "First step starts at [s]", help="On the trace clock."),
            _C("ramp_start_speed_cm_s", "Ramp start speed [cm/s]"),
            _C("ramp_rate_cm_s_per_min", "Ramp rate [cm/s per min]"),
            _C("set_speed_cm_s", "Set speed [cm/s]"),
            _C("time_limit_min", "Time limit [min]"),
            _C("rest_interval_min", "Rest before this swim [min]"),
            _C("first_swim_session_id", "First swim's session id", "text"),
            _C("fatigue_time_s", "Fatigue at [s]",
               "When the fish met the fatigue criterion, on the trace clock; empty if not reached."),
            _C("recovery_baseline", "Recovery baseline", "choice",
               "What the excess post-exercise oxygen is measured from.",
               tuple([""] + list(getattr(sm, "RECOVERY_BASELINES", {})))),
            _C("recovery_baseline_mg_kg_h", "Entered SMR [mg O2/kg/h]",
               "Only with the 'smr' baseline: an SMR from another trial."),
        )),
        GridSection("steps", "Speed steps", "protocol.steps", sm.SpeedStep, True, (
            _C("speed_cm_s", "Set speed [cm/s]"),
            _C("duration_min", "Duration [min]"),
            _C("motor_setting", "Motor setting [controller units]"),
        )),
        GridSection("cycle", "Cycle timing", "protocol.cycle", sm.CycleTiming, False, (
            _C("source", "Phases from", "choice",
               "pump: the logger's pump column; schedule: the durations here; shape: the trace.",
               sm.PHASE_SOURCES),
            _C("flush_s", "Flush [s]"),
            _C("wait_s", "Wait [s]"),
            _C("measure_s", "Measure [s]"),
            _C("start_s", "First flush starts at [s]", help="On the trace clock."),
        )),
        GridSection("fatigue", "Fatigue criterion", "protocol.fatigue_criterion",
                    sm.FatigueCriterion, False, (
            _C("description", "Criterion", "text"),
            _C("rest_on_grid_s", "Rest on the grid [s]"),
            _C("stimulus", "Stimulus", "text"),
            _C("stimulus_limit", "Stimuli before fatigue [count]", "integer"),
        )),
        GridSection("conditions", "Trial conditions", "conditions", sm.TrialConditions, False, (
            _C("acclimation_temperature_c", "Acclimation temperature [°C]"),
            _C("acclimation_days", "Acclimation [days]"),
            _C("fasting_h", "Fasted [h]"),
            _C("habituation_min", "Habituation [min]"),
            _C("habituation_speed_cm_s", "Habituation speed [cm/s]"),
            _C("time_of_day", "Time of day", "text"),
            _C("photoperiod", "Photoperiod", "text", "e.g. 12L:12D"),
            _C("treatment", "Treatment or group", "text", "For comparisons across sessions."),
            _C("animal_care_approval", "Animal-care approval", "text",
               "Committee and approved protocol or licence number covering this trial."),
        )),
        GridSection("sensor", "Oxygen sensor calibration", "sensor", sm.SensorCalibration, False, (
            _C("sensor", "Sensor", "text"),
            _C("date", "Calibrated on", "date"),
            _C("zero_point_pct", "Zero point [% air sat.]"),
            _C("span_point_pct", "Span point [% air sat.]"),
            _C("temperature_c", "Temperature [°C]"),
            _C("barometric_pressure_kpa", "Barometric pressure [kPa]"),
            _C("salinity", "Practical salinity [-]"),
            _C("drift_check_pct", "End-of-trial check [% air sat.]"),
        ), optional=True),
        GridSection("blanks", "Blanks (background runs)", "blanks", sm.Blank, True, (
            _C("channel", "Chamber", "text"),
            _C("when", "When", "choice", options=("before", "after", "during")),
            _C("time_s", "Mid-time [s]", help="On the trace clock; negative before the trial."),
            _C("slope_mg_l_h", "Slope [mg/L/h]", help="Negative for a decline."),
            _C("raw_file_sha256", "Raw blank file (SHA-256)", "text"),
        )),
        GridSection("events", "Observations", "events", sm.Event, True, (
            _C("time_s", "Time [s]", help="On the trace clock."),
            _C("kind", "Kind", "choice", options=sm.EVENT_KINDS),
            _C("fish_id", "Fish id", "text"),
            _C("description", "Description", "text"),
            _C("count", "Count [-]", "integer"),
            _C("gait", "Gait from now on", "choice",
               "For a gait change: the gait the fish swims in from this time (pectoral, steady caudal, "
               "burst-and-coast). The gait an endurance swim ends in sorts its fatigue curve.",
               ("", *sm.GAITS)),
        )),
        *([GridSection("kinematics", "Tail beats", "kinematics", sm.TailBeatRecord, True, (
            _C("step", "Step [-]", "integer"),
            _C("fish_id", "Fish id", "text"),
            _C("tail_beat_count", "Tail beats [count]", "integer"),
            _C("window_s", "Counting window [s]"),
            _C("frames", "Video frames [count]", "integer"),
            _C("frame_rate_hz", "Frame rate [1/s]"),
            _C("amplitude_cm", "Tail-tip amplitude [cm]"),
        ))] if hasattr(sm, "TailBeatRecord") else []),
        GridSection("groups", "Group trials (fish swum together)", "groups", sm.FishGroup, True, (
            _C("group_id", "Group id", "text", "A label for the group (not one of the fish ids)."),
            _C("chamber", "Chamber", "text", "The oxygen channel of the respirometer the fish share."),
            _C("fish_ids", "Fish ids", "list", "The fish swum together, separated by commas (two or more)."),
            _C("fatigue_definition", "Group fatigue", "choice",
               "Required. When the group's swim ended: first_fish (the first fish to fatigue), half_group (half the "
               "fish), last_fish (every fish), or stated (describe it).", ("", *sm.GROUP_FATIGUE_DEFINITIONS)),
            _C("fatigue_description", "Stated definition", "text", "When the group fatigue is 'stated'."),
        )),
    ]
}
"""Every grid of the set-up page, in page order."""

for _name, _section in list(SECTIONS.items()):
    _known = tuple(c for c in _section.columns if c.field in _section.model.model_fields)
    if _known != _section.columns:
        SECTIONS[_name] = GridSection(_section.name, _section.title, _section.path, _section.model, _section.many,
                                      _known, _section.optional)
del _name, _section, _known

PROTOCOL_FIELDS: dict[str, tuple[str, ...]] = {
    "step_ucrit": ("start_s", "fatigue_time_s"),
    "ramp": ("start_s", "ramp_start_speed_cm_s", "ramp_rate_cm_s_per_min", "fatigue_time_s"),
    "endurance": ("start_s", "set_speed_cm_s", "time_limit_min", "fatigue_time_s"),
    "repeat_ucrit": ("start_s", "rest_interval_min", "first_swim_session_id", "fatigue_time_s"),
    "recovery": ("start_s", "recovery_baseline", "recovery_baseline_mg_kg_h"),
}
"""The protocol fields each protocol type shows (the rest keep their stored values)."""

STEP_PROTOCOLS = ("step_ucrit", "repeat_ucrit")
"""Protocol types that are run as speed steps."""


def visible_columns(section: GridSection, protocol_type: str | None = None) -> list[GridColumn]:
    """Return the columns of ``section`` that a person sees (the protocol grid depends on its type)."""
    if section.name == "protocol":
        wanted = PROTOCOL_FIELDS.get(protocol_type or "step_ucrit", ())
        return [c for c in section.columns if c.field in wanted]
    return list(section.columns)


@dataclass(frozen=True)
class ColumnLimits:
    """Limits of one column read from the session model (``gt`` shown as an inclusive minimum)."""

    required: bool
    min_value: float | None
    max_value: float | None
    strict_min: bool = False


def column_limits(section: GridSection, column: GridColumn) -> ColumnLimits:
    """Read whether a column is required and its limits from the session model."""
    info = section.model.model_fields[column.field]
    lo = hi = None
    strict = False
    for item in info.metadata:
        if getattr(item, "ge", None) is not None:
            lo = float(item.ge)
        if getattr(item, "gt", None) is not None:
            lo, strict = float(item.gt), True
        if getattr(item, "le", None) is not None:
            hi = float(item.le)
        if getattr(item, "lt", None) is not None:
            hi = float(item.lt)
    return ColumnLimits(required=info.is_required(), min_value=lo, max_value=hi, strict_min=strict)


# --------------------------------------------------------------------------------------------
# Session dict <-> grids
# --------------------------------------------------------------------------------------------


def _get_path(data: Mapping[str, Any], path: str) -> Any:
    node: Any = data
    if not path:
        return node
    for part in path.split("."):
        if not isinstance(node, Mapping):
            return None
        node = node.get(part)
    return node


def _set_path(data: dict[str, Any], path: str, value: Any) -> None:
    parts = path.split(".")
    node = data
    for part in parts[:-1]:
        child = node.get(part)
        if not isinstance(child, dict):
            child = {}
            node[part] = child
        node = child
    node[parts[-1]] = value


def _cell_from_value(column: GridColumn, value: Any) -> Any:
    if column.kind in ("number", "integer"):
        if value is None or value == "":
            return math.nan
        try:
            return float(value)
        except (TypeError, ValueError):
            return math.nan
    if column.kind == "date":
        if value in (None, ""):
            return None
        if isinstance(value, dt.datetime):
            return value.date()
        if isinstance(value, dt.date):
            return value
        try:
            return dt.date.fromisoformat(str(value))
        except ValueError:
            return None
    if column.kind == "list":
        if isinstance(value, list | tuple):
            return ", ".join(str(v) for v in value)
        return "" if value is None else str(value)
    return "" if value is None else str(value)


def grid_frame(section: GridSection, data: Mapping[str, Any],
               columns: Iterable[GridColumn] | None = None) -> pd.DataFrame:
    """Return the grid of ``section`` filled from a session dict, headers with units.

    Number columns are float (empty = NaN), text and choice columns are strings, date columns
    hold :class:`datetime.date` or None.
    """
    cols = list(columns) if columns is not None else list(section.columns)
    node = _get_path(data, section.path)
    if section.many:
        records = [r for r in (node or []) if isinstance(r, Mapping)]
    else:
        records = [node if isinstance(node, Mapping) else {}]
    rows = [{c.label: _cell_from_value(c, r.get(c.field)) for c in cols} for r in records]
    frame = pd.DataFrame(rows, columns=[c.label for c in cols])
    for c in cols:
        if c.kind in ("number", "integer"):
            frame[c.label] = pd.to_numeric(frame[c.label], errors="coerce").astype(float)
        elif c.kind == "date":
            frame[c.label] = frame[c.label].astype(object)
        else:
            frame[c.label] = frame[c.label].astype(object)
    return frame.reset_index(drop=True)


def _is_blank(value: Any) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    if isinstance(value, str) and value.strip() == "":
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _value_from_cell(column: GridColumn, value: Any) -> Any:
    """Turn a grid cell into a session value; None means empty (the field is left out)."""
    if _is_blank(value):
        return None
    if column.kind == "integer":
        number = float(value) if not isinstance(value, str) else value
        if isinstance(number, float) and number.is_integer():
            return int(number)
        return number  # let the model say what is wrong
    if column.kind == "number":
        if isinstance(value, str):
            text = value.strip().replace(",", ".") if re.fullmatch(r"\s*-?\d+,\d+\s*", value) else value.strip()
            return text  # the model parses numbers in strings, or says what is wrong
        return float(value)
    if column.kind == "list":  # comma- or semicolon-separated labels
        return [part.strip() for part in re.split(r"[,;]", str(value)) if part.strip()]
    if column.kind == "date":
        if isinstance(value, pd.Timestamp | dt.datetime):
            return value.date().isoformat()
        if isinstance(value, dt.date):
            return value.isoformat()
        return str(value).strip()
    return str(value).strip()


def records_from_grid(section: GridSection, frame: pd.DataFrame,
                      columns: Iterable[GridColumn] | None = None) -> tuple[list[dict[str, Any]], list[int]]:
    """Return the grid's rows as records, and the grid row (0-based) each record came from.

    Empty cells are left out of a record (so the model's default or "is required" applies);
    rows with every cell empty are dropped from a many-row grid.
    """
    cols = list(columns) if columns is not None else list(section.columns)
    records: list[dict[str, Any]] = []
    positions: list[int] = []
    frame = frame.reset_index(drop=True)
    for position, row in frame.iterrows():
        record: dict[str, Any] = {}
        for c in cols:
            if c.label not in frame.columns:
                continue
            value = _value_from_cell(c, row[c.label])
            if value is not None:
                record[c.field] = value
        if section.many and not record:
            continue
        records.append(record)
        positions.append(int(position))
    return records, positions


@dataclass
class GridEdit:
    """The result of putting edited grids into a session dict."""

    data: dict[str, Any]
    rows: dict[str, list[int]] = field(default_factory=dict)
    """For each many-row grid, the grid row (0-based) of each record in the session dict."""


def session_from_grids(base: Mapping[str, Any], frames: Mapping[str, pd.DataFrame],
                       protocol_type: str | None = None) -> GridEdit:
    """Put the edited grids ``frames`` (by section name) into a copy of the session dict ``base``.

    A one-row grid updates its record field by field (fields not shown keep their value; an
    emptied cell removes the field); a many-row grid replaces its list.
    """
    data: dict[str, Any] = copy.deepcopy(dict(base))
    if protocol_type is not None:
        _set_path(data, "protocol.type", protocol_type)
    ptype = protocol_type or _get_path(data, "protocol.type")
    rows: dict[str, list[int]] = {}
    for name, frame in frames.items():
        section = SECTIONS[name]
        cols = visible_columns(section, ptype)
        records, positions = records_from_grid(section, frame, cols)
        if section.many:
            _set_path(data, section.path, records)
            rows[name] = positions
            continue
        new = records[0] if records else {}
        if section.optional and not new:
            _set_path(data, section.path, None)
            continue
        node = _get_path(data, section.path) if section.path else data
        record = dict(node) if isinstance(node, Mapping) else {}
        for c in cols:
            record.pop(c.field, None)
        record.update(new)
        if section.path:
            _set_path(data, section.path, record)
        else:
            data.clear()
            data.update(record)
    return GridEdit(data=data, rows=rows)


# --------------------------------------------------------------------------------------------
# Problems -> grid cells
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ProblemLocation:
    """Where a problem shows: grid, grid row (0-based, None for the whole grid) and column label."""

    section: str | None
    row: int | None
    column: str | None
    field: str
    message: str

    def describe(self) -> str:
        """Say where and what, as a person reads it ("Fish, row 2, Mass [g]: ...")."""
        parts = [SECTIONS[self.section].title if self.section else "Session"]
        if self.row is not None:
            parts.append(f"row {self.row + 1}")
        if self.column:
            parts.append(self.column)
        return f"{', '.join(parts)}: {self.message}"


def _sections_by_depth() -> list[GridSection]:
    return sorted((s for s in SECTIONS.values() if s.path), key=lambda s: -len(s.path.split(".")))


def locate_problem(problem: sm.Problem | Mapping[str, str],
                   rows: Mapping[str, list[int]] | None = None) -> ProblemLocation:
    """Map a problem's field path to a grid, row and column.

    ``rows`` is :attr:`GridEdit.rows`: for many-row grids, the grid row of each record, so that
    a problem at ``fish.1`` points at the grid row the second kept record came from.
    """
    field_path = problem.field if isinstance(problem, sm.Problem) else problem["field"]
    message = problem.message if isinstance(problem, sm.Problem) else problem["message"]
    rows = rows or {}
    parts = field_path.split(".") if field_path else []
    for section in _sections_by_depth():
        prefix = section.path.split(".")
        if parts[: len(prefix)] != prefix:
            continue
        rest = parts[len(prefix):]
        row: int | None = None
        if section.many:
            if rest and rest[0].isdigit():
                index = int(rest[0])
                mapping = rows.get(section.name)
                row = mapping[index] if mapping is not None and index < len(mapping) else index
                rest = rest[1:]
        else:
            row = 0 if rest else None
        column = section.column(rest[0]) if rest else None
        if rest and column is None:
            # a field this grid does not show (e.g. the protocol type): name the field
            return ProblemLocation(section.name, None, None, field_path, f"{rest[0]}: {message}")
        return ProblemLocation(section.name, row if column or section.many else None,
                               column.label if column else None, field_path, message)
    trial = SECTIONS["trial"]
    if parts and trial.column(parts[0]) is not None:
        return ProblemLocation("trial", 0, trial.column(parts[0]).label, field_path, message)
    return ProblemLocation(None, None, None, field_path, f"{field_path or 'session'}: {message}")


def locate_problems(problems: Iterable[sm.Problem], rows: Mapping[str, list[int]] | None = None
                    ) -> list[ProblemLocation]:
    """Map every problem (see :func:`locate_problem`)."""
    return [locate_problem(p, rows) for p in problems]


def problems_table(locations: Iterable[ProblemLocation]) -> pd.DataFrame:
    """Return the problems as a table with columns Grid, Row, Column, Problem (rows 1-based)."""
    rows = [
        {
            "Grid": SECTIONS[loc.section].title if loc.section else "Session",
            "Row": (loc.row + 1) if loc.row is not None else None,
            "Column": loc.column or "",
            "Problem": loc.message,
        }
        for loc in locations
    ]
    table = pd.DataFrame(rows, columns=["Grid", "Row", "Column", "Problem"])
    table["Row"] = table["Row"].astype("Int64")
    return table


def cell_problems(section: str, locations: Iterable[ProblemLocation]) -> dict[tuple[int | None, str | None], list[str]]:
    """Problems of one grid keyed by (row, column label); a whole-row problem has column None."""
    cells: dict[tuple[int | None, str | None], list[str]] = {}
    for loc in locations:
        if loc.section == section:
            cells.setdefault((loc.row, loc.column), []).append(loc.message)
    return cells


PROBLEM_CELL_CSS = "background-color: #f8d7da; color: #58151c; font-weight: 600"
"""How a cell with a problem is drawn in the highlighted copy of a grid."""


def highlight_problems(frame: pd.DataFrame, section: str, locations: Iterable[ProblemLocation]):
    """Return a pandas Styler of ``frame`` with the cells (and rows) that have problems marked."""
    cells = cell_problems(section, locations)
    styles = pd.DataFrame("", index=frame.index, columns=frame.columns)
    for (row, column), _messages in cells.items():
        if row is None or row not in styles.index:
            continue
        if column is None:
            styles.loc[row, :] = PROBLEM_CELL_CSS
        elif column in styles.columns:
            styles.loc[row, column] = PROBLEM_CELL_CSS
    return frame.style.apply(lambda _: styles, axis=None).format(na_rep="")


# --------------------------------------------------------------------------------------------
# New sessions
# --------------------------------------------------------------------------------------------


def blank_session(*, operator: str = "", today: dt.date | None = None) -> dict[str, Any]:
    """Return the dict of a new, empty session: it does not validate until it is filled in."""
    return {
        "schema_version": sm.SCHEMA_VERSION,
        "session_id": sm.Session.model_fields["session_id"].default_factory(),
        "title": "",
        "operator": operator,
        "trial_date": (today or dt.date.today()).isoformat(),
        "water": {"salinity": 0.0, "barometric_pressure_kpa": 101.325},
        "flume": {"name": "", "section_shape": "rectangular"},
        "fish": [{"chamber": "A"}],
        "protocol": {"type": "step_ucrit", "cycle": {"source": "schedule"}},
        "background_method": "linear",
    }


def next_fish_session(previous: Mapping[str, Any], *, operator: str = "",
                      today: dt.date | None = None) -> dict[str, Any]:
    """Return a new session copied from ``previous`` for the next fish in the same flume.

    Kept: study, lab, water, flume and its calibration, protocol (steps, cycle, fatigue
    criterion), trial conditions, sensor calibration, background method and lab settings.
    Cleared: the fish's identity and morphometrics (species and chamber are kept), the fatigue
    time, blanks, observations, raw files and exclusions, which belong to one trial only.
    """
    data = copy.deepcopy(dict(previous))
    data["session_id"] = sm.Session.model_fields["session_id"].default_factory()
    title = str(previous.get("title") or "").strip()
    data["title"] = f"{title} – next fish" if title else ""
    data["operator"] = operator or str(previous.get("operator") or "")
    data["trial_date"] = (today or dt.date.today()).isoformat()
    data["fish"] = [
        {"species": f.get("species", ""), "chamber": f.get("chamber", "A")}
        for f in (previous.get("fish") or [{}])
        if isinstance(f, Mapping)
    ] or [{"chamber": "A"}]
    protocol = dict(data.get("protocol") or {})
    protocol.pop("fatigue_time_s", None)
    data["protocol"] = protocol
    for key in ("blanks", "events", "raw_files", "exclusions"):
        data[key] = []
    data["notes"] = ""
    return data


def exclusion_options(measure: pd.DataFrame) -> list[tuple[str, int]]:
    """Return the (channel, cycle) pairs of measure phases, in order, for a phase picker."""
    if measure is None or measure.empty:
        return []
    pairs = measure[["channel", "cycle"]].drop_duplicates().sort_values(["channel", "cycle"])
    return [(str(ch), int(cy)) for ch, cy in pairs.itertuples(index=False)]


def add_exclusion(data: Mapping[str, Any], channel: str, cycle: int, reason: str, *,
                  by: str = "", at: dt.datetime | None = None) -> dict[str, Any]:
    """Return a copy of the session dict with the phase (channel, cycle) excluded for ``reason``.

    An earlier exclusion of the same phase is replaced (the reason is the latest one).
    """
    out = copy.deepcopy(dict(data))
    kept = [e for e in out.get("exclusions") or []
            if not (str(e.get("channel")) == str(channel) and int(e.get("cycle", -1)) == int(cycle))]
    kept.append({"channel": str(channel), "cycle": int(cycle), "reason": reason.strip(), "by": by,
                 "at": (at or dt.datetime.now(dt.UTC)).isoformat(timespec="seconds")})
    out["exclusions"] = kept
    return out


def remove_exclusion(data: Mapping[str, Any], channel: str, cycle: int) -> dict[str, Any]:
    """Return a copy of the session dict with the exclusion of phase (channel, cycle) removed."""
    out = copy.deepcopy(dict(data))
    out["exclusions"] = [e for e in out.get("exclusions") or []
                         if not (str(e.get("channel")) == str(channel) and int(e.get("cycle", -1)) == int(cycle))]
    return out


def attach_raw_file(data: Mapping[str, Any], sha256: str, name: str, mapping: Mapping[str, Any] | None,
                    role: str = "trial") -> dict[str, Any]:
    """Return a copy of the session dict holding a reference to raw file ``sha256``.

    A reference to the same checksum is replaced (its mapping may have been corrected), and so
    is an earlier trial file: a session holds one trial trace (blank files may be several).
    """
    out = copy.deepcopy(dict(data))
    refs = [r for r in out.get("raw_files") or []
            if r.get("sha256") != sha256 and not (role == "trial" and r.get("role", "trial") == "trial")]
    refs.append({"sha256": sha256, "name": name, "role": role,
                 "mapping": dict(mapping) if mapping is not None else None})
    out["raw_files"] = refs
    return out


# --------------------------------------------------------------------------------------------
# Column mapping grid (logger import)
# --------------------------------------------------------------------------------------------

MAPPING_ROLES = ("time", "oxygen", "temperature", "pump")
"""What a logger column can be mapped to (anything else is ignored)."""


def mapping_frame(mapping: Mapping[str, Any], columns: Iterable[str]) -> pd.DataFrame:
    """Return the column mapping as a table: one row per oxygen/temperature channel plus time and pump.

    Columns: ``Role``, ``Chamber``, ``Logger column``.
    """
    rows = [{"Role": "time", "Chamber": "", "Logger column": mapping.get("time") or ""}]
    for role in ("oxygen", "temperature"):
        for channel, column in (mapping.get(role) or {}).items():
            rows.append({"Role": role, "Chamber": str(channel), "Logger column": str(column)})
    if mapping.get("pump"):
        rows.append({"Role": "pump", "Chamber": "", "Logger column": str(mapping["pump"])})
    frame = pd.DataFrame(rows, columns=["Role", "Chamber", "Logger column"])
    known = set(columns)
    frame["In file"] = frame["Logger column"].isin(known)
    return frame


def mapping_from_frame(frame: pd.DataFrame, base: Mapping[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """Return a mapping dict from the edited table and the problems found (in words, by row).

    ``base`` supplies the fields the table does not show (units, delimiter, decimal ...).
    """
    problems: list[str] = []
    out = dict(base)
    out["oxygen"], out["temperature"], out["pump"], out["time"] = {}, {}, None, None
    for position, row in frame.reset_index(drop=True).iterrows():
        role = str(row.get("Role") or "").strip()
        column = str(row.get("Logger column") or "").strip()
        channel = str(row.get("Chamber") or "").strip()
        if not role and not column:
            continue
        where = f"row {position + 1}"
        if role not in MAPPING_ROLES:
            problems.append(f"{where}, Role: must be one of {list(MAPPING_ROLES)} (got {role!r})")
            continue
        if not column:
            problems.append(f"{where}, Logger column: is required")
            continue
        if role in ("oxygen", "temperature"):
            if not channel:
                problems.append(f"{where}, Chamber: is required for a {role} column")
                continue
            if channel in out[role]:
                problems.append(f"{where}, Chamber: chamber {channel!r} has two {role} columns")
                continue
            out[role][channel] = column
        elif out[role] is not None:
            problems.append(f"{where}, Role: only one {role} column is allowed")
        else:
            out[role] = column
    if out["time"] is None:
        problems.append("Role: a time column is required")
    if not out["oxygen"]:
        problems.append("Role: at least one oxygen column is required")
    return out, problems


# --------------------------------------------------------------------------------------------
# Result tables as a person reads them
# --------------------------------------------------------------------------------------------

QUANTITY_NAMES = {
    "ucrit": "Ucrit", "ucrit_bl": "Ucrit", "ucrit_set": "Ucrit (set speed, uncorrected)", "smr": "SMR",
    "smr_quantile": "SMR (low quantile)", "smr_mlnd": "SMR (MLND)", "mmr": "MMR",
    "aas": "Absolute aerobic scope", "fas": "Factorial aerobic scope", "uopt": "Uopt", "uopt_bl": "Uopt",
    "cotmin": "COTmin",
}
"""Names of the result quantities as a person reads them."""

UNIT_NAMES = {
    "mg O2 kg-1 h-1": "mg O₂/kg/h", "mg O2 kg-1 km-1": "mg O₂/kg/km", "-": "–", "m/s": "m/s",
    "cm/s": "cm/s", "BL/s": "BL/s", "mg O2 h-1": "mg O₂/h", "mg O2 kg-1": "mg O₂/kg",
}
"""Units of the result table as a person reads them."""


def _significant(value: Any, digits: int = 4) -> str:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return ""
    if not math.isfinite(number):
        return ""
    return f"{number:.{digits}g}"


def results_display(results: pd.DataFrame) -> pd.DataFrame:
    """Return the results table as text: Quantity, Value, Unit, 95 % interval, Method, Note.

    Missing values and intervals are blank rather than "None" or "nan". A ``label`` column, where
    the table has one (protocol results), names the quantity.
    """
    columns = ["Quantity", "Value", "Unit", "95 % interval", "Method", "Note"]
    if results is None or results.empty:
        return pd.DataFrame(columns=columns)
    rows = []
    for row in results.itertuples(index=False):
        lo, hi = _significant(getattr(row, "ci_low", None)), _significant(getattr(row, "ci_high", None))
        note = getattr(row, "note", "")
        rows.append({
            "Quantity": getattr(row, "label", None) or QUANTITY_NAMES.get(row.quantity, row.quantity),
            "Value": _significant(row.value),
            "Unit": UNIT_NAMES.get(str(row.unit), str(row.unit)),
            "95 % interval": f"{lo} – {hi}" if lo and hi else "",
            "Method": str(getattr(row, "method", "") or ""),
            "Note": "" if note is None or (isinstance(note, float) and math.isnan(note)) else str(note),
        })
    return pd.DataFrame(rows, columns=columns)


def when_text(iso: Any) -> str:
    """An ISO 8601 time stamp as "YYYY-MM-DD HH:MM UTC" (the text itself when it is not one)."""
    try:
        stamp = dt.datetime.fromisoformat(str(iso))
    except ValueError:
        return str(iso)
    if stamp.tzinfo is not None:
        stamp = stamp.astimezone(dt.UTC)
    return stamp.strftime("%Y-%m-%d %H:%M UTC")
