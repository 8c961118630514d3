"""The lab book: sessions, raw files, the audit trail and sign-off (DESIGN.md §4).

One :class:`LabBook` over SQLAlchemy 2 (Core) keeps

- **sessions** with a version number. A save names the version it was based on; a save based
  on a stale version is refused with :class:`~swimlab.errors.ConflictError`, which says what
  changed meanwhile and who changed it (optimistic concurrency; never a silent merge). Every
  saved version's document is kept in ``session_versions``, so nothing is ever lost.
- **raw files** by SHA-256: inserted once, never updated; bytes whose checksum does not match
  are refused.
- an **append-only audit trail**: who, when (UTC), what (field-level changes as a flat
  dotted-path diff of the two JSON documents), why, and the version after.
- each session's **status**: draft → submitted → approved, or returned with a comment. An
  approved session is read-only until it is reopened with a reason. A reviewer must differ from
  the session's operator and from the person who submitted it (four eyes).
- the **lab settings** (overrides of :class:`~swimlab.settings.LabSettings`) and remembered
  column mappings of logger files, keyed by a fingerprint of the file's header.
- the **people** of a lab server: account name, display name, role (:data:`swimlab.auth.ROLES`),
  e-mail for single sign-on, a salted scrypt hash of a local password, and the failed-login
  counter behind the lock-out (:meth:`LabBook.login`).

Two ways in. The methods of :class:`LabBook` itself take ``who=`` as given: they are the trusted
interface of the command line on the machine that holds the database, of single-user mode and
of tests. :meth:`LabBook.as_person` gives an :class:`ActingLabBook` that acts as one
:class:`~swimlab.auth.Person` and checks, inside the transaction that acts, that the person's
*current* role may take the action (:data:`swimlab.auth.PERMISSIONS`), that they edit and
submit only sessions they created, and four eyes. A call that breaks a rule is refused with
:class:`~swimlab.errors.PermissionDeniedError` and changes nothing. Each audit entry records who
acted and how that identity was established (``via``: password, single sign-on, single-user
name, or empty for the trusted interface).

Where it lives: the URL given to :meth:`LabBook.open`, else the environment variable
``SWIMLAB_DATABASE_URL``, else ``database_url`` in ``swimlab.toml`` in the working folder or in
``~/.config/swimlab/settings.toml``, else SQLite at ``./labbook/swimlab.sqlite`` (folder made on
first run). SQLite runs in WAL mode with foreign keys on, a busy timeout, and every transaction
taken with ``BEGIN IMMEDIATE`` so that two writers queue rather than fail half-way; PostgreSQL
(``postgresql+psycopg://…``) serves a department.

Schema changes are a short ordered list of DDL steps (:data:`MIGRATIONS`) recorded in a
``schema_version`` table, applied in one transaction when a lab book is opened. Not Alembic:
that is one dependency less, the lab book has six tables, and the same few statements must run
on SQLite and PostgreSQL alike, which plain DDL with two small dialect substitutions does. The
append-only tables are also guarded in the database itself by triggers, so that no other
program can rewrite the trail either.

Each public method that writes runs in exactly one transaction: it commits whole or not at all.
"""

from __future__ import annotations

import datetime as dt
import json
import os
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import sqlalchemy as sa
from sqlalchemy import event
from sqlalchemy.engine import Connection, Engine, make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError

from swimlab import auth
from swimlab.errors import ConflictError, InputError, PermissionDeniedError
from swimlab.io.checksum import sha256_hex
from swimlab.session import STATUSES, Session
from swimlab.settings import LabSettings

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

ENV_URL = "SWIMLAB_DATABASE_URL"
DEFAULT_SQLITE_PATH = Path("labbook") / "swimlab.sqlite"
BUSY_TIMEOUT_S = 15.0
"""How long a SQLite writer waits for another writer to finish before giving up. [s]"""

SESSION_LIST_COLUMNS = [
    "session_id",
    "title",
    "fish",
    "trial_date",
    "temperature_c",
    "status",
    "operator",
    "version",
    "updated_at",
]
AUDIT_COLUMNS = ["id", "session_id", "at", "who", "action", "changes", "reason", "version", "via"]
PEOPLE_COLUMNS = [
    "username",
    "display_name",
    "role",
    "email",
    "active",
    "local_password",
    "failed_logins",
    "locked_until",
    "last_login_at",
    "created_at",
]

_PG_LOCK_KEY = 0x5757_1AB0
"""Advisory lock taken by PostgreSQL migrations so that two openers do not race."""


# --------------------------------------------------------------------------------------------
# Errors and values
# --------------------------------------------------------------------------------------------


class UnknownSessionError(InputError):
    """No session with this id is in the lab book."""


@dataclass(frozen=True)
class StoredSession:
    """A session as the lab book holds it.

    Attributes
    ----------
    session
        The validated session document of the current version.
    version
        The current version (1 for a new session); pass it as ``base_version`` when saving.
    status
        One of :data:`swimlab.session.STATUSES`.
    return_comment
        The reviewer's comment when the session was returned, else ``""``.
    updated_at, updated_by
        When (UTC, ISO 8601) and by whom the session last changed (document or status).
    """

    session: Session
    version: int
    status: str
    return_comment: str = ""
    updated_at: str = ""
    updated_by: str = ""


# --------------------------------------------------------------------------------------------
# Field-level diffs
# --------------------------------------------------------------------------------------------

_ABSENT = object()


def flatten_document(document: Any, prefix: str = "") -> dict[str, Any]:
    """Flatten nested dicts and lists to {dotted path: scalar} (``fish.0.mass_g``).

    Empty dicts and lists are kept as leaves, so that emptying a list shows in a diff.
    """
    out: dict[str, Any] = {}
    stack: list[tuple[str, Any]] = [(prefix, document)]
    while stack:
        path, node = stack.pop()
        if isinstance(node, dict):
            items = [(f"{path}.{k}" if path else str(k), v) for k, v in node.items()]
        elif isinstance(node, list):
            items = [(f"{path}.{i}" if path else str(i), v) for i, v in enumerate(node)]
        else:
            out[path] = node
            continue
        if not items and path:
            out[path] = node
        stack.extend(reversed(items))  # depth first, in document order
    return out


def _same(a: Any, b: Any) -> bool:
    if a is _ABSENT or b is _ABSENT:
        return a is b
    if isinstance(a, bool) or isinstance(b, bool):
        return type(a) is type(b) and a == b
    if isinstance(a, int | float) and isinstance(b, int | float):
        return a == b  # 3 and 3.0 are the same value in JSON
    return type(a) is type(b) and a == b


def _has_children(flat: Mapping[str, Any], path: str) -> bool:
    start = path + "."
    return any(key.startswith(start) for key in flat)


def diff_documents(old: Any, new: Any) -> list[dict[str, Any]]:
    """Field-level changes from ``old`` to ``new``: ``[{"field", "from", "to"}, …]``.

    Paths are those of :func:`flatten_document`, in the order they appear (old first); a field
    that is absent on one side shows ``None`` there. A list or dict that was empty on one side
    and has entries on the other shows as its entries only (``tags.0: None → "x"``).
    """
    before, after = flatten_document(old), flatten_document(new)
    changes = []
    for path in [*before, *(p for p in after if p not in before)]:
        a, b = before.get(path, _ABSENT), after.get(path, _ABSENT)
        if _same(a, b):
            continue
        if (b is _ABSENT and a in ({}, []) and _has_children(after, path)) or (
            a is _ABSENT and b in ({}, []) and _has_children(before, path)
        ):
            continue  # an empty container that gained (or lost) entries: the entries show
        changes.append(
            {"field": path, "from": None if a is _ABSENT else a, "to": None if b is _ABSENT else b}
        )
    return changes


# --------------------------------------------------------------------------------------------
# Where the lab book lives
# --------------------------------------------------------------------------------------------


def _settings_file_url(path: Path) -> str | None:
    value = auth.settings_file_value(path, "database_url")
    if value is None:
        return None
    if not isinstance(value, str) or not value.strip():
        raise InputError(
            f"must be a database URL (text); got {value!r}", file=str(path), field="database_url"
        )
    return value.strip()


def resolve_database_url(
    url: str | None = None,
    *,
    environ: Mapping[str, str] | None = None,
    cwd: str | os.PathLike | None = None,
    home: str | os.PathLike | None = None,
) -> tuple[str, str]:
    """Decide which database the lab book uses.

    Returns
    -------
    url, source
        ``source`` says where the URL came from: ``"argument"``, ``"environment"``, the
        settings file's path, or ``"default"`` (SQLite at ``./labbook/swimlab.sqlite``).
    """
    environ = os.environ if environ is None else environ
    if url is not None and str(url).strip():
        return str(url).strip(), "argument"
    if environ.get(ENV_URL, "").strip():
        return environ[ENV_URL].strip(), "environment"
    for candidate in auth.settings_files(cwd, home):
        found = _settings_file_url(candidate)
        if found:
            return found, str(candidate)
    where = Path(cwd) if cwd is not None else Path.cwd()
    return f"sqlite:///{(where / DEFAULT_SQLITE_PATH).resolve()}", "default"


def _normalise_url(url: str) -> sa.URL:
    try:
        parsed = make_url(url)
    except ArgumentError as exc:
        raise InputError(f"is not a database URL: {url!r}", field="database_url") from exc
    backend = parsed.get_backend_name()
    if backend in ("postgres", "postgresql"):
        driver = parsed.get_driver_name()
        if parsed.drivername in ("postgres", "postgresql") or driver == "psycopg2":
            parsed = parsed.set(drivername="postgresql+psycopg")
    elif backend != "sqlite":
        raise InputError(
            f"names the {backend!r} database; the lab book runs on 'sqlite' or 'postgresql'",
            field="database_url",
        )
    return parsed


# --------------------------------------------------------------------------------------------
# Tables and migrations
# --------------------------------------------------------------------------------------------

metadata = sa.MetaData()

sessions_table = sa.Table(
    "sessions",
    metadata,
    sa.Column("id", sa.String(64), primary_key=True),
    sa.Column("version", sa.Integer, nullable=False),
    sa.Column("status", sa.String(16), nullable=False),
    sa.Column("title", sa.Text, nullable=False),
    sa.Column("operator", sa.Text, nullable=False),
    sa.Column("fish_ids", sa.Text, nullable=False),
    sa.Column("temperature_c", sa.Float),
    sa.Column("trial_date", sa.String(10)),
    sa.Column("document", sa.Text, nullable=False),
    sa.Column("return_comment", sa.Text, nullable=False),
    sa.Column("created_at", sa.String(40), nullable=False),
    sa.Column("updated_at", sa.String(40), nullable=False),
    sa.Column("updated_by", sa.Text, nullable=False),
    sa.Column("created_by", sa.Text, nullable=False),
)
versions_table = sa.Table(
    "session_versions",
    metadata,
    sa.Column("session_id", sa.String(64), primary_key=True),
    sa.Column("version", sa.Integer, primary_key=True),
    sa.Column("document", sa.Text, nullable=False),
    sa.Column("saved_at", sa.String(40), nullable=False),
    sa.Column("saved_by", sa.Text, nullable=False),
)
raw_files_table = sa.Table(
    "raw_files",
    metadata,
    sa.Column("sha256", sa.String(64), primary_key=True),
    sa.Column("name", sa.Text, nullable=False),
    sa.Column("data", sa.LargeBinary, nullable=False),
    sa.Column("size", sa.BigInteger, nullable=False),
    sa.Column("added_at", sa.String(40), nullable=False),
)
links_table = sa.Table(
    "session_raw_files",
    metadata,
    sa.Column("session_id", sa.String(64), primary_key=True),
    sa.Column("sha256", sa.String(64), primary_key=True),
)
audit_table = sa.Table(
    "audit",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("session_id", sa.String(64)),
    sa.Column("at", sa.String(40), nullable=False),
    sa.Column("who", sa.Text, nullable=False),
    sa.Column("action", sa.String(32), nullable=False),
    sa.Column("changes", sa.Text, nullable=False),
    sa.Column("reason", sa.Text, nullable=False),
    sa.Column("version_after", sa.Integer),
    sa.Column("via", sa.String(16), nullable=False),
)
lab_settings_table = sa.Table(
    "lab_settings",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("settings", sa.Text, nullable=False),
    sa.Column("mappings", sa.Text, nullable=False),
    sa.Column("updated_at", sa.String(40), nullable=False),
    sa.Column("updated_by", sa.Text, nullable=False),
    sa.Column("single_user_name", sa.Text, nullable=False),
)
people_table = sa.Table(
    "people",
    metadata,
    sa.Column("username", sa.String(64), primary_key=True),
    sa.Column("display_name", sa.Text, nullable=False),
    sa.Column("role", sa.String(16), nullable=False),
    sa.Column("email", sa.Text, nullable=False),
    sa.Column("password_hash", sa.Text, nullable=False),
    sa.Column("active", sa.Integer, nullable=False),
    sa.Column("failed_logins", sa.Integer, nullable=False),
    sa.Column("locked_until", sa.String(40), nullable=False),
    sa.Column("last_login_at", sa.String(40), nullable=False),
    sa.Column("created_at", sa.String(40), nullable=False),
    sa.Column("updated_at", sa.String(40), nullable=False),
    sa.Column("updated_by", sa.Text, nullable=False),
)
schema_version_table = sa.Table(
    "schema_version",
    metadata,
    sa.Column("version", sa.Integer, primary_key=True),
    sa.Column("description", sa.Text, nullable=False),
    sa.Column("applied_at", sa.String(40), nullable=False),
)

_DIALECT_WORDS = {
    "sqlite": {"blob": "BLOB", "serial_pk": "INTEGER PRIMARY KEY AUTOINCREMENT"},
    "postgresql": {
        "blob": "BYTEA",
        "serial_pk": "BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY",
    },
}

_SCHEMA_VERSION_DDL = (
    "CREATE TABLE IF NOT EXISTS schema_version ("
    " version INTEGER PRIMARY KEY,"
    " description TEXT NOT NULL,"
    " applied_at VARCHAR(40) NOT NULL)"
)

_STATUS_CHECK = ", ".join(f"'{s}'" for s in STATUSES)

_STEP_1 = [
    f"""CREATE TABLE sessions (
        id VARCHAR(64) PRIMARY KEY,
        version INTEGER NOT NULL CHECK (version >= 1),
        status VARCHAR(16) NOT NULL CHECK (status IN ({_STATUS_CHECK})),
        title TEXT NOT NULL,
        operator TEXT NOT NULL,
        fish_ids TEXT NOT NULL,
        temperature_c DOUBLE PRECISION,
        trial_date VARCHAR(10),
        document TEXT NOT NULL,
        return_comment TEXT NOT NULL DEFAULT '',
        created_at VARCHAR(40) NOT NULL,
        updated_at VARCHAR(40) NOT NULL,
        updated_by TEXT NOT NULL)""",
    """CREATE TABLE session_versions (
        session_id VARCHAR(64) NOT NULL REFERENCES sessions (id),
        version INTEGER NOT NULL CHECK (version >= 1),
        document TEXT NOT NULL,
        saved_at VARCHAR(40) NOT NULL,
        saved_by TEXT NOT NULL,
        PRIMARY KEY (session_id, version))""",
    """CREATE TABLE raw_files (
        sha256 VARCHAR(64) PRIMARY KEY,
        name TEXT NOT NULL,
        data {blob} NOT NULL,
        size BIGINT NOT NULL CHECK (size >= 0),
        added_at VARCHAR(40) NOT NULL)""",
    """CREATE TABLE session_raw_files (
        session_id VARCHAR(64) NOT NULL REFERENCES sessions (id),
        sha256 VARCHAR(64) NOT NULL REFERENCES raw_files (sha256),
        PRIMARY KEY (session_id, sha256))""",
    """CREATE TABLE audit (
        id {serial_pk},
        session_id VARCHAR(64) REFERENCES sessions (id),
        at VARCHAR(40) NOT NULL,
        who TEXT NOT NULL,
        action VARCHAR(32) NOT NULL,
        changes TEXT NOT NULL,
        reason TEXT NOT NULL,
        version_after INTEGER)""",
    """CREATE TABLE lab_settings (
        id INTEGER PRIMARY KEY CHECK (id = 1),
        settings TEXT NOT NULL,
        mappings TEXT NOT NULL,
        updated_at VARCHAR(40) NOT NULL,
        updated_by TEXT NOT NULL)""",
    "INSERT INTO lab_settings (id, settings, mappings, updated_at, updated_by)"
    " VALUES (1, '{{}}', '{{}}', '{now}', 'swimlab')",
]

_APPEND_ONLY = ("audit", "session_versions", "raw_files")

_STEP_2 = {
    "common": [
        "CREATE INDEX audit_by_session ON audit (session_id, id)",
        "CREATE INDEX sessions_by_status ON sessions (status, updated_at)",
    ],
    "sqlite": [
        f"CREATE TRIGGER {table}_no_{verb.lower()} BEFORE {verb} ON {table} "
        f"BEGIN SELECT RAISE(ABORT, 'the {table} table is append-only'); END"
        for table in _APPEND_ONLY
        for verb in ("UPDATE", "DELETE")
    ],
    "postgresql": [
        "CREATE FUNCTION swimlab_refuse_change() RETURNS trigger LANGUAGE plpgsql AS $$ "
        "BEGIN RAISE EXCEPTION USING MESSAGE = 'the ' || TG_TABLE_NAME || ' table is append-only'; "
        "END $$",
        *(
            f"CREATE TRIGGER {table}_append_only BEFORE UPDATE OR DELETE ON {table} "
            "FOR EACH ROW EXECUTE FUNCTION swimlab_refuse_change()"
            for table in _APPEND_ONLY
        ),
    ],
}


_ROLE_CHECK = ", ".join(f"'{r}'" for r in auth.ROLES)

_STEP_3 = [
    # Who created a session: its owner, for "edit and submit only your own".
    "ALTER TABLE sessions ADD COLUMN created_by TEXT NOT NULL DEFAULT ''",
    "UPDATE sessions SET created_by = COALESCE((SELECT a.who FROM audit a"
    " WHERE a.session_id = sessions.id AND a.action = 'created' ORDER BY a.id LIMIT 1),"
    " updated_by)",
    # How the identity of each audit entry was established ('' before this step).
    "ALTER TABLE audit ADD COLUMN via VARCHAR(16) NOT NULL DEFAULT ''",
    f"""CREATE TABLE people (
        username VARCHAR(64) PRIMARY KEY,
        display_name TEXT NOT NULL,
        role VARCHAR(16) NOT NULL CHECK (role IN ({_ROLE_CHECK})),
        email TEXT NOT NULL DEFAULT '',
        password_hash TEXT NOT NULL DEFAULT '',
        active INTEGER NOT NULL DEFAULT 1 CHECK (active IN (0, 1)),
        failed_logins INTEGER NOT NULL DEFAULT 0 CHECK (failed_logins >= 0),
        locked_until VARCHAR(40) NOT NULL DEFAULT '',
        last_login_at VARCHAR(40) NOT NULL DEFAULT '',
        created_at VARCHAR(40) NOT NULL,
        updated_at VARCHAR(40) NOT NULL,
        updated_by TEXT NOT NULL)""",
    "CREATE UNIQUE INDEX people_by_email ON people (email) WHERE email <> ''",
    "CREATE INDEX sessions_by_creator ON sessions (created_by)",
]


_STEP_4 = [
    # The name of the one person of single-user mode, asked once and kept.
    "ALTER TABLE lab_settings ADD COLUMN single_user_name TEXT NOT NULL DEFAULT ''",
]


@dataclass(frozen=True)
class Migration:
    """One schema step: its number, what it does, and its statements per dialect."""

    version: int
    description: str
    common: tuple[str, ...] = ()
    by_dialect: tuple[tuple[str, tuple[str, ...]], ...] = ()

    def statements(self, dialect: str, now: str) -> list[str]:
        """The statements for ``dialect`` (``sqlite`` or ``postgresql``)."""
        words = {**_DIALECT_WORDS[dialect], "now": now}
        extra = dict(self.by_dialect).get(dialect, ())
        return [stmt.format(**words) for stmt in self.common] + list(extra)


MIGRATIONS: tuple[Migration, ...] = (
    Migration(1, "sessions, versions, raw files, audit trail, lab settings", tuple(_STEP_1)),
    Migration(
        2,
        "indexes for listing and the trail; append-only guards",
        tuple(s.replace("{", "{{").replace("}", "}}") for s in _STEP_2["common"]),
        (("sqlite", tuple(_STEP_2["sqlite"])), ("postgresql", tuple(_STEP_2["postgresql"]))),
    ),
    Migration(
        3,
        "people and roles; sessions' creator; how each audit entry's identity was established",
        tuple(s.replace("{", "{{").replace("}", "}}") for s in _STEP_3),
    ),
    Migration(4, "the kept name of single-user mode", tuple(_STEP_4)),
)
"""The ordered schema steps. Append new steps; never edit a released one."""

LATEST_SCHEMA = MIGRATIONS[-1].version


# --------------------------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------------------------


def _now() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="microseconds")


def _dumps(value: Any) -> str:
    return json.dumps(value, ensure_ascii=False, allow_nan=False, separators=(",", ":"))




def _person(value: Any, field: str = "who") -> str:
    if not isinstance(value, str) or not value.strip():
        raise InputError(
            f"must name the person acting (non-empty text); got {value!r}", field=field
        )
    if len(value) > 200:
        raise InputError("must be at most 200 characters", field=field)
    return value.strip()


def _text(value: Any, field: str, *, required: bool, min_length: int = 1) -> str:
    if not isinstance(value, str):
        raise InputError(f"must be text; got {value!r}", field=field)
    value = value.strip()
    if required and len(value) < min_length:
        raise InputError(
            f"is required (at least {min_length} characters); got {value!r}", field=field
        )
    return value



@dataclass(frozen=True)
class _Actor:
    """Who acts: the name for the trail, how it was established, and the person to check.

    ``person`` is ``None`` on the trusted interface (``who=`` given to :class:`LabBook`'s own
    methods): no role or ownership checks then, four eyes still.
    """

    name: str
    via: str = ""
    person: auth.Person | None = None

    @classmethod
    def given(cls, who: Any) -> _Actor:
        return cls(_person(who))

    def names(self) -> frozenset[str]:
        names = {self.name.strip().casefold()}
        if self.person is not None:
            names |= self.person.names()
        return frozenset(names)

    @property
    def account(self) -> bool:
        """Whether this is a signed-in account, whose role and ownership are checked."""
        return self.person is not None and self.person.authenticated


def _checked_document(session: Session) -> dict[str, Any]:
    if not isinstance(session, Session):
        raise InputError(f"must be a Session; got {type(session).__name__}", field="session")
    document = session.to_json_dict()
    Session.from_json_dict(document)  # raises InputError listing every problem
    return document


def _as_bytes(data: Any, field: str) -> bytes:
    if isinstance(data, bytes | bytearray | memoryview):
        return bytes(data)
    raise InputError(f"must be bytes; got {type(data).__name__}", field=field)


def _summary(document: Mapping[str, Any]) -> dict[str, Any]:
    return {
        "title": document["title"],
        "operator": document.get("operator", ""),
        "fish_ids": ", ".join(f["fish_id"] for f in document["fish"]),
        "temperature_c": document["water"]["temperature_c"],
        "trial_date": document.get("trial_date"),
    }


def _list_fields(fields: list[str], limit: int = 8) -> str:
    shown = ", ".join(fields[:limit])
    return shown + (f" and {len(fields) - limit} more" if len(fields) > limit else "")


# --------------------------------------------------------------------------------------------
# The lab book
# --------------------------------------------------------------------------------------------


class LabBook:
    """The running store of a lab. Open with :meth:`LabBook.open`; close with :meth:`close`."""

    def __init__(self, engine: Engine, *, url: str, source: str) -> None:
        self._engine = engine
        self.url = url
        """The database URL, password hidden."""
        self.source = source
        """Where the URL came from (see :func:`resolve_database_url`)."""
        self.dialect = engine.dialect.name

    # -- opening ------------------------------------------------------------------------------
    @classmethod
    def open(cls, url: str | None = None) -> LabBook:
        """Open (and create or upgrade) the lab book.

        Parameters
        ----------
        url
            SQLAlchemy database URL (``sqlite:///path``, ``postgresql+psycopg://user@host/db``);
            when ``None``, see :func:`resolve_database_url`.

        Raises
        ------
        InputError
            If the URL is not usable, the database cannot be reached, or it was made by a newer
            swimlab.
        """
        raw_url, source = resolve_database_url(url)
        parsed = _normalise_url(raw_url)
        shown = parsed.render_as_string(hide_password=True)
        if parsed.get_backend_name() == "sqlite":
            engine = cls._sqlite_engine(parsed, create_folder=source == "default")
        else:
            try:
                engine = sa.create_engine(parsed, pool_pre_ping=True)
            except (ArgumentError, NoSuchModuleError, ImportError) as exc:
                raise InputError(f"cannot use {shown}: {exc}", field="database_url") from exc
        book = cls(engine, url=shown, source=source)
        try:
            book._migrate()
        except DBAPIError as exc:
            engine.dispose()
            first = str(exc.orig).strip().splitlines()[0] if exc.orig else str(exc)
            raise InputError(
                f"cannot open the lab book at {shown}: {first}", field="database_url"
            ) from exc
        except BaseException:
            engine.dispose()
            raise
        return book

    @staticmethod
    def _sqlite_engine(parsed: sa.URL, *, create_folder: bool) -> Engine:
        database = parsed.database or ""
        in_memory = database in ("", ":memory:") or database.startswith("file::memory:")
        options: dict[str, Any] = {}
        if in_memory:
            options = {
                "poolclass": sa.pool.StaticPool,
                "connect_args": {"check_same_thread": False},
            }
        else:
            folder = Path(database).expanduser().resolve().parent
            if create_folder:
                folder.mkdir(parents=True, exist_ok=True)
            elif not folder.is_dir():
                raise InputError(
                    "the folder for the lab book does not exist",
                    file=str(folder),
                    field="database_url",
                )
            options = {"connect_args": {"timeout": BUSY_TIMEOUT_S}}
        try:
            engine = sa.create_engine(parsed, **options)
        except (ArgumentError, NoSuchModuleError) as exc:
            raise InputError(f"is not usable: {exc}", field="database_url") from exc

        @event.listens_for(engine, "connect")
        def _on_connect(dbapi_connection, _record):  # pragma: no cover - exercised via engine
            # Take transactions into our own hands (pysqlite otherwise defers BEGIN).
            dbapi_connection.isolation_level = None
            cursor = dbapi_connection.cursor()
            cursor.execute("PRAGMA foreign_keys = ON")
            cursor.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
            if not in_memory:
                cursor.execute("PRAGMA journal_mode = WAL")
            cursor.execute("PRAGMA synchronous = FULL")
            cursor.close()

        @event.listens_for(engine, "begin")
        def _on_begin(connection):  # pragma: no cover - exercised via engine
            # IMMEDIATE: take the write lock at the start, so two writers queue (busy timeout)
            # instead of one failing after it has read.
            connection.exec_driver_sql("BEGIN IMMEDIATE")

        return engine

    def _migrate(self, upto: int | None = None) -> int:
        """Apply pending schema steps (all, or up to ``upto``) in one transaction."""
        target = LATEST_SCHEMA if upto is None else upto
        with self._engine.begin() as conn:
            if self.dialect == "postgresql":
                conn.exec_driver_sql(f"SELECT pg_advisory_xact_lock({_PG_LOCK_KEY})")
            conn.exec_driver_sql(_SCHEMA_VERSION_DDL)
            current = (
                conn.execute(sa.select(sa.func.max(schema_version_table.c.version))).scalar() or 0
            )
            if current > LATEST_SCHEMA:
                raise InputError(
                    f"the lab book's schema is version {current}, newer than this swimlab knows "
                    f"({LATEST_SCHEMA}); update swimlab",
                    field="database_url",
                )
            now = _now()
            for step in MIGRATIONS:
                if current < step.version <= target:
                    for statement in step.statements(self.dialect, now):
                        conn.exec_driver_sql(statement)
                    conn.execute(
                        schema_version_table.insert().values(
                            version=step.version, description=step.description, applied_at=now
                        )
                    )
                    current = step.version
        return current

    def schema_version(self) -> int:
        """The schema version of the open lab book."""
        with self._engine.connect() as conn:
            return int(
                conn.execute(sa.select(sa.func.max(schema_version_table.c.version))).scalar() or 0
            )

    def close(self) -> None:
        """Release the database connections."""
        self._engine.dispose()

    def __enter__(self) -> LabBook:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"LabBook({self.url!r})"

    # -- internals ----------------------------------------------------------------------------
    def _locked_row(self, conn: Connection, session_id: str):
        query = sa.select(sessions_table).where(sessions_table.c.id == session_id)
        if self.dialect == "postgresql":
            query = query.with_for_update()
        row = conn.execute(query).mappings().first()
        if row is None:
            raise UnknownSessionError(
                f"no session {session_id!r} in the lab book", field="session_id"
            )
        return row

    def _insert_raw(self, conn: Connection, sha: str, data: bytes, name: str) -> None:
        if self.dialect == "postgresql":
            from sqlalchemy.dialects.postgresql import insert
        else:
            from sqlalchemy.dialects.sqlite import insert
        statement = insert(raw_files_table).values(
            sha256=sha, name=name, data=data, size=len(data), added_at=_now()
        )
        conn.execute(statement.on_conflict_do_nothing(index_elements=["sha256"]))

    def _store_raw_files(
        self, conn: Connection, session: Session, raw_files: Mapping[str, bytes] | None
    ) -> None:
        names = {ref.sha256: ref.name for ref in session.raw_files}
        for sha, data in (raw_files or {}).items():
            data = _as_bytes(data, f"raw_files.{sha}")
            actual = sha256_hex(data)
            if actual != sha:
                raise InputError(
                    f"the bytes have checksum {actual}, not the one they are given under; "
                    "nothing was saved",
                    field=f"raw_files.{sha}",
                )
            self._insert_raw(conn, sha, data, names.get(sha, ""))
        wanted = [ref.sha256 for ref in session.raw_files]
        if wanted:
            present = set(
                conn.execute(
                    sa.select(raw_files_table.c.sha256).where(
                        raw_files_table.c.sha256.in_(set(wanted))
                    )
                ).scalars()
            )
            for i, ref in enumerate(session.raw_files):
                if ref.sha256 not in present:
                    raise InputError(
                        f"refers to raw file {ref.name!r}, which is not in the lab book and was "
                        "not given; nothing was saved",
                        field=f"raw_files.{i}.sha256",
                    )

    def _link_raw_files(self, conn: Connection, session_id: str, session: Session) -> None:
        linked = set(
            conn.execute(
                sa.select(links_table.c.sha256).where(links_table.c.session_id == session_id)
            ).scalars()
        )
        for sha in dict.fromkeys(ref.sha256 for ref in session.raw_files):
            if sha not in linked:
                conn.execute(links_table.insert().values(session_id=session_id, sha256=sha))

    def _audit(
        self,
        conn: Connection,
        *,
        session_id: str | None,
        who: str,
        action: str,
        changes: list[dict[str, Any]],
        reason: str,
        version: int | None,
        at: str,
        via: str = "",
    ) -> None:
        conn.execute(
            audit_table.insert().values(
                session_id=session_id,
                at=at,
                who=who,
                action=action,
                changes=_dumps(changes),
                reason=reason,
                version_after=version,
                via=via,
            )
        )

    def _check(self, conn: Connection, actor: _Actor, action: str, what: str = "") -> None:
        """Refuse (PermissionDeniedError) unless ``actor`` may take ``action`` now.

        For a signed-in account the role is read again from the people table, in the same
        transaction as the action, so that a changed role or a deactivated account counts at
        once. The trusted interface is not checked.
        """
        person = actor.person
        if person is None:
            return
        if person.authenticated:
            query = sa.select(people_table.c.role, people_table.c.active).where(
                people_table.c.username == person.username
            )
            if self.dialect == "postgresql":
                query = query.with_for_update(read=True)
            row = conn.execute(query).first()
            if row is None or not row.active:
                state = "not in this lab book" if row is None else "no longer active"
                raise PermissionDeniedError(
                    f"the account {person.username!r} is {state}; nothing was changed"
                )
            person = replace(person, role=row.role)
        auth.require(person, action, what)

    @staticmethod
    def _check_owner(actor: _Actor, row: Mapping[str, Any], verb: str) -> None:
        """Refuse unless a signed-in ``actor`` created the session in ``row``."""
        if not actor.account:
            return
        owner = row["created_by"] or ""
        if owner.strip().casefold() != actor.name.strip().casefold():
            raise PermissionDeniedError(
                f"{actor.person} may {verb} only sessions they created; session {row['id']!r} "
                f"was created by {owner!r}. Nothing was changed."
            )

    def _conflict(self, conn: Connection, session_id: str, base_version: int, row) -> ConflictError:
        current = int(row["version"])
        if base_version > current or base_version < 1:
            error = ConflictError(
                f"session {session_id!r} has no version {base_version}; it is at version "
                f"{current}. Nothing was saved; reload the session."
            )
            error.current_version, error.changes = current, []
            return error
        entries = conn.execute(
            sa.select(
                audit_table.c.who,
                audit_table.c.version_after,
                audit_table.c.changes,
                audit_table.c.action,
            )
            .where(audit_table.c.session_id == session_id)
            .where(audit_table.c.version_after > base_version)
            .where(audit_table.c.action == "saved")
            .order_by(audit_table.c.id)
        ).all()
        changes = [
            {
                "version": entry.version_after,
                "who": entry.who,
                "fields": [c["field"] for c in json.loads(entry.changes)],
            }
            for entry in entries
        ]
        described = "; ".join(
            f"version {c['version']} by {c['who']}: {_list_fields(c['fields'])}" for c in changes
        )
        error = ConflictError(
            f"session {session_id!r} changed since version {base_version}, which your edit was "
            f"based on; it is now version {current}. Changed meanwhile: {described or 'nothing recorded'}. "
            "Nothing of yours was saved; reload the session and apply your changes again."
        )
        error.current_version, error.changes = current, changes
        return error

    # -- sessions -----------------------------------------------------------------------------
    def create_session(
        self,
        session: Session,
        raw_files: Mapping[str, bytes] | None = None,
        *,
        who: str,
        reason: str = "created",
    ) -> int:
        """Add a new session (status draft) with the raw files it refers to.

        Parameters
        ----------
        session
            The new session; its ``session_id`` must not be in the lab book yet.
        raw_files
            Bytes of raw files, keyed by SHA-256 (hex). Files already in the lab book may be
            left out.
        who, reason
            For the audit trail.

        Returns
        -------
        int
            The version, 1.

        Raises
        ------
        ConflictError
            If a session with this id exists.
        InputError
            If the session is not valid, a raw file's bytes do not match its checksum, or the
            session refers to a raw file the lab book does not have.
        """
        return self._create_session(session, raw_files, actor=_Actor.given(who), reason=reason)

    def _create_session(
        self,
        session: Session,
        raw_files: Mapping[str, bytes] | None,
        *,
        actor: _Actor,
        reason: str,
    ) -> int:
        who = actor.name
        reason = _text(reason, "reason", required=False)
        document = _checked_document(session)
        session_id = session.session_id
        at = _now()
        with self._engine.begin() as conn:
            self._check(conn, actor, auth.CREATE)
            exists = conn.execute(
                sa.select(sessions_table.c.id).where(sessions_table.c.id == session_id)
            ).first()
            if exists:
                raise ConflictError(
                    f"a session with id {session_id!r} is already in the lab book; nothing was saved"
                )
            self._store_raw_files(conn, session, raw_files)
            text = _dumps(document)
            conn.execute(
                sessions_table.insert().values(
                    id=session_id,
                    version=1,
                    status="draft",
                    document=text,
                    return_comment="",
                    created_at=at,
                    updated_at=at,
                    updated_by=who,
                    created_by=who,
                    **_summary(document),
                )
            )
            conn.execute(
                versions_table.insert().values(
                    session_id=session_id, version=1, document=text, saved_at=at, saved_by=who
                )
            )
            self._link_raw_files(conn, session_id, session)
            self._audit(
                conn,
                session_id=session_id,
                who=who,
                action="created",
                changes=[],
                reason=reason,
                version=1,
                at=at,
                via=actor.via,
            )
        return 1

    def save_session(
        self,
        session: Session,
        *,
        base_version: int,
        who: str,
        reason: str,
        raw_files: Mapping[str, bytes] | None = None,
    ) -> int:
        """Save an edited session as a new version.

        Parameters
        ----------
        session
            The edited session (same ``session_id``).
        base_version
            The version the edit started from (:attr:`StoredSession.version`).
        who, reason
            For the audit trail.
        raw_files
            Bytes of raw files newly referred to, keyed by SHA-256 (hex).

        Returns
        -------
        int
            The new version; the current one unchanged when the document did not change
            (nothing is written then).

        Raises
        ------
        ConflictError
            If the session was saved by someone else since ``base_version``: the message lists
            each later version, who saved it, and the fields it changed.
        PermissionDeniedError
            If the session is approved (reopen it first, with a reason).
        UnknownSessionError, InputError
            If there is no such session, or the session or a raw file is not valid.

        Notes
        -----
        Saving a submitted session takes it back to draft, so that a reviewer never approves a
        version they were not sent.
        """
        return self._save_session(
            session,
            base_version=base_version,
            actor=_Actor.given(who),
            reason=reason,
            raw_files=raw_files,
        )

    def _save_session(
        self,
        session: Session,
        *,
        base_version: int,
        actor: _Actor,
        reason: str,
        raw_files: Mapping[str, bytes] | None,
    ) -> int:
        who = actor.name
        reason = _text(reason, "reason", required=False)
        if isinstance(base_version, bool) or not isinstance(base_version, int):
            raise InputError(f"must be a whole number; got {base_version!r}", field="base_version")
        document = _checked_document(session)
        session_id = session.session_id
        at = _now()
        with self._engine.begin() as conn:
            self._check(conn, actor, auth.EDIT_OWN, f"{session_id!r}")
            row = self._locked_row(conn, session_id)
            self._check_owner(actor, row, "edit")
            if row["status"] == "approved":
                raise PermissionDeniedError(
                    f"session {session_id!r} is approved and read-only; reopen it with a reason "
                    "before editing. Nothing was saved."
                )
            if int(row["version"]) != base_version:
                raise self._conflict(conn, session_id, base_version, row)
            changes = diff_documents(json.loads(row["document"]), document)
            if not changes:
                return base_version
            status = "draft" if row["status"] == "submitted" else row["status"]
            if status != row["status"]:
                changes.append({"field": "status", "from": row["status"], "to": status})
            self._store_raw_files(conn, session, raw_files)
            new_version = base_version + 1
            text = _dumps(document)
            result = conn.execute(
                sessions_table.update()
                .where(sessions_table.c.id == session_id)
                .where(sessions_table.c.version == base_version)
                .values(
                    version=new_version,
                    status=status,
                    document=text,
                    updated_at=at,
                    updated_by=who,
                    **_summary(document),
                )
            )
            if result.rowcount != 1:  # pragma: no cover - guarded by the locked read above
                raise self._conflict(
                    conn, session_id, base_version, self._locked_row(conn, session_id)
                )
            conn.execute(
                versions_table.insert().values(
                    session_id=session_id,
                    version=new_version,
                    document=text,
                    saved_at=at,
                    saved_by=who,
                )
            )
            self._link_raw_files(conn, session_id, session)
            self._audit(
                conn,
                session_id=session_id,
                who=who,
                action="saved",
                changes=changes,
                reason=reason,
                version=new_version,
                at=at,
                via=actor.via,
            )
        return new_version

    def get_session(self, session_id: str) -> StoredSession:
        """Return the current version of a session.

        Raises
        ------
        UnknownSessionError
            If there is no such session.
        """
        with self._engine.connect() as conn:
            row = (
                conn.execute(sa.select(sessions_table).where(sessions_table.c.id == session_id))
                .mappings()
                .first()
            )
        if row is None:
            raise UnknownSessionError(
                f"no session {session_id!r} in the lab book", field="session_id"
            )
        return StoredSession(
            session=Session.from_json_dict(json.loads(row["document"])),
            version=int(row["version"]),
            status=row["status"],
            return_comment=row["return_comment"],
            updated_at=row["updated_at"],
            updated_by=row["updated_by"],
        )

    def get_session_version(self, session_id: str, version: int) -> Session:
        """Return one saved version of a session (every version is kept)."""
        with self._engine.connect() as conn:
            text = conn.execute(
                sa.select(versions_table.c.document)
                .where(versions_table.c.session_id == session_id)
                .where(versions_table.c.version == version)
            ).scalar()
        if text is None:
            raise UnknownSessionError(
                f"no version {version} of session {session_id!r}", field="version"
            )
        return Session.from_json_dict(json.loads(text))

    def session_history(self, session_id: str) -> pd.DataFrame:
        """Every saved version of a session: version, saved_at, saved_by."""
        import pandas as pd

        with self._engine.connect() as conn:
            rows = conn.execute(
                sa.select(
                    versions_table.c.version, versions_table.c.saved_at, versions_table.c.saved_by
                )
                .where(versions_table.c.session_id == session_id)
                .order_by(versions_table.c.version)
            ).all()
        return pd.DataFrame([tuple(r) for r in rows], columns=["version", "saved_at", "saved_by"])

    def list_sessions(self, status: str | None = None) -> pd.DataFrame:
        """One row per session, most recently changed first.

        Columns: session_id, title, fish (ids, comma-separated), trial_date, temperature_c,
        status, operator, version, updated_at.
        """
        import pandas as pd

        if status is not None and status not in STATUSES:
            raise ValueError(f"unknown status {status!r}; valid: {list(STATUSES)}")
        t = sessions_table.c
        query = sa.select(
            t.id,
            t.title,
            t.fish_ids,
            t.trial_date,
            t.temperature_c,
            t.status,
            t.operator,
            t.version,
            t.updated_at,
        ).order_by(t.updated_at.desc(), t.id)
        if status is not None:
            query = query.where(t.status == status)
        with self._engine.connect() as conn:
            rows = conn.execute(query).all()
        return pd.DataFrame([tuple(r) for r in rows], columns=SESSION_LIST_COLUMNS)

    # -- status and sign-off ------------------------------------------------------------------
    def _four_eyes(
        self, conn: Connection, actor: _Actor, session_id: str, row: Mapping[str, Any]
    ) -> None:
        """Refuse a review by anyone who had a hand in the session (four eyes).

        The reviewer must not be the person named as its operator, its creator, anyone who
        saved a version of it, or the person who submitted it last. Names are compared without
        regard to case; a signed-in reviewer is compared by account name and display name.
        """
        submitter = (
            conn.execute(
                sa.select(audit_table.c.who)
                .where(audit_table.c.session_id == session_id)
                .where(audit_table.c.action == "submitted")
                .order_by(audit_table.c.id.desc())
                .limit(1)
            ).scalar()
            or ""
        )
        savers = conn.execute(
            sa.select(versions_table.c.saved_by)
            .where(versions_table.c.session_id == session_id)
            .distinct()
        ).scalars()
        hands = [
            ("operator", row["operator"] or ""),
            ("creator", row["created_by"] or ""),
            ("person who submitted it", submitter),
            *(("person who saved a version of it", name or "") for name in savers),
        ]
        names = actor.names()
        for part, name in hands:
            if name.strip() and name.strip().casefold() in names:
                raise PermissionDeniedError(
                    f"{actor.name!r} is the {part} of session {session_id!r}; a different "
                    "person must review it (four eyes)"
                )

    def _set_status(
        self,
        session_id: str,
        *,
        actor: _Actor,
        permission: str,
        action: str,
        verb: str,
        allowed: Iterable[str],
        to: str,
        reason: str,
        return_comment: str = "",
        reviewer: bool = False,
        owner_only: bool = False,
        version: int | None = None,
    ) -> StoredSession:
        who = actor.name
        at = _now()
        with self._engine.begin() as conn:
            self._check(conn, actor, permission, f"{session_id!r}")
            row = self._locked_row(conn, session_id)
            if owner_only:
                self._check_owner(actor, row, verb)
            status = row["status"]
            if status not in allowed:
                hint = " (reopen it with a reason first)" if status == "approved" else ""
                raise PermissionDeniedError(
                    f"cannot {verb} session {session_id!r}: its "
                    f"status is {status!r}; this needs {' or '.join(repr(s) for s in allowed)}{hint}"
                )
            if version is not None and int(row["version"]) != version:
                raise self._conflict(conn, session_id, version, row)
            if reviewer:
                self._four_eyes(conn, actor, session_id, row)
            changes = [{"field": "status", "from": status, "to": to}]
            if return_comment != row["return_comment"]:
                changes.append(
                    {"field": "return_comment", "from": row["return_comment"], "to": return_comment}
                )
            result = conn.execute(
                sessions_table.update()
                .where(sessions_table.c.id == session_id)
                .where(sessions_table.c.status == status)
                .values(status=to, return_comment=return_comment, updated_at=at, updated_by=who)
            )
            if result.rowcount != 1:  # pragma: no cover - guarded by the locked read above
                raise ConflictError(
                    f"the status of session {session_id!r} changed meanwhile; reload it"
                )
            self._audit(
                conn,
                session_id=session_id,
                who=who,
                action=action,
                changes=changes,
                reason=reason,
                version=int(row["version"]),
                at=at,
                via=actor.via,
            )
        return self.get_session(session_id)

    def submit(self, session_id: str, *, who: str, comment: str = "") -> StoredSession:
        """Send a draft or returned session for review (status submitted)."""
        return self._submit(session_id, actor=_Actor.given(who), comment=comment)

    def _submit(self, session_id: str, *, actor: _Actor, comment: str) -> StoredSession:
        return self._set_status(
            session_id,
            actor=actor,
            permission=auth.SUBMIT_OWN,
            action="submitted",
            verb="submit",
            allowed=("draft", "returned"),
            to="submitted",
            reason=_text(comment, "comment", required=False),
            owner_only=True,
        )

    def approve(
        self, session_id: str, *, who: str, comment: str = "", version: int | None = None
    ) -> StoredSession:
        """Approve a submitted session; it becomes read-only.

        ``who`` must differ from the session's operator, its creator, everyone who saved a
        version of it and whoever submitted it (four eyes). Pass the ``version`` that was
        reviewed to refuse approving a later one (ConflictError).
        """
        return self._approve(session_id, actor=_Actor.given(who), comment=comment, version=version)

    def _approve(
        self, session_id: str, *, actor: _Actor, comment: str, version: int | None
    ) -> StoredSession:
        return self._set_status(
            session_id,
            actor=actor,
            permission=auth.APPROVE,
            action="approved",
            verb="approve",
            allowed=("submitted",),
            to="approved",
            reason=_text(comment, "comment", required=False),
            reviewer=True,
            version=version,
        )

    def return_session(self, session_id: str, *, who: str, comment: str) -> StoredSession:
        """Return a submitted session to its operator with a comment saying what to change."""
        return self._return_session(session_id, actor=_Actor.given(who), comment=comment)

    def _return_session(self, session_id: str, *, actor: _Actor, comment: str) -> StoredSession:
        comment = _text(comment, "comment", required=True, min_length=3)
        return self._set_status(
            session_id,
            actor=actor,
            permission=auth.RETURN,
            action="returned",
            verb="return",
            allowed=("submitted",),
            to="returned",
            reason=comment,
            return_comment=comment,
            reviewer=True,
        )

    def reopen(self, session_id: str, *, who: str, reason: str) -> StoredSession:
        """Reopen an approved session for editing (status draft); the reason goes in the trail."""
        return self._reopen(session_id, actor=_Actor.given(who), reason=reason)

    def _reopen(self, session_id: str, *, actor: _Actor, reason: str) -> StoredSession:
        reason = _text(reason, "reason", required=True, min_length=3)
        return self._set_status(
            session_id,
            actor=actor,
            permission=auth.REOPEN,
            action="reopened",
            verb="reopen",
            allowed=("approved",),
            to="draft",
            reason=reason,
        )

    # -- raw files ----------------------------------------------------------------------------
    def add_raw_file(self, data: bytes, name: str = "", *, sha256: str | None = None) -> str:
        """Store a raw file's bytes unchanged; return its SHA-256 (hex).

        Storing the same bytes again does nothing. When ``sha256`` is given, bytes with another
        checksum are refused.
        """
        return self._add_raw_file(data, name, sha256=sha256, actor=None)

    def _add_raw_file(
        self, data: bytes, name: str, *, sha256: str | None, actor: _Actor | None
    ) -> str:
        data = _as_bytes(data, "data")
        actual = sha256_hex(data)
        if sha256 is not None and actual != sha256:
            raise InputError(
                f"the bytes have checksum {actual}, not {sha256}; nothing was stored",
                field="sha256",
            )
        with self._engine.begin() as conn:
            if actor is not None:
                self._check(conn, actor, auth.ADD_RAW_FILE)
            self._insert_raw(conn, actual, data, _text(name, "name", required=False))
        return actual

    def get_raw_file(self, sha256: str) -> bytes:
        """Return a raw file's bytes, checked against their checksum."""
        with self._engine.connect() as conn:
            data = conn.execute(
                sa.select(raw_files_table.c.data).where(raw_files_table.c.sha256 == sha256)
            ).scalar()
        if data is None:
            raise InputError(
                f"no raw file with checksum {sha256!r} in the lab book", field="sha256"
            )
        data = bytes(data)
        if sha256_hex(data) != sha256:  # pragma: no cover - the database returned other bytes
            raise InputError(
                f"the stored raw file {sha256} is damaged (checksum differs)", field="sha256"
            )
        return data

    def raw_files_of(self, session: Session) -> dict[str, bytes]:
        """The bytes of every raw file ``session`` refers to, keyed by SHA-256."""
        return {ref.sha256: self.get_raw_file(ref.sha256) for ref in session.raw_files}

    # -- audit trail --------------------------------------------------------------------------
    def audit_trail(self, session_id: str | None) -> pd.DataFrame:
        """The audit trail of a session (or, for ``None``, of the lab: settings, mappings and
        people), oldest first.

        Columns: id, session_id, at (UTC, ISO 8601), who, action, changes (list of
        ``{"field", "from", "to"}``), reason, version (the version after the action), via (how
        the identity of ``who`` was established: ``password``, ``oidc``, ``single-user``, or
        ``""`` for the trusted interface).
        """
        import pandas as pd

        t = audit_table.c
        query = sa.select(
            t.id, t.session_id, t.at, t.who, t.action, t.changes, t.reason, t.version_after, t.via
        )
        query = query.where(
            t.session_id.is_(None) if session_id is None else t.session_id == session_id
        )
        with self._engine.connect() as conn:
            rows = conn.execute(query.order_by(t.id)).all()
        records = [
            (
                r.id,
                r.session_id,
                r.at,
                r.who,
                r.action,
                json.loads(r.changes),
                r.reason,
                r.version_after,
                r.via,
            )
            for r in rows
        ]
        return pd.DataFrame(records, columns=AUDIT_COLUMNS)

    def sign_off(self, session_id: str) -> dict[str, Any]:
        """Who entered, submitted and approved a session, and when: for exports and reports.

        Returns
        -------
        dict
            ``session_id``, ``status``, ``version``; ``entered_by``, ``entered_at``,
            ``entered_via`` (the "created" entry); ``last_saved_by``, ``last_saved_at``;
            ``submitted_by``, ``submitted_at`` (the last submission); ``approved_by``,
            ``approved_at``, ``approved_via``, ``approved_version`` (``None`` unless the session
            is approved now: a reopened session's earlier approval no longer holds). Times are
            UTC, ISO 8601; ``via`` as in :meth:`audit_trail`.
        """
        stored = self.get_session(session_id)
        record: dict[str, Any] = {
            "session_id": session_id,
            "status": stored.status,
            "version": stored.version,
            **{
                f"{what}_{part}": None
                for what in ("entered", "last_saved", "submitted", "approved")
                for part in ("by", "at")
            },
            "entered_via": None,
            "approved_via": None,
            "approved_version": None,
        }
        for entry in self.audit_trail(session_id).itertuples(index=False):
            if entry.action == "created":
                record.update(entered_by=entry.who, entered_at=entry.at, entered_via=entry.via)
                record.update(last_saved_by=entry.who, last_saved_at=entry.at)
            elif entry.action == "saved":
                record.update(last_saved_by=entry.who, last_saved_at=entry.at)
            elif entry.action == "submitted":
                record.update(submitted_by=entry.who, submitted_at=entry.at)
            elif entry.action == "approved":
                record.update(
                    approved_by=entry.who,
                    approved_at=entry.at,
                    approved_via=entry.via,
                    approved_version=int(entry.version),
                )
        if stored.status != "approved":
            record.update(approved_by=None, approved_at=None, approved_via=None, approved_version=None)
        return record

    # -- lab settings and remembered mappings -------------------------------------------------
    def _settings_row(self, conn: Connection):
        query = sa.select(lab_settings_table).where(lab_settings_table.c.id == 1)
        if self.dialect == "postgresql":
            query = query.with_for_update()
        return conn.execute(query).mappings().one()

    def get_lab_setting_overrides(self) -> dict[str, Any]:
        """The lab's own values, only those that differ from the defaults' fields set."""
        with self._engine.connect() as conn:
            row = conn.execute(
                sa.select(lab_settings_table.c.settings).where(lab_settings_table.c.id == 1)
            ).scalar()
        return json.loads(row or "{}")

    def get_lab_settings(self) -> LabSettings:
        """The lab's settings: defaults with the lab's overrides applied."""
        return LabSettings.from_dict(self.get_lab_setting_overrides())

    def set_lab_settings(
        self, overrides: Mapping[str, Any], *, who: str, reason: str
    ) -> LabSettings:
        """Replace the lab's overrides (``{}`` returns to the defaults); recorded in the trail."""
        return self._set_lab_settings(overrides, actor=_Actor.given(who), reason=reason)

    def _set_lab_settings(
        self, overrides: Mapping[str, Any], *, actor: _Actor, reason: str
    ) -> LabSettings:
        who = actor.name
        reason = _text(reason, "reason", required=True, min_length=3)
        if not isinstance(overrides, Mapping):
            raise InputError(
                f"must be a mapping of setting names to values; got {overrides!r}", field="settings"
            )
        overrides = dict(overrides)
        settings = LabSettings.from_dict(overrides)
        auth.check_login_settings(settings.login_attempts_max, settings.login_lockout_min)
        at = _now()
        with self._engine.begin() as conn:
            self._check(conn, actor, auth.CHANGE_SETTINGS)
            row = self._settings_row(conn)
            old = json.loads(row["settings"])
            changes = diff_documents({"settings": old}, {"settings": overrides})
            conn.execute(
                lab_settings_table.update()
                .where(lab_settings_table.c.id == 1)
                .values(settings=_dumps(overrides), updated_at=at, updated_by=who)
            )
            self._audit(
                conn,
                session_id=None,
                who=who,
                action="settings changed",
                changes=changes,
                reason=reason,
                version=None,
                at=at,
                via=actor.via,
            )
        return settings

    def remember_mapping(self, fingerprint: str, mapping: Mapping[str, Any], *, who: str) -> None:
        """Remember the column mapping for logger files whose header has this fingerprint."""
        self._remember_mapping(fingerprint, mapping, actor=_Actor.given(who))

    def _remember_mapping(
        self, fingerprint: str, mapping: Mapping[str, Any], *, actor: _Actor
    ) -> None:
        who = actor.name
        fingerprint = _text(fingerprint, "fingerprint", required=True)
        if not isinstance(mapping, Mapping):
            raise InputError(f"must be a mapping; got {mapping!r}", field="mapping")
        try:
            mapping = json.loads(_dumps(dict(mapping)))
        except (TypeError, ValueError) as exc:
            raise InputError(f"must hold only JSON values: {exc}", field="mapping") from exc
        at = _now()
        with self._engine.begin() as conn:
            self._check(conn, actor, auth.REMEMBER_MAPPING)
            row = self._settings_row(conn)
            mappings = json.loads(row["mappings"])
            old = mappings.get(fingerprint)
            if old == mapping:
                return
            mappings[fingerprint] = mapping
            conn.execute(
                lab_settings_table.update()
                .where(lab_settings_table.c.id == 1)
                .values(mappings=_dumps(mappings), updated_at=at, updated_by=who)
            )
            changes = [{"field": f"mappings[{fingerprint}]", "from": old, "to": mapping}]
            self._audit(
                conn,
                session_id=None,
                who=who,
                action="mapping remembered",
                changes=changes,
                reason="",
                version=None,
                at=at,
                via=actor.via,
            )

    def single_user_name(self) -> str:
        """The name kept for single-user mode (``""`` until someone gave one)."""
        with self._engine.connect() as conn:
            return (
                conn.execute(
                    sa.select(lab_settings_table.c.single_user_name).where(
                        lab_settings_table.c.id == 1
                    )
                ).scalar()
                or ""
            )

    def set_single_user_name(self, name: str) -> str:
        """Keep the name of the person working in single-user mode; recorded in the trail.

        Raises
        ------
        InputError
            If the name is empty or longer than 200 characters (field ``name``).
        """
        name = _person(name, "name")
        at = _now()
        with self._engine.begin() as conn:
            old = self._settings_row(conn)["single_user_name"]
            if old == name:
                return name
            conn.execute(
                lab_settings_table.update()
                .where(lab_settings_table.c.id == 1)
                .values(single_user_name=name)
            )
            self._audit(
                conn,
                session_id=None,
                who=name,
                action="single-user name set",
                changes=[{"field": "single_user_name", "from": old or None, "to": name}],
                reason="",
                version=None,
                at=at,
                via=auth.VIA_SINGLE_USER,
            )
        return name

    def recall_mapping(self, fingerprint: str) -> dict[str, Any] | None:
        """The remembered column mapping for this header fingerprint, or ``None``."""
        return self.remembered_mappings().get(fingerprint)

    def remembered_mappings(self) -> dict[str, dict[str, Any]]:
        """Every remembered mapping, keyed by header fingerprint."""
        with self._engine.connect() as conn:
            row = conn.execute(
                sa.select(lab_settings_table.c.mappings).where(lab_settings_table.c.id == 1)
            ).scalar()
        return json.loads(row or "{}")

    # -- people -------------------------------------------------------------------------------
    def _person_row(self, conn: Connection, username: str, *, lock: bool = False):
        query = sa.select(people_table).where(people_table.c.username == username)
        if lock and self.dialect == "postgresql":
            query = query.with_for_update()
        return conn.execute(query).mappings().first()

    def _known_row(self, conn: Connection, username: str):
        row = self._person_row(conn, username, lock=True)
        if row is None:
            raise InputError(f"no person {username!r} in the lab book", field="username")
        return row

    def _active_admins(self, conn: Connection) -> int:
        return int(
            conn.execute(
                sa.select(sa.func.count())
                .select_from(people_table)
                .where(people_table.c.role == auth.ADMIN)
                .where(people_table.c.active == 1)
            ).scalar()
            or 0
        )

    def _people_audit(
        self,
        conn: Connection,
        actor: _Actor,
        action: str,
        username: str,
        changes: list[dict[str, Any]],
        reason: str,
        at: str,
    ) -> None:
        self._audit(
            conn,
            session_id=None,
            who=actor.name,
            action=action,
            changes=[{**c, "field": f"people.{username}.{c['field']}"} for c in changes],
            reason=reason,
            version=None,
            at=at,
            via=actor.via,
        )

    def add_person(
        self,
        username: str,
        *,
        display_name: str,
        role: str,
        email: str = "",
        password: str | None = None,
        who: str,
        reason: str = "",
    ) -> Account:
        """Add a person to the lab (lab-server mode); recorded in the trail.

        Parameters
        ----------
        username
            Account name: 1–64 characters of letters, digits and ``. _ @ + -`` (stored in lower
            case).
        display_name
            The name shown on pages and in reports.
        role
            One of :data:`swimlab.auth.ROLES`.
        email
            Address matched against the single-sign-on service's verified ``email`` claim;
            ``""`` for none.
        password
            A local password (see :func:`swimlab.auth.check_new_password`), stored only as a
            salted scrypt hash; ``None`` for a person who signs in through single sign-on only.
        who, reason
            For the audit trail.
        """
        return self._add_person(
            username,
            display_name=display_name,
            role=role,
            email=email,
            password=password,
            actor=_Actor.given(who),
            reason=reason,
        )

    def _add_person(
        self,
        username: str,
        *,
        display_name: str,
        role: str,
        email: str,
        password: str | None,
        actor: _Actor,
        reason: str,
    ) -> Account:
        username = auth.check_username(username)
        display_name = auth._check_name(display_name, "display_name")
        role = auth.check_role(role)
        email = _email(email)
        reason = _text(reason, "reason", required=False)
        password_hash = ""
        if password is not None:
            auth.check_new_password(password, username=username)
            password_hash = auth.hash_password(password)
        at = _now()
        with self._engine.begin() as conn:
            self._check(conn, actor, auth.MANAGE_PEOPLE)
            if self._person_row(conn, username, lock=True) is not None:
                raise ConflictError(
                    f"a person with account name {username!r} is already in the lab book; "
                    "nothing was changed"
                )
            self._email_free(conn, email, username)
            conn.execute(
                people_table.insert().values(
                    username=username,
                    display_name=display_name,
                    role=role,
                    email=email,
                    password_hash=password_hash,
                    active=1,
                    failed_logins=0,
                    locked_until="",
                    last_login_at="",
                    created_at=at,
                    updated_at=at,
                    updated_by=actor.name,
                )
            )
            changes = [
                {"field": "display_name", "from": None, "to": display_name},
                {"field": "role", "from": None, "to": role},
                {"field": "email", "from": None, "to": email},
                {"field": "local_password", "from": None, "to": bool(password_hash)},
            ]
            self._people_audit(conn, actor, "person added", username, changes, reason, at)
        return self.get_person(username)

    def _email_free(self, conn: Connection, email: str, username: str) -> None:
        if not email:
            return
        other = conn.execute(
            sa.select(people_table.c.username)
            .where(people_table.c.email == email)
            .where(people_table.c.username != username)
        ).scalar()
        if other is not None:
            raise ConflictError(
                f"the e-mail address {email!r} already belongs to {other!r}; nothing was changed"
            )

    def _update_person(
        self,
        username: str,
        *,
        actor: _Actor,
        action: str,
        values: Mapping[str, Any],
        reason: str,
        changes: Callable[[Mapping[str, Any]], list[dict[str, Any]]] | None = None,
    ) -> Account:
        username = auth.check_username(username)
        at = _now()
        with self._engine.begin() as conn:
            self._check(conn, actor, auth.MANAGE_PEOPLE)
            row = self._known_row(conn, username)
            was_admin = row["role"] == auth.ADMIN and row["active"] == 1
            stays_admin = values.get("role", row["role"]) == auth.ADMIN and values.get(
                "active", row["active"]
            ) == 1
            if was_admin and not stays_admin and self._active_admins(conn) <= 1:
                raise PermissionDeniedError(
                    f"{username!r} is the lab's last active admin; make someone else admin "
                    "first. Nothing was changed."
                )
            if "email" in values:
                self._email_free(conn, values["email"], username)
            listed = (
                changes(row)
                if changes is not None
                else [
                    {"field": k, "from": row[k], "to": v}
                    for k, v in values.items()
                    if row[k] != v
                ]
            )
            if not listed:
                return self.get_person(username)
            conn.execute(
                people_table.update()
                .where(people_table.c.username == username)
                .values(**values, updated_at=at, updated_by=actor.name)
            )
            self._people_audit(conn, actor, action, username, listed, reason, at)
        return self.get_person(username)

    def set_role(self, username: str, role: str, *, who: str, reason: str) -> Account:
        """Change a person's role (takes effect at their next action); recorded in the trail.

        The lab's last active admin cannot be made anything else.
        """
        return self._set_role(username, role, actor=_Actor.given(who), reason=reason)

    def _set_role(self, username: str, role: str, *, actor: _Actor, reason: str) -> Account:
        role = auth.check_role(role)
        reason = _text(reason, "reason", required=True, min_length=3)
        return self._update_person(
            username, actor=actor, action="role changed", values={"role": role}, reason=reason
        )

    def set_active(self, username: str, active: bool, *, who: str, reason: str) -> Account:
        """Deactivate a person (they can no longer sign in or act) or activate them again.

        People are never deleted: the audit trail names them. The lab's last active admin
        cannot be deactivated.
        """
        return self._set_active(username, active, actor=_Actor.given(who), reason=reason)

    def _set_active(self, username: str, active: bool, *, actor: _Actor, reason: str) -> Account:
        if not isinstance(active, bool):
            raise InputError(f"must be True or False; got {active!r}", field="active")
        reason = _text(reason, "reason", required=True, min_length=3)
        return self._update_person(
            username,
            actor=actor,
            action="person reactivated" if active else "person deactivated",
            values={"active": int(active)},
            reason=reason,
        )

    def set_email(self, username: str, email: str, *, who: str, reason: str = "") -> Account:
        """Change the e-mail address matched against single sign-on (``""`` for none)."""
        return self._set_email(username, email, actor=_Actor.given(who), reason=reason)

    def _set_email(self, username: str, email: str, *, actor: _Actor, reason: str) -> Account:
        return self._update_person(
            username,
            actor=actor,
            action="e-mail changed",
            values={"email": _email(email)},
            reason=_text(reason, "reason", required=False),
        )

    def set_password(
        self, username: str, password: str | None, *, who: str, reason: str = ""
    ) -> Account:
        """Set a person's local password (``None`` removes it: single sign-on only).

        The password is checked (:func:`swimlab.auth.check_new_password`) and stored only as a
        salted scrypt hash; the trail records that it changed, never the hash. A lock-out is
        lifted.
        """
        return self._set_password(username, password, actor=_Actor.given(who), reason=reason)

    def _set_password(
        self, username: str, password: str | None, *, actor: _Actor, reason: str
    ) -> Account:
        username = auth.check_username(username)
        reason = _text(reason, "reason", required=False)
        password_hash = ""
        if password is not None:
            auth.check_new_password(password, username=username)
            password_hash = auth.hash_password(password)

        def listed(row: Mapping[str, Any]) -> list[dict[str, Any]]:
            return [
                {
                    "field": "local_password",
                    "from": bool(row["password_hash"]),
                    "to": "changed" if password_hash and row["password_hash"] else bool(password_hash),
                }
            ]

        return self._update_person(
            username,
            actor=actor,
            action="password set" if password_hash else "password removed",
            values={"password_hash": password_hash, "failed_logins": 0, "locked_until": ""},
            reason=reason,
            changes=listed,
        )

    def unlock(self, username: str, *, who: str, reason: str = "") -> Account:
        """Lift a lock-out after failed logins, before it expires; recorded in the trail."""
        return self._unlock(username, actor=_Actor.given(who), reason=reason)

    def _unlock(self, username: str, *, actor: _Actor, reason: str) -> Account:
        reason = _text(reason, "reason", required=False)

        def listed(row: Mapping[str, Any]) -> list[dict[str, Any]]:
            if not row["locked_until"] and not row["failed_logins"]:
                return []
            return [
                {"field": "failed_logins", "from": row["failed_logins"], "to": 0},
                {"field": "locked_until", "from": row["locked_until"] or None, "to": None},
            ]

        return self._update_person(
            username,
            actor=actor,
            action="person unlocked",
            values={"failed_logins": 0, "locked_until": ""},
            reason=reason,
            changes=listed,
        )

    def get_person(self, username: str) -> Account:
        """One person's account (never their password hash).

        Raises
        ------
        InputError
            If there is no such person (field ``username``).
        """
        username = auth.check_username(username)
        with self._engine.connect() as conn:
            row = self._person_row(conn, username)
        if row is None:
            raise InputError(f"no person {username!r} in the lab book", field="username")
        return Account.from_row(row)

    def list_people(self) -> pd.DataFrame:
        """Everyone in the lab, by account name; columns :data:`PEOPLE_COLUMNS` (no hashes)."""
        import pandas as pd

        with self._engine.connect() as conn:
            rows = conn.execute(
                sa.select(people_table).order_by(people_table.c.username)
            ).mappings().all()
        records = [tuple(getattr(Account.from_row(r), c) for c in PEOPLE_COLUMNS) for r in rows]
        return pd.DataFrame(records, columns=PEOPLE_COLUMNS)

    def has_people(self) -> bool:
        """Whether any person has been added (a lab server needs at least one admin)."""
        with self._engine.connect() as conn:
            return conn.execute(sa.select(people_table.c.username).limit(1)).first() is not None

    # -- signing in ---------------------------------------------------------------------------
    def login(
        self, username: str, password: str, *, now: dt.datetime | None = None
    ) -> auth.Person:
        """Check a local account's password; return the signed-in person.

        After :attr:`~swimlab.settings.LabSettings.login_attempts_max` wrong passwords in a row
        the account is locked for :attr:`~swimlab.settings.LabSettings.login_lockout_min`
        minutes (an admin may unlock it sooner); the lock is recorded in the trail. A success
        clears the count, and re-hashes the password if its stored hash is weaker than the
        current parameters.

        Parameters
        ----------
        username, password
            What the person typed. The password is never stored, logged or put in a message.
        now
            The time of the attempt (UTC); for tests. Default: the clock.

        Raises
        ------
        LoginError
            For an unknown account, a wrong password, an account without a local password or a
            deactivated one, all with the same message (it does not tell which).
        LockedOutError
            If the account is locked; its ``until`` says until when (UTC, ISO 8601).
        """
        when = now or dt.datetime.now(dt.UTC)
        if when.tzinfo is None:
            raise ValueError("now must be timezone-aware (UTC)")
        try:
            username = auth.check_username(username)
        except InputError:
            auth.verify_password(password if isinstance(password, str) else "", None)
            raise auth.LoginError(auth.WRONG_LOGIN, field="password") from None
        settings = self.get_lab_settings()
        attempts_max, lockout_min = auth.check_login_settings(
            settings.login_attempts_max, settings.login_lockout_min
        )
        with self._engine.connect() as conn:
            row = self._person_row(conn, username)
        if row is not None:
            self._refuse_if_locked(row, when)
        usable = row is not None and row["active"] == 1 and bool(row["password_hash"])
        checked_hash = row["password_hash"] if usable else None
        ok = auth.verify_password(password, checked_hash) and usable
        at = when.isoformat(timespec="microseconds")
        with self._engine.begin() as conn:
            row = self._person_row(conn, username, lock=True)
            if row is None:
                raise auth.LoginError(auth.WRONG_LOGIN, field="password")
            self._refuse_if_locked(row, when)  # locked by a parallel attempt meanwhile
            expired = bool(row["locked_until"])  # a lock that is over: count afresh
            # Deactivated, or the password reset, since it was checked: the check does not count.
            ok = ok and row["active"] == 1 and row["password_hash"] == checked_hash
            if ok:
                values: dict[str, Any] = {"failed_logins": 0, "locked_until": "", "last_login_at": at}
                if auth.needs_rehash(row["password_hash"]):
                    values["password_hash"] = auth.hash_password(password)
                conn.execute(
                    people_table.update().where(people_table.c.username == username).values(**values)
                )
                return auth.Person(
                    username=username,
                    display_name=row["display_name"],
                    role=row["role"],
                    via=auth.VIA_PASSWORD,
                )
            if row["active"] != 1 or not row["password_hash"]:
                raise auth.LoginError(auth.WRONG_LOGIN, field="password")
            failed = (0 if expired else int(row["failed_logins"])) + 1
            values = {"failed_logins": failed, "locked_until": ""}
            if failed >= attempts_max:
                until = (when + dt.timedelta(minutes=lockout_min)).isoformat(timespec="microseconds")
                values["locked_until"] = until
                self._audit(
                    conn,
                    session_id=None,
                    who=username,
                    action="login locked",
                    changes=[
                        {"field": f"people.{username}.locked_until", "from": None, "to": until}
                    ],
                    reason=f"{failed} failed logins in a row",
                    version=None,
                    at=at,
                    via=auth.VIA_PASSWORD,
                )
            conn.execute(
                people_table.update().where(people_table.c.username == username).values(**values)
            )
        if values["locked_until"]:
            self._refuse_if_locked(values, when)
        raise auth.LoginError(auth.WRONG_LOGIN, field="password")

    @staticmethod
    def _refuse_if_locked(row: Mapping[str, Any], when: dt.datetime) -> None:
        if not row["locked_until"]:
            return
        until = dt.datetime.fromisoformat(row["locked_until"])
        if when < until:
            shown = until.strftime("%Y-%m-%d %H:%M UTC")
            raise auth.LockedOutError(
                f"too many failed logins: the account is locked until {shown}; try again then, "
                "or ask the lab's admin to unlock it",
                until=row["locked_until"],
            )

    def person_for_claims(self, claims: Mapping[str, Any]) -> auth.Person:
        """The person whom a single-sign-on service vouched for (``st.user`` of ``st.login``).

        The verified ``email`` claim is matched (without regard to case) against the people's
        e-mail addresses; someone the lab has not added, or has deactivated, is refused.

        Raises
        ------
        LoginError
            With field ``email``: no usable address in the claims, or nobody active with it.
        """
        email = auth.email_from_claims(claims)
        with self._engine.connect() as conn:
            row = (
                conn.execute(sa.select(people_table).where(people_table.c.email == email))
                .mappings()
                .first()
            )
        if row is None or row["active"] != 1:
            raise auth.LoginError(
                f"{email} is not an active member of this lab book; ask the lab's admin to add "
                "you with this e-mail address",
                field="email",
            )
        return auth.Person(
            username=row["username"],
            display_name=row["display_name"],
            role=row["role"],
            via=auth.VIA_OIDC,
        )

    def as_person(self, person: auth.Person) -> ActingLabBook:
        """The lab book as ``person`` acts on it: every action checked (see the module notes)."""
        if not isinstance(person, auth.Person):
            raise InputError(
                f"must be a swimlab.auth.Person; got {type(person).__name__}", field="person"
            )
        return ActingLabBook(self, person)


def _email(value: Any) -> str:
    if not isinstance(value, str):
        raise InputError(f"must be text; got {value!r}", field="email")
    text = value.strip().lower()
    if text and ("@" not in text or " " in text or len(text) > 254):
        raise InputError(f"must be an e-mail address (or empty); got {value!r}", field="email")
    return text


@dataclass(frozen=True)
class Account:
    """One person in the lab book, as the people table holds them (no password hash).

    Attributes
    ----------
    username, display_name, role, email
        See :meth:`LabBook.add_person`.
    active
        Whether they may sign in and act.
    local_password
        Whether a local password is set.
    failed_logins
        Wrong passwords in a row since the last success.
    locked_until
        UTC time (ISO 8601) until which the account is locked, or ``""``.
    last_login_at, created_at
        UTC times (ISO 8601); ``""`` when never.
    """

    username: str
    display_name: str
    role: str
    email: str
    active: bool
    local_password: bool
    failed_logins: int
    locked_until: str
    last_login_at: str
    created_at: str

    @classmethod
    def from_row(cls, row: Mapping[str, Any]) -> Account:
        return cls(
            username=row["username"],
            display_name=row["display_name"],
            role=row["role"],
            email=row["email"],
            active=bool(row["active"]),
            local_password=bool(row["password_hash"]),
            failed_logins=int(row["failed_logins"]),
            locked_until=row["locked_until"],
            last_login_at=row["last_login_at"],
            created_at=row["created_at"],
        )


# --------------------------------------------------------------------------------------------
# The lab book as one person acts on it
# --------------------------------------------------------------------------------------------


class ActingLabBook:
    """The lab book as one :class:`~swimlab.auth.Person` acts on it.

    Every write is checked inside its own transaction, before anything is written:

    - the person's role may take the action (:data:`swimlab.auth.PERMISSIONS`); for a
      signed-in account the role (and that the account is still active) is read afresh;
    - a signed-in person edits and submits only sessions they created;
    - a review (approve, return) is by someone other than the operator, creator, any saver or
      the submitter (four eyes).

    A refused call raises :class:`~swimlab.errors.PermissionDeniedError` and changes nothing.
    Reads need the role to read (any active person). Methods take the same arguments as those
    of :class:`LabBook` without ``who``; a ``who`` that is given must name this person (for a
    single-user person it names whoever acts at this computer, since names are not proven
    there). Nothing else of the lab book is reachable through this object.
    """

    _READS = frozenset(
        {
            "get_session",
            "get_session_version",
            "session_history",
            "list_sessions",
            "get_raw_file",
            "raw_files_of",
            "audit_trail",
            "get_lab_setting_overrides",
            "get_lab_settings",
            "recall_mapping",
            "remembered_mappings",
            "has_people",
            "schema_version",
            "sign_off",
        }
    )

    def __init__(self, book: LabBook, person: auth.Person) -> None:
        self._book = book
        self._person = person

    @property
    def person(self) -> auth.Person:
        """Who acts."""
        return self._person

    @property
    def url(self) -> str:
        """The lab book's URL, password hidden."""
        return self._book.url

    @property
    def dialect(self) -> str:
        """``sqlite`` or ``postgresql``."""
        return self._book.dialect

    def __repr__(self) -> str:
        return f"ActingLabBook({self._book.url!r}, as {self._person})"

    def __getattr__(self, name: str) -> Any:
        if name in ActingLabBook._READS:
            method = getattr(self._book, name)

            def read(*args: Any, **kwargs: Any) -> Any:
                self.check(auth.READ)
                return method(*args, **kwargs)

            read.__doc__ = method.__doc__
            read.__name__ = name
            return read
        raise AttributeError(
            f"{name!r} is not available to a person acting on the lab book"
        )

    # -- who acts -----------------------------------------------------------------------------
    def _actor(self, who: Any = None) -> _Actor:
        person = self._person
        if who is not None:
            name = _person(who)
            if name.casefold() not in person.names():
                if person.authenticated:
                    raise PermissionDeniedError(
                        f"signed in as {person}; cannot act as {name!r}. Nothing was changed."
                    )
                person = auth.Person.single_user(name, role=person.role)
        return _Actor(person.username, via=person.via, person=person)

    def check(self, action: str, what: str = "") -> None:
        """Raise PermissionDeniedError unless this person may take ``action`` now."""
        with self._book._engine.connect() as conn:
            self._book._check(conn, self._actor(), action, what)

    def may(self, action: str) -> bool:
        """Whether this person may take ``action`` now (for showing or hiding a control)."""
        try:
            self.check(action)
        except PermissionDeniedError:
            return False
        return True

    # -- sessions -----------------------------------------------------------------------------
    def create_session(
        self,
        session: Session,
        raw_files: Mapping[str, bytes] | None = None,
        *,
        reason: str = "created",
        who: str | None = None,
    ) -> int:
        """As :meth:`LabBook.create_session`; the person becomes the session's creator."""
        return self._book._create_session(
            session, raw_files, actor=self._actor(who), reason=reason
        )

    def save_session(
        self,
        session: Session,
        *,
        base_version: int,
        reason: str,
        raw_files: Mapping[str, bytes] | None = None,
        who: str | None = None,
    ) -> int:
        """As :meth:`LabBook.save_session`; a signed-in person saves only sessions they created."""
        return self._book._save_session(
            session,
            base_version=base_version,
            actor=self._actor(who),
            reason=reason,
            raw_files=raw_files,
        )

    def submit(self, session_id: str, *, comment: str = "", who: str | None = None) -> StoredSession:
        """As :meth:`LabBook.submit`; a signed-in person submits only sessions they created."""
        return self._book._submit(session_id, actor=self._actor(who), comment=comment)

    def approve(
        self,
        session_id: str,
        *,
        comment: str = "",
        version: int | None = None,
        who: str | None = None,
    ) -> StoredSession:
        """As :meth:`LabBook.approve`: reviewers and admins, four eyes."""
        return self._book._approve(
            session_id, actor=self._actor(who), comment=comment, version=version
        )

    def return_session(
        self, session_id: str, *, comment: str, who: str | None = None
    ) -> StoredSession:
        """As :meth:`LabBook.return_session`: reviewers and admins, four eyes."""
        return self._book._return_session(session_id, actor=self._actor(who), comment=comment)

    def reopen(self, session_id: str, *, reason: str, who: str | None = None) -> StoredSession:
        """As :meth:`LabBook.reopen`: reviewers and admins, with a reason."""
        return self._book._reopen(session_id, actor=self._actor(who), reason=reason)

    def add_raw_file(self, data: bytes, name: str = "", *, sha256: str | None = None) -> str:
        """As :meth:`LabBook.add_raw_file`."""
        return self._book._add_raw_file(data, name, sha256=sha256, actor=self._actor())

    def remember_mapping(
        self, fingerprint: str, mapping: Mapping[str, Any], *, who: str | None = None
    ) -> None:
        """As :meth:`LabBook.remember_mapping`."""
        self._book._remember_mapping(fingerprint, mapping, actor=self._actor(who))

    # -- the lab ------------------------------------------------------------------------------
    def set_lab_settings(
        self, overrides: Mapping[str, Any], *, reason: str, who: str | None = None
    ) -> LabSettings:
        """As :meth:`LabBook.set_lab_settings`: admins only."""
        return self._book._set_lab_settings(overrides, actor=self._actor(who), reason=reason)

    def add_person(
        self,
        username: str,
        *,
        display_name: str,
        role: str,
        email: str = "",
        password: str | None = None,
        reason: str = "",
    ) -> Account:
        """As :meth:`LabBook.add_person`: admins only."""
        return self._book._add_person(
            username,
            display_name=display_name,
            role=role,
            email=email,
            password=password,
            actor=self._actor(),
            reason=reason,
        )

    def set_role(self, username: str, role: str, *, reason: str) -> Account:
        """As :meth:`LabBook.set_role`: admins only."""
        return self._book._set_role(username, role, actor=self._actor(), reason=reason)

    def set_active(self, username: str, active: bool, *, reason: str) -> Account:
        """As :meth:`LabBook.set_active`: admins only."""
        return self._book._set_active(username, active, actor=self._actor(), reason=reason)

    def set_password(self, username: str, password: str | None, *, reason: str = "") -> Account:
        """As :meth:`LabBook.set_password`: admins only (see :meth:`change_own_password`)."""
        return self._book._set_password(username, password, actor=self._actor(), reason=reason)

    def unlock(self, username: str, *, reason: str = "") -> Account:
        """As :meth:`LabBook.unlock`: admins only."""
        return self._book._unlock(username, actor=self._actor(), reason=reason)

    def set_email(self, username: str, email: str, *, reason: str = "") -> Account:
        """As :meth:`LabBook.set_email`: admins only."""
        return self._book._set_email(username, email, actor=self._actor(), reason=reason)

    def list_people(self) -> pd.DataFrame:
        """As :meth:`LabBook.list_people`: admins only (it shows e-mails and login times)."""
        self.check(auth.MANAGE_PEOPLE)
        return self._book.list_people()

    def get_person(self, username: str) -> Account:
        """One person's account: one's own, or anyone's for an admin."""
        own = (
            self._person.authenticated
            and isinstance(username, str)
            and username.strip().lower() == self._person.username
        )
        self.check(auth.READ if own else auth.MANAGE_PEOPLE)
        return self._book.get_person(username)

    def change_own_password(self, current: str, new: str) -> Account:
        """Change this signed-in person's local password, proving the current one first.

        A wrong current password counts as a failed login (and may lock the account).
        """
        person = self._person
        if person.via != auth.VIA_PASSWORD:
            raise PermissionDeniedError(
                f"{person} did not sign in with a local password; nothing was changed"
            )
        self.check(auth.CHANGE_OWN_PASSWORD)
        self._book.login(person.username, current)
        auth.check_new_password(new, username=person.username, field="new_password")
        # One's own password: no person to check, so the people-management check does not apply.
        return self._book._set_password(
            person.username, new, actor=_Actor(person.username, via=person.via), reason="own"
        )
