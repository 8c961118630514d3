"""Tests of swimlab.store: the lab book, on SQLite and on PostgreSQL (the same tests on both).

PostgreSQL comes from tests/pg_server.py: ``SWIMLAB_TEST_POSTGRES_URL`` if set, else a
throwaway cluster started for the run. Without a server the PostgreSQL half is skipped with the
reason, except in CI (``CI=true``), where it fails.
"""

from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
import random
import signal
import threading
import time

import pytest
import sqlalchemy as sa
import store_fixtures
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from store_fixtures import TRACE, edited, make_session, with_raw

from swimlab.errors import ConflictError, InputError, PermissionDeniedError
from swimlab.session import Session
from swimlab.settings import LabSettings
from swimlab.store import (
    AUDIT_COLUMNS,
    LATEST_SCHEMA,
    MIGRATIONS,
    SESSION_LIST_COLUMNS,
    LabBook,
    UnknownSessionError,
    diff_documents,
    flatten_document,
    metadata,
    resolve_database_url,
)

db_url = store_fixtures.db_url  # fixtures: a fresh lab book URL / open lab book, per backend
labbook = store_fixtures.labbook


def _stored(labbook, **overrides):
    session, raw = with_raw(make_session(**overrides), ("run 1.txt", TRACE, "trial"))
    labbook.create_session(session, raw, who="ana")
    return session


def _with_mass(session: Session, mass_g: float) -> Session:
    doc = session.to_json_dict()
    doc["fish"][0]["mass_g"] = mass_g
    return Session.from_json_dict(doc)


# --------------------------------------------------------------------------------------------
# Sessions and versions
# --------------------------------------------------------------------------------------------


def test_create_and_get(labbook):
    session = _stored(labbook)
    stored = labbook.get_session(session.session_id)
    assert stored.session == session
    assert (stored.version, stored.status, stored.return_comment, stored.updated_by) == (
        1,
        "draft",
        "",
        "ana",
    )
    assert labbook.get_raw_file(session.raw_files[0].sha256) == TRACE


def test_list_sessions(labbook):
    first = _stored(labbook, title="Trial one", operator="ana")
    second = _stored(labbook, title="Trial two", operator="ben", water={"temperature_c": 8.0})
    labbook.submit(second.session_id, who="ben")
    table = labbook.list_sessions()
    assert list(table.columns) == SESSION_LIST_COLUMNS
    assert table["session_id"].tolist() == [second.session_id, first.session_id]  # newest first
    row = table.set_index("session_id").loc[second.session_id]
    assert (row["title"], row["fish"], row["trial_date"], row["temperature_c"]) == (
        "Trial two",
        "NW-01",
        "2031-05-14",
        8.0,
    )
    assert (row["status"], row["operator"], row["version"]) == ("submitted", "ben", 1)
    assert labbook.list_sessions(status="submitted")["session_id"].tolist() == [second.session_id]
    assert labbook.list_sessions(status="approved").empty
    with pytest.raises(ValueError, match="valid"):
        labbook.list_sessions(status="finished")


def test_save_makes_a_new_version_and_keeps_the_old(labbook):
    session = _stored(labbook)
    version = labbook.save_session(
        _with_mass(session, 160.0), base_version=1, who="ana", reason="re-weighed"
    )
    assert version == 2
    stored = labbook.get_session(session.session_id)
    assert stored.version == 2 and stored.session.fish[0].mass_g == 160.0
    assert labbook.get_session_version(session.session_id, 1) == session
    assert labbook.session_history(session.session_id)["version"].tolist() == [1, 2]


def test_save_without_changes_writes_nothing(labbook):
    session = _stored(labbook)
    assert labbook.save_session(session, base_version=1, who="ana", reason="no change") == 1
    assert len(labbook.audit_trail(session.session_id)) == 1


def test_stale_save_is_refused_and_says_what_changed_and_who(labbook):
    session = _stored(labbook)
    labbook.save_session(_with_mass(session, 160.0), base_version=1, who="ben", reason="re-weighed")
    labbook.save_session(
        edited(_with_mass(session, 160.0), notes="cloudy water"),
        base_version=2,
        who="cy",
        reason="note",
    )
    with pytest.raises(ConflictError) as info:
        labbook.save_session(
            edited(session, title="Renamed"), base_version=1, who="ana", reason="rename"
        )
    message = str(info.value)
    assert "version 2 by ben: fish.0.mass_g" in message
    assert "version 3 by cy: notes" in message
    assert "now version 3" in message
    assert info.value.current_version == 3
    assert [c["who"] for c in info.value.changes] == ["ben", "cy"]
    stored = labbook.get_session(session.session_id)
    assert stored.version == 3 and stored.session.title == session.title  # nothing of ana's saved
    assert stored.session.notes == "cloudy water"  # nothing of the others' lost


def test_base_version_that_never_existed(labbook):
    session = _stored(labbook)
    with pytest.raises(ConflictError, match="no version 5"):
        labbook.save_session(edited(session, notes="x"), base_version=5, who="ana", reason="r")


def test_two_writers_from_the_same_version(db_url):
    """Two lab books (two engines, two connections) saving at the same moment from version 1."""
    books = [LabBook.open(db_url), LabBook.open(db_url)]
    try:
        for attempt in range(5):
            session = _stored(books[0], session_id=f"race{attempt}")
            edits = [edited(session, notes="from writer 0"), edited(session, title="from writer 1")]
            barrier = threading.Barrier(2)
            outcome: dict[int, object] = {}

            def save(i, barrier=barrier, outcome=outcome, edits=edits):
                barrier.wait()
                try:
                    outcome[i] = books[i].save_session(
                        edits[i], base_version=1, who=f"writer{i}", reason="race"
                    )
                except ConflictError as exc:
                    outcome[i] = exc

            threads = [threading.Thread(target=save, args=(i,)) for i in range(2)]
            for t in threads:
                t.start()
            for t in threads:
                t.join(30)
            winners = [i for i, r in outcome.items() if r == 2]
            losers = [i for i, r in outcome.items() if isinstance(r, ConflictError)]
            assert len(winners) == 1 and len(losers) == 1, outcome
            winner, loser = winners[0], losers[0]
            assert f"writer{winner}" in str(outcome[loser])
            stored = books[loser].get_session(session.session_id)
            assert stored.version == 2 and stored.session == edits[winner]
            assert books[0].get_session_version(session.session_id, 1) == session
    finally:
        for book in books:
            book.close()


def test_unknown_session(labbook):
    with pytest.raises(UnknownSessionError, match="no session 'nope'"):
        labbook.get_session("nope")
    with pytest.raises(UnknownSessionError):
        labbook.save_session(make_session(session_id="nope"), base_version=1, who="ana", reason="r")
    with pytest.raises(UnknownSessionError):
        labbook.submit("nope", who="ana")


def test_duplicate_session_id_is_refused(labbook):
    session = _stored(labbook)
    with pytest.raises(ConflictError, match="already in the lab book"):
        labbook.create_session(edited(session, title="Other"), who="ben")
    assert labbook.get_session(session.session_id).session.title == session.title


@pytest.mark.parametrize("who", ["", "   ", None, 3])
def test_who_is_required(labbook, who):
    with pytest.raises(InputError) as info:
        labbook.create_session(make_session(), who=who)
    assert info.value.field == "who"
    assert labbook.list_sessions().empty


# --------------------------------------------------------------------------------------------
# Status, sign-off and four eyes
# --------------------------------------------------------------------------------------------


def test_edit_to_an_approved_session_is_refused(labbook):
    session = _stored(labbook, operator="ana")
    labbook.submit(session.session_id, who="ana")
    labbook.approve(session.session_id, who="pi", comment="looks right")
    with pytest.raises(PermissionDeniedError, match="approved and read-only"):
        labbook.save_session(_with_mass(session, 1.0), base_version=1, who="pi", reason="oops")
    stored = labbook.get_session(session.session_id)
    assert stored.status == "approved" and stored.version == 1 and stored.session == session
    with pytest.raises(PermissionDeniedError):
        labbook.submit(session.session_id, who="ana")


def test_reopen_needs_a_reason_that_goes_in_the_trail(labbook):
    session = _stored(labbook)
    labbook.submit(session.session_id, who="ana")
    labbook.approve(session.session_id, who="pi")
    with pytest.raises(InputError) as info:
        labbook.reopen(session.session_id, who="pi", reason=" ")
    assert info.value.field == "reason"
    assert labbook.get_session(session.session_id).status == "approved"
    labbook.reopen(session.session_id, who="pi", reason="mass was entered in the wrong unit")
    assert labbook.get_session(session.session_id).status == "draft"
    assert (
        labbook.save_session(
            _with_mass(session, 15.2), base_version=1, who="ana", reason="fix unit"
        )
        == 2
    )
    trail = labbook.audit_trail(session.session_id)
    reopened = trail[trail["action"] == "reopened"].iloc[0]
    assert reopened["reason"] == "mass was entered in the wrong unit" and reopened["who"] == "pi"
    assert reopened["changes"] == [{"field": "status", "from": "approved", "to": "draft"}]


def test_four_eyes(labbook):
    session = _stored(labbook, operator="Ana")
    labbook.submit(session.session_id, who="ben")  # submitted by a colleague of the operator
    for person in ("ana", " ANA ", "ben"):  # the operator (any case) and the submitter
        with pytest.raises(PermissionDeniedError, match="four eyes"):
            labbook.approve(session.session_id, who=person)
        with pytest.raises(PermissionDeniedError, match="four eyes"):
            labbook.return_session(session.session_id, who=person, comment="please check")
    assert labbook.get_session(session.session_id).status == "submitted"
    assert labbook.approve(session.session_id, who="pi").status == "approved"


def test_return_with_comment_then_resubmit(labbook):
    session = _stored(labbook)
    labbook.submit(session.session_id, who="ana")
    with pytest.raises(InputError):
        labbook.return_session(session.session_id, who="pi", comment="")
    stored = labbook.return_session(session.session_id, who="pi", comment="blank run missing")
    assert (stored.status, stored.return_comment) == ("returned", "blank run missing")
    labbook.save_session(
        edited(session, notes="blank added"), base_version=1, who="ana", reason="blank"
    )
    assert labbook.get_session(session.session_id).status == "returned"
    stored = labbook.submit(session.session_id, who="ana")
    assert (stored.status, stored.return_comment) == ("submitted", "")
    actions = labbook.audit_trail(session.session_id)["action"].tolist()
    assert actions == ["created", "submitted", "returned", "saved", "submitted"]


def test_wrong_transitions(labbook):
    session = _stored(labbook)
    with pytest.raises(PermissionDeniedError, match="status is 'draft'"):
        labbook.approve(session.session_id, who="pi")
    with pytest.raises(PermissionDeniedError):
        labbook.reopen(session.session_id, who="pi", reason="not approved yet")
    labbook.submit(session.session_id, who="ana")
    with pytest.raises(PermissionDeniedError, match="status is 'submitted'"):
        labbook.submit(session.session_id, who="ana")


def test_saving_a_submitted_session_takes_it_back_to_draft(labbook):
    session = _stored(labbook)
    labbook.submit(session.session_id, who="ana")
    labbook.save_session(
        edited(session, notes="late note"), base_version=1, who="ana", reason="note"
    )
    assert labbook.get_session(session.session_id).status == "draft"
    last = labbook.audit_trail(session.session_id).iloc[-1]
    assert {"field": "status", "from": "submitted", "to": "draft"} in last["changes"]


def test_approving_a_version_other_than_the_one_reviewed(labbook):
    session = _stored(labbook)
    labbook.save_session(edited(session, notes="v2"), base_version=1, who="ana", reason="note")
    labbook.submit(session.session_id, who="ana")
    with pytest.raises(ConflictError):
        labbook.approve(session.session_id, who="pi", version=1)
    assert labbook.approve(session.session_id, who="pi", version=2).status == "approved"


# --------------------------------------------------------------------------------------------
# Raw files
# --------------------------------------------------------------------------------------------


def _count(labbook, table: str) -> int:
    with labbook._engine.connect() as conn:
        return conn.execute(sa.text(f"SELECT COUNT(*) FROM {table}")).scalar()


def test_raw_files_are_stored_once(labbook):
    sha = labbook.add_raw_file(TRACE, "run 1.txt")
    assert sha == hashlib.sha256(TRACE).hexdigest()
    assert labbook.add_raw_file(TRACE, "renamed.txt") == sha
    assert _count(labbook, "raw_files") == 1
    assert labbook.get_raw_file(sha) == TRACE
    with pytest.raises(InputError, match="no raw file"):
        labbook.get_raw_file("0" * 64)


def test_raw_bytes_that_do_not_match_their_checksum_are_refused(labbook):
    with pytest.raises(InputError, match="checksum"):
        labbook.add_raw_file(TRACE, sha256="0" * 64)
    session, raw = with_raw(make_session(), ("run 1.txt", TRACE, "trial"))
    sha = session.raw_files[0].sha256
    with pytest.raises(InputError) as info:
        labbook.create_session(session, {sha: TRACE + b"tampered"}, who="ana")
    assert info.value.field == f"raw_files.{sha}"
    assert labbook.list_sessions().empty and _count(labbook, "raw_files") == 0


def test_session_referring_to_an_absent_raw_file_is_refused(labbook):
    session, _ = with_raw(make_session(), ("run 1.txt", TRACE, "trial"))
    with pytest.raises(InputError) as info:
        labbook.create_session(session, {}, who="ana")
    assert info.value.field == "raw_files.0.sha256"
    assert labbook.list_sessions().empty and _count(labbook, "audit") == 0


def test_append_only_tables_are_guarded_in_the_database(labbook):
    session = _stored(labbook)
    for statement in (
        "UPDATE audit SET who = 'someone else'",
        "DELETE FROM audit",
        "UPDATE raw_files SET name = 'x'",
        "DELETE FROM session_versions",
    ):
        with pytest.raises(sa.exc.DBAPIError, match="append-only"):
            with labbook._engine.begin() as conn:
                conn.exec_driver_sql(statement)
    assert labbook.audit_trail(session.session_id)["who"].tolist() == ["ana"]


# --------------------------------------------------------------------------------------------
# Audit trail and diffs
# --------------------------------------------------------------------------------------------


def test_audit_trail_has_field_level_changes(labbook):
    session = _stored(labbook)
    labbook.save_session(_with_mass(session, 160.0), base_version=1, who="ben", reason="re-weighed")
    trail = labbook.audit_trail(session.session_id)
    assert list(trail.columns) == AUDIT_COLUMNS
    assert trail["action"].tolist() == ["created", "saved"]
    assert trail["version"].tolist() == [1, 2]
    saved = trail.iloc[1]
    assert saved["changes"] == [{"field": "fish.0.mass_g", "from": 152.3, "to": 160.0}]
    assert (saved["who"], saved["reason"]) == ("ben", "re-weighed")
    assert saved["at"].endswith("+00:00")  # UTC


def test_flatten_and_diff():
    old = {"a": 1, "fish": [{"m": 1.0}, {"m": 2.0}], "tags": [], "w": {"t": 3}}
    new = {"a": 1.0, "fish": [{"m": 1.5}], "tags": ["x"], "w": {}}
    assert flatten_document(old) == {"a": 1, "fish.0.m": 1.0, "fish.1.m": 2.0, "tags": [], "w.t": 3}
    assert diff_documents(old, new) == [
        {"field": "fish.0.m", "from": 1.0, "to": 1.5},
        {"field": "fish.1.m", "from": 2.0, "to": None},
        {"field": "w.t", "from": 3, "to": None},
        {"field": "tags.0", "from": None, "to": "x"},
    ]
    assert diff_documents({"a": []}, {"a": {}}) == [{"field": "a", "from": [], "to": {}}]
    assert diff_documents({"x": True}, {"x": 1}) == [{"field": "x", "from": True, "to": 1}]


json_values = st.recursive(
    st.none() | st.booleans() | st.text(max_size=5) | st.integers(-5, 5),
    lambda inner: (
        st.lists(inner, max_size=3) | st.dictionaries(st.sampled_from("abc"), inner, max_size=3)
    ),
    max_leaves=12,
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.dictionaries(st.sampled_from("abcd"), json_values, max_size=4),
    st.dictionaries(st.sampled_from("abcd"), json_values, max_size=4),
)
def test_diff_reports_exactly_the_changed_leaves(old, new):
    changes = diff_documents(old, new)
    assert (changes == []) == (json.dumps(old, sort_keys=True) == json.dumps(new, sort_keys=True))
    before, after = flatten_document(old), flatten_document(new)
    for change in changes:
        assert before.get(change["field"]) == change["from"]
        assert after.get(change["field"]) == change["to"]
    assert diff_documents(old, old) == []


# --------------------------------------------------------------------------------------------
# Lab settings and remembered mappings
# --------------------------------------------------------------------------------------------


def test_lab_settings(labbook):
    assert labbook.get_lab_settings() == LabSettings()
    labbook.set_lab_settings({"r2_min": 0.9}, who="pi", reason="lab agreed a looser R²")
    assert labbook.get_lab_settings().r2_min == 0.9
    assert labbook.get_lab_setting_overrides() == {"r2_min": 0.9}
    with pytest.raises(InputError, match="unknown lab settings"):
        labbook.set_lab_settings({"r2_minimum": 0.9}, who="pi", reason="typo")
    assert labbook.get_lab_setting_overrides() == {"r2_min": 0.9}
    trail = labbook.audit_trail(None)
    assert trail["action"].tolist() == ["settings changed"]
    assert trail.iloc[0]["changes"] == [{"field": "settings.r2_min", "from": None, "to": 0.9}]


def test_remembered_mappings(labbook):
    mapping = {"time": "Time [s]", "oxygen": "Oxygen (%AS)", "decimal": ","}
    assert labbook.recall_mapping("f" * 16) is None
    labbook.remember_mapping("f" * 16, mapping, who="ana")
    labbook.remember_mapping("f" * 16, mapping, who="ana")  # same again: nothing new
    assert labbook.recall_mapping("f" * 16) == mapping
    assert labbook.audit_trail(None)["action"].tolist() == ["mapping remembered"]
    with pytest.raises(InputError):
        labbook.remember_mapping("", mapping, who="ana")


# --------------------------------------------------------------------------------------------
# Where the lab book lives, and its schema
# --------------------------------------------------------------------------------------------


def test_url_resolution_order(tmp_path):
    home = tmp_path / "home"
    (home / ".config" / "swimlab").mkdir(parents=True)
    work = tmp_path / "work"
    work.mkdir()
    assert resolve_database_url(None, environ={}, cwd=work, home=home) == (
        f"sqlite:///{work / 'labbook' / 'swimlab.sqlite'}",
        "default",
    )
    (home / ".config" / "swimlab" / "settings.toml").write_text(
        'database_url = "sqlite:///user.db"\n'
    )
    assert resolve_database_url(None, environ={}, cwd=work, home=home)[0] == "sqlite:///user.db"
    (work / "swimlab.toml").write_text('database_url = "sqlite:///local.db"\n')
    assert resolve_database_url(None, environ={}, cwd=work, home=home)[0] == "sqlite:///local.db"
    env = {"SWIMLAB_DATABASE_URL": "sqlite:///env.db"}
    assert resolve_database_url(None, environ=env, cwd=work, home=home) == (
        "sqlite:///env.db",
        "environment",
    )
    assert resolve_database_url("sqlite:///arg.db", environ=env, cwd=work, home=home) == (
        "sqlite:///arg.db",
        "argument",
    )
    (work / "swimlab.toml").write_text("database_url = \n")
    with pytest.raises(InputError) as info:
        resolve_database_url(None, environ={}, cwd=work, home=home)
    assert info.value.file == str(work / "swimlab.toml")


def test_default_lab_book_is_created_on_first_run(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("SWIMLAB_DATABASE_URL", raising=False)
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    with LabBook.open() as book:
        assert book.source == "default"
        _stored(book)
    assert (tmp_path / "labbook" / "swimlab.sqlite").is_file()


def test_sqlite_settings(tmp_path):
    with LabBook.open(f"sqlite:///{tmp_path / 'lb.sqlite'}") as book:
        with book._engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
            assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
            assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() >= 5000


@pytest.mark.parametrize(
    "url, words",
    [
        ("mysql://u@h/db", "runs on 'sqlite' or 'postgresql'"),
        ("not a url", "not a database URL"),
        ("sqlite:////no/such/folder/lb.sqlite", "does not exist"),
    ],
)
def test_unusable_urls(url, words):
    with pytest.raises(InputError, match=words):
        LabBook.open(url)


def test_unreachable_postgresql_is_a_clear_error():
    with pytest.raises(InputError, match="cannot open the lab book at postgresql"):
        LabBook.open("postgresql://nobody@127.0.0.1:1/none?connect_timeout=2")


def test_schema_matches_the_table_definitions(labbook):
    assert labbook.schema_version() == LATEST_SCHEMA == MIGRATIONS[-1].version
    inspector = sa.inspect(labbook._engine)
    for table in metadata.sorted_tables:
        assert [c["name"] for c in inspector.get_columns(table.name)] == [
            c.name for c in table.columns
        ], table.name


def _create_at_schema_1(book: LabBook, session: Session, *, who: str) -> None:
    """Write a session as the lab book did at schema step 1 (before the creator column)."""
    text = json.dumps(session.to_json_dict())
    at = "2031-05-14T08:00:00+00:00"
    with book._engine.begin() as conn:
        conn.execute(
            sa.text(
                "INSERT INTO sessions (id, version, status, title, operator, fish_ids, document, "
                "created_at, updated_at, updated_by) VALUES (:id, 1, 'draft', :title, :op, "
                "'NW-01', :doc, :at, :at, :who)"
            ),
            {"id": session.session_id, "title": session.title, "op": session.operator,
             "doc": text, "at": at, "who": who},
        )
        conn.execute(
            sa.text("INSERT INTO session_versions VALUES (:id, 1, :doc, :at, :who)"),
            {"id": session.session_id, "doc": text, "at": at, "who": who},
        )
        conn.execute(
            sa.text(
                "INSERT INTO audit (session_id, at, who, action, changes, reason, version_after)"
                " VALUES (:id, :at, :who, 'created', '[]', '', 1)"
            ),
            {"id": session.session_id, "at": at, "who": who},
        )


def test_older_schema_is_migrated_and_newer_refused(db_url):
    """A lab book left at schema step 1 is brought up to date when opened."""
    from swimlab.store import _normalise_url

    parsed = _normalise_url(db_url)
    if parsed.get_backend_name() == "sqlite":
        engine = LabBook._sqlite_engine(parsed, create_folder=False)
    else:
        engine = sa.create_engine(parsed)
    partial = LabBook(engine, url=db_url, source="test")
    assert partial._migrate(upto=1) == 1
    _create_at_schema_1(partial, make_session(session_id="early"), who="ana")
    partial.close()
    with LabBook.open(db_url) as opened:
        assert opened.schema_version() == LATEST_SCHEMA
        assert opened.get_session("early").version == 1  # kept across the upgrade
        with opened._engine.connect() as conn:
            creator = conn.execute(sa.text("SELECT created_by FROM sessions")).scalar()
        assert creator == "ana"  # step 3 takes a session's creator from its "created" entry
        assert opened.audit_trail("early")[["who", "via"]].values.tolist() == [["ana", ""]]
        with opened._engine.begin() as conn:
            conn.execute(
                sa.text("INSERT INTO schema_version VALUES (:v, 'from the future', 'x')"),
                {"v": LATEST_SCHEMA + 1},
            )
    with pytest.raises(InputError, match="newer than this swimlab knows"):
        LabBook.open(db_url)


# --------------------------------------------------------------------------------------------
# A process killed in the middle of saving
# --------------------------------------------------------------------------------------------

KILL_ROUNDS = 20
EVENTS_IN_LARGE_SESSION = 1000  # about 140 kB of JSON: a save takes long enough to be cut


def _large_session(session_id: str) -> Session:
    events = [
        {
            "time_s": float(i),
            "kind": "note",
            "fish_id": "NW-01",
            "description": f"observation {i:05d} " + "x" * 60,
        }
        for i in range(EVENTS_IN_LARGE_SESSION)
    ]
    return make_session(session_id=session_id, events=events)


def _save_in_a_loop(url: str, session_id: str, fd: int) -> None:  # runs in the child process
    book = LabBook.open(url)
    stored = book.get_session(session_id)
    doc, version = stored.session.to_json_dict(), stored.version
    with os.fdopen(fd, "w", buffering=1) as report:
        for i in range(10**6):
            doc["notes"] = f"save {version + 1}"
            doc["events"][i % EVENTS_IN_LARGE_SESSION]["description"] = (
                f"edited in save {version + 1}"
            )
            version = book.save_session(
                Session.from_json_dict(doc), base_version=version, who="saver", reason=f"loop {i}"
            )
            report.write(f"{version}\n")


def _check_consistent(url: str, session_id: str, reported: int) -> int:
    with LabBook.open(url) as book:
        stored = book.get_session(session_id)
        version = stored.version
        assert reported <= version <= reported + 1, (
            reported,
            version,
        )  # the one in flight may have committed
        assert book.session_history(session_id)["version"].tolist() == list(range(1, version + 1))
        trail = book.audit_trail(session_id)
        assert trail["version"].tolist() == list(range(1, version + 1))
        assert trail["action"].tolist() == ["created"] + ["saved"] * (version - 1)
        assert book.get_session_version(session_id, version) == stored.session
        if version > 1:
            assert stored.session.notes == f"save {version}"
            previous = book.get_session_version(session_id, version - 1)
            assert previous.notes == ("" if version == 2 else f"save {version - 1}")
    return version


@pytest.mark.slow
def test_killed_while_saving_loses_nothing(db_url):
    session = _large_session("killed")
    with LabBook.open(db_url) as book:
        book.create_session(session, who="ana")
    context = multiprocessing.get_context("fork")  # the child starts without re-importing
    rng = random.Random(20310514)
    saves = 0
    for _ in range(KILL_ROUNDS):
        read_end, write_end = os.pipe()
        child = context.Process(
            target=_save_in_a_loop, args=(db_url, session.session_id, write_end)
        )
        child.start()
        os.close(write_end)
        with os.fdopen(read_end) as report:
            first = report.readline()  # the child is in its save loop
            assert first, "the saving process stopped before its first save"
            time.sleep(rng.uniform(0.0, 0.12))
            os.kill(child.pid, signal.SIGKILL)
            child.join(10)
            lines = [first, *report.read().splitlines()]
        assert child.exitcode == -signal.SIGKILL
        reported = int(lines[-1])
        saves = _check_consistent(db_url, session.session_id, reported)
    assert saves > KILL_ROUNDS  # at least one save per round
    if db_url.startswith("sqlite"):
        with LabBook.open(db_url) as book, book._engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"


def test_json_documents_are_stored_as_sent(labbook):
    session = _stored(labbook, notes="µmol/L, 15 °C — ok")
    with labbook._engine.connect() as conn:
        text = conn.execute(sa.text("SELECT document FROM sessions")).scalar()
    assert json.loads(text) == session.to_json_dict()
