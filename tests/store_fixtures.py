"""Shared helpers for the bundle, lab-book and command-line tests.

Imported by tests/test_bundle.py, tests/test_store.py and tests/test_cli.py (pytest puts the
tests folder on ``sys.path``). Sessions are of an invented study: the "North Weir" lab swimming
tagged fish labelled NW-01, NW-02 in a 30 L tunnel.
"""

from __future__ import annotations

import copy
import hashlib
import os
import uuid
from typing import Any

import pytest

from swimlab.session import Session


def session_dict(**overrides: Any) -> dict[str, Any]:
    """A valid session as a plain dict; top-level keys can be replaced with ``overrides``."""
    data: dict[str, Any] = {
        "session_id": overrides.pop("session_id", uuid.uuid4().hex[:12]),
        "title": "North Weir step test, fish NW-01",
        "study": "North Weir thermal series",
        "lab": "North Weir field station",
        "operator": "ana",
        "trial_date": "2031-05-14",
        "water": {"temperature_c": 12.5, "salinity": 0.0},
        "flume": {
            "name": "Tunnel B (30 L)",
            "section_width_cm": 10.0,
            "section_height_cm": 10.0,
            "respirometer_volume_l": 30.0,
        },
        "fish": [
            {
                "fish_id": "NW-01",
                "mass_g": 152.3,
                "total_length_cm": 23.1,
                "body_depth_cm": 4.2,
                "body_width_cm": 2.6,
            }
        ],
        "protocol": {
            "type": "step_ucrit",
            "steps": [
                {"speed_cm_s": 20.0, "duration_min": 20.0},
                {"speed_cm_s": 30.0, "duration_min": 20.0},
                {"speed_cm_s": 40.0, "duration_min": 20.0},
            ],
            "cycle": {"source": "schedule", "flush_s": 180.0, "wait_s": 60.0, "measure_s": 360.0},
        },
    }
    data.update(overrides)
    return data


def make_session(**overrides: Any) -> Session:
    """A valid :class:`Session` (see :func:`session_dict`)."""
    return Session.from_json_dict(session_dict(**overrides))


def with_raw(session: Session, *files: tuple[str, bytes, str]) -> tuple[Session, dict[str, bytes]]:
    """Attach raw files ``(name, bytes, role)`` to a copy of ``session``; return it and the bytes."""
    doc = copy.deepcopy(session.to_json_dict())
    raw: dict[str, bytes] = {}
    for name, data, role in files:
        sha = hashlib.sha256(data).hexdigest()
        raw[sha] = data
        doc["raw_files"].append({"sha256": sha, "name": name, "role": role})
    return Session.from_json_dict(doc), raw


TRACE = (
    "# logger export, North Weir tunnel B\n"
    "time_s;oxygen_pct_air_sat;temperature_c\n"
    "0;99,1;12,5\n"
    "1;99,0;12,5\n"
    "2;98,9;12,6\n"
).encode("latin-1")


def edited(session: Session, **changes: Any) -> Session:
    """A copy of ``session`` with top-level fields changed (validated)."""
    doc = session.to_json_dict()
    doc.update(changes)
    return Session.from_json_dict(doc)


# --------------------------------------------------------------------------------------------
# Lab books on SQLite and PostgreSQL
# --------------------------------------------------------------------------------------------


def postgres_or_skip() -> str:
    """URL of a PostgreSQL server for tests, or skip (fail in CI) saying why there is none."""
    import pg_server

    url, why = pg_server.server_url()
    if url is None:
        if os.environ.get("CI") == "true":
            pytest.fail(f"PostgreSQL is required in CI but none could be had: {why}")
        pytest.skip(f"no PostgreSQL server for the tests: {why}")
    return url


def fresh_url(kind: str, tmp_path) -> str:
    """A database URL for one test: a new SQLite file, or a new PostgreSQL database."""
    if kind == "sqlite":
        return f"sqlite:///{tmp_path / 'labbook.sqlite'}"
    import pg_server

    return pg_server.fresh_database(postgres_or_skip())


BACKENDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]


@pytest.fixture(params=BACKENDS)
def db_url(request, tmp_path) -> str:
    """A fresh lab-book URL, once on SQLite and once on PostgreSQL."""
    url = fresh_url(request.param, tmp_path)
    yield url
    if request.param == "postgresql":
        import pg_server

        pg_server.drop_database(url)


@pytest.fixture
def labbook(db_url):
    """An open, empty lab book on each backend."""
    from swimlab.store import LabBook

    book = LabBook.open(db_url)
    yield book
    book.close()


# Faster lab books for the permission and sign-in tests: the same two backends, but SQLite lives
# in memory-backed /dev/shm where there is one (durability is tested in test_store.py, not here)
# and PostgreSQL keeps one migrated schema per module, emptied before each test. A test module
# imports both fixtures below and names ``quick_labbook`` where it needs a lab book.
_DATA_TABLES = "sessions, session_versions, raw_files, session_raw_files, audit, people"


@pytest.fixture(scope="module")
def postgres_quick_book():
    """One migrated PostgreSQL lab book per test module."""
    import pg_server

    from swimlab.store import LabBook

    url = pg_server.fresh_database(postgres_or_skip())
    book = LabBook.open(url)
    yield book
    book.close()
    pg_server.drop_database(url)


@pytest.fixture(params=BACKENDS)
def quick_labbook(request, tmp_path):
    """An empty lab book on each backend, made fast (see above)."""
    import shutil
    import tempfile

    from swimlab.store import LabBook

    if request.param == "postgresql":
        book = request.getfixturevalue("postgres_quick_book")
        with book._engine.begin() as conn:
            conn.exec_driver_sql(f"TRUNCATE {_DATA_TABLES} RESTART IDENTITY CASCADE")
            conn.exec_driver_sql("UPDATE lab_settings SET settings = '{}', mappings = '{}', single_user_name = ''")
        yield book
        return
    shm = "/dev/shm"
    folder = tempfile.mkdtemp(dir=shm) if os.access(shm, os.W_OK) else str(tmp_path)
    book = LabBook.open(f"sqlite:///{folder}/labbook.sqlite")
    yield book
    book.close()
    if folder != str(tmp_path):
        shutil.rmtree(folder, ignore_errors=True)
