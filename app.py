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


from swimlab import auth  # noqa: E402 - after set_page_config

mode = common.app_mode()
client_ip = st.context.ip_address  # None for this computer (Streamlit maps loopback to None)
if mode == auth.SINGLE_USER and isinstance(client_ip, str) and client_ip and not auth.is_loopback(client_ip):
    # Single-user mode asks for no password: it serves this computer only.
    st.error(
        "This swimlab runs in single-user mode, which asks for no password, so it answers only "
        "on the computer it runs on. To share it with a lab, run it in lab-server mode "
        "(mode = \"lab-server\" in swimlab.toml) so that everyone signs in."
    )
    st.stop()

listening = st.get_option("server.address")
if mode == auth.SINGLE_USER and listening and auth.binding_problem(mode, listening):
    st.warning(auth.binding_problem(mode, listening), icon=":material/lock_open:")

plain = common.plain_labbook()
person = common.check_sign_in(plain) if mode == auth.LAB_SERVER else None

if mode == auth.LAB_SERVER and person is None:
    # Nobody signed in: the sign-in page is the only page there is.
    page = st.navigation([st.Page(common.PAGE_FILES["sign_in"], title="Sign in", icon=":material/login:",
                                  default=True)])
    common.footer(plain)
    page.run()
    st.stop()

pages = common.page_list(mode, person)
page = st.navigation(pages)

try:
    loaded, demo_problems = _load_demo_sessions(common.database_url(), str(DEMO_DIR))
except ImportError as exc:
    loaded, demo_problems = 0, (f"bundles cannot be read in this installation: {exc}",)
if loaded and not st.session_state.get("app_demo_told"):
    st.session_state["app_demo_told"] = True
    st.toast(f"The lab book was empty: {loaded} demo session(s) loaded.")


def _keep_name() -> None:
    """Keep the name typed in single-user mode in the lab book (asked once)."""
    name = str(st.session_state.get("app_user") or "").strip()
    if name:
        try:
            plain.set_single_user_name(name)
        except (ValueError, OSError) as exc:
            st.session_state["app_name_problem"] = str(exc)


with st.sidebar:
    if mode == auth.LAB_SERVER:
        st.markdown(f"Signed in as **{person}** · {person.role}")
        if st.button("Sign out", key="app_sign_out", icon=":material/logout:"):
            common.sign_out()
        if person.via == auth.VIA_PASSWORD:
            common.own_password_form(plain.as_person(person))
    else:
        if "app_user" not in st.session_state:
            st.session_state["app_user"] = plain.single_user_name()
        st.text_input("Your name", key="app_user", on_change=_keep_name,
                      help="Asked once and kept in the lab book; recorded in the audit trail with every action.",
                      placeholder="e.g. A. Student")
        if not st.session_state.get("app_user"):
            st.caption("Type your name once: it is kept, and every save is recorded under it.")
        if st.session_state.get("app_name_problem"):
            st.error(f"Your name: {st.session_state.pop('app_name_problem')}")
    if demo_problems:
        with st.expander("Demo sessions not loaded"):
            for line in demo_problems:
                st.caption(line)

common.footer(plain)  # before the page: a page may st.stop() early
page.run()
