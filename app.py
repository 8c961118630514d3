"""swimlab in the browser: navigation, the sidebar shared by every page, first-run demo sessions.

Run with ``streamlit run app.py``. The pages live in ``app_pages/``; all science is in
``swimlab``.
"""

from __future__ import annotations

import os
from pathlib import Path

import streamlit as st

from app_pages import common

st.set_page_config(
    page_title="swimlab – swim-tunnel respirometry",
    page_icon=":material/water:",
    layout="wide",
    initial_sidebar_state="expanded",
)

DEMO_DIR = Path(os.environ.get("SWIMLAB_DEMO_DIR") or Path(__file__).parent / "demo_sessions")


@st.cache_resource(show_spinner="Loading the demo sessions into the empty lab book…")
def _load_demo_sessions(url: str | None, demo_dir: str) -> tuple[int, tuple[str, ...]]:
    """Import every bundle in ``demo_dir`` when the lab book is empty (once per lab book)."""
    from swimlab.io.bundle import SESSION_JSON, read_bundle

    book = common._open_labbook(url)
    if not book.list_sessions().empty:
        return 0, ()
    loaded, problems = 0, []
    folder = Path(demo_dir)
    candidates = sorted(
        p for p in folder.iterdir() if (p.is_dir() and (p / SESSION_JSON).is_file()) or p.suffix == ".zip"
    ) if folder.is_dir() else []
    for path in candidates:
        try:
            contents = read_bundle(path)
        except (ValueError, OSError) as exc:
            problems.append(f"{path.name}: {exc}")
            continue
        if contents.session is None or contents.problems:
            problems.append(f"{path.name}: " + "; ".join(str(p) for p in contents.problems))
            continue
        try:
            book.create_session(contents.session, dict(contents.raw_files), who="demo loader", reason="demo session")
            loaded += 1
        except (ValueError, OSError) as exc:
            problems.append(f"{path.name}: {exc}")
    return loaded, tuple(problems)


pages = {
    "Trial": [
        st.Page(common.PAGE_FILES["lab_book"], title="Lab book", icon=":material/menu_book:", default=True),
        st.Page(common.PAGE_FILES["setup"], title="Set-up", icon=":material/edit_note:"),
        st.Page(common.PAGE_FILES["trace"], title="Oxygen trace", icon=":material/show_chart:"),
        st.Page(common.PAGE_FILES["checks"], title="Checks", icon=":material/rule:"),
        st.Page(common.PAGE_FILES["results"], title="Results", icon=":material/insights:"),
    ],
    "Sign-off": [
        st.Page(common.PAGE_FILES["review"], title="Review", icon=":material/verified:"),
        st.Page(common.PAGE_FILES["care"], title="Care and cautions", icon=":material/pets:"),
    ],
}
page = st.navigation(pages)

book = common.labbook()
try:
    loaded, demo_problems = _load_demo_sessions(common.database_url(), str(DEMO_DIR))
except ImportError as exc:
    loaded, demo_problems = 0, (f"bundles cannot be read in this installation: {exc}",)
if loaded and not st.session_state.get("app_demo_told"):
    st.session_state["app_demo_told"] = True
    st.toast(f"The lab book was empty: {loaded} demo session(s) loaded.")

with st.sidebar:
    st.text_input("Your name", key="app_user", help="Recorded in the audit trail with every save.",
                  placeholder="e.g. A. Student")
    if demo_problems:
        with st.expander("Demo sessions not loaded"):
            for line in demo_problems:
                st.caption(line)

common.footer(book)  # before the page: a page may st.stop() early
page.run()
