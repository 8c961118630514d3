"""Care and cautions: the welfare limits of this lab and what to do when something goes wrong."""

from __future__ import annotations

import streamlit as st

from app_pages import common
from swimlab.checks import RULES

common.page_header(
    "Care and cautions",
    "The welfare limits this lab has set, the checks that watch them, and what to do when a fish is in trouble.",
)
book = common.labbook()
settings = common.effective_settings(book, common.work())
common.care_notice(settings, where="every trial")

st.subheader("This lab's welfare limits")
st.dataframe(
    [
        {"Limit": "Oxygen floor", "Value": settings.oxygen_floor_pct_air_sat, "Unit": "% air saturation",
         "Setting": "oxygen_floor_pct_air_sat"},
        {"Limit": "Oxygen restored after a flush", "Value": settings.flush_restore_pct_air_sat,
         "Unit": "% air saturation", "Setting": "flush_restore_pct_air_sat"},
        {"Limit": "Longest time at exhaustion on the rear grid", "Value": settings.max_time_at_exhaustion_s,
         "Unit": "s", "Setting": "max_time_at_exhaustion_s"},
        {"Limit": "Largest temperature change from acclimation", "Value": settings.max_temperature_change_c,
         "Unit": "°C", "Setting": "max_temperature_change_c"},
        {"Limit": "Largest temperature drift over a trial", "Value": settings.temperature_drift_trial_max_c,
         "Unit": "°C", "Setting": "temperature_drift_trial_max_c"},
    ],
    hide_index=True, width="stretch",
)
st.caption("These are lab settings with common-practice defaults; your approved protocol's limits take precedence.")

st.subheader("Checks that watch welfare")
st.dataframe(
    [{"Rule": r.title, "Severity": r.severity, "What to do": r.advice, "Source": r.source}
     for r in RULES.values() if r.welfare],
    hide_index=True, width="stretch",
)

st.subheader("When something goes wrong")
st.markdown(
    "- **Impingement** (the fish pinned against the rear grid): slow or stop the flow at once, free "
    "the fish, and record an *impingement* event on the Set-up page's Observations grid.\n"
    "- **Fatigue**: reduce the speed as soon as the fatigue criterion is met; record the time as the "
    "protocol's fatigue time and a *fatigue* event.\n"
    "- **Oxygen at the floor**: flush at once; shorten measure phases or lengthen flushes before the next cycle.\n"
    "- **Any adverse event**: record it as an *adverse_event* and follow your protocol's humane "
    "end-points and reporting duties.\n\n"
    "swimlab records and checks trials; it does not grant or replace the approval of your institution's "
    "animal-care committee, local law, or licensed practice."
)

common.explain(
    "Where these limits come from",
    "Each limit is a lab setting with a documented default (see the rule catalogue on the Checks page). "
    "Defaults marked *common practice* have no single source; set them to your approved protocol's values.",
)
