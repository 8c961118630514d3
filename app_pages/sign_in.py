"""Sign in (lab-server mode): a local account's password, or the institution's single sign-on."""

from __future__ import annotations

from collections.abc import Mapping

import streamlit as st

from app_pages import common
from swimlab.auth import LockedOutError, LoginError

common.page_header(
    "Sign in",
    "This lab book is shared by a lab: sign in to enter, review and approve trials under your own name.",
)
book = common.plain_labbook()

problem = st.session_state.pop("app_sign_in_error", None)
if problem:
    st.error(f"Not signed in: {problem}")
    if common._sso_logged_in():
        st.button("Leave single sign-on", key="si_sso_out", on_click=st.logout)

sso = common.oidc_section()
if sso is not None:
    providers = [k for k, v in sso.items() if isinstance(v, Mapping)]
    if st.button("Sign in with your institution's single sign-on", key="si_sso", type="primary",
                 icon=":material/badge:"):
        if providers:
            st.login(providers[0])
        else:
            st.login()
    st.caption("Or, with a local account of this lab book:")

if not book.has_people():
    st.info(
        "Nobody can sign in yet. An administrator of this server adds the first people on its command "
        "line, for example: `python -m swimlab people add pi --name \"P. Investigator\" --role admin`."
    )

with st.form("si_form", clear_on_submit=True):
    username = st.text_input("Account name", key="si_username", autocomplete="username")
    password = st.text_input("Password", type="password", key="si_password", autocomplete="current-password")
    submitted = st.form_submit_button("Sign in", type="primary" if sso is None else "secondary")
if submitted:
    try:
        st.session_state["app_person"] = book.login(username, password)
    except LockedOutError as exc:
        st.error(f"Not signed in: {exc.reason}")
    except LoginError as exc:
        st.error(f"Not signed in: {exc.reason}.")
    else:
        st.rerun()

common.explain(
    "How sign-in works",
    "Passwords are kept only as salted scrypt hashes; after several wrong passwords in a row the "
    "account is locked for a while (a lab setting), and an admin can unlock it. Your sign-in holds "
    "for this browser tab: a reload or a new tab asks again. What you may do follows your role "
    "(operator, reviewer, admin), checked by the lab book at every action. See docs/security.md.",
)
