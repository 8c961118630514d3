"""A throwaway PostgreSQL server for the lab-book tests.

:func:`server_url` gives the URL of a PostgreSQL server, or ``None`` and the reason there is
none. It uses ``SWIMLAB_TEST_POSTGRES_URL`` when that is set; otherwise it starts a private
cluster once per test run: ``initdb`` into a temporary folder and ``pg_ctl start`` on a free
loopback port, with its socket in that folder, durability switched off (it is thrown away), and
trust authentication for its one local user. When the tests run as root, the server runs as the
``postgres`` system user (PostgreSQL refuses to run as root). The cluster is stopped and its
folder removed when the test process exits.

Each test gets its own empty schema (:func:`fresh_database`), dropped afterwards
(:func:`drop_database`).
"""

from __future__ import annotations

import atexit
import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
import uuid

ENV_URL = "SWIMLAB_TEST_POSTGRES_URL"
USER = "swimlab"

_state: dict[str, object] = {}


def _binaries() -> str | None:
    """Folder holding initdb and pg_ctl, newest PostgreSQL first."""
    found = shutil.which("initdb")
    if found:
        return os.path.dirname(found)
    candidates = sorted(
        glob.glob("/usr/lib/postgresql/*/bin/initdb"),
        key=lambda p: int(p.split("/")[-3]) if p.split("/")[-3].isdigit() else 0,
        reverse=True,
    )
    candidates += glob.glob("/usr/local/pgsql/bin/initdb") + glob.glob("/opt/homebrew/bin/initdb")
    return os.path.dirname(candidates[0]) if candidates else None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _run(
    cmd: list[str], *, as_user: str | None, timeout: float = 60
) -> subprocess.CompletedProcess:
    if as_user:
        cmd = ["runuser", "-u", as_user, "--", *cmd]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False)


def _start() -> tuple[str | None, str]:
    bindir = _binaries()
    if bindir is None:
        return None, "no PostgreSQL binaries (initdb, pg_ctl) found; install postgresql"
    as_user = None
    if os.geteuid() == 0:
        try:
            pwd.getpwnam("postgres")
        except KeyError:
            return None, "running as root and there is no 'postgres' user to run the server as"
        if shutil.which("runuser") is None:
            return None, "running as root and 'runuser' is missing"
        as_user = "postgres"
    folder = tempfile.mkdtemp(prefix="swimlab-pg-")
    if as_user:
        shutil.chown(folder, user=as_user)
    data = os.path.join(folder, "data")
    log = os.path.join(folder, "server.log")
    init = _run(
        [
            f"{bindir}/initdb",
            "-D",
            data,
            "-A",
            "trust",
            "-U",
            USER,
            "-E",
            "UTF8",
            "--locale=C",
            "--no-sync",
        ],
        as_user=as_user,
    )
    if init.returncode != 0:
        shutil.rmtree(folder, ignore_errors=True)
        return None, f"initdb failed: {(init.stderr or init.stdout).strip()[-400:]}"
    last_error = ""
    for _attempt in range(3):  # the free port can be taken between choosing and binding
        port = _free_port()
        options = (
            f"-p {port} -k {folder} -c listen_addresses=127.0.0.1 -c fsync=off "
            "-c synchronous_commit=off -c full_page_writes=off -c max_connections=50"
        )
        start = _run(
            [f"{bindir}/pg_ctl", "-D", data, "-o", options, "-l", log, "-w", "-t", "30", "start"],
            as_user=as_user,
        )
        if start.returncode == 0:
            _state.update(bindir=bindir, data=data, folder=folder, as_user=as_user)
            atexit.register(_stop)
            return f"postgresql+psycopg://{USER}@127.0.0.1:{port}/postgres", ""
        try:
            with open(log, encoding="utf-8", errors="replace") as handle:
                last_error = handle.read()[-400:]
        except OSError:
            last_error = (start.stderr or start.stdout).strip()[-400:]
    shutil.rmtree(folder, ignore_errors=True)
    return None, f"pg_ctl start failed: {last_error}"


def _stop() -> None:
    if "data" not in _state:
        return
    _run(
        [f"{_state['bindir']}/pg_ctl", "-D", str(_state["data"]), "-m", "immediate", "-w", "stop"],
        as_user=_state["as_user"],  # type: ignore[arg-type]
    )
    shutil.rmtree(str(_state["folder"]), ignore_errors=True)
    _state.clear()


def server_url() -> tuple[str | None, str]:
    """Return ``(url, "")`` of a PostgreSQL server for tests, or ``(None, reason)``."""
    if "url" not in _state:
        if os.environ.get(ENV_URL):
            from swimlab.store import _normalise_url  # postgresql:// → postgresql+psycopg://

            url = _normalise_url(os.environ[ENV_URL]).render_as_string(hide_password=False)
            _state["url"], _state["why"] = url, ""
        else:
            url, why = _start()
            _state["url"], _state["why"] = url, why
    return _state["url"], _state["why"]  # type: ignore[return-value]


def _admin(url: str):
    import sqlalchemy as sa

    return sa.create_engine(url, isolation_level="AUTOCOMMIT", poolclass=sa.pool.NullPool)


def fresh_database(url: str) -> str:
    """Make a new, empty schema on the server at ``url``; return a URL that works inside it.

    A schema (selected with the connection option ``search_path``) isolates one test as well as
    a database would, and is made in milliseconds where ``CREATE DATABASE`` takes a few tenths
    of a second.
    """
    import sqlalchemy as sa

    name = f"swimlab_test_{uuid.uuid4().hex[:12]}"
    engine = _admin(url)
    try:
        with engine.connect() as conn:
            conn.execute(sa.text(f'CREATE SCHEMA "{name}"'))
    finally:
        engine.dispose()
    parsed = sa.make_url(url).update_query_dict({"options": f"-csearch_path={name}"})
    return parsed.render_as_string(hide_password=False)


def _schema_of(url: str) -> str:
    import sqlalchemy as sa

    options = sa.make_url(url).query.get("options", "")
    name = options.removeprefix("-csearch_path=") if isinstance(options, str) else ""
    if not name.startswith("swimlab_test_"):
        raise ValueError(f"refusing to drop {name!r}: not a test schema")
    return name


def drop_database(url: str) -> None:
    """Drop a schema made by :func:`fresh_database`, with everything in it."""
    import sqlalchemy as sa

    name = _schema_of(url)
    engine = _admin(
        sa.make_url(url).difference_update_query(["options"]).render_as_string(hide_password=False)
    )
    try:
        with engine.connect() as conn:
            conn.execute(sa.text(f'DROP SCHEMA IF EXISTS "{name}" CASCADE'))
    finally:
        engine.dispose()
