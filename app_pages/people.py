"""People (lab-server mode, admins): who may enter, review and approve; roles, lock-outs, passwords."""

from __future__ import annotations

import streamlit as st

from app_pages import common
from swimlab import auth
from swimlab.errors import ConflictError, InputError, PermissionDeniedError

common.page_header(
    "People",
    "Who may enter, review and approve trials in this lab book. Every change here is recorded in the "
    "audit trail under your name.",
)
book = common.labbook()

try:
    people = book.list_people()
except PermissionDeniedError as exc:
    st.error(str(exc))
    st.stop()

ROLE_HELP = {
    auth.OPERATOR: "creates, edits and submits their own sessions",
    auth.REVIEWER: "also approves, returns and reopens others' sessions (never their own)",
    auth.ADMIN: "also manages people and lab settings",
}

if people.empty:
    st.info("Nobody has been added yet.")
else:
    shown = people.assign(
        locked_until=people["locked_until"].str.slice(0, 16).str.replace("T", " "),
        last_login_at=people["last_login_at"].str.slice(0, 16).str.replace("T", " "),
    ).drop(columns=["created_at"])
    st.dataframe(
        shown.rename(columns={
            "username": "Account", "display_name": "Name", "role": "Role", "email": "E-mail (single sign-on)",
            "active": "Active", "local_password": "Local password", "failed_logins": "Failed logins",
            "locked_until": "Locked until (UTC)", "last_login_at": "Last sign-in (UTC)",
        }),
        hide_index=True, width="stretch",
    )


def _done(message: str) -> None:
    common.flash(message)
    st.rerun()


def _try(action, message: str) -> None:
    try:
        action()
    except (InputError, ConflictError, PermissionDeniedError) as exc:
        st.error(f"Not done: {exc}")
    else:
        _done(message)


st.subheader("Add a person")
with st.form("pp_add", clear_on_submit=True):
    cols = st.columns(2)
    username = cols[0].text_input("Account name", help="Letters, digits and . _ @ + - (stored in lower case).")
    name = cols[1].text_input("Name shown on pages and reports")
    role = cols[0].selectbox("Role", auth.ROLES, format_func=lambda r: f"{r} — {ROLE_HELP[r]}")
    email = cols[1].text_input("E-mail for single sign-on (optional)")
    password = cols[0].text_input(
        "First password (optional)", type="password", autocomplete="new-password",
        help=f"At least {auth.PASSWORD_MIN_LENGTH} characters; leave empty for single sign-on only.",
    )
    reason = cols[1].text_input("Why (for the audit trail)")
    add = st.form_submit_button("Add", type="primary")
if add:
    _try(lambda: book.add_person(username, display_name=name, role=role, email=email,
                                 password=password or None, reason=reason),
         f"Added {name or username}.")

if not people.empty:
    st.subheader("Change a person")
    who = st.selectbox("Person", list(people["username"]), key="pp_who",
                       format_func=lambda u: f"{u} — {people.set_index('username').loc[u, 'display_name']}")
    row = people.set_index("username").loc[who]
    left, right = st.columns(2)
    with left:
        new_role = st.selectbox("Role", auth.ROLES, index=auth.ROLES.index(row["role"]), key="pp_role")
        why = st.text_input("Why", key="pp_why", help="Required for a change of role or (de)activation.")
        if st.button("Change role", key="pp_set_role", disabled=new_role == row["role"]):
            _try(lambda: book.set_role(who, new_role, reason=why), f"{who} is now {new_role}.")
        if row["active"]:
            if st.button("Deactivate", key="pp_deactivate",
                         help="They can no longer sign in or act; their name stays in the trail."):
                _try(lambda: book.set_active(who, False, reason=why), f"{who} is deactivated.")
        elif st.button("Reactivate", key="pp_reactivate"):
            _try(lambda: book.set_active(who, True, reason=why), f"{who} is active again.")
    with right:
        if row["locked_until"] or row["failed_logins"]:
            if st.button("Unlock", key="pp_unlock", help="Clear the failed logins and any lock-out."):
                _try(lambda: book.unlock(who, reason="unlocked on the People page"), f"{who} is unlocked.")
        with st.form("pp_password", clear_on_submit=True):
            new_password = st.text_input("New password", type="password", autocomplete="new-password")
            set_pw = st.form_submit_button("Set password")
        if set_pw:
            _try(lambda: book.set_password(who, new_password, reason="set on the People page"),
                 f"New password set for {who}.")

st.subheader("Sign-in settings")
settings = book.get_lab_settings()
with st.form("pp_login_settings"):
    cols = st.columns(3)
    attempts = cols[0].number_input("Failed logins before a lock-out", min_value=1, max_value=100, step=1,
                                    value=int(settings.login_attempts_max))
    minutes = cols[1].number_input("Lock-out [min]", min_value=1.0, max_value=1440.0, step=1.0,
                                   value=float(settings.login_lockout_min))
    why_settings = cols[2].text_input("Why (for the audit trail)", key="pp_settings_why")
    save_settings = st.form_submit_button("Save sign-in settings")
if save_settings:
    overrides = {**book.get_lab_setting_overrides(), "login_attempts_max": int(attempts),
                 "login_lockout_min": float(minutes)}
    _try(lambda: book.set_lab_settings(overrides, reason=why_settings), "Sign-in settings saved.")

common.explain(
    "Roles and what the lab book enforces",
    "Operators create, edit and submit their own sessions. Reviewers may also approve, return and reopen "
    "other people's sessions, never one they entered, saved or submitted (four eyes). Admins may also manage "
    "people and lab settings. The lab book checks each action against the person's current role, so a change "
    "here counts at their next click. The lab's last admin cannot be removed. Lock-out after failed logins "
    "follows the lab settings login_attempts_max and login_lockout_min.",
)
