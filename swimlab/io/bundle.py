"""Session bundles: the open interchange and archive format (DESIGN.md §4).

A bundle is a folder, or the same files in a ``.zip``::

    session.json          the authoritative record: bundle fields, the session, a file manifest
    steps.csv fish.csv    the session's lists as plain tables, for people who open them in a
    blanks.csv events.csv spreadsheet; derived from session.json and checked against it on read
    exclusions.csv
    raw/<original name>   the raw logger files, byte for byte as they were imported

``session.json`` is the one source of truth. The CSV tables are copies: on reading, each is
checked cell by cell against the JSON, and any disagreement is refused with the file, row and
column, so that an edit made in a spreadsheet is never silently lost or silently taken.

The layout is versioned (:data:`BUNDLE_FORMAT_VERSION`) and published as a JSON Schema
(draft 2020-12) in ``swimlab/schema/session-bundle-v2.schema.json``, generated from the
session model by :func:`bundle_json_schema`. Older layouts are upgraded on reading through the
ordered :data:`UPGRADES`; a newer layout than this swimlab knows is refused. The layout is
described for people in ``docs/bundle_format.md``.

Writing is atomic: the bundle is written beside its destination under a temporary name, read
back and checked, then renamed into place; a failure leaves nothing behind.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import os
import shutil
import uuid
import zipfile
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from decimal import Decimal, InvalidOperation
from functools import lru_cache
from pathlib import Path, PurePosixPath
from typing import Any

from pydantic import BaseModel

from swimlab.errors import InputError
from swimlab.io.checksum import sha256_hex
from swimlab.session import (
    Blank,
    Event,
    Fish,
    PhaseExclusion,
    Session,
    SpeedStep,
    validate_session,
)

BUNDLE_FORMAT = "swimlab-session-bundle"
"""Value of ``bundle_format`` in every bundle's ``session.json``."""

BUNDLE_FORMAT_VERSION = 2
"""The layout this swimlab writes. Readable: 0 (pre-release, upgraded on read) to this."""

COLUMNS_ADDED = {2: {"events.csv": ("gait",)}}
"""CSV columns a layout added: a table written by an older layout lacks them, and is checked on
the columns it has (the missing values are the defaults, which the upgrade leaves in place)."""

SESSION_JSON = "session.json"
RAW_DIR = "raw"
SCHEMA_FILE = f"session-bundle-v{BUNDLE_FORMAT_VERSION}.schema.json"

FILE_ROLES = ("trial", "blank", "table")


@dataclass(frozen=True)
class TableSpec:
    """One CSV table of a bundle: its file name, where its rows live in the session, its row model."""

    name: str
    path: tuple[str, ...]
    model: type[BaseModel]

    @property
    def columns(self) -> list[str]:
        """Column names, in order: the row model's fields."""
        return list(self.model.model_fields)

    @property
    def field(self) -> str:
        """Dotted path of the list in the session (``protocol.steps``)."""
        return ".".join(self.path)


TABLES: tuple[TableSpec, ...] = (
    TableSpec("steps.csv", ("protocol", "steps"), SpeedStep),
    TableSpec("fish.csv", ("fish",), Fish),
    TableSpec("blanks.csv", ("blanks",), Blank),
    TableSpec("events.csv", ("events",), Event),
    TableSpec("exclusions.csv", ("exclusions",), PhaseExclusion),
)
TABLES_BY_NAME = {table.name: table for table in TABLES}


@dataclass(frozen=True)
class BundleContents:
    """What :func:`read_bundle` found.

    Attributes
    ----------
    session
        The validated session.
    raw_files
        The raw files the session refers to, keyed by SHA-256 (hex), each checked against its
        checksum.
    problems
        Findings that did not stop the reading, one sentence each naming the file: an upgrade
        from an older layout, a table re-saved with different formatting but the same values,
        files in the bundle that its manifest does not list.
    format_version
        The layout version the bundle was written in (before any upgrade).
    created_at, generator
        As recorded in ``session.json``.
    """

    session: Session
    raw_files: dict[str, bytes]
    problems: list[str] = field(default_factory=list)
    format_version: int = BUNDLE_FORMAT_VERSION
    created_at: str = ""
    generator: str = ""


# --------------------------------------------------------------------------------------------
# JSON Schema
# --------------------------------------------------------------------------------------------


def bundle_json_schema() -> dict[str, Any]:
    """Return the JSON Schema (draft 2020-12) of ``session.json``, generated from the model.

    The session part is :meth:`Session.model_json_schema`; around it go the bundle fields and
    the file manifest. The committed file ``swimlab/schema/session-bundle-v2.schema.json``
    must equal this (a test keeps them together); regenerate it with
    ``python -m swimlab schema --write``.
    """
    session_schema = Session.model_json_schema()
    defs = dict(session_schema.pop("$defs", {}))
    defs["Session"] = session_schema
    defs["FileEntry"] = {
        "type": "object",
        "title": "FileEntry",
        "description": "One file of the bundle other than session.json.",
        "additionalProperties": False,
        "required": ["path", "sha256", "bytes", "role"],
        "properties": {
            "path": {
                "type": "string",
                "minLength": 1,
                "description": "Path inside the bundle, '/'-separated, relative to its root.",
            },
            "sha256": {
                "type": "string",
                "pattern": "^[0-9a-f]{64}$",
                "description": "SHA-256 of the file's bytes, lower-case hex.",
            },
            "bytes": {"type": "integer", "minimum": 0, "description": "Size of the file [bytes]."},
            "role": {
                "enum": list(FILE_ROLES),
                "description": "'trial' or 'blank' for a raw logger file, 'table' for a CSV table.",
            },
        },
    }
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "title": "swimlab session bundle, session.json",
        "description": (
            "The authoritative document of a swimlab session bundle (layout version "
            f"{BUNDLE_FORMAT_VERSION}): the session as entered, and a manifest of the bundle's "
            "other files. See docs/bundle_format.md."
        ),
        "type": "object",
        "additionalProperties": False,
        "required": [
            "bundle_format",
            "bundle_format_version",
            "created_at",
            "generator",
            "session",
            "files",
        ],
        "properties": {
            "bundle_format": {"const": BUNDLE_FORMAT},
            "bundle_format_version": {"const": BUNDLE_FORMAT_VERSION},
            "created_at": {
                "type": "string",
                "format": "date-time",
                "description": "When the bundle was written (UTC, RFC 3339).",
            },
            "generator": {"type": "string", "description": "Program and version that wrote it."},
            "session": {"$ref": "#/$defs/Session"},
            "files": {"type": "array", "items": {"$ref": "#/$defs/FileEntry"}},
        },
        "$defs": defs,
    }


def schema_path() -> Path:
    """Path of the committed JSON Schema file inside the package."""
    return Path(__file__).resolve().parent.parent / "schema" / SCHEMA_FILE


def schema_text(schema: Mapping[str, Any] | None = None) -> str:
    """The schema as the committed file holds it (2-space indent, sorted keys, final newline)."""
    return (
        json.dumps(schema or bundle_json_schema(), indent=2, sort_keys=True, ensure_ascii=False)
        + "\n"
    )


def write_schema(path: str | os.PathLike | None = None) -> Path:
    """Write the generated schema to ``path`` (default: the committed file). Returns the path."""
    target = Path(path) if path is not None else schema_path()
    atomic_write_bytes(target, schema_text().encode("utf-8"))
    return target


@lru_cache(maxsize=1)
def _validator():
    from jsonschema import Draft202012Validator

    try:
        schema = json.loads(schema_path().read_text(encoding="utf-8"))
    except FileNotFoundError:
        # An install without the package data: the generated schema is the same document
        # (tests/test_bundle.py keeps the committed file equal to it).
        schema = bundle_json_schema()
    Draft202012Validator.check_schema(schema)
    return Draft202012Validator(schema)


# --------------------------------------------------------------------------------------------
# Upgrades from older layouts
# --------------------------------------------------------------------------------------------


def _upgrade_0_to_1(doc: dict[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """Layout 0 (pre-release) → 1: fish mass was ``mass_kg`` [kg]; it is now ``mass_g`` [g].

    Layout 0 was otherwise the same; it carried no CSV tables. The conversion is exact in
    decimal (0.0123 kg → 12.3 g, not 12.299999999999999).
    """
    session = doc.get("session")
    if not isinstance(session, dict):
        raise InputError(
            "must be an object holding the session", file=SESSION_JSON, field="session"
        )
    fish_list = session.get("fish")
    converted = 0
    if isinstance(fish_list, list):
        for i, fish in enumerate(fish_list):
            if not isinstance(fish, dict) or "mass_kg" not in fish:
                continue
            where = f"session.fish.{i}.mass_kg"
            if "mass_g" in fish:
                raise InputError(
                    "a layout-0 bundle gives mass in kg only; this fish has both mass_kg and mass_g",
                    file=SESSION_JSON,
                    field=where,
                )
            kg = fish.pop("mass_kg")
            if isinstance(kg, bool) or not isinstance(kg, int | float):
                raise InputError(
                    f"must be a number of kilograms; got {kg!r}", file=SESSION_JSON, field=where
                )
            try:
                fish["mass_g"] = float(Decimal(repr(kg)) * 1000)
            except InvalidOperation as exc:  # pragma: no cover - repr of a float is a decimal
                raise InputError(
                    f"must be a finite number of kilograms; got {kg!r}",
                    file=SESSION_JSON,
                    field=where,
                ) from exc
            converted += 1
    doc["bundle_format_version"] = 1
    return doc, [
        f"{SESSION_JSON}: upgraded from bundle layout 0 to 1 (mass_kg → mass_g for {converted} fish)"
    ]


def _upgrade_1_to_2(doc: dict[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """Layout 1 → 2: sessions gained group trials (``groups``) and a gait on events (``gait``).

    Both are optional with empty defaults, so nothing is converted; ``events.csv`` of layout 1
    has no ``gait`` column and is checked without it.
    """
    session = doc.get("session")
    if isinstance(session, dict):
        session["schema_version"] = 2
    doc["bundle_format_version"] = 2
    return doc, [f"{SESSION_JSON}: upgraded from bundle layout 1 to 2 (group trials and event gaits added; "
                 "nothing to convert)"]


UPGRADES: list[tuple[int, Callable[[dict[str, Any]], tuple[dict[str, Any], list[str]]]]] = [
    (0, _upgrade_0_to_1),
    (1, _upgrade_1_to_2),
]
"""Ordered upgrade steps: (layout version they read, function returning the next version's
document and notes). Reading applies every step from the bundle's version up to
:data:`BUNDLE_FORMAT_VERSION`."""


def upgrade_document(doc: dict[str, Any]) -> tuple[dict[str, Any], int, list[str]]:
    """Upgrade a parsed ``session.json`` to the current layout.

    Returns
    -------
    document, found_version, notes
    """
    if doc.get("bundle_format") != BUNDLE_FORMAT:
        raise InputError(
            f"must be {BUNDLE_FORMAT!r}; got {doc.get('bundle_format')!r} "
            "(this is not a swimlab session bundle, or it is damaged)",
            file=SESSION_JSON,
            field="bundle_format",
        )
    version = doc.get("bundle_format_version")
    if isinstance(version, bool) or not isinstance(version, int):
        raise InputError(
            f"must be a whole number; got {version!r}",
            file=SESSION_JSON,
            field="bundle_format_version",
        )
    oldest = UPGRADES[0][0] if UPGRADES else BUNDLE_FORMAT_VERSION
    if version > BUNDLE_FORMAT_VERSION:
        raise InputError(
            f"is {version}, newer than this swimlab can read (versions {oldest} to "
            f"{BUNDLE_FORMAT_VERSION}); update swimlab to read this bundle",
            file=SESSION_JSON,
            field="bundle_format_version",
        )
    if version < oldest:
        raise InputError(
            f"is {version}; this swimlab reads versions {oldest} to {BUNDLE_FORMAT_VERSION}",
            file=SESSION_JSON,
            field="bundle_format_version",
        )
    notes: list[str] = []
    found = version
    for from_version, step in UPGRADES:
        if from_version == doc["bundle_format_version"]:
            doc, step_notes = step(doc)
            notes.extend(step_notes)
    return doc, found, notes


# --------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------




def _cell(value: Any) -> str:
    """Render one JSON value as a CSV cell."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float | str):
        return str(value) if not isinstance(value, float) else repr(value)
    return json.dumps(value, sort_keys=True, ensure_ascii=False)


def _rows_at(document: Mapping[str, Any], path: tuple[str, ...]) -> list[dict[str, Any]]:
    node: Any = document
    for key in path:
        node = node.get(key, []) if isinstance(node, dict) else []
    return node if isinstance(node, list) else []


def table_text(session_document: Mapping[str, Any], table: TableSpec) -> str:
    """The CSV text of one table for a session's JSON document (header row first)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")  # RFC 4180; quotes CR and LF in cells
    writer.writerow(table.columns)
    for row in _rows_at(session_document, table.path):
        writer.writerow([_cell(row.get(column)) for column in table.columns])
    return buffer.getvalue()


def _raw_paths(session: Session) -> dict[str, str]:
    """Bundle path of each raw file, keyed by checksum: ``raw/<original name>``.

    The original name is reduced to its last path part; when two different files share a
    name, the later ones get the first 12 hex digits of their checksum as a prefix.
    """
    paths: dict[str, str] = {}
    used: set[str] = set()
    for ref in session.raw_files:
        if ref.sha256 in paths:
            continue
        base = ref.name.replace("\\", "/").split("/")[-1].strip()
        if base in ("", ".", "..") or any(ord(ch) < 32 for ch in base):
            base = "file"
        name = base if base.lower() not in used else f"{ref.sha256[:12]}_{base}"
        used.add(name.lower())
        paths[ref.sha256] = f"{RAW_DIR}/{name}"
    return paths


def bundle_files(
    session: Session, raw_files: Mapping[str, bytes], *, created_at: str | None = None
) -> dict[str, bytes]:
    """Return every file of the bundle of ``session`` as {path inside the bundle: bytes}.

    Raises
    ------
    InputError
        If the session is not valid, a raw file it refers to is missing from ``raw_files``, a
        raw file's bytes do not match its checksum, or ``raw_files`` holds a file the session
        does not refer to.
    """
    document = session.to_json_dict()
    Session.from_json_dict(document)  # raises InputError listing every problem
    refs = {ref.sha256 for ref in session.raw_files}
    for sha, data in raw_files.items():
        if sha not in refs:
            raise InputError(
                "raw_files holds a file the session does not refer to; add a raw file reference "
                "or leave it out",
                field=f"raw_files.{sha}",
            )
        if sha256_hex(data) != sha:
            raise InputError(
                f"the bytes given have checksum {sha256_hex(data)}, not the key they are given under",
                field=f"raw_files.{sha}",
            )
    files: dict[str, bytes] = {}
    manifest: list[dict[str, Any]] = []
    for table in TABLES:
        data = table_text(document, table).encode("utf-8")
        files[table.name] = data
        manifest.append(
            {"path": table.name, "sha256": sha256_hex(data), "bytes": len(data), "role": "table"}
        )
    paths = _raw_paths(session)
    roles = {}
    for ref in session.raw_files:
        roles.setdefault(ref.sha256, ref.role)
    for i, ref in enumerate(session.raw_files):
        if ref.sha256 not in raw_files:
            raise InputError(
                f"the session refers to raw file {ref.name!r} but its bytes were not given",
                field=f"raw_files.{i}.sha256",
            )
    for sha, path in paths.items():
        data = raw_files[sha]
        files[path] = data
        manifest.append({"path": path, "sha256": sha, "bytes": len(data), "role": roles[sha]})
    import swimlab

    wrapper = {
        "bundle_format": BUNDLE_FORMAT,
        "bundle_format_version": BUNDLE_FORMAT_VERSION,
        "created_at": created_at or dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "generator": f"swimlab {swimlab.__version__}",
        "session": document,
        "files": manifest,
    }
    files[SESSION_JSON] = (
        json.dumps(wrapper, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    ).encode("utf-8")
    return files


def write_bundle(
    session: Session,
    raw_files: Mapping[str, bytes],
    path: str | os.PathLike,
    *,
    as_zip: bool = False,
    overwrite: bool = False,
) -> Path:
    """Write ``session`` and its raw files as a bundle folder (or ``.zip``) at ``path``.

    Parameters
    ----------
    session
        The session to write.
    raw_files
        The bytes of every raw file the session refers to, keyed by SHA-256 (hex).
    path
        Destination folder, or ``.zip`` file when ``as_zip`` is true. Its parent must exist.
    as_zip
        Write one ``.zip`` file instead of a folder (same files, at the root of the archive).
    overwrite
        Replace an existing bundle at ``path``; otherwise an existing path is refused.

    Returns
    -------
    Path
        The bundle's path.

    Notes
    -----
    The bundle is written under a temporary name beside ``path``, read back with
    :func:`read_bundle`, and only then renamed into place, so a failure at any point leaves
    nothing at ``path`` (or the previous bundle, when overwriting).
    """
    target = Path(path)
    if not target.parent.is_dir():
        raise InputError("the folder to write into does not exist", file=str(target.parent))
    if (target.exists() or target.is_symlink()) and not overwrite:
        raise InputError("already exists; choose another path or overwrite it", file=str(target))
    files = bundle_files(session, raw_files)
    temp = target.parent / f".{target.name}.partial-{uuid.uuid4().hex[:8]}"
    try:
        if as_zip:
            _write_zip(temp, files)
        else:
            _write_folder(temp, files)
        read_bundle(temp)  # what was written must read back
        _move_into_place(temp, target)
    finally:
        if temp.is_dir():
            shutil.rmtree(temp, ignore_errors=True)
        elif temp.exists():
            temp.unlink()
    return target


def _fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:  # pragma: no cover - platforms without directory handles
        return
    try:
        os.fsync(fd)
    except OSError:  # pragma: no cover
        pass
    finally:
        os.close(fd)


def _write_file(path: Path, data: bytes) -> None:
    with open(path, "wb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())


def atomic_write_bytes(target: Path, data: bytes) -> None:
    """Write ``data`` to ``target`` whole or not at all: a synced temporary file beside it,
    renamed into place; an existing ``target`` is replaced only when the new bytes are on disk."""
    temp = target.parent / f".{target.name}.partial-{uuid.uuid4().hex[:8]}"
    try:
        _write_file(temp, data)
        os.replace(temp, target)
        _fsync_dir(target.parent)
    finally:
        if temp.exists():
            temp.unlink()


def _write_folder(root: Path, files: Mapping[str, bytes]) -> None:
    root.mkdir()
    for name, data in files.items():
        dest = root.joinpath(*PurePosixPath(name).parts)
        dest.parent.mkdir(parents=True, exist_ok=True)
        _write_file(dest, data)
    for folder in {root.joinpath(*PurePosixPath(n).parts).parent for n in files}:
        _fsync_dir(folder)


def _write_zip(target: Path, files: Mapping[str, bytes]) -> None:
    with open(target, "wb") as handle:
        with zipfile.ZipFile(handle, "w", compression=zipfile.ZIP_DEFLATED) as archive:
            stamp = dt.datetime.now().timetuple()[:6]
            for name in [SESSION_JSON, *sorted(n for n in files if n != SESSION_JSON)]:
                info = zipfile.ZipInfo(name, date_time=stamp)
                info.compress_type = zipfile.ZIP_DEFLATED
                archive.writestr(info, files[name])
        handle.flush()
        os.fsync(handle.fileno())


def _move_into_place(temp: Path, target: Path) -> None:
    if temp.is_dir() and target.exists():
        old = target.parent / f".{target.name}.old-{uuid.uuid4().hex[:8]}"
        os.rename(target, old)
        try:
            os.rename(temp, target)
        except OSError:
            os.rename(old, target)
            raise
        if old.is_dir():
            shutil.rmtree(old)
        else:
            old.unlink()
    else:
        os.replace(temp, target)
    _fsync_dir(target.parent)


# --------------------------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------------------------


def _safe_member(name: str, where: str) -> str:
    parts = PurePosixPath(name.replace("\\", "/")).parts
    if (
        name.startswith(("/", "\\"))
        or any(part in ("..", "") for part in parts)
        or ":" in (parts[0] if parts else "")
    ):
        raise InputError(
            f"holds an unsafe path {name!r} (absolute or leading outside the bundle)", file=where
        )
    return "/".join(parts)


def load_bundle_files(path: str | os.PathLike) -> dict[str, bytes]:
    """Read every file of a bundle folder or ``.zip`` into {path inside the bundle: bytes}.

    A ``.zip`` whose files sit in one top-level folder (as an operating system zips a folder)
    is read as if they were at its root.
    """
    source = Path(path)
    files: dict[str, bytes] = {}
    if source.is_dir():
        for item in sorted(source.rglob("*")):
            if item.is_file():
                files[item.relative_to(source).as_posix()] = item.read_bytes()
    elif source.is_file():
        if not zipfile.is_zipfile(source):
            raise InputError("is neither a bundle folder nor a .zip bundle", file=str(source))
        try:
            with zipfile.ZipFile(source) as archive:
                for info in archive.infolist():
                    if info.is_dir():
                        continue
                    name = _safe_member(info.filename, str(source))
                    files[name] = archive.read(info)
        except (zipfile.BadZipFile, OSError, EOFError) as exc:
            raise InputError(f"the .zip is damaged: {exc}", file=str(source)) from exc
    else:
        raise InputError("no bundle folder or .zip at this path", file=str(source))
    if SESSION_JSON not in files:
        tops = {name.split("/", 1)[0] for name in files}
        if len(tops) == 1 and f"{next(iter(tops))}/{SESSION_JSON}" in files:
            prefix = next(iter(tops)) + "/"
            files = {name[len(prefix) :]: data for name, data in files.items()}
    return files


def _refuse_constant(name: str) -> None:
    raise ValueError(f"{name} is not a number JSON allows")


def _parse_json(data: bytes) -> dict[str, Any]:
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"is not UTF-8 text (byte {exc.start})", file=SESSION_JSON) from exc
    try:
        doc = json.loads(text, parse_constant=_refuse_constant)
    except json.JSONDecodeError as exc:
        raise InputError(
            f"is not valid JSON: {exc.msg} at column {exc.colno}", file=SESSION_JSON, row=exc.lineno
        ) from exc
    except ValueError as exc:
        raise InputError(f"is not valid JSON: {exc}", file=SESSION_JSON) from exc
    if not isinstance(doc, dict):
        raise InputError(
            f"must hold a JSON object at the top; got {type(doc).__name__}", file=SESSION_JSON
        )
    return doc


def _path_of(parts) -> str:
    return ".".join(str(p) for p in parts)


def _check_schema(doc: dict[str, Any]) -> None:
    from jsonschema.exceptions import best_match

    errors = list(_validator().iter_errors(doc))
    if not errors:
        return
    first = best_match(errors)
    where = _path_of(first.absolute_path) or "(document)"
    others = sorted(
        {
            f"{_path_of(e.absolute_path) or '(document)'}: {e.message}"
            for e in errors
            if e is not first
        }
    )
    more = f" (also: {'; '.join(others[:4])}{'; …' if len(others) > 4 else ''})" if others else ""
    raise InputError(f"{first.message}{more}", file=SESSION_JSON, field=where)


def _cells_equal(value: Any, expected: str, found: str) -> bool:
    """Whether a cell holds the JSON ``value`` (rendered ``expected``); formatting may differ."""
    if expected == found:
        return True
    if isinstance(value, bool):
        return found.strip().lower() == expected
    if isinstance(value, int | float):
        try:
            return float(found) == float(value)
        except ValueError:
            return False
    return False


def _columns_of_layout(name: str, layout: int) -> list[str]:
    added = {c for version, tables in COLUMNS_ADDED.items() if version > layout for c in tables.get(name, ())}
    return [c for c in TABLES_BY_NAME[name].columns if c not in added]


def check_table(name: str, data: bytes, session_document: Mapping[str, Any], *,
                layout: int = BUNDLE_FORMAT_VERSION) -> bool:
    """Check one CSV table against the session's JSON document.

    Returns ``True`` when the bytes are exactly what swimlab writes, ``False`` when they differ
    only in formatting (the same values). Any other difference raises.

    Raises
    ------
    InputError
        Naming the file, and the row (as counted in the file, the header being row 1) and
        column, on missing or extra columns, a missing or extra row, or a value that differs
        from the authoritative ``session.json``. A table of an older ``layout`` is checked on
        the columns that layout had (:data:`COLUMNS_ADDED`).
    """
    table = TABLES_BY_NAME[name]
    columns = _columns_of_layout(name, layout)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"is not UTF-8 text (byte {exc.start})", file=name) from exc
    try:
        rows = list(csv.reader(io.StringIO(text, newline="")))
    except csv.Error as exc:
        raise InputError(f"is not readable CSV: {exc}", file=name) from exc
    if not rows:
        raise InputError(
            f"is empty; expected a header row with columns {table.columns}", file=name, row=1
        )
    header = [cell.strip() for cell in rows[0]]
    missing = [c for c in columns if c not in header]
    extra = [c for c in header if c not in columns]
    if missing:
        raise InputError(
            f"column is missing; the table's columns are {columns}",
            file=name,
            row=1,
            column=missing[0],
        )
    if extra:
        raise InputError(
            f"column is not part of this table; its columns are {columns}",
            file=name,
            row=1,
            column=extra[0],
        )
    if len(set(header)) != len(header):
        dup = next(c for c in header if header.count(c) > 1)
        raise InputError("column appears more than once", file=name, row=1, column=dup)
    records = _rows_at(session_document, table.path)
    expected_rows = [[_cell(record.get(c)) for c in columns] for record in records]
    body = [row for row in rows[1:] if any(cell.strip() for cell in row)]
    for number, row in enumerate(rows[1:], start=2):
        if any(cell.strip() for cell in row) and len(row) != len(header):
            raise InputError(
                f"has {len(row)} cells; the header has {len(header)}", file=name, row=number
            )
    numbered = [
        (number, row) for number, row in enumerate(rows[1:], start=2) if any(c.strip() for c in row)
    ]
    if len(body) != len(expected_rows):
        row = numbered[len(expected_rows)][0] if len(body) > len(expected_rows) else len(rows) + 1
        raise InputError(
            f"has {len(body)} rows but session.json (the authoritative record) has "
            f"{len(expected_rows)} in {table.field}; edit the session, not the table",
            file=name,
            row=row,
        )
    for (number, row), expected, record in zip(numbered, expected_rows, records, strict=True):
        found = dict(zip(header, row, strict=True))
        for column, want in zip(columns, expected, strict=True):
            if not _cells_equal(record.get(column), want, found[column]):
                raise InputError(
                    f"holds {found[column]!r} but session.json (the authoritative record) has "
                    f"{want!r}; edit the session, not the table",
                    file=name,
                    row=number,
                    column=column,
                )
    if layout != BUNDLE_FORMAT_VERSION:  # an older layout's table: its values agree, its columns are its own
        return True
    return data == table_text(session_document, table).encode("utf-8")


def read_bundle(path: str | os.PathLike) -> BundleContents:
    """Read and check a bundle folder or ``.zip``.

    Every check runs before anything is returned, and nothing is written anywhere.

    Raises
    ------
    InputError
        Naming the file and the field, row or column: no ``session.json``; not JSON; not a
        swimlab bundle; a layout newer than this swimlab; a value of the wrong type or out of
        range; a file listed in the manifest but absent, of the wrong size, or whose checksum
        does not match; a raw file the session refers to that the manifest does not list; a CSV
        table with missing or extra columns or values that disagree with ``session.json``.
    """
    files = load_bundle_files(path)
    if SESSION_JSON not in files:
        raise InputError(
            "is missing; every bundle holds its record in session.json at its root",
            file=SESSION_JSON,
        )
    doc = _parse_json(files[SESSION_JSON])
    doc, found_version, problems = upgrade_document(doc)
    _check_schema(doc)
    session_doc = doc["session"]
    session, session_problems = validate_session(session_doc)
    if session is None:
        first = session_problems[0]
        raise InputError(
            "; ".join(f"session.{p.field}: {p.message}" for p in session_problems),
            file=SESSION_JSON,
            field=f"session.{first.field}",
        )

    listed: dict[str, dict[str, Any]] = {}
    by_sha: dict[str, str] = {}
    for i, entry in enumerate(doc["files"]):
        where = f"files.{i}.path"
        name = _safe_member(entry["path"], SESSION_JSON)
        if name in listed or name == SESSION_JSON:
            raise InputError(
                f"lists {name!r} twice (or lists session.json itself)",
                file=SESSION_JSON,
                field=where,
            )
        if name not in files:
            raise InputError(
                f"is listed in session.json ({where}) but absent from the bundle",
                file=name,
                field=where,
            )
        data = files[name]
        if entry["role"] == "table":
            if name not in TABLES_BY_NAME:
                raise InputError(
                    f"is listed as a table, but the tables are {sorted(TABLES_BY_NAME)}",
                    file=name,
                    field=f"files.{i}.role",
                )
        else:
            if len(data) != entry["bytes"]:
                raise InputError(
                    f"has {len(data)} bytes; session.json ({f'files.{i}.bytes'}) says "
                    f"{entry['bytes']}: the file was changed or damaged",
                    file=name,
                    field=f"files.{i}.bytes",
                )
            actual = sha256_hex(data)
            if actual != entry["sha256"]:
                raise InputError(
                    f"has checksum {actual}; session.json ({f'files.{i}.sha256'}) says "
                    f"{entry['sha256']}: the file was changed or damaged",
                    file=name,
                    field=f"files.{i}.sha256",
                )
            by_sha.setdefault(actual, name)
        listed[name] = entry

    for name, entry in listed.items():
        if entry["role"] == "table" and not check_table(name, files[name], session_doc, layout=found_version):
            problems.append(
                f"{name}: re-formatted since it was written; its values agree with session.json"
            )
    for table in TABLES:
        if table.name not in listed and found_version >= 1:
            problems.append(f"{table.name}: not in the bundle; session.json holds {table.field}")

    raw: dict[str, bytes] = {}
    for i, ref in enumerate(session.raw_files):
        if ref.sha256 not in by_sha:
            raise InputError(
                f"refers to raw file {ref.name!r}, but no file in the bundle's manifest has its checksum",
                file=SESSION_JSON,
                field=f"session.raw_files.{i}.sha256",
            )
        raw[ref.sha256] = files[by_sha[ref.sha256]]
    unlisted = sorted(set(files) - set(listed) - {SESSION_JSON})
    for name in unlisted:
        problems.append(f"{name}: not listed in session.json; ignored")
    for sha, name in by_sha.items():
        if sha not in raw:
            problems.append(f"{name}: listed but not referred to by the session; ignored")
    return BundleContents(
        session=session,
        raw_files=raw,
        problems=problems,
        format_version=found_version,
        created_at=str(doc["created_at"]),
        generator=str(doc["generator"]),
    )
