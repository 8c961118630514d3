"""Checks: every flag of the open session, welfare first, each with its reason, source and remedy."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app_pages import common
from swimlab.checks import RULES, SEVERITIES, catalogue

common.page_header(
    "Checks",
    "Every rule the session did not pass: where, why it matters, its source, and what to do. "
    "Welfare flags come first.",
)
book = common.labbook()
data = common.require_session()
common.session_banner()
session = common.require_valid(data)
analysis = common.analysis_for(book, session)
if analysis is None:
    st.stop()

flags = analysis.flags
SEVERITY_WORDS = {
    "invalid": ("Invalid — the value it concerns is not used", st.error),
    "warning": ("Warnings — used, but needs your judgement", st.warning),
    "info": ("For the record", st.info),
}


def _where(row: pd.Series) -> str:
    parts = [str(row["where"])] if row.get("where") else []
    if pd.notna(row.get("step")) and f"step {int(row['step'])}" not in " ".join(parts):
        parts.append(f"step {int(row['step'])}")
    return ", ".join(parts) or str(row.get("scope") or "session")


def _by_rule(part: pd.DataFrame) -> None:
    """One bordered block per rule: what it protects, its source, what to do, and where it failed."""
    for code, rows in part.groupby("code", sort=False):
        rule = RULES.get(code)
        with st.container(border=True):
            st.markdown(f"**{rule.title if rule else code}** · {len(rows)} flag(s) · `{code}`")
            if rule:
                st.markdown(f"*Why it matters:* {rule.protects}  \n*What to do:* {rule.advice}  \n"
                            f"*Source:* {rule.source}" + (f" · threshold: lab setting `{rule.setting}`" if rule.setting else ""))
            st.dataframe(
                pd.DataFrame({"Where": [_where(r) for _, r in rows.iterrows()], "Found": rows["message"].tolist()}),
                hide_index=True, width="stretch", height=min(38 + 35 * len(rows), 300),
            )


if flags is None or flags.empty:
    st.success("No rule flagged this session.")
else:
    welfare = flags[flags["welfare"].astype(bool)]
    counts = flags[~flags["welfare"].astype(bool)]["severity"].value_counts()  # welfare flags counted once
    cols = st.columns(4)
    cols[0].metric("Welfare", len(welfare))
    for col, sev in zip(cols[1:], SEVERITIES, strict=False):
        col.metric(sev.capitalize(), int(counts.get(sev, 0)))
    if not welfare.empty:
        st.subheader("Animal welfare")
        st.error(f"{len(welfare)} flag(s) concern the fish's welfare. Check them against the approved protocol.",
                 icon=":material/pets:")
        _by_rule(welfare)
    rest = flags[~flags["welfare"].astype(bool)]
    for sev in SEVERITIES:
        part = rest[rest["severity"] == sev]
        if part.empty:
            continue
        title, box = SEVERITY_WORDS[sev]
        st.subheader(f"{title} ({len(part)})")
        _by_rule(part)

    phase_flags = flags[flags["cycle"].notna() & flags["channel"].notna()]
    if not phase_flags.empty:
        st.subheader("Look at a flagged phase")
        pairs = sorted({(str(r.channel), int(r.cycle)) for r in phase_flags.itertuples(index=False)})
        cols = st.columns([3, 1])
        pick = cols[0].selectbox("Phase", pairs, format_func=lambda p: f"chamber {p[0]}, cycle {p[1]}", key="ck_phase")
        if cols[1].button("Show on the trace", key="ck_go"):
            st.session_state["tr_focus"] = pick
            st.switch_page(common.PAGE_FILES["trace"])
    step_flags = flags[flags["step"].notna()]
    if not step_flags.empty:
        st.caption("Flags about speed steps: see the step table on the Results page.")
        st.page_link(common.PAGE_FILES["results"], label="Go to Results", icon=":material/insights:")

with st.expander("The rule catalogue"):
    st.dataframe(catalogue(), hide_index=True, width="stretch")
    st.caption("Thresholds are lab settings (column 'setting'); 'common practice' marks a rule of thumb with no single source.")

common.explain(
    "How flags are raised",
    "Each stage of the analysis applies the rules of the catalogue with the lab's thresholds. "
    "*Invalid* means the value it concerns (a phase's MO2, a fit) is not used; *warning* means it "
    "is used but needs a person's judgement; *info* is for the record. Welfare rules come first.",
)
