"""Lab book: every session, a new one (blank or for the next fish), open, bundles in and out."""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

import pandas as pd
import streamlit as st

from app_pages import common
from swimlab import ui_forms
from swimlab.errors import InputError
from swimlab.session import STATUSES

common.page_header("Lab book", "Every trial in the lab book: find one, open it, start a new one, or move bundles in and out.")
book = common.labbook()

try:
    table = common.session_table(book)
except Exception as exc:  # noqa: BLE001 - database errors are shown in words
    st.error(f"The lab book could not be read: {exc}")
    st.stop()


@st.cache_data(show_spinner=False, max_entries=256)
def _flag_count(session_id: str, version: int, url: str | None) -> int | None:
    """Number of flags of one stored version (None when it cannot be analysed)."""
    from swimlab.analysis import analyse

    store = common._open_labbook(url)
    stored = store.get_session(session_id)
    raw = {ref.sha256: store.get_raw_file(ref.sha256) for ref in stored.session.raw_files}
    try:
        return int(len(analyse(stored.session, raw, lab_settings=common.lab_settings_dict(store)).flags))
    except (ValueError, LookupError):
        return None


# --- the table ------------------------------------------------------------------------------
filters = st.columns([2, 2, 1])
text = filters[0].text_input("Filter", key="lb_filter", placeholder="fish, title, operator…")
statuses = filters[1].multiselect("Status", STATUSES, key="lb_status", placeholder="any status")
count_flags = filters[2].toggle("Count flags", key="lb_count_flags", value=True,
                                help="Analyses each session once (cached) to count its flags.")

COLUMN_CONFIG = {
    "title": st.column_config.TextColumn("Title"),
    "fish": st.column_config.TextColumn("Fish"),
    "trial_date": st.column_config.DateColumn("Date"),
    "temperature_c": st.column_config.NumberColumn("Temperature [°C]", format="%.1f"),
    "status": st.column_config.TextColumn("Status"),
    "flags": st.column_config.NumberColumn("Flags", help="Number of flags raised by the checks"),
    "operator": st.column_config.TextColumn("Operator"),
    "version": st.column_config.NumberColumn("Version"),
    "updated_at": st.column_config.DatetimeColumn("Last saved"),
    "session_id": st.column_config.TextColumn("Session id"),
}
ORDER = ["title", "fish", "trial_date", "temperature_c", "status", "flags", "operator", "version", "updated_at",
         "session_id"]


def _show(frame: pd.DataFrame) -> None:
    columns = [c for c in ORDER if c in frame.columns]
    slot.dataframe(frame[columns] if not frame.empty else pd.DataFrame(columns=columns), hide_index=True,
                   width="stretch", column_config=COLUMN_CONFIG)


view = table.copy()
if not view.empty:
    if text:
        needle = text.strip().lower()
        hay = view.astype(str).agg(" ".join, axis=1).str.lower()
        view = view[hay.str.contains(needle, regex=False)]
    if statuses:
        view = view[view["status"].isin(statuses)]
slot = st.empty()
_show(view)  # at once; the flag counts follow
if count_flags and not view.empty:
    progress = st.progress(0.0, text="Counting flags…")
    counts = []
    for i, row in enumerate(view.itertuples(index=False), start=1):
        try:
            counts.append(_flag_count(row.session_id, int(row.version), common.database_url()))
        except ImportError:
            counts.append(None)
        progress.progress(i / len(view), text=f"Counting flags… {i}/{len(view)}")
    progress.empty()
    view = view.assign(flags=pd.array(counts, dtype="Int64"))
    _show(view)
st.caption(f"{len(view)} of {len(table)} session(s). Click a column header to sort.")

# --- open -----------------------------------------------------------------------------------
st.subheader("Open a session")
options = list(table["session_id"]) if not table.empty else []
labels = {row.session_id: f"{row.title} · {row.fish} · {row.status}" for row in table.itertuples(index=False)} if options else {}
cols = st.columns([3, 1])
chosen = cols[0].selectbox("Session", options, format_func=lambda sid: labels.get(sid, sid), key="lb_open_id",
                           index=None, placeholder="choose a session")
if cols[1].button("Open this session", key="lb_open", disabled=chosen is None, type="primary"):
    if common.open_stored(book, chosen):
        st.switch_page(common.PAGE_FILES["setup"])

# --- new ------------------------------------------------------------------------------------
st.subheader("New session")
cols = st.columns([2, 3, 1])
STARTS = ["blank", "an earlier session (same flume, next fish)", "a draft kept from the Set-up page (.json)"]
how = cols[0].radio("Start from", STARTS, key="lb_new_how")
source = draft = None
if how == STARTS[1]:
    source = cols[1].selectbox("Copy from", options, format_func=lambda sid: labels.get(sid, sid), key="lb_copy_id",
                               index=None, placeholder="choose the earlier session")
elif how == STARTS[2]:
    draft = cols[1].file_uploader("Draft file", type=["json"], key="lb_draft_upload")
ready = how == STARTS[0] or (how == STARTS[1] and source is not None) or (how == STARTS[2] and draft is not None)
if cols[2].button("Start", key="lb_new", disabled=not ready):
    data = None
    if how == STARTS[0]:
        data = ui_forms.blank_session(operator=common.user_name())
    elif how == STARTS[1]:
        data = ui_forms.next_fish_session(book.get_session(source).session.to_json_dict(), operator=common.user_name())
    else:
        try:
            data = json.loads(draft.getvalue().decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            st.error(f"The draft {draft.name!r} is not a JSON file swimlab wrote: {exc}")
        if data is not None and not isinstance(data, dict):
            st.error(f"The draft {draft.name!r} does not hold a session (expected a JSON object).")
            data = None
    if data is not None:
        common.set_work(data, session_id=None, version=None)
        st.switch_page(common.PAGE_FILES["setup"])

# --- bundles --------------------------------------------------------------------------------
st.subheader("Bundles")
left, right = st.columns(2)
with left:
    upload = st.file_uploader("Import a bundle (.zip)", type=["zip"], key="lb_bundle_upload")
    if upload is not None and st.button("Import into the lab book", key="lb_import"):
        from swimlab.io.bundle import read_bundle

        with tempfile.TemporaryDirectory() as tmp, st.spinner("Reading the bundle…"):
            path = Path(tmp) / Path(upload.name).name
            path.write_bytes(upload.getvalue())
            try:
                contents = read_bundle(path)
            except (InputError, ValueError, OSError) as exc:
                contents = None
                st.error(f"The bundle {upload.name!r} could not be read: {exc}")
        if contents is not None and (contents.session is None or contents.problems):
            st.error(f"The bundle {upload.name!r} was not imported:")
            for problem in contents.problems:
                st.markdown(f"- `{getattr(problem, 'field', '')}` {getattr(problem, 'message', problem)}")
        elif contents is not None:
            try:
                book.create_session(contents.session, dict(contents.raw_files),
                                    who=common.user_name() or "unnamed", reason=f"imported from {upload.name}")
                common.flash(f"Imported {contents.session.title!r}.")
                st.rerun()
            except (InputError, ValueError) as exc:
                st.error(f"The bundle {upload.name!r} was not imported: {exc}")
with right:
    export_id = st.selectbox("Export a session as a bundle", options, format_func=lambda sid: labels.get(sid, sid),
                             key="lb_export_id", index=None, placeholder="choose a session")
    if export_id is not None:
        def _bundle_bytes(sid: str = export_id) -> bytes:
            from swimlab.io.bundle import write_bundle

            stored = book.get_session(sid)
            raw = {ref.sha256: book.get_raw_file(ref.sha256) for ref in stored.session.raw_files}
            with tempfile.TemporaryDirectory() as tmp:
                path = Path(tmp) / f"{sid}.zip"
                written = write_bundle(stored.session, raw, path, as_zip=True)
                return Path(written or path).read_bytes()

        st.download_button("Download the bundle (.zip)", data=_bundle_bytes, file_name=f"swimlab-{export_id}.zip",
                           mime="application/zip", key="lb_export", icon=":material/download:")

common.explain(
    "What the lab book keeps",
    "Each session is stored with a version number: a save based on an older version is refused, "
    "never merged. Raw logger files are kept unchanged under their SHA-256 checksum. Every save, "
    "submission, approval and return is written to the audit trail (who, when, why). Status runs "
    "draft → submitted → approved, or returned with a comment. A bundle is a folder (or .zip) with "
    "the session as JSON, its tables as CSV and the raw files untouched.",
)
