"""Results: the step table, speed–MO2 and cost-of-transport curves, Ucrit, SMR, MMR, scope; downloads."""

from __future__ import annotations

import json

import pandas as pd
import streamlit as st

from app_pages import common
from swimlab import plots, ui_forms

common.page_header(
    "Results",
    "Speeds, MO2 and cost of transport per step; Ucrit, SMR, MMR and aerobic scope with their "
    "methods and intervals; tables and figures to download.",
)
book = common.labbook()
data = common.require_session()
common.session_banner()
session = common.require_valid(data)
analysis = common.analysis_for(book, session)
if analysis is None:
    st.stop()

fish_ids = session.unit_ids()  # fish, and groups of fish swum together
fish_id = (st.selectbox("Fish or group", fish_ids, key="rs_fish",
                        format_func=lambda u: f"group {u} (fish swum together)"
                        if any(g.group_id == u for g in session.groups) else u)
           if len(fish_ids) > 1 else fish_ids[0])
common.group_warning(session, fish_id)

welfare = analysis.flags[analysis.flags["welfare"].astype(bool)] if not analysis.flags.empty else analysis.flags
if len(welfare):
    st.error(f"{len(welfare)} welfare flag(s) on this session — see the Checks page.", icon=":material/pets:")
    st.page_link(common.PAGE_FILES["checks"], label="Go to Checks", icon=":material/rule:")

# --- headline values ------------------------------------------------------------------------
results = analysis.results
mine = results[results["fish_id"].astype(str) == str(fish_id)] if not results.empty else results
quantities = set(mine["quantity"]) if not mine.empty else set()
if session.protocol.type in ("step_ucrit", "repeat_ucrit") and "ucrit" not in quantities:
    st.info("No Ucrit: it needs the time the fish met the fatigue criterion (Set-up › Protocol › Fatigue at) "
            "within the last step swum. See Checks.")
if mine.empty:
    st.info("No derived values yet: they need accepted measure phases at several speeds.")
else:
    headline = [q for q in ("ucrit", "smr", "mmr", "aas", "uopt", "cotmin") if q in quantities]
    cols = st.columns(max(len(headline), 1))
    for col, q in zip(cols, headline, strict=False):
        row = mine[mine["quantity"] == q].iloc[0]
        shown = ui_forms.results_display(mine[mine["quantity"] == q]).iloc[0]
        interval = f"95 % interval {shown['95 % interval']}. " if shown["95 % interval"] else ""
        col.metric(shown["Quantity"], shown["Value"] or "–", help=f"{interval}{row['method']}.")
        col.caption(shown["Unit"])
    st.dataframe(ui_forms.results_display(mine), hide_index=True, placeholder="—", width="stretch")

# --- protocol results (ramp, endurance, repeat swim, recovery, gait, kinematics) -------------
protocol = getattr(analysis, "protocol", None)
if protocol is not None:
    from swimlab.protocol_analysis import PART_LABELS

    presults = protocol.results
    own_protocol = presults[presults["fish_id"].astype(str) == str(fish_id)] if not presults.empty else presults
    for part in protocol.parts:
        rows = own_protocol[own_protocol["part"] == part]
        if rows.empty:
            continue
        st.subheader(PART_LABELS.get(part, part))
        st.dataframe(ui_forms.results_display(rows), hide_index=True, placeholder="—", width="stretch")
    for name, table in (protocol.tables or {}).items():
        if table is not None and not table.empty:
            with st.expander(f"Table: {name.replace('_', ' ')}"):
                st.dataframe(table, hide_index=True, placeholder="—", width="stretch")
    for problem in protocol.problems:
        if not problem.fish_id or str(problem.fish_id) == str(fish_id):
            st.info(f"Not computed ({PART_LABELS.get(problem.part, problem.part)}): {problem.message}"
                    + (f" — field `{problem.field}`" if problem.field else ""))

# --- step table -----------------------------------------------------------------------------
st.subheader("Steps")
steps = analysis.steps
own = steps[steps["fish_id"].astype(str) == str(fish_id)] if not steps.empty else steps
STEP_COLUMNS = {
    "step": st.column_config.NumberColumn("Step", format="%d"),
    "set_speed_cm_s": st.column_config.NumberColumn("Set speed [cm/s]", format="%.1f"),
    "corrected_speed_cm_s": st.column_config.NumberColumn("Corrected speed [cm/s]", format="%.1f",
                                                          help="Set speed corrected for solid blocking"),
    "speed_bl_s": st.column_config.NumberColumn("Speed [BL/s]", format="%.2f"),
    "reynolds": st.column_config.NumberColumn("Re [-]", format="%.3g"),
    "flow_regime": st.column_config.TextColumn("Flow regime"),
    "drag_mn": st.column_config.NumberColumn("Drag [mN]", format="%.2f"),
    "drag_power_mw": st.column_config.NumberColumn("Drag power [mW]", format="%.3f"),
    "mo2_mg_kg_h": st.column_config.NumberColumn("MO2 [mg O2/kg/h]", format="%.1f"),
    "mo2_sd_mg_kg_h": st.column_config.NumberColumn("MO2 SD [mg O2/kg/h]", format="%.1f"),
    "n_phases": st.column_config.NumberColumn("Phases [-]", format="%d"),
    "n_fish": st.column_config.NumberColumn("Fish in the chamber [-]", format="%d"),
    "mo2_mg_h": st.column_config.NumberColumn("Chamber MO2 [mg O2/h]", format="%.2f",
                                              help="For a group trial: the group's MO2"),
    "mo2_per_fish_mg_h": st.column_config.NumberColumn("MO2 per fish [mg O2/h]", format="%.2f",
                                                       help="Chamber MO2 / fish in the chamber (per capita)"),
    "cot_gross_mg_kg_km": st.column_config.NumberColumn("Gross COT [mg O2/kg/km]", format="%.1f"),
    "cot_net_mg_kg_km": st.column_config.NumberColumn("Net COT [mg O2/kg/km]", format="%.1f"),
    "cot_gross_j_kg_m": st.column_config.NumberColumn("Gross COT [J/kg/m]", format="%.2f"),
}
shown = own[[c for c in STEP_COLUMNS if c in own]].copy()
drag_cols = [c for c in ("drag_mn", "drag_power_mw") if c in shown]
no_drag = bool(drag_cols) and not shown.empty and shown[drag_cols].isna().all().all()
if no_drag:
    shown = shown.drop(columns=drag_cols)
for col in shown.columns:  # numbers missing as None: a numeric column (shown as "—")
    if col != "flow_regime" and shown[col].dtype == object:
        shown[col] = pd.to_numeric(shown[col], errors="coerce")
st.dataframe(shown, hide_index=True, placeholder="—", width="stretch", column_config=STEP_COLUMNS)
if no_drag:
    st.caption("Drag and drag power are not computed here"
               + (" (several fish swam together in this chamber)." if "n_fish" in own and (own["n_fish"] > 1).any()
                  else "."))

# --- figures --------------------------------------------------------------------------------
fits = analysis.fits.get(fish_id) if isinstance(analysis.fits, dict) else None
fig_mo2 = plots.speed_mo2_figure(steps, fits, fish_id, measure=analysis.measure)
fig_cot = plots.cot_figure(steps, results, fish_id)
left, right = st.columns(2)
with left:
    common.show_figure(fig_mo2, key="rs_fig_mo2", name=f"speed-mo2-{fish_id}")
with right:
    common.show_figure(fig_cot, key="rs_fig_cot", name=f"cot-{fish_id}")
if fits is None:
    st.caption("No speed–MO2 fit for this fish (see Checks).")
else:
    st.caption(f"Chosen by AICc: {getattr(fits, 'best', None) or 'none'}. Bands: 95 % intervals of each fit. "
               "The camera button of a figure saves it as SVG.")

# --- downloads ------------------------------------------------------------------------------
st.subheader("Downloads")
sid = session.session_id
cols = st.columns(4)
cols[0].download_button("Step table (CSV)", steps.to_csv(index=False), file_name=f"{sid}-steps.csv", mime="text/csv",
                        key="rs_dl_steps", icon=":material/table:")
cols[1].download_button("Results (CSV)", results.to_csv(index=False), file_name=f"{sid}-results.csv", mime="text/csv",
                        key="rs_dl_results", icon=":material/table:")
cols[2].download_button("Measure phases (CSV)", analysis.measure.to_csv(index=False), file_name=f"{sid}-phases.csv",
                        mime="text/csv", key="rs_dl_phases", icon=":material/table:")
cols[3].download_button("Flags (CSV)", analysis.flags.to_csv(index=False), file_name=f"{sid}-flags.csv",
                        mime="text/csv", key="rs_dl_flags", icon=":material/table:")
cols = st.columns(4)
cols[0].download_button("Analysis (JSON)", lambda: json.dumps(analysis.to_json_dict(), indent=2, default=str),
                        file_name=f"{sid}-analysis.json", mime="application/json", key="rs_dl_json", icon=":material/data_object:")
cols[1].download_button("Speed–MO2 figure (HTML)", lambda: fig_mo2.to_html(include_plotlyjs=True, full_html=True),
                        file_name=f"{sid}-speed-mo2.html", mime="text/html", key="rs_dl_fig_mo2", icon=":material/image:")
cols[2].download_button("COT figure (HTML)", lambda: fig_cot.to_html(include_plotlyjs=True, full_html=True),
                        file_name=f"{sid}-cot.html", mime="text/html", key="rs_dl_fig_cot", icon=":material/image:")
st.caption("SVG: use the camera button at the top right of each figure.")

# --- submit ---------------------------------------------------------------------------------
st.subheader("Send for review")
status = st.session_state.get("app_status")
if status in ("draft", "returned"):
    if common.is_unsaved():
        st.warning("Save your edits on the Set-up page before sending the session for review.")
    note = st.text_input("Note for the reviewer (optional)", key="rs_submit_note")
    if st.button("Submit for review", key="rs_submit", type="primary", disabled=common.is_unsaved()):
        who = common.user_name() or session.operator
        if not who:
            st.error("Your name: type your name in the sidebar first; it goes in the audit trail.")
        else:
            try:
                book.submit(sid, who=who, comment=note)
                common.refresh_status(book)
                common.flash("Submitted for review.")
                st.rerun()
            except (ValueError, LookupError) as exc:
                st.error(f"Not submitted: {exc}")
else:
    st.caption(f"Status: {status or 'not yet in the lab book'}.")

common.explain(
    "How these values are computed",
    "Corrected speed: set speed from the flume's calibration, corrected for solid blocking (Bell & "
    "Terhune 1970). Ucrit: Brett (1964), from the last completed step and the time swum in the step of "
    "fatigue. Speed–MO2: exponential and power models fitted to per-phase MO2, chosen by AICc, with 95 % "
    "intervals. SMR: the fit extrapolated to zero speed, and from resting phases where there are enough "
    "(Chabot et al. 2016). MMR: the steepest window of the measure phases. Aerobic scope: MMR − SMR "
    "(absolute) and MMR / SMR (factorial). Cost of transport: MO2 / speed (gross) and (MO2 − SMR) / speed "
    "(net); Uopt is the speed of the fit's lowest gross COT.",
    ["swimlab.flume.corrected_speed", "swimlab.performance.ucrit", "swimlab.performance.fit_speed_metabolism",
     "swimlab.performance.smr_from_fit", "swimlab.performance.cost_of_transport", "swimlab.performance.optimal_speed"],
)
