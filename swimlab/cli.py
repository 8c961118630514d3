"""The command line: ``python -m swimlab COMMAND …``.

Commands
--------
``import-bundle PATH``
    Read a session bundle (folder or .zip) and add it to the lab book.
``export SESSION_ID PATH [--zip]``
    Write a session from the lab book as a bundle.
``analyse (BUNDLE_PATH | --session ID) [--out DIR]``
    Analyse a session, print its results and write steps.csv, phases.csv (measure phases with MO2),
    cycles.csv, results.csv, flags.csv and analysis.json.
``fatigue-curves BUNDLE_PATH… [--out DIR]``
    Endurance across fish: the censored fatigue curve of all fish and of each gait the trials
    ended in, from the endurance bundles given (or folders of bundles).
``list [--status S]``
    List the sessions in the lab book.
``check-bundle PATH``
    Check a bundle without importing it.
``schema [--write]``
    Print the JSON Schema of a bundle's session.json (or rewrite the committed file).
``people add|list|set-role|unlock|set-password|set-email|deactivate|reactivate …``
    Manage the people of a lab server (accounts, roles, local passwords, lock-outs). Passwords
    are read without echo, or from standard input with ``--password-stdin``; never from the
    command line.

``--db URL`` chooses the lab book (otherwise as :func:`swimlab.store.resolve_database_url`);
``--who NAME`` names the person acting, for the audit trail (default: ``SWIMLAB_USER`` or the
login name). Exit status: 0 on success, 2 on bad input (one line on stderr, no traceback).
"""

from __future__ import annotations

import argparse
import getpass
import json
import os
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from swimlab import __version__
from swimlab.errors import SwimlabError

EXIT_OK = 0
EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse, with its usage errors on one line like every other error here."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def _default_who() -> str:
    name = os.environ.get("SWIMLAB_USER", "").strip()
    if name:
        return name
    try:
        return getpass.getuser()
    except (OSError, KeyError):  # pragma: no cover - no login name on this system
        return ""


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``python -m swimlab``."""
    parser = _Parser(
        prog="swimlab",
        description="Swim-tunnel respirometry: session bundles, the lab book and analyses.",
        epilog="Trials with live animals must follow the protocol approved by your institution's "
        "animal-care committee and local law.",
    )
    parser.add_argument("--version", action="version", version=f"swimlab {__version__}")
    parser.add_argument(
        "--db",
        metavar="URL",
        help="lab book database URL (default: SWIMLAB_DATABASE_URL, then swimlab.toml, "
        "then ./labbook/swimlab.sqlite)",
    )
    parser.add_argument(
        "--who", metavar="NAME", default=None, help="person acting, for the audit trail"
    )
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    commands.required = True

    cmd = commands.add_parser(
        "import-bundle",
        help="add a session bundle to the lab book",
        description="Read a session bundle (folder or .zip), check it, and add "
        "the session and its raw files to the lab book as version 1.",
    )
    cmd.add_argument("path", metavar="PATH", help="bundle folder or .zip")
    cmd.set_defaults(run=_import_bundle)

    cmd = commands.add_parser(
        "export",
        help="write a session from the lab book as a bundle",
        description="Write the current version of a session, with its raw "
        "files, as a bundle folder (or .zip with --zip).",
    )
    cmd.add_argument("session_id", metavar="SESSION_ID")
    cmd.add_argument("path", metavar="PATH", help="bundle folder (or .zip) to create")
    cmd.add_argument("--zip", action="store_true", help="write one .zip file instead of a folder")
    cmd.add_argument("--overwrite", action="store_true", help="replace an existing bundle at PATH")
    cmd.set_defaults(run=_export)

    cmd = commands.add_parser(
        "analyse",
        help="analyse a session and write its tables",
        description="Analyse a session from a bundle or from the lab book; "
        "write steps.csv, phases.csv, cycles.csv, results.csv, flags.csv and analysis.json into DIR "
        "and print a short summary.",
    )
    source = cmd.add_mutually_exclusive_group(required=True)
    source.add_argument("bundle", metavar="BUNDLE_PATH", nargs="?", help="bundle folder or .zip")
    source.add_argument("--session", metavar="ID", help="a session in the lab book")
    cmd.add_argument(
        "--out", metavar="DIR", help="output folder (default: ./analysis-<session id>)"
    )
    cmd.set_defaults(run=_analyse)

    cmd = commands.add_parser(
        "fatigue-curves",
        help="endurance across fish: fatigue curves pooled and per gait",
        description="Analyse the fixed-speed endurance sessions among the bundles given (bundle folders, .zip "
        "files, or folders of bundles) and print the censored fatigue curve of all fish, the curve of each gait "
        "the trials ended in (with the test of one curve per gait against one pooled curve) and the maximum "
        "sustained speed.",
    )
    cmd.add_argument("bundles", metavar="BUNDLE_PATH", nargs="+", help="bundle folders, .zip files or folders of them")
    cmd.add_argument("--out", metavar="DIR", help="also write endurance_fish.csv and fatigue_curves_by_gait.csv here")
    cmd.set_defaults(run=_fatigue_curves)

    cmd = commands.add_parser(
        "report",
        help="write a methods-and-results report of a session",
        description="Write the report of a session from a bundle or from the lab book: methods "
        "filled from the recorded settings, reporting checklist, results, figures, flags and "
        "sign-off, as self-contained HTML or printable PDF.",
    )
    source = cmd.add_mutually_exclusive_group(required=True)
    source.add_argument("bundle", metavar="BUNDLE_PATH", nargs="?", help="bundle folder or .zip")
    source.add_argument("--session", metavar="ID", help="a session in the lab book")
    cmd.add_argument("--out", metavar="FILE", required=True, help="report file to write (.html or .pdf)")
    cmd.add_argument("--format", choices=("html", "pdf"), default=None,
                     help="report format (default: from the file's ending)")
    cmd.add_argument("--page-size", choices=("A4", "Letter"), default="A4", help="paper size of a PDF")
    cmd.add_argument("--no-figures", action="store_true",
                     help="leave figures out (quick draft; figures need Chromium)")
    cmd.set_defaults(run=_report)

    cmd = commands.add_parser(
        "list",
        help="list the sessions in the lab book",
        description="List the sessions in the lab book, most recently changed first.",
    )
    from swimlab.session import STATUSES

    cmd.add_argument("--status", choices=STATUSES, help="only sessions with this status")
    cmd.set_defaults(run=_list)

    cmd = commands.add_parser(
        "check-bundle",
        help="check a bundle without importing it",
        description="Read and check a bundle; report what was found.",
    )
    cmd.add_argument("path", metavar="PATH", help="bundle folder or .zip")
    cmd.set_defaults(run=_check_bundle)

    cmd = commands.add_parser(
        "schema",
        help="print the JSON Schema of session.json",
        description="Print the JSON Schema (draft 2020-12) of a bundle's "
        "session.json, generated from the session model.",
    )
    cmd.add_argument(
        "--write", action="store_true", help="rewrite the schema file committed inside the package"
    )
    cmd.set_defaults(run=_schema)
    _add_people_parser(commands)
    return parser


def _who(args: argparse.Namespace) -> str:
    return args.who if args.who is not None else _default_who()


def _open_book(args: argparse.Namespace):
    from swimlab.store import LabBook

    return LabBook.open(args.db)


def _import_bundle(args: argparse.Namespace) -> int:
    from swimlab.io.bundle import read_bundle

    contents = read_bundle(args.path)
    with _open_book(args) as book:
        version = book.create_session(
            contents.session,
            contents.raw_files,
            who=_who(args),
            reason=f"imported from bundle {Path(args.path).name}",
        )
    for note in contents.problems:
        print(f"note: {note}")
    session = contents.session
    print(f"imported session {session.session_id} ({session.title}) as version {version}")
    return EXIT_OK


def _export(args: argparse.Namespace) -> int:
    from swimlab.io.bundle import write_bundle

    with _open_book(args) as book:
        stored = book.get_session(args.session_id)
        raw = book.raw_files_of(stored.session)
    path = write_bundle(stored.session, raw, args.path, as_zip=args.zip, overwrite=args.overwrite)
    print(f"wrote session {args.session_id} version {stored.version} ({stored.status}) to {path}")
    return EXIT_OK


@dataclass(frozen=True)
class _Source:
    """A session to analyse, named by ``--session`` (the lab book) or ``BUNDLE_PATH``."""

    session: Any
    raw: dict[str, bytes]
    stored: Any = None
    """The lab book's :class:`~swimlab.store.StoredSession`; ``None`` for a bundle."""
    audit: Any = None
    """The session's audit trail, when asked for; ``None`` for a bundle."""
    lab_settings: dict[str, Any] | None = None
    notes: tuple[str, ...] = ()
    """What reading the bundle noticed."""


def _source(args: argparse.Namespace, *, audit: bool = False) -> _Source:
    if args.session:
        with _open_book(args) as book:
            stored = book.get_session(args.session)
            return _Source(
                stored.session,
                book.raw_files_of(stored.session),
                stored=stored,
                audit=book.audit_trail(args.session) if audit else None,
                lab_settings=book.get_lab_setting_overrides(),
            )
    from swimlab.io.bundle import read_bundle

    contents = read_bundle(args.bundle)
    return _Source(contents.session, contents.raw_files, notes=tuple(contents.problems))


def _analysed(args: argparse.Namespace, source: _Source):
    """The analysis of ``source``; a repeat swim's first swim is analysed too, for the recovery ratio."""
    from swimlab.analysis import analyse  # the science stack is loaded only when needed

    session, lab_settings = source.session, source.lab_settings
    extra = {}
    if session.protocol.type == "repeat_ucrit" and session.protocol.first_swim_session_id:
        first = _first_swim(args, session.protocol.first_swim_session_id)
        if first is not None:  # the first swim's analysis gives the recovery ratio
            extra["first_swim"] = analyse(first[0], first[1], lab_settings=lab_settings)
    return analyse(session, source.raw, lab_settings=lab_settings, **extra)


def _analyse(args: argparse.Namespace) -> int:
    source = _source(args)
    for note in source.notes:
        print(f"note: {note}")
    session = source.session
    result = _analysed(args, source)
    out = Path(args.out) if args.out else Path(f"analysis-{session.session_id}")
    files = {
        "steps.csv": result.steps.to_csv(index=False).encode("utf-8"),
        "phases.csv": result.measure.to_csv(index=False).encode("utf-8"),
        "cycles.csv": result.phases.to_csv(index=False).encode("utf-8"),
        "results.csv": result.results.to_csv(index=False).encode("utf-8"),
        "flags.csv": result.flags.to_csv(index=False).encode("utf-8"),
        "analysis.json": (
            json.dumps(result.to_json_dict(), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
        ).encode("utf-8"),
    }
    protocol = getattr(result, "protocol", None)
    if protocol is not None and not protocol.results.empty:
        files["protocol_results.csv"] = protocol.results.to_csv(index=False).encode("utf-8")
    groups = getattr(result, "groups", None)
    if groups is not None and not groups.empty:
        files["groups.csv"] = groups.to_csv(index=False).encode("utf-8")
    from swimlab.io.bundle import atomic_write_bytes

    out.mkdir(parents=True, exist_ok=True)
    for name, data in files.items():
        atomic_write_bytes(out / name, data)
    flags = result.flags
    counts = ""
    if len(flags) and "severity" in flags:
        by = flags["severity"].value_counts()
        counts = (
            " ("
            + ", ".join(f"{int(by[s])} {s}" for s in ("invalid", "warning", "info") if s in by)
            + ")"
        )
    print(
        f"{session.title} [{session.session_id}]: {len(result.phases)} phases, "
        f"{len(result.steps)} steps, {len(flags)} flags{counts}"
    )
    for line in _result_lines(result):
        print(line)
    print(f"wrote {', '.join(files)} to {out}")
    return EXIT_OK


def _first_swim(args: argparse.Namespace, session_id: str):
    """(session, raw files) of a repeat swim's first swim: from the lab book, or a bundle beside this one."""
    if args.session:
        with _open_book(args) as book:
            try:
                stored = book.get_session(session_id)
            except SwimlabError:
                return None
            return stored.session, book.raw_files_of(stored.session)
    from swimlab.io.bundle import SESSION_JSON, read_bundle

    for sibling in sorted(Path(args.bundle).resolve().parent.iterdir()):
        try:
            doc = json.loads((sibling / SESSION_JSON).read_text(encoding="utf-8")) if sibling.is_dir() else {}
        except (OSError, ValueError):
            continue
        if doc.get("session", {}).get("session_id") == session_id:
            contents = read_bundle(sibling)
            return contents.session, contents.raw_files
    return None


def _result_lines(result) -> list[str]:
    """One line per derived value: quantity, value with unit, 95 % interval, method.

    Protocol results (ramp, endurance, repeat swim, recovery, gait, kinematics) follow, each line
    led by its protocol's name, then why any protocol result was not computed, then the flags.
    """
    lines = []
    groups = getattr(result, "groups", None)
    if groups is not None and not groups.empty:
        from swimlab.checks import GROUP_CAVEAT

        for g in groups.itertuples(index=False):
            lines.append(f"  WARNING group {g.group_id}: {g.n_fish} fish ({g.fish_ids}) swum together in chamber "
                         f"{g.chamber}, {g.mass_g:g} g in all; fatigue definition {g.fatigue_definition}. MO2 is the "
                         "group's; per kg and per fish it is per capita.")
        lines.append(f"  WARNING {GROUP_CAVEAT}")
    for row in result.results.itertuples(index=False):
        if row.value != row.value:  # NaN: nothing to print
            continue
        interval = "" if row.ci_low != row.ci_low else f" (95 % CI {row.ci_low:.4g}–{row.ci_high:.4g})"
        note = f" [{row.note}]" if row.note else ""
        lines.append(f"  {row.fish_id}  {row.quantity:<13} {row.value:.4g} {row.unit}{interval} — {row.method}{note}")
    protocol = getattr(result, "protocol", None)
    if protocol is not None:
        for row in protocol.results.itertuples(index=False):
            if row.value != row.value:
                lines.append(f"  [{row.part}] {row.fish_id}  {row.label} — not computed: {row.note}")
                continue
            interval = "" if row.ci_low != row.ci_low else f" (95 % CI {row.ci_low:.4g}–{row.ci_high:.4g})"
            note = f" [{row.note}]" if row.note else ""
            lines.append(f"  [{row.part}] {row.fish_id}  {row.label}: {row.value:.4g} {row.unit}{interval}"
                         f" — {row.method}{note}")
        lines.extend(f"  [{p.part}] not computed: {p}" for p in protocol.problems)
    for row in result.flags.itertuples(index=False):
        where = getattr(row, "where", "") or "session"
        lines.append(f"  flag {row.severity}: {row.code} at {where} — {getattr(row, 'message', '')}")
    return lines


def _report(args: argparse.Namespace) -> int:
    source = _source(args, audit=True)
    session = source.session
    fmt = args.format or ("pdf" if str(args.out).lower().endswith(".pdf") else "html")
    from swimlab.report import write_report

    path = write_report(
        session, _analysed(args, source), args.out, fmt=fmt, status=source.stored, audit=source.audit,
        page_size=args.page_size, figures=not args.no_figures,
    )
    print(f"wrote the {fmt.upper()} report of session {session.session_id} ({session.title}) to {path}")
    return EXIT_OK


def _fatigue_curves(args: argparse.Namespace) -> int:
    from swimlab.analysis import analyse
    from swimlab.io.bundle import SESSION_JSON, read_bundle
    from swimlab.protocol_analysis import endurance_summary, gait_curve_sentences, gait_curve_table

    paths: list[Path] = []
    for given in args.bundles:
        path = Path(given)
        if path.is_dir() and not (path / SESSION_JSON).is_file():  # a folder of bundles
            paths.extend(sorted(p for p in path.iterdir() if (p / SESSION_JSON).is_file()))
        else:
            paths.append(path)
    items = []
    for path in paths:
        contents = read_bundle(path)
        if contents.session.protocol.type == "endurance":
            items.append((contents.session, analyse(contents.session, contents.raw_files)))
    summary = endurance_summary(items)
    if summary is None:
        from swimlab.errors import InputError

        raise InputError("none of the bundles given holds a fixed-speed endurance session", field="bundles")
    fish = summary.fish
    print(f"Fixed-speed endurance: {len(fish)} fish, {int((~fish['fatigued']).sum())} still swimming at the "
          f"{summary.time_limit_s / 60:g} min limit (censored)")
    fit = summary.fatigue_curve
    if fit is not None:
        sign = "−" if fit.slope < 0 else "+"
        print(f"  all fish pooled: log10 T [s] = {fit.intercept:.4g} {sign} {abs(fit.slope) / 100:.3g} × U [cm/s] "
              f"(slope SE {(fit.slope_se or float('nan')) / 100:.2g}; Tobin 1958)")
    mss = summary.max_sustained.speed_m_s
    print(f"  maximum sustained speed (set): {'none' if mss is None else f'{mss * 100:.1f} cm/s'}")
    for line in gait_curve_sentences(summary):
        print(f"  per gait: {line}")
    for line in summary.problems:
        print(f"  note: {line}")
    if args.out:
        out = Path(args.out)
        out.mkdir(parents=True, exist_ok=True)
        from swimlab.io.bundle import atomic_write_bytes

        atomic_write_bytes(out / "endurance_fish.csv", fish.to_csv(index=False).encode("utf-8"))
        atomic_write_bytes(out / "fatigue_curves_by_gait.csv",
                            gait_curve_table(summary).to_csv(index=False).encode("utf-8"))
        print(f"wrote endurance_fish.csv, fatigue_curves_by_gait.csv to {out}")
    return EXIT_OK


def _list(args: argparse.Namespace) -> int:
    with _open_book(args) as book:
        table = book.list_sessions(status=args.status)
    if table.empty:
        print(
            "no sessions"
            + (f" with status {args.status!r}" if args.status else "")
            + f" in {book.url}"
        )
        return EXIT_OK
    shown = table.assign(updated_at=table["updated_at"].str.slice(0, 19).str.replace("T", " "))
    print(shown.to_string(index=False))
    return EXIT_OK


def _check_bundle(args: argparse.Namespace) -> int:
    from swimlab.io.bundle import read_bundle

    contents = read_bundle(args.path)
    for note in contents.problems:
        print(f"note: {note}")
    session = contents.session
    print(
        f"ok: session {session.session_id} ({session.title}), bundle layout "
        f"{contents.format_version}, {len(contents.raw_files)} raw file(s)"
    )
    return EXIT_OK


def _schema(args: argparse.Namespace) -> int:
    from swimlab.io.bundle import schema_text, write_schema

    if args.write:
        print(f"wrote {write_schema()}")
    else:
        sys.stdout.write(schema_text())
    return EXIT_OK


# --------------------------------------------------------------------------------------------
# people (lab-server mode)
# --------------------------------------------------------------------------------------------


def _add_people_parser(commands) -> None:
    """``people …``: the accounts of a lab server. Run on the machine that holds the lab book."""
    from swimlab.auth import ROLES

    people = commands.add_parser(
        "people",
        help="manage the people of a lab server",
        description="Add people, list them, change roles, set passwords and lift lock-outs. "
        "Everything is recorded in the lab book's audit trail under --who. This command acts "
        "with the lab book's own database access: keep it to the server's administrators.",
    )
    sub = people.add_subparsers(dest="people_command", metavar="ACTION", parser_class=_Parser)
    sub.required = True

    def password_options(cmd, *, removable: bool) -> None:
        group = cmd.add_mutually_exclusive_group()
        group.add_argument(
            "--password-stdin",
            action="store_true",
            help="read the password from the first line of standard input (for scripts)",
        )
        group.add_argument(
            "--no-password" if not removable else "--remove",
            dest="no_password",
            action="store_true",
            help="no local password: the person signs in through single sign-on only"
            if not removable
            else "remove the local password (single sign-on only)",
        )

    cmd = sub.add_parser(
        "add",
        help="add a person",
        description="Add a person. Without --password-stdin or --no-password the password is "
        "asked twice, without echo. It must be at least 12 characters.",
    )
    cmd.add_argument("username", metavar="USERNAME", help="account name (letters, digits, . _ @ + -)")
    cmd.add_argument("--name", required=True, metavar="NAME", help="name shown on pages and reports")
    cmd.add_argument("--role", required=True, choices=ROLES)
    cmd.add_argument("--email", default="", help="address the single-sign-on service vouches for")
    cmd.add_argument("--reason", default="", help="why, for the audit trail")
    password_options(cmd, removable=False)
    cmd.set_defaults(run=_people_add)

    cmd = sub.add_parser("list", help="list the people", description="List the people.")
    cmd.set_defaults(run=_people_list)

    cmd = sub.add_parser("set-role", help="change a person's role", description="Change a role.")
    cmd.add_argument("username", metavar="USERNAME")
    cmd.add_argument("role", choices=ROLES)
    cmd.add_argument("--reason", required=True, help="why, for the audit trail")
    cmd.set_defaults(run=_people_set_role)

    cmd = sub.add_parser(
        "unlock",
        help="lift a lock-out after failed logins",
        description="Lift a lock-out before it expires.",
    )
    cmd.add_argument("username", metavar="USERNAME")
    cmd.add_argument("--reason", default="", help="why, for the audit trail")
    cmd.set_defaults(run=_people_unlock)

    cmd = sub.add_parser(
        "set-password",
        help="set or remove a person's local password",
        description="Set a local password (asked twice without echo, or --password-stdin), or "
        "remove it with --remove. Lifts a lock-out.",
    )
    cmd.add_argument("username", metavar="USERNAME")
    cmd.add_argument("--reason", default="", help="why, for the audit trail")
    password_options(cmd, removable=True)
    cmd.set_defaults(run=_people_set_password)

    cmd = sub.add_parser(
        "set-email", help="change the single-sign-on address", description="Change the e-mail."
    )
    cmd.add_argument("username", metavar="USERNAME")
    cmd.add_argument("email", metavar="EMAIL", help='address, or "" for none')
    cmd.set_defaults(run=_people_set_email)

    for name, active in (("deactivate", False), ("reactivate", True)):
        cmd = sub.add_parser(
            name,
            help=f"{name} a person" + ("" if active else " (they can no longer sign in or act)"),
            description="People are never deleted: the audit trail names them.",
        )
        cmd.add_argument("username", metavar="USERNAME")
        cmd.add_argument("--reason", required=True, help="why, for the audit trail")
        cmd.set_defaults(run=_people_set_active, active=active)


def _new_password(args: argparse.Namespace, username: str) -> str | None:
    """The password to set: none, the first line of standard input, or asked twice."""
    from swimlab.auth import check_new_password
    from swimlab.errors import InputError

    if args.no_password:
        return None
    if args.password_stdin:
        password = sys.stdin.readline().rstrip("\r\n")
    else:
        if not sys.stdin.isatty():
            raise InputError(
                "cannot ask for the password: standard input is not a terminal; use "
                "--password-stdin (or --no-password)",
                field="password",
            )
        password = getpass.getpass(f"password for {username}: ")
        if getpass.getpass("the same again: ") != password:
            raise InputError("the two passwords differ; nothing was changed", field="password")
    return check_new_password(password, username=username)


def _acting(args: argparse.Namespace) -> str:
    from swimlab.errors import InputError

    who = _who(args)
    if not who.strip():
        raise InputError("name the person acting with --who (or SWIMLAB_USER)", field="who")
    return who


def _people_add(args: argparse.Namespace) -> int:
    from swimlab.auth import check_username

    username = check_username(args.username)
    password = _new_password(args, username)
    with _open_book(args) as book:
        account = book.add_person(
            username,
            display_name=args.name,
            role=args.role,
            email=args.email,
            password=password,
            who=_acting(args),
            reason=args.reason,
        )
    how = "a local password" if account.local_password else "no local password"
    print(f"added {account.display_name} ({account.username}) as {account.role}, with {how}")
    return EXIT_OK


def _people_list(args: argparse.Namespace) -> int:
    with _open_book(args) as book:
        table = book.list_people()
    if table.empty:
        print(f"nobody has been added to {book.url}; start with: swimlab people add NAME "
              "--name 'Full Name' --role admin")
        return EXIT_OK
    shown = table.drop(columns=["created_at"]).assign(
        locked_until=table["locked_until"].str.slice(0, 16).str.replace("T", " "),
        last_login_at=table["last_login_at"].str.slice(0, 16).str.replace("T", " "),
    )
    print(shown.to_string(index=False))
    return EXIT_OK


def _people_set_role(args: argparse.Namespace) -> int:
    with _open_book(args) as book:
        account = book.set_role(args.username, args.role, who=_acting(args), reason=args.reason)
    print(f"{account.username} is now {account.role}")
    return EXIT_OK


def _people_unlock(args: argparse.Namespace) -> int:
    with _open_book(args) as book:
        account = book.unlock(args.username, who=_acting(args), reason=args.reason)
    print(f"{account.username} is unlocked")
    return EXIT_OK


def _people_set_password(args: argparse.Namespace) -> int:
    from swimlab.auth import check_username

    username = check_username(args.username)
    password = _new_password(args, username)
    with _open_book(args) as book:
        book.set_password(username, password, who=_acting(args), reason=args.reason)
    print(f"{username}: local password {'set' if password is not None else 'removed'}")
    return EXIT_OK


def _people_set_email(args: argparse.Namespace) -> int:
    with _open_book(args) as book:
        account = book.set_email(args.username, args.email, who=_acting(args))
    print(f"{account.username}: e-mail {account.email or '(none)'}")
    return EXIT_OK


def _people_set_active(args: argparse.Namespace) -> int:
    with _open_book(args) as book:
        account = book.set_active(
            args.username, args.active, who=_acting(args), reason=args.reason
        )
    print(f"{account.username} is {'active' if account.active else 'deactivated'}")
    return EXIT_OK


def _one_line(message: str) -> str:
    return " ".join(str(message).split())


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.run(args)
    except SwimlabError as exc:
        print(f"swimlab: error: {_one_line(str(exc))}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:
        where = f" {exc.filename}" if getattr(exc, "filename", None) else ""
        print(f"swimlab: error:{where}: {_one_line(exc.strerror or str(exc))}", file=sys.stderr)
        return EXIT_BAD_INPUT
