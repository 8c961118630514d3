"""Tests of swimlab.ui_forms: session dicts to grids and back, problems to grid cells."""

from __future__ import annotations

import copy
import datetime as dt

import numpy as np
import pandas as pd
import pytest
from browser_support import typical_session
from hypothesis import given, settings
from hypothesis import strategies as st

from swimlab import ui_forms as uf
from swimlab.session import Fish, Problem, Session, validate_session


def _frames(data, protocol_type=None):
    ptype = protocol_type or data["protocol"]["type"]
    return {name: uf.grid_frame(s, data, uf.visible_columns(s, ptype)) for name, s in uf.SECTIONS.items()}


def _canonical(data):
    return Session.model_validate(data).to_json_dict()


EDITED_ELSEWHERE = {
    # fields a person does not type in that grid: sub-records with grids of their own, or values
    # set by the trace page (raw files, exclusions) and the lab book (ids, settings)
    "trial": {"schema_version", "session_id", "water", "flume", "fish", "protocol", "conditions", "sensor",
              "blanks", "events", "kinematics", "groups", "raw_files", "exclusions", "settings"},
    "flume": {"calibration", "characterisation"},
    "protocol": {"type", "steps", "cycle", "fatigue_criterion"},
}


def test_every_field_a_person_enters_has_a_grid_column():
    # Fails when the session model gains a field that no grid shows.
    for section in uf.SECTIONS.values():
        shown = {c.field for c in section.columns}
        missing = set(section.model.model_fields) - shown - EDITED_ELSEWHERE.get(section.name, set())
        assert not missing, (section.name, sorted(missing))


def test_headers_of_number_columns_carry_units():
    # Units in every header of a number column (DESIGN.md §2 "units in every header").
    for section in uf.SECTIONS.values():
        for column in section.columns:
            if column.kind in ("number", "integer"):
                assert "[" in column.label and column.label.endswith("]"), column.label


def test_limits_are_read_from_the_model():
    fish = uf.SECTIONS["fish"]
    limits = uf.column_limits(fish, fish.column("mass_g"))
    assert limits == uf.ColumnLimits(required=True, min_value=0.0, max_value=100000.0, strict_min=True)
    water = uf.SECTIONS["water"]
    t = uf.column_limits(water, water.column("temperature_c"))
    assert (t.min_value, t.max_value, t.strict_min, t.required) == (-2.0, 40.0, False, True)
    assert uf.column_limits(fish, fish.column("fork_length_cm")).required is False


def test_grids_round_trip_a_valid_session():
    data = typical_session()
    edit = uf.session_from_grids(data, _frames(data))
    assert _canonical(edit.data) == _canonical(data)


def test_round_trip_keeps_fields_the_protocol_grid_does_not_show():
    data = typical_session()
    data["protocol"]["ramp_rate_cm_s_per_min"] = 2.5  # not shown for a step test
    edit = uf.session_from_grids(data, _frames(data))
    assert edit.data["protocol"]["ramp_rate_cm_s_per_min"] == 2.5


@settings(max_examples=40, deadline=None)
@given(mass=st.floats(0.5, 5000), length=st.floats(5, 60), n_fish=st.integers(1, 4))
def test_fish_grid_round_trip(mass, length, n_fish):
    data = typical_session()
    data["fish"] = [
        {"fish_id": f"KB-{i}", "chamber": "ABCD"[i], "mass_g": mass, "total_length_cm": length,
         "body_depth_cm": length / 6, "body_width_cm": length / 10}
        for i in range(n_fish)
    ]
    section = uf.SECTIONS["fish"]
    records, rows = uf.records_from_grid(section, uf.grid_frame(section, data))
    assert rows == list(range(n_fish))
    assert [Fish.model_validate(r).model_dump() for r in records] == [Fish.model_validate(f).model_dump() for f in data["fish"]]


def test_pasted_rows_with_blank_lines_keep_their_grid_rows():
    section = uf.SECTIONS["fish"]
    frame = pd.DataFrame([
        {"Fish id": "KB-1", "Mass [g]": 10.0, "Total length [cm]": 10.0},
        {"Fish id": "", "Mass [g]": np.nan},
        {"Fish id": "KB-3", "Mass [g]": -4.0, "Total length [cm]": 11.0},
    ], columns=section.labels())
    records, rows = uf.records_from_grid(section, frame)
    assert [r["fish_id"] for r in records] == ["KB-1", "KB-3"]
    assert rows == [0, 2]
    data = typical_session()
    edit = uf.session_from_grids(data, {"fish": frame})
    _, problems = validate_session(edit.data)
    located = uf.locate_problems(problems, edit.rows)
    mass = [loc for loc in located if loc.field == "fish.1.mass_g"]
    # the second kept record came from grid row 3 (index 2)
    assert mass and mass[0].section == "fish" and mass[0].row == 2 and mass[0].column == "Mass [g]"
    assert mass[0].describe().startswith("Fish, row 3, Mass [g]: ")


def test_negative_mass_is_a_problem_at_its_cell():
    data = typical_session()
    data["fish"][0]["mass_g"] = -3
    _, problems = validate_session(data)
    loc = uf.locate_problem(next(p for p in problems if p.field == "fish.0.mass_g"))
    assert (loc.section, loc.row, loc.column) == ("fish", 0, "Mass [g]")
    assert "-3" in loc.message


@pytest.mark.parametrize(
    ("field", "where"),
    [
        ("fish.1.mass_g", ("fish", 1, "Mass [g]")),
        ("fish.1", ("fish", 1, None)),
        ("fish", ("fish", None, None)),
        ("water.temperature_c", ("water", 0, "Temperature [°C]")),
        ("protocol.steps.2.speed_cm_s", ("steps", 2, "Set speed [cm/s]")),
        ("protocol.steps", ("steps", None, None)),
        ("protocol.cycle.flush_s", ("cycle", 0, "Flush [s]")),
        ("protocol.fatigue_criterion.rest_on_grid_s", ("fatigue", 0, "Rest on the grid [s]")),
        ("protocol.ramp_rate_cm_s_per_min", ("protocol", 0, "Ramp rate [cm/s per min]")),
        ("flume.calibration.0.speed_cm_s", ("calibration", 0, "Measured speed [cm/s]")),
        ("flume.section_width_cm", ("flume", 0, "Section width [cm]")),
        ("flume.characterisation.uniformity_pct", ("characterisation", 0, "Speed uniformity [%]")),
        ("sensor.zero_point_pct", ("sensor", 0, "Zero point [% air sat.]")),
        ("blanks.0.channel", ("blanks", 0, "Chamber")),
        ("events.3.fish_id", ("events", 3, "Fish id")),
        ("title", ("trial", 0, "Title")),
        ("trial_date", ("trial", 0, "Date")),
        ("settings", (None, None, None)),
        ("raw_files.0.sha256", (None, None, None)),
    ],
)
def test_field_paths_map_to_grid_cells(field, where):
    loc = uf.locate_problem(Problem(field=field, message="is wrong"))
    assert (loc.section, loc.row, loc.column) == where


def test_every_problem_of_a_blank_session_is_located_in_a_grid():
    _, problems = validate_session(uf.blank_session(today=dt.date(2031, 1, 1)))
    located = uf.locate_problems(problems)
    assert problems and all(loc.section is not None for loc in located)
    table = uf.problems_table(located)
    assert list(table.columns) == ["Grid", "Row", "Column", "Problem"]
    assert "Temperature [°C]" in set(table["Column"])


def test_cross_check_problems_are_located():
    data = typical_session()
    data["fish"][0]["body_depth_cm"] = 30.0  # deeper than long and than the section
    data["protocol"]["cycle"]["flush_s"] = None
    _, problems = validate_session(data)
    located = {(loc.section, loc.row, loc.column) for loc in uf.locate_problems(problems)}
    assert ("fish", 0, "Body depth [cm]") in located
    assert ("fish", 0, None) in located
    assert ("cycle", 0, "Flush [s]") in located


def test_emptied_cell_is_required_again():
    data = typical_session()
    frames = _frames(data)
    frames["water"].loc[0, "Temperature [°C]"] = np.nan
    edit = uf.session_from_grids(data, frames)
    _, problems = validate_session(edit.data)
    assert [p.field for p in problems] == ["water.temperature_c"]
    assert problems[0].message == "is required"


def test_empty_sensor_row_means_no_calibration():
    data = typical_session()
    frames = _frames(data)
    frames["sensor"] = uf.grid_frame(uf.SECTIONS["sensor"], {"sensor": None})
    frames["sensor"].loc[0, :] = [None, None, np.nan, np.nan, np.nan, np.nan, np.nan, np.nan]
    edit = uf.session_from_grids(data, frames)
    assert edit.data["sensor"] is None
    assert validate_session(edit.data)[0] is not None


def test_protocol_type_changes_the_protocol_grid():
    cols = [c.field for c in uf.visible_columns(uf.SECTIONS["protocol"], "endurance")]
    assert "set_speed_cm_s" in cols and "time_limit_min" in cols and "ramp_rate_cm_s_per_min" not in cols
    data = typical_session()
    frames = _frames(data, "endurance")
    edit = uf.session_from_grids(data, frames, "endurance")
    _, problems = validate_session(edit.data)
    assert {p.field for p in problems} == {"protocol.set_speed_cm_s", "protocol.time_limit_min"}


def test_dates_and_choices_survive_the_grid():
    data = typical_session()
    frame = uf.grid_frame(uf.SECTIONS["trial"], data)
    assert frame.loc[0, "Date"] == dt.date(2031, 6, 2)
    frame.loc[0, "Background correction"] = "constant"
    edit = uf.session_from_grids(data, {"trial": frame})
    assert edit.data["trial_date"] == "2031-06-02" and edit.data["background_method"] == "constant"


def test_highlight_marks_the_bad_cell_only():
    data = typical_session()
    data["fish"].append({**data["fish"][0], "fish_id": "KB-04", "chamber": "B", "mass_g": -1})
    _, problems = validate_session(data)
    located = uf.locate_problems(problems)
    frame = uf.grid_frame(uf.SECTIONS["fish"], data)
    html = uf.highlight_problems(frame, "fish", located).to_html()
    assert html.count(uf.PROBLEM_CELL_CSS.split(";")[0]) >= 1
    cells = uf.cell_problems("fish", located)
    assert list(cells) == [(1, "Mass [g]")]


def test_next_fish_keeps_the_flume_and_clears_the_fish():
    previous = typical_session()
    previous["events"] = [{"time_s": 10.0, "kind": "burst"}]
    previous["exclusions"] = [{"channel": "A", "cycle": 2, "reason": "bubbles"}]
    new = uf.next_fish_session(previous, operator="B. Student", today=dt.date(2031, 6, 3))
    assert new["session_id"] != previous["session_id"]
    assert new["flume"] == previous["flume"] and new["protocol"]["steps"] == previous["protocol"]["steps"]
    assert new["fish"] == [{"species": "Oncorhynchus mykiss", "chamber": "A"}]
    assert new["events"] == [] and new["exclusions"] == [] and new["raw_files"] == []
    assert "fatigue_time_s" not in new["protocol"]
    assert new["operator"] == "B. Student" and new["trial_date"] == "2031-06-03"
    session, problems = validate_session(new)
    assert session is None and {p.field for p in problems} >= {"fish.0.fish_id", "fish.0.mass_g"}
    new["fish"][0].update(fish_id="KB-04", mass_g=90.0, total_length_cm=21.0, body_depth_cm=4.1, body_width_cm=2.3)
    assert validate_session(new)[0] is not None
    assert previous["events"] and previous["fish"][0]["fish_id"] == "KB-03"  # the source is untouched


def test_blank_session_needs_filling():
    session, problems = validate_session(uf.blank_session())
    assert session is None and len(problems) >= 5


def test_exclusions_are_added_replaced_and_removed():
    data = typical_session()
    at = dt.datetime(2031, 6, 2, 12, 0, tzinfo=dt.UTC)
    one = uf.add_exclusion(data, "A", 3, "  bubbles on the optode ", by="R. Operator", at=at)
    two = uf.add_exclusion(one, "A", 3, "fish turned round", by="R. Operator", at=at)
    assert "exclusions" not in data
    assert [e["reason"] for e in one["exclusions"]] == ["bubbles on the optode"]
    assert [e["reason"] for e in two["exclusions"]] == ["fish turned round"]
    assert validate_session(two)[0].exclusions[0].cycle == 3
    assert uf.remove_exclusion(two, "A", 3)["exclusions"] == []


def test_attaching_a_trial_file_replaces_the_earlier_one():
    data = typical_session()
    a, b, c = "a" * 64, "b" * 64, "c" * 64
    one = uf.attach_raw_file(data, a, "first.csv", {"time": "t"})
    one = uf.attach_raw_file(one, c, "blank.csv", None, role="blank")
    two = uf.attach_raw_file(one, b, "second.csv", {"time": "t"})
    assert [(r["sha256"], r["role"]) for r in two["raw_files"]] == [(c, "blank"), (b, "trial")]
    assert validate_session(two)[0] is not None


def test_mapping_table_round_trip_and_row_problems():
    mapping = {"time": "t", "oxygen": {"A": "o2 a", "B": "o2 b"}, "temperature": {"A": "temp"},
               "pump": "pump", "oxygen_unit": "mg/L", "delimiter": ";"}
    frame = uf.mapping_frame(mapping, ["t", "o2 a", "o2 b", "temp"])
    assert frame["In file"].tolist() == [True, True, True, True, False]
    back, problems = uf.mapping_from_frame(frame, mapping)
    assert problems == [] and back == mapping
    broken = copy.deepcopy(frame)
    broken.loc[2, "Chamber"] = "A"  # two oxygen columns for chamber A
    broken.loc[0, "Role"] = "oxygen"  # no time column left
    _, problems = uf.mapping_from_frame(broken, mapping)
    assert "row 1, Chamber: is required for a oxygen column" in problems
    assert "row 3, Chamber: chamber 'A' has two oxygen columns" in problems
    assert "Role: a time column is required" in problems


def test_exclusion_options_are_sorted_pairs():
    measure = pd.DataFrame({"channel": ["B", "A", "A"], "cycle": [1, 2, 1]})
    assert uf.exclusion_options(measure) == [("A", 1), ("A", 2), ("B", 1)]
    assert uf.exclusion_options(pd.DataFrame()) == []


def test_results_display_names_units_and_blank_intervals():
    results = pd.DataFrame([
        {"fish_id": "KB-03", "quantity": "smr", "value": 109.4863, "unit": "mg O2 kg-1 h-1",
         "method": "fit at zero speed", "ci_low": 107.2015, "ci_high": 111.6714, "note": ""},
        {"fish_id": "KB-03", "quantity": "fas", "value": 3.079, "unit": "-", "method": "MMR / SMR",
         "ci_low": np.nan, "ci_high": np.nan, "note": np.nan},
    ])
    shown = uf.results_display(results)
    assert shown.to_dict("records") == [
        {"Quantity": "SMR", "Value": "109.5", "Unit": "mg O₂/kg/h", "95 % interval": "107.2 – 111.7",
         "Method": "fit at zero speed", "Note": ""},
        {"Quantity": "Factorial aerobic scope", "Value": "3.079", "Unit": "–", "95 % interval": "",
         "Method": "MMR / SMR", "Note": ""},
    ]
    assert list(uf.results_display(pd.DataFrame()).columns) == ["Quantity", "Value", "Unit", "95 % interval",
                                                                "Method", "Note"]


def test_when_text():
    assert uf.when_text("2031-06-02T14:31:41.939184+02:00") == "2031-06-02 12:31 UTC"
    assert uf.when_text("not a time") == "not a time"


@pytest.mark.skipif("kinematics" not in uf.SECTIONS, reason="the session model has no tail-beat records")
def test_tail_beat_problems_map_to_their_grid():
    loc = uf.locate_problem(Problem(field="kinematics.1.window_s", message="is wrong"))
    assert (loc.section, loc.row, loc.column) == ("kinematics", 1, "Counting window [s]")


def test_results_display_prefers_a_label():
    rows = pd.DataFrame([{"fish_id": "KB-03", "quantity": "ramp_umax", "label": "Ramp Umax", "value": 61.2,
                          "unit": "cm/s", "method": "last speed", "ci_low": np.nan, "ci_high": np.nan, "note": ""}])
    assert uf.results_display(rows)["Quantity"].tolist() == ["Ramp Umax"]
