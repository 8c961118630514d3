"""Set-up: the trial entered as spreadsheet-style grids, checked as you type, saved when valid."""

from __future__ import annotations

import json

import streamlit as st

from app_pages import common
from swimlab import plots, ui_forms
from swimlab.session import PROTOCOL_LABELS, PROTOCOL_TYPES

common.page_header(
    "Set-up",
    "Enter the trial: water, flume, fish, protocol, conditions, sensor, blanks and observations. "
    "Units are in every header; problems show under each grid as you type.",
)
book = common.labbook()
data = common.require_session()
common.session_banner()
settings = common.effective_settings(book, data)
common.care_notice(settings, where="setting up a trial")

gen = int(st.session_state.get("app_gen", 0))
frozen = st.session_state.get("app_status") == "approved"
if frozen:
    st.info("This session is approved and frozen. A reviewer can reopen it on the Review page.")

summary = st.container()


def _column_config(section: ui_forms.GridSection, columns: list[ui_forms.GridColumn]) -> dict:
    config = {}
    for column in columns:
        limits = ui_forms.column_limits(section, column)
        words = [column.help] if column.help else []
        if limits.min_value is not None or limits.max_value is not None:
            lo = "" if limits.min_value is None else (f"more than {limits.min_value:g}" if limits.strict_min
                                                      else f"at least {limits.min_value:g}")
            hi = "" if limits.max_value is None else f"at most {limits.max_value:g}"
            words.append(" and ".join(w for w in (lo, hi) if w).capitalize() + ".")
        if limits.required:
            words.append("Required.")
        help_text = " ".join(words) or None
        if column.kind in ("number", "integer"):
            config[column.label] = st.column_config.NumberColumn(
                column.label, help=help_text, required=limits.required,
                min_value=limits.min_value, max_value=limits.max_value,
                step=1 if column.kind == "integer" else None,
                format="%d" if column.kind == "integer" else None,
            )
        elif column.kind == "choice":
            config[column.label] = st.column_config.SelectboxColumn(
                column.label, help=help_text, options=list(column.options), required=limits.required)
        elif column.kind == "date":
            config[column.label] = st.column_config.DateColumn(
                column.label, help=help_text, format="YYYY-MM-DD", required=limits.required)
        else:
            config[column.label] = st.column_config.TextColumn(column.label, help=help_text, required=limits.required)
    return config


frames = {}
under = {}


def grid(name: str, protocol_type: str, *, caption: str | None = None) -> None:
    """Draw one grid; keep its starting table fixed while it is being edited."""
    section = ui_forms.SECTIONS[name]
    columns = ui_forms.visible_columns(section, protocol_type)
    suffix = f"_{protocol_type}" if name == "protocol" else ""
    key = f"su_{name}{suffix}_{gen}"
    base_key = f"su_base_{name}{suffix}_{gen}"
    if key not in st.session_state or base_key not in st.session_state:
        st.session_state[base_key] = ui_forms.grid_frame(section, data, columns)
    st.markdown(f"**{section.title}**" + (f" — {caption}" if caption else ""))
    edited = st.data_editor(
        st.session_state[base_key], key=key, hide_index=True, width="stretch",
        num_rows="dynamic" if section.many else "fixed",
        column_config=_column_config(section, columns), disabled=frozen, placeholder="",
    )
    frames[name] = edited.reset_index(drop=True)
    under[name] = st.container()


current_type = (data.get("protocol") or {}).get("type") or "step_ucrit"
tabs = st.tabs(["Trial and water", "Flume", "Fish", "Protocol", "Sensor and blanks", "Observations"])
with tabs[0]:
    grid("trial", current_type)
    grid("water", current_type)
    grid("conditions", current_type, caption="before and around the trial")
with tabs[1]:
    grid("flume", current_type)
    grid("calibration", current_type, caption="motor setting against measured water speed; paste rows from a spreadsheet")
    calibration_chart = st.container()
    with st.expander("Flow characterisation of the flume"):
        grid("characterisation", current_type)
with tabs[2]:
    grid("fish", current_type, caption="one row per fish; paste several rows from a spreadsheet at once")
    grid("groups", current_type, caption="only when several fish swim together in one respirometer: the chamber's "
         "MO2 is then the group's, given per capita, and the group's fatigue definition is required")
with tabs[3]:
    protocol_type = st.selectbox(
        "Protocol type", PROTOCOL_TYPES, format_func=PROTOCOL_LABELS.get, key=f"su_ptype_{gen}",
        index=PROTOCOL_TYPES.index(current_type) if current_type in PROTOCOL_TYPES else 0, disabled=frozen,
    )
    grid("protocol", protocol_type, caption="the fields this protocol type needs")
    if protocol_type in ui_forms.STEP_PROTOCOLS:
        grid("steps", protocol_type, caption="in the order swum")
    grid("cycle", protocol_type, caption="flush / wait / measure")
    grid("fatigue", protocol_type)
with tabs[4]:
    grid("sensor", protocol_type, caption="leave the row empty if not recorded")
    grid("blanks", protocol_type, caption="background runs without the fish")
with tabs[5]:
    grid("events", protocol_type, caption="gait changes, rear-grid contacts, stimuli, bursts, fatigue, adverse events")
    if "kinematics" in ui_forms.SECTIONS:
        grid("kinematics", protocol_type, caption="counted per speed step, over a window or over video frames")

edit = ui_forms.session_from_grids(data, frames, protocol_type)
if not frozen:
    st.session_state["app_work"] = edit.data
session, problems = common.validated(edit.data)
locations = ui_forms.locate_problems(problems, edit.rows)

for name, box in under.items():
    mine = [loc for loc in locations if loc.section == name]
    if not mine:
        continue
    with box:
        st.error("\n".join(f"- {loc.describe()}" for loc in mine))
        if any(loc.row is not None for loc in mine) and len(frames[name]):
            st.dataframe(ui_forms.highlight_problems(frames[name], name, mine), hide_index=True, width="stretch")

points = edit.data.get("flume", {}).get("calibration") or []
if len(points) >= 1:
    with calibration_chart:
        common.show_figure(plots.calibration_figure(points), key="su_calibration_fig", name="speed-calibration")

with summary:
    loose = [loc for loc in locations if loc.section is None]
    if problems:
        st.error(
            f"**{len(problems)} problem(s)** to fix before this session can be saved to the lab book. "
            "Until then your entries are kept in this browser tab only (a draft): do not close the tab."
        )
        with st.expander("All problems", expanded=bool(loose)):
            st.dataframe(ui_forms.problems_table(locations), hide_index=True, width="stretch")
        st.download_button(
            "Keep a copy of this draft (JSON)", json.dumps(edit.data, indent=2, default=str),
            file_name=f"swimlab-draft-{edit.data.get('session_id', 'new')}.json", mime="application/json",
            key="su_draft_download", icon=":material/download:",
            help="A half-filled session is not stored in the lab book. Start from this file on the Lab book page "
                 "to carry on later.",
        )
    else:
        st.success("Every value is valid." + (" There are unsaved edits." if common.is_unsaved() else ""))
    cols = st.columns([3, 1])
    reason = cols[0].text_input("Reason for this save", key="su_reason", placeholder="e.g. entered fish morphometrics",
                                disabled=frozen)
    if cols[1].button("Save to lab book", key="su_save", type="primary", disabled=frozen):
        if session is None:
            st.error(f"Not saved: {len(problems)} problem(s) remain (listed under the grids). Nothing was written.")
        elif common.persist(book, edit.data, reason=reason.strip() or "edited on the Set-up page"):
            common.flash(f"Saved as version {st.session_state.get('app_version')}.")
            st.rerun()

if session is not None:
    with st.expander("Planning values (from the set-up alone)"):
        plan = common.analysis_for(book, session.model_copy(update={"raw_files": []}))
        if plan is not None:
            st.dataframe(plan.fish, hide_index=True, width="stretch")
            if not plan.steps.empty:
                cols = [c for c in ["fish_id", "step", "set_speed_cm_s", "corrected_speed_cm_s", "speed_bl_s", "reynolds",
                                    "flow_regime", "drag_mn"] if c in plan.steps]
                st.dataframe(plan.steps[cols], hide_index=True, width="stretch")
            if not plan.flags.empty:
                st.dataframe(plan.flags[["severity", "where", "message", "advice"]], hide_index=True, width="stretch")

common.explain(
    "How the entries are checked",
    "Each grid's limits come from the session model; every value is checked again by the model "
    "before anything is saved (a grid's limits in the browser are a convenience, not a guarantee). "
    "Cross-checks: a rectangular section needs width and height, a circular one its diameter; a fish "
    "must be smaller than the section and its volume (mass at 1 kg/L) smaller than the respirometer; "
    "a step protocol needs steps; a ramp its rate; an endurance swim its set speed and time limit; a "
    "schedule its flush and measure durations; blanks and events must name a chamber or fish that exists. "
    "Planning values use the solid-blocking correction and hydrodynamics below.",
    ["swimlab.flume.solid_blocking", "swimlab.flume.blocking_ratio", "swimlab.hydrodynamics.reynolds_number"],
)
