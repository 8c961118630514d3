"""Oxygen trace: import the logger file, confirm its columns, look at the phases, exclude a phase."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app_pages import common
from swimlab import plots, ui_forms
from swimlab.constants import SECONDS_PER_HOUR
from swimlab.errors import InputError
from swimlab.io.checksum import sha256_hex

common.page_header(
    "Oxygen trace",
    "Import the oxygen logger's export, confirm which column is which, then check every measure "
    "phase's fitted line and exclude a phase with a reason if it must not count.",
)
book = common.labbook()
data = common.require_session()
common.session_banner()
settings = common.effective_settings(book, data)
common.care_notice(settings, where="watching the trace")
session, problems = common.validated(data)


@st.cache_data(show_spinner=False, max_entries=8)
def _sniff(raw: bytes, name: str):
    from swimlab.io import logger

    sniffed = logger.sniff(raw, name=name)
    guess = logger.guess_mapping(raw, name=name)
    return sniffed, guess.to_dict(), logger.header_fingerprint(sniffed.columns)


@st.cache_data(show_spinner=False, max_entries=4)
def _read(raw: bytes, name: str, mapping: dict):
    from swimlab.io import logger

    return logger.read_logger(raw, name=name, mapping=logger.ColumnMapping.from_dict(mapping))


def _oxygen_units() -> list[str]:
    try:
        from swimlab import oxygen

        units = getattr(oxygen, "UNITS", None) or getattr(oxygen, "OXYGEN_UNITS", None)
        if units:
            return [str(u) for u in units]
    except ImportError:
        pass
    return ["% air saturation", "mg/L", "µmol/L", "kPa"]


# --- 1. the logger file ---------------------------------------------------------------------
st.subheader("Logger file")
attached = [ref for ref in (data.get("raw_files") or []) if ref.get("role", "trial") == "trial"]
if attached:
    ref = attached[0]
    st.markdown(f"Attached: **{ref.get('name')}** (SHA-256 `{ref.get('sha256', '')[:12]}…`). "
                "Upload another file below to replace it; a stored file is never changed.")
pending = st.session_state.get("tr_upload")
attached_shas = {ref.get("sha256") for ref in attached}
fresh = pending is not None and sha256_hex(pending.getvalue()) not in attached_shas
importer = st.expander("Import a logger file" if not attached else "Replace the logger file or change its mapping",
                       expanded=not attached or fresh)
with importer:
    upload = st.file_uploader("Oxygen logger export (text: CSV, TSV or similar)", key="tr_upload")
if upload is not None:
    with importer:
        raw = upload.getvalue()
        sha = sha256_hex(raw)
        try:
            with st.spinner("Reading the file's layout…"):
                sniffed, guessed, fingerprint = _sniff(raw, upload.name)
        except ImportError as exc:
            st.error(f"Logger files cannot be read in this installation: {exc}")
            st.stop()
        except (InputError, ValueError, UnicodeError) as exc:
            st.error(f"The file {upload.name!r} could not be read: {exc}")
            st.stop()
        remembered = None
        try:
            remembered = book.recall_mapping(fingerprint)
        except (InputError, ValueError):
            remembered = None
        base = dict(remembered or guessed)
        if remembered:
            st.success("These columns were seen before: the mapping saved for them is used. Check it below.")
        else:
            st.info("The mapping below is a guess from the column names. Check it before attaching the file.")
        marks = {",": "comma", ";": "semicolon", "\t": "tab", " ": "space", ".": "point", "|": "bar"}
        st.caption(
            f"Read as: encoding {sniffed.encoding}; columns separated by {marks.get(sniffed.delimiter, repr(sniffed.delimiter))}; "
            f"decimal {marks.get(sniffed.decimal, repr(sniffed.decimal))}; column names on line {int(sniffed.header_line) + 1}."
        )
        preview = sniffed.preview if isinstance(sniffed.preview, pd.DataFrame) else pd.DataFrame(sniffed.preview)
        st.markdown("**First rows of the file**")
        st.dataframe(preview.head(8), hide_index=True, width="stretch")

        cols = st.columns([3, 1])
        with cols[0]:
            st.markdown("**Column mapping** — which logger column holds what")
            edited = st.data_editor(
                ui_forms.mapping_frame(base, sniffed.columns), key=f"tr_map_{sha[:12]}", hide_index=True,
                num_rows="dynamic", width="stretch",
                column_config={
                    "Role": st.column_config.SelectboxColumn("Role", options=list(ui_forms.MAPPING_ROLES), required=True),
                    "Chamber": st.column_config.TextColumn("Chamber", help="Oxygen channel (A, B, …) for oxygen and temperature columns"),
                    "Logger column": st.column_config.SelectboxColumn("Logger column", options=[str(c) for c in sniffed.columns], required=True),
                    "In file": st.column_config.CheckboxColumn("In file", disabled=True),
                },
            )
        with cols[1]:
            units = _oxygen_units()
            current_unit = base.get("oxygen_unit") or units[0]
            unit = st.selectbox("Oxygen unit in the file", units, key=f"tr_unit_{sha[:12]}",
                                index=units.index(current_unit) if current_unit in units else 0)
        mapping, mapping_problems = ui_forms.mapping_from_frame(edited.drop(columns=["In file"], errors="ignore"),
                                                                {**base, "oxygen_unit": unit})
        for problem in mapping_problems:
            st.error(f"Column mapping, {problem}")
        if not mapping_problems:
            try:
                with st.spinner("Reading every line of the file…"):
                    logged = _read(raw, upload.name, mapping)
            except (InputError, ValueError) as exc:
                logged = None
                st.error(f"The file {upload.name!r} could not be read with this mapping: {exc}")
            if logged is not None:
                # time_s starts at 0 and increases (a trace holds at least two readings)
                duration_h = float(logged.time_s[-1]) / SECONDS_PER_HOUR
                st.markdown(
                    f"{len(logged.time_s):,} readings over {duration_h:.2f} h; oxygen channels "
                    f"{', '.join(sorted(logged.oxygen))} in {logged.oxygen_unit}; "
                    f"{len(logged.glitches)} glitch(es) found and handled."
                )
                if len(logged.glitches):
                    with st.expander("Import report (glitches)"):
                        st.dataframe(logged.glitches, hide_index=True, width="stretch")
                chambers = {f.get("chamber") for f in data.get("fish") or []}
                missing = sorted(c for c in chambers if c and c not in logged.oxygen)
                if missing:
                    st.error(f"Fish chamber(s) {missing} have no oxygen column in this mapping; "
                             f"the mapped chambers are {sorted(logged.oxygen)}.")
                if st.button("Attach this file to the session", key="tr_attach", type="primary", disabled=bool(missing)):
                    if session is None:
                        st.error(f"Not attached: the set-up has {len(problems)} problem(s); fix them on the Set-up page first.")
                    else:
                        stored_sha = book.add_raw_file(raw, upload.name)
                        try:
                            book.remember_mapping(fingerprint, mapping, who=common.user_name() or session.operator or "unnamed")
                        except (InputError, ValueError) as exc:
                            st.warning(f"The mapping was not remembered: {exc}")
                        new = ui_forms.attach_raw_file(data, stored_sha, upload.name, mapping)
                        if common.persist(book, new, reason=f"attached logger file {upload.name}", raw_files={stored_sha: raw}):
                            common.flash(f"Attached {upload.name!r}.")
                            st.rerun()

# --- 2. the trace ---------------------------------------------------------------------------
if session is None:
    st.warning(f"The set-up has {len(problems)} problem(s); the trace is analysed once they are fixed on the Set-up page.")
    st.stop()
if not session.trial_files():
    st.info("No logger file is attached yet.")
    st.stop()

analysis = common.analysis_for(book, session)
if analysis is None or not analysis.traces:
    st.stop()

logged = next(iter(analysis.traces.values()))
measure = analysis.measure
floor = common.oxygen_floor_mg_l(session, settings)

st.subheader("Oxygen and phases")
options = ui_forms.exclusion_options(measure)
focus = st.session_state.pop("tr_focus", None)
if focus is not None and tuple(focus) in options:
    st.session_state["tr_phase"] = tuple(focus)
highlight = st.session_state.get("tr_phase")

fig = plots.trace_figure(logged.time_s, analysis.concentration, unit="mg/L", phases=analysis.phases,
                         measure=measure, floor=floor, highlight=highlight,
                         title=f"Oxygen – {session.title}")
event = common.show_figure(fig, key="tr_chart", name=f"oxygen-{session.session_id}",
                           on_select="rerun", selection_mode=("points", "box"))
picked = None
try:
    for point in (event.selection.get("points") or []) if event is not None else []:
        picked = plots.phase_of_point(point.get("customdata"), list(analysis.concentration))
        if picked is not None:
            break
except (AttributeError, TypeError, ValueError):
    picked = None
if picked is not None and picked in options and picked != st.session_state.get("tr_last_pick"):
    st.session_state["tr_last_pick"] = picked
    st.session_state["tr_phase"] = picked
    st.rerun()
st.caption("Shaded: flush (blue), wait (grey), measure (yellow). Solid lines: fitted slopes used; dotted: not used. "
           "Hover a fitted line for its R² and MO2; click a point of one (or draw a box) to pick that phase below.")

if measure is None or measure.empty:
    st.info("No measure phases were found in this trace.")
    st.stop()

st.subheader("Measure phases")
show = [c for c in common.MEASURE_COLUMNS if c in measure]
st.dataframe(
    measure[show].rename(columns=common.MEASURE_COLUMNS), hide_index=True, placeholder="—", width="stretch", height=260,
    column_config={
        "Start [s]": st.column_config.NumberColumn(format="%.0f"),
        "End [s]": st.column_config.NumberColumn(format="%.0f"),
        "R²": st.column_config.NumberColumn(format="%.4f"),
        "Relative SE [-]": st.column_config.NumberColumn(format="%.3f"),
        "MO2 [mg O2/kg/h]": st.column_config.NumberColumn(format="%.1f"),
        "Step": st.column_config.NumberColumn(help="0: before the first step; −1: after fatigue or the last step"),
    },
)

st.subheader("Exclude a phase")
described = {}
for row in measure.itertuples(index=False):
    described[(str(row.channel), int(row.cycle))] = (
        f"chamber {row.channel}, cycle {int(row.cycle)}"
        + (f", step {int(row.step)}" if hasattr(row, "step") and pd.notna(row.step) else "")
        + (f" – R² {row.r2:.3f}" if pd.notna(row.r2) else "")
    )
if st.session_state.get("tr_phase") not in options:
    st.session_state.pop("tr_phase", None)
cols = st.columns([2, 3, 1])
phase = cols[0].selectbox("Phase", options, format_func=lambda p: described.get(p, str(p)), key="tr_phase",
                          index=None, placeholder="choose a phase")
reason = cols[1].text_input("Reason (kept in the record)", key="tr_reason",
                            placeholder="e.g. fish struggling against the grid, bubbles on the sensor")
if cols[2].button("Exclude", key="tr_exclude", disabled=phase is None):
    if len(reason.strip()) < 3:
        st.error("Reason: give a reason of at least 3 characters; it is kept with the exclusion.")
    else:
        new = ui_forms.add_exclusion(data, phase[0], phase[1], reason, by=common.user_name())
        if common.persist(book, new, reason=f"excluded chamber {phase[0]} cycle {phase[1]}: {reason.strip()}"):
            common.flash(f"Excluded chamber {phase[0]}, cycle {phase[1]}.")
            st.rerun()

exclusions = data.get("exclusions") or []
if exclusions:
    st.markdown("**Excluded phases**")
    shown = pd.DataFrame(exclusions).rename(columns={"channel": "Chamber", "cycle": "Cycle", "reason": "Reason",
                                                      "by": "By", "at": "When"})
    if "When" in shown:
        shown["When"] = shown["When"].map(lambda v: ui_forms.when_text(v) if v else "")
    st.dataframe(shown, hide_index=True, width="stretch")
    pairs = [(str(e["channel"]), int(e["cycle"])) for e in exclusions]
    cols = st.columns([3, 1])
    back = cols[0].selectbox("Include a phase again", pairs, format_func=lambda p: f"chamber {p[0]}, cycle {p[1]}",
                             key="tr_include_pick", index=None, placeholder="choose an excluded phase")
    if cols[1].button("Include again", key="tr_include", disabled=back is None):
        new = ui_forms.remove_exclusion(data, back[0], back[1])
        if common.persist(book, new, reason=f"included chamber {back[0]} cycle {back[1]} again"):
            st.rerun()

common.explain(
    "How the phases and slopes are computed",
    "Readings are converted to mg/L with their own temperature. Phases come from the pump signal, "
    "the cycle schedule or the trace's shape (Set-up › Cycle timing). Each measure phase's slope is a "
    "least-squares straight line, accepted on its R², relative standard error and scatter against the "
    "sensor's noise (lab settings). MO2 is the oxygen decline's slope, less the background slope, times "
    "the water volume (respirometer less fish) per kilogram of fish. The plot is drawn from at most "
    f"{plots.DEFAULT_MAX_POINTS} points per chamber (MinMax-LTTB downsampling); every reading is used for "
    "the numbers.",
    ["swimlab.trace.fit_slopes", "swimlab.uptake.mo2", "swimlab.trace.concentration_from_trace"],
)
