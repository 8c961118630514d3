"""Permissions enforced in the lab book itself, on SQLite and PostgreSQL.

The table below is written from the issue's words, not from swimlab.auth: an **operator**
creates and edits their own drafts and submits them; a **reviewer** may do all that, and
approve or return *others'* submitted sessions, never their own; an **admin** manages people and
lab settings (and, holding every power anyway, all a reviewer may). Each cell runs the real
lab-book call as a signed-in person and checks that an allowed call is recorded under that
person, and that a refused one raises PermissionDeniedError and changes nothing at all.
"""

from __future__ import annotations

import pytest
import sqlalchemy as sa

# The lab books are store_fixtures.quick_labbook (SQLite and PostgreSQL, made fast).
from store_fixtures import TRACE, edited, make_session, postgres_quick_book, quick_labbook  # noqa: F401  (fixtures)

from swimlab import auth
from swimlab.errors import InputError, PermissionDeniedError
from swimlab.store import ActingLabBook, LabBook


@pytest.fixture
def labbook(quick_labbook):  # noqa: F811  (the fixture, by its name)
    return quick_labbook

PASSWORD = "flush, wait and measure"


@pytest.fixture(autouse=True)
def cheap_hashes(monkeypatch):
    # Cheap scrypt parameters keep the table fast; test_auth checks the real ones.
    monkeypatch.setattr(auth, "PASSWORD_PARAMETERS", auth.ScryptParameters(n=2**10))


def _lab(book: LabBook, role: str) -> ActingLabBook:
    """People: olga (operator), pi (admin), and 'actor' with ``role``; return actor signed in."""
    book.add_person("pi", display_name="P. Investigator", role="admin", password=PASSWORD, who="setup")
    book.add_person("olga", display_name="Olga Berg", role="operator", password=PASSWORD, who="setup")
    book.add_person("actor", display_name="A. Actor", role=role, password=PASSWORD, who="setup")
    return book.as_person(book.login("actor", PASSWORD))


def _session_of(book: LabBook, creator: str, status: str = "draft", **fields):
    """A session made (through the trusted interface) by ``creator`` and taken to ``status``."""
    session = make_session(operator=fields.pop("operator", creator), **fields)
    book.create_session(session, who=creator)
    if status in ("submitted", "approved", "returned"):
        book.submit(session.session_id, who=creator)
    if status == "approved":
        book.approve(session.session_id, who="pi")
    if status == "returned":
        book.return_session(session.session_id, who="pi", comment="blank run missing")
    return session


def _snapshot(book: LabBook) -> dict:
    """Everything a refused call must leave as it was."""
    with book._engine.connect() as conn:
        return {
            table: conn.execute(sa.text(f"SELECT * FROM {table} ORDER BY 1, 2")).all()
            for table in ("sessions", "session_versions", "audit", "raw_files", "people", "lab_settings")
        }


# Each scenario: set-up through the trusted interface, then the call as the signed-in actor.
def _read(book, me):
    _session_of(book, "olga")
    return me.list_sessions()


def _create(book, me):
    return me.create_session(make_session(operator="A. Actor"))


def _edit_own_draft(book, me):
    s = _session_of(book, "actor")
    return me.save_session(edited(s, notes="water cloudy"), base_version=1, reason="note")


def _edit_own_returned(book, me):
    s = _session_of(book, "actor", "returned")
    return me.save_session(edited(s, notes="blank added"), base_version=1, reason="blank")


def _edit_others_draft(book, me):
    s = _session_of(book, "olga")
    return me.save_session(edited(s, notes="my note"), base_version=1, reason="note")


def _submit_own(book, me):
    return me.submit(_session_of(book, "actor").session_id)


def _submit_others(book, me):
    return me.submit(_session_of(book, "olga").session_id)


def _approve_others(book, me):
    return me.approve(_session_of(book, "olga", "submitted").session_id, comment="fine")


def _approve_own(book, me):
    return me.approve(_session_of(book, "actor", "submitted").session_id, comment="fine")


def _return_others(book, me):
    return me.return_session(_session_of(book, "olga", "submitted").session_id, comment="redo blank")


def _return_own(book, me):
    return me.return_session(_session_of(book, "actor", "submitted").session_id, comment="redo blank")


def _reopen(book, me):
    return me.reopen(_session_of(book, "olga", "approved").session_id, reason="mass in the wrong unit")


def _add_raw_file(book, me):
    return me.add_raw_file(TRACE, "run 1.txt")


def _remember_mapping(book, me):
    return me.remember_mapping("f" * 16, {"time": "Time [s]", "oxygen": "O2 (%AS)"})


def _change_settings(book, me):
    return me.set_lab_settings({"r2_min": 0.9}, reason="the lab agreed a looser R²")


def _add_person(book, me):
    return me.add_person("new", display_name="New Student", role="operator", password=PASSWORD)


def _set_role(book, me):
    return me.set_role("olga", "reviewer", reason="second year")


def _deactivate(book, me):
    return me.set_active("olga", False, reason="left the lab")


def _set_password(book, me):
    return me.set_password("olga", "a new and long password", reason="forgot it")


def _unlock(book, me):
    book.set_lab_settings({"login_attempts_max": 1}, who="pi", reason="strict")
    with pytest.raises(auth.LockedOutError):
        book.login("olga", "not her password")
    return me.unlock("olga", reason="she called")


OP, RV, AD = "operator", "reviewer", "admin"

#: scenario → (call, the permission-table action it exercises or None, roles that may)
TABLE = {
    "read the lab book": (_read, auth.READ, {OP, RV, AD}),
    "create a session": (_create, auth.CREATE, {OP, RV, AD}),
    "edit own draft": (_edit_own_draft, auth.EDIT_OWN, {OP, RV, AD}),
    "edit own returned session": (_edit_own_returned, auth.EDIT_OWN, {OP, RV, AD}),
    "edit someone else's draft": (_edit_others_draft, None, set()),
    "submit own session": (_submit_own, auth.SUBMIT_OWN, {OP, RV, AD}),
    "submit someone else's session": (_submit_others, None, set()),
    "approve someone else's session": (_approve_others, auth.APPROVE, {RV, AD}),
    "approve own session": (_approve_own, None, set()),
    "return someone else's session": (_return_others, auth.RETURN, {RV, AD}),
    "return own session": (_return_own, None, set()),
    "reopen an approved session": (_reopen, auth.REOPEN, {RV, AD}),
    "add a raw file": (_add_raw_file, auth.ADD_RAW_FILE, {OP, RV, AD}),
    "remember a column mapping": (_remember_mapping, auth.REMEMBER_MAPPING, {OP, RV, AD}),
    "change lab settings": (_change_settings, auth.CHANGE_SETTINGS, {AD}),
    "add a person": (_add_person, auth.MANAGE_PEOPLE, {AD}),
    "change a role": (_set_role, auth.MANAGE_PEOPLE, {AD}),
    "deactivate a person": (_deactivate, auth.MANAGE_PEOPLE, {AD}),
    "set someone's password": (_set_password, auth.MANAGE_PEOPLE, {AD}),
    "unlock an account": (_unlock, auth.MANAGE_PEOPLE, {AD}),
}

WRITES_NO_TRAIL = {"read the lab book", "add a raw file"}


@pytest.mark.parametrize("role", auth.ROLES)
@pytest.mark.parametrize("scenario", list(TABLE))
def test_role_by_action(labbook, role, scenario):
    call, action, may = TABLE[scenario]
    if action is not None:
        assert auth.allowed(role, action) == (role in may), "the permission table disagrees"
    me = _lab(labbook, role)
    if role in may:
        call(labbook, me)
        if scenario not in WRITES_NO_TRAIL:
            with labbook._engine.connect() as conn:
                who, via = conn.execute(
                    sa.text("SELECT who, via FROM audit ORDER BY id DESC LIMIT 1")
                ).one()
            assert (who, via) == ("actor", "password")
        return
    outcome: dict = {}

    def attempt():
        try:
            call(labbook, me)
        except PermissionDeniedError as exc:
            outcome["error"] = exc
        else:
            outcome["error"] = None

    _run_and_compare(labbook, attempt)
    assert outcome["error"] is not None, f"{role} was allowed to {scenario}"


def _run_and_compare(book: LabBook, attempt) -> None:
    """Run ``attempt``; the state after must equal the state just before the refused call.

    The scenario's own set-up writes first, so the snapshot is taken by a hook the first time
    the acting object is called: every public method of ActingLabBook goes through ``_actor``
    or ``check``.
    """
    snapshots = []
    original_actor = ActingLabBook._actor
    original_check = ActingLabBook.check

    def actor(self, who=None):
        if not snapshots:
            snapshots.append(_snapshot(book))
        return original_actor(self, who)

    def check(self, action, what=""):
        if not snapshots:
            snapshots.append(_snapshot(book))
        return original_check(self, action, what)

    ActingLabBook._actor, ActingLabBook.check = actor, check
    try:
        attempt()
    finally:
        ActingLabBook._actor, ActingLabBook.check = original_actor, original_check
    assert snapshots, "the acting lab book was never called"
    assert _snapshot(book) == snapshots[0], "a refused call changed the lab book"


# --------------------------------------------------------------------------------------------
# Four eyes with signed-in people
# --------------------------------------------------------------------------------------------


def _signed_in(book: LabBook, username: str, display_name: str, role: str) -> ActingLabBook:
    """Add a person with a local password and return them signed in."""
    book.add_person(username, display_name=display_name, role=role, password=PASSWORD, who="setup")
    return book.as_person(book.login(username, PASSWORD))


def _reviewer(book: LabBook, username="ben", display_name="Ben Okafor") -> ActingLabBook:
    return _signed_in(book, username, display_name, "reviewer")


@pytest.mark.parametrize(
    "how",
    ["named as operator by display name", "named as operator by account", "saved a version",
     "submitted it", "created it"],
)
def test_four_eyes_for_a_reviewer_with_a_hand_in_the_session(labbook, how):
    ben = _reviewer(labbook)
    operator = {"named as operator by display name": "ben okafor",
                "named as operator by account": "BEN"}.get(how, "Olga Berg")
    creator = "ben" if how == "created it" else "olga"
    session = make_session(operator=operator)
    labbook.create_session(session, who=creator)
    if how == "saved a version":
        labbook.save_session(edited(session, notes="fixed a typo"), base_version=1, who="ben", reason="typo")
    labbook.submit(session.session_id, who="ben" if how == "submitted it" else creator)
    for call in (lambda: ben.approve(session.session_id),
                 lambda: ben.return_session(session.session_id, comment="please check")):
        with pytest.raises(PermissionDeniedError, match="four eyes"):
            call()
    assert labbook.get_session(session.session_id).status == "submitted"


def test_submit_then_approve_by_two_signed_in_people(labbook):
    olga = _signed_in(labbook, "olga", "Olga Berg", "operator")
    ben = _reviewer(labbook)
    session = make_session(operator="Olga Berg")
    olga.create_session(session)
    olga.save_session(edited(session, notes="fatigue at 61 cm/s"), base_version=1, reason="note")
    olga.submit(session.session_id)
    assert ben.approve(session.session_id, version=2).status == "approved"
    trail = labbook.audit_trail(session.session_id)
    assert trail[["who", "action", "via"]].values.tolist() == [
        ["olga", "created", "password"],
        ["olga", "saved", "password"],
        ["olga", "submitted", "password"],
        ["ben", "approved", "password"],
    ]
    with pytest.raises(PermissionDeniedError, match="approved and read-only"):
        olga.save_session(edited(session, notes="late"), base_version=2, reason="late")


# --------------------------------------------------------------------------------------------
# The identity is checked at every action, not only at sign-in
# --------------------------------------------------------------------------------------------


def test_a_role_change_counts_at_the_next_action(labbook):
    ben = _reviewer(labbook)
    labbook.add_person("pi", display_name="PI", role="admin", who="setup")
    first = _session_of(labbook, "olga", "submitted")
    second = _session_of(labbook, "olga", "submitted")
    ben.approve(first.session_id)
    labbook.set_role("ben", "operator", who="pi", reason="reviews by staff only")
    with pytest.raises(PermissionDeniedError, match="is an operator"):
        ben.approve(second.session_id)  # the same signed-in object, the role read afresh
    assert labbook.get_session(second.session_id).status == "submitted"


def test_a_deactivated_account_can_do_nothing(labbook):
    ben = _reviewer(labbook)
    labbook.add_person("pi", display_name="PI", role="admin", who="setup")
    session = _session_of(labbook, "olga", "submitted")
    labbook.set_active("ben", False, who="pi", reason="left the lab")
    for call in (lambda: ben.approve(session.session_id), lambda: ben.list_sessions(),
                 lambda: ben.get_session(session.session_id), lambda: ben.create_session(make_session())):
        with pytest.raises(PermissionDeniedError, match="no longer active"):
            call()
    assert not ben.may(auth.READ)


def test_an_account_not_in_the_lab_book_is_refused(labbook):
    stranger = labbook.as_person(auth.Person("mallory", "Mallory", "admin", auth.VIA_OIDC))
    with pytest.raises(PermissionDeniedError, match="not in this lab book"):
        stranger.add_person("mallory2", display_name="M2", role="admin")
    assert labbook.list_people().empty


def test_a_signed_in_person_cannot_act_under_another_name(labbook):
    ben = _reviewer(labbook)
    session = _session_of(labbook, "olga", "submitted")
    with pytest.raises(PermissionDeniedError, match="cannot act as 'pi'"):
        ben.approve(session.session_id, who="pi")
    assert ben.approve(session.session_id, who="Ben Okafor").status == "approved"  # own name
    assert labbook.audit_trail(session.session_id).iloc[-1]["who"] == "ben"


def test_only_checked_methods_are_reachable(labbook):
    ben = _reviewer(labbook)
    for name in ("_engine", "_set_status", "_migrate", "close", "open", "login", "as_person",
                 "_create_session"):
        with pytest.raises(AttributeError):
            getattr(ben, name)
    assert ben.person.username == "ben" and "ben" in repr(ben)


def test_may_answers_for_showing_controls(labbook):
    ben = _reviewer(labbook)
    assert ben.may(auth.APPROVE) and ben.may(auth.READ)
    assert not ben.may(auth.MANAGE_PEOPLE) and not ben.may(auth.CHANGE_SETTINGS)


# --------------------------------------------------------------------------------------------
# Admins
# --------------------------------------------------------------------------------------------


def test_the_last_active_admin_cannot_be_removed(labbook):
    labbook.add_person("pi", display_name="PI", role="admin", password=PASSWORD, who="setup")
    pi = labbook.as_person(labbook.login("pi", PASSWORD))
    for call in (lambda: pi.set_role("pi", "reviewer", reason="step down"),
                 lambda: pi.set_active("pi", False, reason="leaving")):
        with pytest.raises(PermissionDeniedError, match="last active admin"):
            call()
    assert labbook.get_person("pi").role == "admin"
    pi.add_person("kim", display_name="Kim", role="admin")
    pi.set_role("pi", "reviewer", reason="Kim runs the lab now")
    with pytest.raises(PermissionDeniedError, match="is a reviewer"):
        pi.add_person("lee", display_name="Lee", role="operator")  # no longer an admin


def test_admin_changes_are_in_the_trail(labbook):
    labbook.add_person("pi", display_name="PI", role="admin", password=PASSWORD, who="setup")
    pi = labbook.as_person(labbook.login("pi", PASSWORD))
    pi.add_person("olga", display_name="Olga Berg", role="operator", reason="new student")
    pi.set_role("olga", "reviewer", reason="second year")
    pi.set_lab_settings({"r2_min": 0.9}, reason="lab meeting")
    trail = labbook.audit_trail(None)
    assert trail["action"].tolist()[-3:] == ["person added", "role changed", "settings changed"]
    assert set(trail["who"].tolist()[-3:]) == {"pi"} and set(trail["via"].tolist()[-3:]) == {"password"}
    assert trail.iloc[-2]["changes"] == [{"field": "people.olga.role", "from": "operator", "to": "reviewer"}]
    assert trail.iloc[-2]["reason"] == "second year"


def test_people_input_errors_name_the_field(labbook):
    labbook.add_person("pi", display_name="PI", role="admin", password=PASSWORD, who="setup")
    pi = labbook.as_person(labbook.login("pi", PASSWORD))
    for kwargs, field in (
        ({"username": "a b", "display_name": "A", "role": "operator"}, "username"),
        ({"username": "ab", "display_name": " ", "role": "operator"}, "display_name"),
        ({"username": "ab", "display_name": "A", "role": "boss"}, "role"),
        ({"username": "ab", "display_name": "A", "role": "operator", "email": "no-at-sign"}, "email"),
        ({"username": "ab", "display_name": "A", "role": "operator", "password": "short"}, "password"),
    ):
        with pytest.raises(InputError) as info:
            pi.add_person(kwargs.pop("username"), **kwargs)
        assert info.value.field == field
    with pytest.raises(InputError) as info:
        pi.set_role("olga", "reviewer", reason="no such person")
    assert info.value.field == "username"
    assert labbook.list_people()["username"].tolist() == ["pi"]


# --------------------------------------------------------------------------------------------
# Single-user mode: no login, one name, four eyes still
# --------------------------------------------------------------------------------------------


def test_single_user_needs_no_account_and_keeps_four_eyes(labbook):
    me = labbook.as_person(auth.Person.single_user("R. Operator"))
    demo = make_session(operator="Demo")
    labbook.create_session(demo, who="demo loader")
    me.save_session(edited(demo, notes="mine now"), base_version=1, reason="note")  # no owner rule
    session = make_session(operator="R. Operator")
    me.create_session(session)
    me.submit(session.session_id)
    with pytest.raises(PermissionDeniedError, match="four eyes"):
        me.approve(session.session_id)
    # the supervisor types their own name at the same computer, as the review page lets them
    assert me.approve(session.session_id, who="P. Reviewer").status == "approved"
    trail = labbook.audit_trail(session.session_id)
    assert trail[["who", "via"]].values.tolist() == [
        ["R. Operator", "single-user"], ["R. Operator", "single-user"], ["P. Reviewer", "single-user"]
    ]
    assert labbook.list_people().empty  # nobody had to be added


def test_the_trusted_interface_still_takes_who(labbook):
    """The command line and tests act through LabBook itself: no role checks, four eyes kept."""
    session = _session_of(labbook, "ana", "submitted")
    with pytest.raises(PermissionDeniedError, match="four eyes"):
        labbook.approve(session.session_id, who="ANA")
    assert labbook.approve(session.session_id, who="pi").status == "approved"
    assert labbook.audit_trail(session.session_id)["via"].tolist() == ["", "", ""]


# --------------------------------------------------------------------------------------------
# Who entered, who approved and when
# --------------------------------------------------------------------------------------------


def test_sign_off_names_who_entered_and_who_approved(labbook):
    olga = _signed_in(labbook, "olga", "Olga Berg", "operator")
    ben = _reviewer(labbook)
    session = make_session(operator="Olga Berg")
    olga.create_session(session)
    olga.submit(session.session_id)
    ben.approve(session.session_id)
    record = ben.sign_off(session.session_id)
    trail = labbook.audit_trail(session.session_id)
    assert (record["entered_by"], record["entered_via"], record["entered_at"]) == ("olga", "password", trail.iloc[0]["at"])
    assert (record["submitted_by"], record["approved_by"], record["approved_via"]) == ("olga", "ben", "password")
    assert record["approved_at"] == trail.iloc[-1]["at"] and record["approved_version"] == 1
    labbook.reopen(session.session_id, who="pi", reason="mass in the wrong unit")
    reopened = labbook.sign_off(session.session_id)
    assert reopened["status"] == "draft" and reopened["approved_by"] is None  # no longer approved


def test_people_details_are_for_admins_and_oneself(labbook):
    ben = _reviewer(labbook)
    labbook.add_person("olga", display_name="Olga Berg", role="operator", email="olga@lab.example", who="setup")
    assert ben.get_person("ben").role == "reviewer"
    for call in (lambda: ben.list_people(), lambda: ben.get_person("olga")):
        with pytest.raises(PermissionDeniedError, match="manage people"):
            call()


def test_the_single_user_name_is_kept_in_the_lab_book(labbook):
    assert labbook.single_user_name() == ""
    assert labbook.set_single_user_name("  R. Operator ") == "R. Operator"
    labbook.set_single_user_name("R. Operator")  # the same again: nothing new
    assert labbook.single_user_name() == "R. Operator"
    with pytest.raises(InputError) as info:
        labbook.set_single_user_name(" ")
    assert info.value.field == "name" and labbook.single_user_name() == "R. Operator"
    entries = labbook.audit_trail(None)
    assert entries[["who", "action", "via"]].values.tolist() == [["R. Operator", "single-user name set", "single-user"]]
