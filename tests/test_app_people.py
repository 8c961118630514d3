"""AppTest tests of people in the browser: single-user mode and lab-server mode.

Single-user mode needs no sign-in and keeps the name in the lab book; lab-server mode shows only
the sign-in page until someone signs in, then the pages of their role. What a person may do is
enforced by the lab book (tests/test_store_permissions.py); here the pages follow it.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from browser_support import APP_TIMEOUT_S, ROOT, app_lab_book_url, run_app, texts, typical_session
from streamlit.testing.v1 import AppTest

from swimlab import auth
from swimlab.session import Session

ANA, BEN, PI = "tunnel B runs at noon", "a weir is not a dam", "flush, wait and measure"


@pytest.fixture(autouse=True)
def cheap_hashes(monkeypatch):
    # The app runs in this process under AppTest, so it uses these test-only parameters too.
    monkeypatch.setattr(auth, "PASSWORD_PARAMETERS", auth.ScryptParameters(n=2**10))


@pytest.fixture
def lab(tmp_path, monkeypatch):
    """A fresh lab book, no demo sessions, single-user mode unless a test says otherwise."""
    from swimlab.store import LabBook

    url = app_lab_book_url(tmp_path, monkeypatch)
    monkeypatch.delenv("SWIMLAB_MODE", raising=False)
    monkeypatch.setenv("HOME", str(tmp_path / "home"))  # no user settings file
    book = LabBook.open(url)
    yield book
    book.close()


@pytest.fixture
def server(lab, monkeypatch):
    """Lab-server mode with three people: ana (operator), ben (reviewer), pi (admin)."""
    monkeypatch.setenv("SWIMLAB_MODE", "lab-server")
    lab.add_person("ana", display_name="Ana Ruiz", role="operator", password=ANA, who="setup")
    lab.add_person("ben", display_name="Ben Okafor", role="reviewer", password=BEN, who="setup")
    lab.add_person("pi", display_name="P. Investigator", role="admin", password=PI, who="setup")
    return lab


def _footer(at: AppTest) -> str:
    return texts(at.sidebar.caption)


def _pages(at: AppTest) -> set[str]:
    """The pages registered by st.navigation in the last run (what this browser may open)."""
    return {
        Path(str(info["script_path"])).stem
        for info in at._registered_pages.values()
        if info.get("script_path")
    }


def _sign_in(at: AppTest, username: str, password: str) -> AppTest:
    at.text_input(key="si_username").input(username)
    at.text_input(key="si_password").input(password)
    next(b for b in at.button if b.label == "Sign in").click().run()
    assert not at.exception, at.exception
    return at


# --------------------------------------------------------------------------------------------
# Single-user mode
# --------------------------------------------------------------------------------------------


def test_single_user_mode_needs_no_sign_in_and_keeps_the_name(lab):
    at = run_app()
    assert at.title[0].value == "Lab book"
    assert "single-user mode · working as (no name yet) · no sign-in" in _footer(at)
    assert "Type your name once" in _footer(at)
    assert {"review", "care", "lab_book"} <= _pages(at) and "people" not in _pages(at)
    at.sidebar.text_input(key="app_user").input("R. Operator").run()
    assert "single-user mode · working as R. Operator" in _footer(at)
    assert lab.single_user_name() == "R. Operator"
    again = run_app()  # a new browser session: the name is asked once, then kept
    assert again.sidebar.text_input(key="app_user").value == "R. Operator"
    assert "working as R. Operator" in _footer(again)


def test_single_user_actions_are_recorded_under_the_kept_name(lab):
    lab.set_single_user_name("R. Operator")
    session = Session.model_validate(typical_session())
    lab.create_session(session, {}, who="R. Operator")
    at = run_app()
    at.selectbox(key="lb_open_id").set_value(session.session_id).run()
    at.button(key="lb_open").click().run()
    at.switch_page("app_pages/results.py").run()
    at.button(key="rs_submit").click().run()
    assert not at.exception, at.exception
    trail = lab.audit_trail(session.session_id)
    assert trail[["who", "action", "via"]].values.tolist()[-1] == ["R. Operator", "submitted", "single-user"]


def test_a_bad_mode_setting_stops_the_app_in_words(lab, monkeypatch):
    monkeypatch.setenv("SWIMLAB_MODE", "open-door")
    at = AppTest.from_file(str(ROOT / "app.py"), default_timeout=APP_TIMEOUT_S)
    at.run()
    assert "The mode setting is not usable: field 'mode': must be one of" in texts(at.error)
    assert not at.title


# --------------------------------------------------------------------------------------------
# Lab-server mode
# --------------------------------------------------------------------------------------------


def test_lab_server_shows_only_the_sign_in_page(server):
    at = run_app()
    assert at.title[0].value == "Sign in"
    assert _pages(at) == {"sign_in"}
    assert "lab-server mode · not signed in" in _footer(at)
    assert "sqlite" not in _footer(at)  # where the lab book lives is not shown to strangers
    assert not at.sidebar.text_input  # no "your name" box to type anyone's name into


def test_a_wrong_password_is_refused(server):
    at = _sign_in(run_app(), "ana", "not the password at all")
    assert "Not signed in: the account name or the password is wrong" in texts(at.error)
    assert at.title[0].value == "Sign in" and "app_person" not in at.session_state
    assert "not the password" not in texts(at.error) + texts(at.markdown)


def test_lock_out_on_the_sign_in_page(server):
    server.set_lab_settings({"login_attempts_max": 2}, who="pi", reason="strict")
    at = run_app()
    for _ in range(2):
        _sign_in(at, "ana", "not the password at all")
    assert "too many failed logins: the account is locked until" in texts(at.error)
    _sign_in(at, "ana", ANA)  # the right password, while locked
    assert at.title[0].value == "Sign in" and "locked until" in texts(at.error)


@pytest.mark.parametrize(
    "username, password, role_pages, missing",
    [
        ("ana", ANA, {"lab_book", "setup", "trace", "checks", "results", "care"}, {"review", "people"}),
        ("ben", BEN, {"lab_book", "review", "care"}, {"people"}),
        ("pi", PI, {"lab_book", "review", "people"}, set()),
    ],
)
def test_each_role_gets_its_own_pages(server, username, password, role_pages, missing):
    at = _sign_in(run_app(), username, password)
    assert at.title[0].value == "Lab book"
    pages = _pages(at)
    assert role_pages <= pages and not (missing & pages), pages
    person = server.get_person(username)
    assert f"lab-server mode · signed in as {person.display_name} ({username}) · {person.role} · by password" in _footer(at)
    # the password is not kept in the browser session's state
    assert "si_password" not in at.session_state or not at.session_state["si_password"]


def test_the_review_page_acts_as_the_signed_in_reviewer(server):
    session = Session.model_validate(typical_session())
    server.create_session(session, {}, who="ana")
    server.submit(session.session_id, who="ana")
    at = _sign_in(run_app(), "ben", BEN)
    at.switch_page("app_pages/review.py").run()
    assert at.text_input(key="rv_name_signed_in").value == "Ben Okafor (ben)"
    assert at.text_input(key="rv_name_signed_in").disabled
    at.button(key="rv_approve").click().run()
    assert not at.exception, at.exception
    entry = server.audit_trail(session.session_id).iloc[-1]
    assert (entry["who"], entry["action"], entry["via"]) == ("ben", "approved", "password")


def test_an_admin_adds_a_person_on_the_people_page(server):
    at = _sign_in(run_app(), "pi", PI)
    at.switch_page("app_pages/people.py").run()
    assert not at.exception, at.exception
    form = [t for t in at.text_input if t.label in ("Account name", "Name shown on pages and reports",
                                                     "First password (optional)", "Why (for the audit trail)")]
    values = {"Account name": "cy", "Name shown on pages and reports": "Cy Tan",
              "First password (optional)": "cy swims the ramp test", "Why (for the audit trail)": "new student"}
    for box in form:
        box.input(values[box.label])
    next(b for b in at.button if b.label == "Add").click().run()
    assert not at.exception, at.exception
    assert server.get_person("cy").role == "operator"
    entry = server.audit_trail(None).iloc[-1]
    assert (entry["who"], entry["action"], entry["via"], entry["reason"]) == ("pi", "person added", "password", "new student")
    assert server.login("cy", "cy swims the ramp test").username == "cy"


def test_a_role_change_or_deactivation_counts_at_the_next_page_run(server):
    at = _sign_in(run_app(), "ben", BEN)
    assert "review" in _pages(at)
    server.set_role("ben", "operator", who="pi", reason="reviews by staff only")
    at.run()
    assert "review" not in _pages(at) and "· operator ·" in _footer(at)
    server.set_active("ben", False, who="pi", reason="left the lab")
    at.run()
    assert at.title[0].value == "Sign in" and "app_person" not in at.session_state


def test_sign_out_forgets_the_session(server):
    at = _sign_in(run_app(), "ana", ANA)
    at.button(key="app_sign_out").click().run()
    assert not at.exception, at.exception
    assert at.title[0].value == "Sign in" and "app_person" not in at.session_state


def test_an_admin_unlocks_and_deactivates_on_the_people_page(server):
    server.set_lab_settings({"login_attempts_max": 1}, who="pi", reason="strict")
    with pytest.raises(auth.LockedOutError):
        server.login("ana", "not the password at all")
    at = _sign_in(run_app(), "pi", PI)
    at.switch_page("app_pages/people.py").run()
    at.selectbox(key="pp_who").set_value("ana").run()
    at.button(key="pp_unlock").click().run()
    assert not at.exception, at.exception
    assert server.get_person("ana").locked_until == ""
    at.selectbox(key="pp_who").set_value("ana").run()
    at.text_input(key="pp_why").input("left the lab").run()
    at.button(key="pp_deactivate").click().run()
    assert not server.get_person("ana").active
    actions = server.audit_trail(None)[["who", "action"]].values.tolist()[-2:]
    assert actions == [["pi", "person unlocked"], ["pi", "person deactivated"]]
    # the last admin cannot take themselves out, and the page says why
    at.selectbox(key="pp_who").set_value("pi").run()
    at.text_input(key="pp_why").input("stepping down").run()
    at.selectbox(key="pp_role").set_value("reviewer").run()
    at.button(key="pp_set_role").click().run()
    assert "Not done: 'pi' is the lab's last active admin" in texts(at.error)
    assert server.get_person("pi").role == "admin"


def test_a_person_changes_their_own_password(server):
    at = _sign_in(run_app(), "ana", ANA)
    boxes = {t.label: t for t in at.sidebar.text_input}
    boxes["Current password"].input("not my password at all")
    boxes["New password"].input("a brand new long password")
    boxes["New password again"].input("a brand new long password")
    next(b for b in at.sidebar.button if b.label == "Change").click().run()
    assert "Current password: it is not right" in texts(at.sidebar.error)
    assert server.get_person("ana").failed_logins == 1
    boxes = {t.label: t for t in at.sidebar.text_input}
    boxes["Current password"].input(ANA)
    boxes["New password"].input("a brand new long password")
    boxes["New password again"].input("a brand new long password")
    next(b for b in at.sidebar.button if b.label == "Change").click().run()
    assert "Password changed." in texts(at.sidebar.success)
    assert server.login("ana", "a brand new long password").username == "ana"


def test_an_admin_sets_the_lock_out_on_the_people_page(server):
    at = _sign_in(run_app(), "pi", PI)
    at.switch_page("app_pages/people.py").run()
    at.number_input[0].set_value(3)
    at.number_input[1].set_value(30.0)
    at.text_input(key="pp_settings_why").input("lab meeting")
    next(b for b in at.button if b.label == "Save sign-in settings").click().run()
    assert not at.exception, at.exception
    settings = server.get_lab_settings()
    assert (settings.login_attempts_max, settings.login_lockout_min) == (3, 30.0)
    assert server.audit_trail(None).iloc[-1][["who", "action"]].tolist() == ["pi", "settings changed"]


def test_single_user_mode_warns_when_told_to_listen_beyond_this_computer(lab):
    from streamlit import config

    at = AppTest.from_file(str(ROOT / "app.py"), default_timeout=APP_TIMEOUT_S)
    old = config.get_option("server.address")
    config.set_option("server.address", "0.0.0.0")
    try:
        at.run()
    finally:
        config.set_option("server.address", old)
    assert "single-user mode asks for no password, but the server listens on 0.0.0.0" in texts(at.warning)
    assert at.title[0].value == "Lab book"  # connections from this computer are still served
