"""Protocols: the fields each protocol needs, tail-beat records, and each protocol's results.

Ramp, fixed-speed endurance, repeat swim, post-exercise recovery, gait and kinematics. Every
result is shown under its protocol's name (a ramp Umax never where a step Ucrit is expected).
State keys start with ``pr_``.
"""

from __future__ import annotations

import copy
import json

import streamlit as st

from app_pages import common
from swimlab import plots, ui_forms
from swimlab.constants import CM_PER_M
from swimlab.protocol_analysis import (
    PART_LABELS,
    endurance_summary,
    gait_curve_sentences,
    gait_curve_table,
    repeat_pairs,
)
from swimlab.session import PROTOCOL_LABELS, RECOVERY_BASELINES, Session

common.page_header(
    "Protocols",
    "Ramp, endurance, repeat swims, post-exercise recovery, gait and tail beats: the fields each "
    "protocol needs, and its results under its own name.",
)
book = common.labbook()
data = common.require_session()
common.session_banner()
settings = common.effective_settings(book, data)
common.care_notice(settings, where="running a protocol trial")

frozen = st.session_state.get("app_status") == "approved"
if frozen:
    st.info("This session is approved and frozen. A reviewer can reopen it on the Review page.")

# Grids keep their own epoch: it moves on when another page rebuilt the session (opened, saved
# elsewhere), and this page moves the shared generation on when it changes the session, so that
# the Set-up grids are rebuilt from what was entered here.
gen = int(st.session_state.get("app_gen", 0))
if st.session_state.get("pr_seen_gen") != gen:
    st.session_state["pr_epoch"] = int(st.session_state.get("pr_epoch", 0)) + 1
    st.session_state["pr_seen_gen"] = gen
epoch = st.session_state["pr_epoch"]

ptype = (data.get("protocol") or {}).get("type") or "step_ucrit"
st.subheader(f"Protocol: {PROTOCOL_LABELS.get(ptype, ptype)}")
st.caption("The protocol type is chosen on the Set-up page; here are the fields this type needs.")


def _config(section, columns) -> dict:
    config = {}
    for column in columns:
        limits = ui_forms.column_limits(section, column)
        if column.kind in ("number", "integer"):
            config[column.label] = st.column_config.NumberColumn(
                column.label, help=column.help or None, min_value=limits.min_value, max_value=limits.max_value,
                step=1 if column.kind == "integer" else None, format="%d" if column.kind == "integer" else None)
        elif column.kind == "choice":
            config[column.label] = st.column_config.SelectboxColumn(column.label, help=column.help or None,
                                                                    options=list(column.options))
        else:
            config[column.label] = st.column_config.TextColumn(column.label, help=column.help or None)
    return config


def _grid(name: str, columns, *, many: bool):
    section = ui_forms.SECTIONS[name]
    key, base_key = f"pr_{name}_{epoch}", f"pr_base_{name}_{epoch}"
    if key not in st.session_state or base_key not in st.session_state:
        st.session_state[base_key] = ui_forms.grid_frame(section, data, columns)
    return st.data_editor(st.session_state[base_key], key=key, hide_index=True, width="stretch",
                          num_rows="dynamic" if many else "fixed", column_config=_config(section, columns),
                          disabled=frozen, placeholder="").reset_index(drop=True)


new = copy.deepcopy(data)
protocol = dict(new.get("protocol") or {})

# --- protocol fields (one-row grid; the first swim is picked from the lab book below) --------
section = ui_forms.SECTIONS["protocol"]
columns = [c for c in ui_forms.visible_columns(section, ptype) if c.field != "first_swim_session_id"]
frame = _grid("protocol", columns, many=False)
records, _ = ui_forms.records_from_grid(section, frame, columns)
for c in columns:
    protocol.pop(c.field, None)
protocol.update(records[0] if records else {})

if ptype == "recovery":
    exhaustion = st.number_input(
        "Exhaustion at [s]", min_value=0.0, value=protocol.get("fatigue_time_s"), key=f"pr_exhaustion_{epoch}",
        help="When the exercise ended with the fish exhausted, on the trace clock. The recovery series is the "
             "measure phases after it; the exercise began at 'First step starts at'.", disabled=frozen)
    protocol["fatigue_time_s"] = exhaustion
    baseline = protocol.get("recovery_baseline")
    st.caption("Recovery baseline: " + (f"**{baseline}** — {RECOVERY_BASELINES[baseline]}." if baseline in
                                        RECOVERY_BASELINES else "not chosen yet; EPOC needs it."))

if ptype == "repeat_ucrit":
    fish_ids = {f.get("fish_id") for f in new.get("fish") or [] if isinstance(f, dict)}
    table = common.session_table(book)
    current = protocol.get("first_swim_session_id") or ""
    candidates = [str(r.session_id) for r in table.itertuples(index=False)
                  if str(r.session_id) != str(new.get("session_id"))
                  and fish_ids & {x.strip() for x in str(r.fish or "").split(",")}]
    options = [""] + sorted(set(candidates) | ({current} if current else set()))
    titles = dict(zip(table["session_id"].astype(str), table["title"], strict=False))
    first = st.selectbox(
        "First swim of this fish", options, index=options.index(current), key=f"pr_first_{epoch}",
        format_func=lambda sid: "(not chosen)" if not sid else f"{sid} — {titles.get(sid, 'not in the lab book')}",
        help="Sessions in the lab book that hold a fish of this session. The recovery ratio compares the two swims "
             "of one fish.", disabled=frozen)
    protocol["first_swim_session_id"] = first or None

conditions = dict(new.get("conditions") or {})
treatment = st.text_input("Treatment or group", value=conditions.get("treatment", ""), key=f"pr_treatment_{epoch}",
                          help="For comparing sessions, e.g. the recovery ratios of control and exposed fish.",
                          disabled=frozen)
conditions["treatment"] = treatment.strip()
new["protocol"], new["conditions"] = protocol, conditions

# --- tail-beat records -------------------------------------------------------------------------
st.subheader("Tail beats")
st.caption("One row per count: the speed step, the beats counted, and the counting window in seconds — or the "
           "video frames the beats spanned and the frame rate. Amplitude is the tail tip's peak-to-peak excursion.")
kin_section = ui_forms.SECTIONS.get("kinematics")
edit_rows: dict = {}
if kin_section is not None:
    kin_frame = _grid("kinematics", list(kin_section.columns), many=True)
    edit = ui_forms.session_from_grids(new, {"kinematics": kin_frame}, ptype)
    new, edit_rows = edit.data, edit.rows

if not frozen and json.dumps(new, sort_keys=True, default=str) != json.dumps(data, sort_keys=True, default=str):
    st.session_state["app_work"] = new
    st.session_state["app_gen"] = gen + 1  # the Set-up grids are rebuilt from these entries
    st.session_state["pr_seen_gen"] = gen + 1
    data = new

session, problems = common.validated(data)
mine = [loc for loc in ui_forms.locate_problems(problems, edit_rows)
        if loc.field.startswith(("protocol", "kinematics", "conditions"))]
if mine:
    st.error("\n".join(f"- {loc.describe()}" for loc in mine))
elif problems:
    st.warning(f"The set-up has {len(problems)} other problem(s); fix them on the Set-up page.")
if session is not None and common.is_unsaved() and not frozen:
    if st.button("Save to lab book", key="pr_save", type="primary"):
        if common.persist(book, data, reason="protocol fields or tail beats edited on the Protocols page"):
            common.flash(f"Saved as version {st.session_state.get('app_version')}.")
            st.rerun()
if session is None:
    st.stop()

# --- analysis (a repeat swim is analysed with its first swim) ---------------------------------


@st.cache_data(show_spinner=False, max_entries=32)
def _analysis(session_json: str, shas: tuple[str, ...], url: str | None, settings_json: str,
              first_json: str | None = None, first_shas: tuple[str, ...] = ()):
    from swimlab.analysis import analyse

    lab = common._open_labbook(url)
    lab_settings = json.loads(settings_json)
    first = None
    if first_json is not None:
        first_session = Session.model_validate_json(first_json)
        first = analyse(first_session, {sha: lab.get_raw_file(sha) for sha in first_shas}, lab_settings=lab_settings)
    return analyse(Session.model_validate_json(session_json), {sha: lab.get_raw_file(sha) for sha in shas},
                   lab_settings=lab_settings, first_swim=first)


def _analyse(s: Session, first: Session | None = None):
    settings_json = json.dumps(common.lab_settings_dict(book), sort_keys=True, default=str)
    shas = tuple(sorted(ref.sha256 for ref in s.raw_files))
    first_json = None if first is None else first.model_dump_json()
    first_shas = () if first is None else tuple(sorted(ref.sha256 for ref in first.raw_files))
    return _analysis(s.model_dump_json(), shas, common.database_url(), settings_json, first_json, first_shas)


def _stored(session_id: str) -> Session | None:
    try:
        return book.get_session(session_id).session
    except Exception:  # noqa: BLE001 - not in the lab book: the page says so
        return None


first_session = None
if session.protocol.type == "repeat_ucrit" and session.protocol.first_swim_session_id:
    first_session = _stored(session.protocol.first_swim_session_id)
    if first_session is None:
        st.warning(f"The first swim, session {session.protocol.first_swim_session_id}, is not in the lab book: "
                   "the recovery ratio cannot be computed.")
try:
    with st.spinner("Analysing the session…"):
        analysis = _analyse(session, first_session)
except (ValueError, LookupError, KeyError) as exc:
    st.error(f"The analysis stopped: {exc}")
    st.stop()
pr = analysis.protocol

st.header("Results by protocol")
fish_ids = session.unit_ids() + [f.fish_id for f in session.fish if session.group_of(f.fish_id) is not None]
fish_id = (st.selectbox("Fish or group", fish_ids, key="pr_fish",
                        format_func=lambda u: f"group {u} (fish swum together)"
                        if any(g.group_id == u for g in session.groups) else u)
           if len(fish_ids) > 1 else fish_ids[0])
common.group_warning(session, fish_id)
if not pr.parts and not pr.problems:
    st.info("This session has no result beyond the step test (no ramp, endurance, repeat swim or recovery, no gait "
            "events and no tail beats). Its step-test results are on the Results page.")

FIGURES = {
    "ramp": (plots.ramp_mo2_figure, "ramp-mo2"),
    "recovery": (plots.epoc_figure, "epoc"),
    "gait": (plots.gait_figure, "gait"),
    "kinematics": (plots.frequency_speed_figure, "tail-beat-frequency"),
}
TABLES = {"ramp": "ramp_phases", "endurance": "endurance", "recovery": "recovery_curve", "gait": "gait_steps",
          "kinematics": "kinematics", "group": "group_steps"}
results = pr.results
own = results[results["fish_id"].astype(str) == str(fish_id)] if not results.empty else results
for part in pr.parts:
    rows = own[own["part"] == part]
    if rows.empty:
        continue
    st.subheader(PART_LABELS[part])
    st.dataframe(ui_forms.results_display(rows), hide_index=True, placeholder="—", width="stretch")
    if part == "repeat" and str(fish_id) in pr.repeat and pr.repeat[str(fish_id)].ci_low is not None:
        rr_shown = pr.repeat[str(fish_id)]
        calib = ("one speed calibration shared by both swims, which cancels in the ratio"
                 if "cancels" in rr_shown.uncertainty else "two separate speed calibrations")
        st.caption(f"The 95 % interval of this one pair covers measurement uncertainty only: the fatigue times known "
                   f"within {analysis.settings.fatigue_time_uncertainty_s:g} s (a lab setting, taken as uniform) and "
                   f"{calib} (Fieller 1954). How much a fish's Ucrit varies between swims is not in it; compare with "
                   "the spread across pairs below.")
    if part in FIGURES:
        builder, name = FIGURES[part]
        fig = builder(pr, fish_id)
        if fig is not None:
            common.show_figure(fig, key=f"pr_fig_{part}", name=f"{name}-{fish_id}")
    table = pr.tables.get(TABLES.get(part, ""))
    if table is not None and not table.empty:
        with st.expander(f"{PART_LABELS[part]}: table"):
            st.dataframe(table[table["fish_id"].astype(str) == str(fish_id)], hide_index=True, placeholder="—", width="stretch")
for problem in pr.problems:
    if not problem.fish_id or str(problem.fish_id) == str(fish_id):
        st.error(f"Not computed — {problem}")

# --- across sessions ---------------------------------------------------------------------------


def _same_study(kind: tuple[str, ...]) -> list[tuple[Session, object]]:
    """(session, analysis) of every lab-book session of these protocol types in this session's study."""
    items = []
    for row in common.session_table(book).itertuples(index=False):
        other = session if str(row.session_id) == session.session_id else _stored(str(row.session_id))
        if other is None or other.protocol.type not in kind or other.study != session.study:
            continue
        first = None
        if other.protocol.type == "repeat_ucrit" and other.protocol.first_swim_session_id:
            first = _stored(other.protocol.first_swim_session_id)
        try:
            items.append((other, _analyse(other, first)))
        except (ValueError, LookupError, KeyError):
            continue
    return items


if session.protocol.type == "endurance":
    st.header("Endurance across fish")
    st.caption(f"Every endurance session of the study “{session.study or '(no study)'}” in the lab book.")
    summary = endurance_summary(_same_study(("endurance",)))
    if summary is not None:
        fish = summary.fish
        st.markdown(f"**{len(fish)}** fish, **{int((~fish['fatigued']).sum())}** still swimming at the "
                    f"{summary.time_limit_s / 60:g} min limit (censored).")
        cols = st.columns(2)
        mss = summary.max_sustained.speed_m_s
        cols[0].metric("Endurance: maximum sustained speed (set)", "–" if mss is None else f"{mss * CM_PER_M:.1f} cm/s",
                       help="Highest set speed at which no fish fatigued within the limit.")
        half = summary.half_fatigued
        cols[1].metric("Endurance: speed at which half fatigue", "–" if half is None or half.speed_m_s is None
                       else f"{half.speed_m_s * CM_PER_M:.1f} cm/s",
                       help="From the censored fatigue curve (Tobin 1958).")
        left, right = st.columns(2)
        with left:
            common.show_figure(plots.kaplan_meier_figure(summary), key="pr_fig_km", name="endurance-kaplan-meier")
        if summary.fatigue_curve is not None:
            with right:
                common.show_figure(plots.fatigue_curve_figure(summary), key="pr_fig_fatigue",
                                   name="endurance-fatigue-curve")
        for line in summary.problems:
            st.info(line)
        if summary.by_gait is not None:
            st.subheader("Endurance: fatigue curves per gait")
            st.caption("Each gait the trials ended in (the last gait change with a gait, at or before fatigue or the "
                       "limit) gets its own censored fatigue curve when it has enough trials: steady and burst-assisted "
                       "swimming are separate domains (Brett 1964; Beamish 1978).")
            st.dataframe(gait_curve_table(summary), hide_index=True, placeholder="—", width="stretch", column_config={
                "label": st.column_config.TextColumn("Gait at the end"),
                "n_fish": st.column_config.NumberColumn("Fish [-]", format="%d"),
                "n_fatigued": st.column_config.NumberColumn("Fatigued [-]", format="%d"),
                "n_censored": st.column_config.NumberColumn("Censored [-]", format="%d"),
                "intercept_log10_s": st.column_config.NumberColumn("Intercept [log10 s]", format="%.3f"),
                "slope_log10_s_per_m_s": st.column_config.NumberColumn("Slope [log10 s per m/s]", format="%.2f"),
                "slope_se": st.column_config.NumberColumn("Slope SE [log10 s per m/s]", format="%.2f"),
                "sigma_log10_s": st.column_config.NumberColumn("Residual SD [log10 s]", format="%.3f"),
                "median_time_at_fastest_min": st.column_config.NumberColumn(
                    "Median endurance at the fastest speed [min]", format="%.1f"),
                "fitted": st.column_config.CheckboxColumn("Own curve"), "gait": None})
            for line in gait_curve_sentences(summary):
                st.markdown(f"- {line}.")
        with st.expander("Endurance: every fish"):
            st.dataframe(fish, hide_index=True, placeholder="—", width="stretch")

if session.protocol.type in ("repeat_ucrit", "step_ucrit"):
    paired = repeat_pairs(_same_study(("repeat_ucrit", "step_ucrit"))) if session.protocol.type == "repeat_ucrit" else None
    if paired is not None and not paired.pairs.empty:
        st.header("Repeat swims across fish")
        st.dataframe(paired.pairs, hide_index=True, placeholder="—", width="stretch")
        st.dataframe(paired.groups, hide_index=True, placeholder="—", width="stretch")
        if paired.comparison:
            c = paired.comparison
            st.markdown(f"Mean recovery ratio, {c['groups'][0]} − {c['groups'][1]}: **{c['difference']:.3f}** "
                        f"(Welch's t = {c['t']:.2f}, df = {c['df']:.1f}, p = {c['p']:.2g}).")

# --- downloads and sources -------------------------------------------------------------------
if not results.empty:
    st.download_button("Protocol results (CSV)", results.to_csv(index=False),
                       file_name=f"{session.session_id}-protocol-results.csv", mime="text/csv", key="pr_dl_results",
                       icon=":material/table:")

common.explain(
    "How these values are computed",
    "Ramp Umax = U₀ + a·t at fatigue (Farrell 2008), on set and blocking-corrected speed; it is not a step Ucrit. "
    "Endurance: time at the set speed to fatigue, or censored at the time limit; across fish, Kaplan–Meier per set "
    "speed and a censored (Tobin 1958) regression of log₁₀ time on speed, also one per gait the trials ended in, "
    "with a likelihood-ratio test (Wilks 1938) of one curve per gait against one pooled curve. Repeat swim: recovery ratio Ucrit₂ / Ucrit₁ "
    "(Jain, Birtwell & Farrell 1998), with a 95 % interval for the one pair by Fieller (1954) from a measurement "
    "model — each fatigue time known within the lab's span (uniform), moving Ucrit by ΔU/t_ii per second; a flume "
    "calibration shared by both swims cancels in the ratio — which is measurement uncertainty only, not the fish's "
    "swim-to-swim variation. Recovery: EPOC above the stated baseline, by trapezoids and from a fitted one- "
    "or two-phase exponential decay; times to 50 % and 95 % recovery. Gait: Up–c and burst onset from the event log "
    "(Drucker & Jensen 1996). Kinematics: frequency = beats / window, stride = U/f, St = f·A/U (Taylor, Nudds & "
    "Thomas 2003), and Bainbridge's (1958) U = ¼ L (3f − 4) for comparison.",
    ["swimlab.protocols.ramp.umax", "swimlab.protocols.endurance.kaplan_meier",
     "swimlab.protocols.endurance.fatigue_curve", "swimlab.protocols.endurance.fatigue_curves_by_gait",
     "swimlab.protocols.repeat.recovery_ratio",
     "swimlab.protocols.repeat.recovery_ratio_from_measurement", "swimlab.protocols.repeat.fieller_interval",
     "swimlab.protocols.recovery.epoc", "swimlab.protocols.gait.gait_summary",
     "swimlab.protocols.kinematics.bainbridge_speed_m_s", "swimlab.protocols.kinematics.strouhal_number"],
)
