"""Review: submitted sessions with their flags and plots; approve or return; the audit trail."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app_pages import common
from swimlab import plots, ui_forms
from swimlab.errors import ConflictError, InputError, PermissionDeniedError

common.page_header(
    "Review",
    "A second person looks at a submitted session's flags and plots, then approves it (which "
    "freezes it) or returns it with a comment.",
)
book = common.labbook()


submitted = common.session_table(book, status="submitted")
everything = common.session_table(book)
labels = {r.session_id: f"{r.title} · {r.fish} · {r.operator or 'no operator'}" for r in everything.itertuples(index=False)}

st.subheader("Waiting for review")
if submitted.empty:
    st.info("No session is waiting for review.")
    chosen = None
else:
    chosen = st.selectbox("Session", list(submitted["session_id"]), format_func=lambda s: labels.get(s, s),
                          key="rv_session")

if chosen is not None:
    stored = book.get_session(chosen)
    session = stored.session
    st.markdown(f"**{session.title}** — operator *{session.operator or 'not recorded'}*, "
                f"trial date {session.trial_date or 'not recorded'}, version {stored.version}.")
    analysis = common.analysis_for(book, session)
    if analysis is not None:
        left, right = st.columns(2)
        with left:
            st.markdown("**Flags**")
            flags = analysis.flags
            if flags.empty:
                st.success("No rule flagged this session.")
            else:
                nwel = int(flags["welfare"].astype(bool).sum())
                if nwel:
                    st.error(f"{nwel} welfare flag(s).", icon=":material/pets:")
                st.dataframe(flags[["severity", "where", "message", "advice"]].rename(
                    columns={"severity": "Severity", "where": "Where", "message": "Found", "advice": "What to do"}),
                    hide_index=True, width="stretch")
        with right:
            fish_id = session.fish[0].fish_id
            fits = analysis.fits.get(fish_id) if isinstance(analysis.fits, dict) else None
            common.show_figure(plots.speed_mo2_figure(analysis.steps, fits, fish_id, measure=analysis.measure),
                               key="rv_fig_mo2", name=f"speed-mo2-{fish_id}")
        if analysis.traces:
            logged = next(iter(analysis.traces.values()))
            floor = common.oxygen_floor_mg_l(session, common.effective_settings(book, session.to_json_dict()))
            common.show_figure(plots.trace_figure(logged.time_s, analysis.concentration, unit="mg/L",
                                                  phases=analysis.phases, measure=analysis.measure, floor=floor,
                                                  title=f"Oxygen – {session.title}"),
                               key="rv_fig_trace", name=f"oxygen-{session.session_id}")
        if not analysis.results.empty:
            shown = ui_forms.results_display(analysis.results)
            shown.insert(0, "Fish", analysis.results["fish_id"].tolist())
            st.dataframe(shown, hide_index=True, width="stretch")

    st.subheader("Decision")
    cols = st.columns([1, 2])
    me = common.signed_in()
    if me is not None:  # lab-server mode: the reviewer is whoever signed in
        reviewer = me.display_name
        cols[0].text_input("Reviewer", value=str(me), disabled=True, key="rv_name_signed_in")
    else:
        reviewer = cols[0].text_input("Reviewer's name", key="rv_name",
                                      help="Must differ from the operator's and the submitter's (four eyes).")
    comment = cols[1].text_area("Comment", key="rv_comment", height=80,
                                placeholder="Required when returning: say what to change.")
    same = reviewer.strip() and reviewer.strip().casefold() == (session.operator or "").strip().casefold()
    if same:
        st.error("Reviewer's name: the reviewer must be a different person from the operator.")
    cols = st.columns(2)
    approve = cols[0].button("Approve", key="rv_approve", type="primary", disabled=not reviewer.strip() or bool(same))
    give_back = cols[1].button("Return to the operator", key="rv_return", disabled=not reviewer.strip() or bool(same))
    if approve or give_back:
        try:
            if approve:
                book.approve(chosen, who=reviewer.strip(), comment=comment.strip(), version=stored.version)
                common.flash("Approved: the session is frozen.")
            else:
                if len(comment.strip()) < 3:
                    raise InputError("say what to change (at least 3 characters)", field="comment")
                book.return_session(chosen, who=reviewer.strip(), comment=comment.strip())
                common.flash("Returned to the operator with your comment.")
            if st.session_state.get("app_session_id") == chosen:
                common.refresh_status(book)
            st.rerun()
        except ConflictError as exc:
            st.error(f"Not done: the session changed while you reviewed it; look again. ({exc})")
        except (PermissionDeniedError, InputError) as exc:
            st.error(f"Not done: {exc}")

# --- reopen ---------------------------------------------------------------------------------
approved = everything[everything["status"] == "approved"] if not everything.empty else everything
if not approved.empty:
    with st.expander("Reopen an approved session"):
        pick = st.selectbox("Approved session", list(approved["session_id"]), format_func=lambda s: labels.get(s, s),
                            key="rv_reopen_id")
        why = st.text_input("Reason", key="rv_reopen_reason")
        me = common.signed_in()
        who = me.display_name if me is not None else st.text_input("Your name", key="rv_reopen_who")
        if st.button("Reopen", key="rv_reopen"):
            try:
                book.reopen(pick, who=who.strip(), reason=why.strip())
                common.flash("Reopened as a draft.")
                st.rerun()
            except (PermissionDeniedError, InputError) as exc:
                st.error(f"Not reopened: {exc}")

# --- audit trail ----------------------------------------------------------------------------
st.subheader("Audit trail")
ids = list(everything["session_id"]) if not everything.empty else []
default = ids.index(chosen) if chosen in ids else (ids.index(st.session_state["app_session_id"])
                                                   if st.session_state.get("app_session_id") in ids else 0)
trail_id = st.selectbox("Session", ids, format_func=lambda s: labels.get(s, s), key="rv_trail_id",
                        index=default if ids else None)
if trail_id:
    trail = book.audit_trail(trail_id)
    if trail.empty:
        st.caption("No entries.")
    for row in trail.iloc[::-1].itertuples(index=False):
        changes = row.changes or []
        fields = ", ".join(str(c.get("field")) for c in changes[:6]) + (" …" if len(changes) > 6 else "")
        line = f"**{ui_forms.when_text(row.at)}** — **{row.who}** · {row.action}"
        if row.version is not None and not pd.isna(row.version):
            line += f" · version {int(row.version)}"
        if row.reason:
            line += f"  \n> {row.reason}"
        st.markdown(line)
        if fields:
            st.caption(f"changed: {fields}")

common.explain(
    "What approval means",
    "Approval freezes the session: it can no longer be saved until a reviewer reopens it with a "
    "reason. The reviewer must be a different person from the operator and from whoever submitted it "
    "(four eyes). Every step is kept in the audit trail: who, when, what changed, and why. Approval "
    "records the scientific review only; it does not replace the animal-care committee's approval.",
)
