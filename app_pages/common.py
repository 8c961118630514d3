"""Shared pieces of the browser pages: the lab book, the open session, cached analysis, notices.

Not a page itself. Keys of ``st.session_state`` set here start with ``app_``; each page keeps
its own prefix (``lb_``, ``su_``, ``tr_``, ``ck_``, ``rs_``, ``rv_``, ``cc_``).
"""

from __future__ import annotations

import inspect
import json
import os
import re
from collections.abc import Mapping
from typing import Any

import streamlit as st

from swimlab.errors import ConflictError, InputError, PermissionDeniedError
from swimlab.session import Session, validate_session
from swimlab.settings import LabSettings

PAGE_FILES = {
    "lab_book": "app_pages/lab_book.py",
    "setup": "app_pages/setup.py",
    "trace": "app_pages/trace.py",
    "checks": "app_pages/checks.py",
    "results": "app_pages/results.py",
    "protocols": "app_pages/protocols.py",
    "review": "app_pages/review.py",
    "care": "app_pages/care.py",
    "people": "app_pages/people.py",
    "sign_in": "app_pages/sign_in.py",
}

DEFAULT_DATABASE_HINT = "sqlite:///labbook/swimlab.sqlite"


# --------------------------------------------------------------------------------------------
# Lab book
# --------------------------------------------------------------------------------------------


def database_url() -> str | None:
    """The lab book URL from the environment, or None for the default SQLite file."""
    return os.environ.get("SWIMLAB_DATABASE_URL") or None


@st.cache_resource(show_spinner="Opening the lab book…")
def _open_labbook(url: str | None):
    from swimlab.store import LabBook

    return LabBook.open(url)


def labbook():
    """The lab book as the person at this browser acts on it (every action checked there).

    Single-user mode: the person is the name kept in the sidebar. Lab-server mode: the signed-in
    person; before sign-in the page stops. See :meth:`swimlab.store.LabBook.as_person`.
    """
    plain = plain_labbook()
    person = acting_person()
    if person is None:
        st.warning("Sign in first.")
        st.stop()
    return plain.as_person(person)


def plain_labbook():
    """Return the lab book itself (the trusted interface), or show why it cannot be opened."""
    try:
        return _open_labbook(database_url())
    except ImportError as exc:
        st.error(f"The lab book module is not available in this installation: {exc}")
    except (InputError, ValueError, OSError) as exc:
        st.error(f"The lab book could not be opened: {exc}")
    except Exception as exc:  # noqa: BLE001 - a database driver's own error, shown in words
        st.error(f"The lab book could not be opened ({type(exc).__name__}): {exc}")
    st.stop()


def masked_url(book: Any = None) -> str:
    """The lab book URL in use, with any password hidden."""
    url = getattr(book, "url", None) if book is not None else None
    url = str(url) if url else (database_url() or DEFAULT_DATABASE_HINT)
    try:
        from sqlalchemy.engine import make_url

        return make_url(url).render_as_string(hide_password=True)
    except Exception:  # noqa: BLE001 - not a URL SQLAlchemy parses: mask by hand
        return re.sub(r"://([^:/@]+):[^@]*@", r"://\1:***@", url)


def session_table(book: Any, status: str | None = None):
    """The lab book's list of sessions with the column names the pages use.

    Columns: session_id, title, fish, trial_date, temperature_c, status, operator, version,
    updated_at.
    """
    table = book.list_sessions(status=status) if status else book.list_sessions()
    return table.rename(columns={"id": "session_id", "date": "trial_date", "temperature": "temperature_c"})


def lab_settings_dict(book: Any) -> dict[str, Any]:
    """The lab book's settings overrides as a dict (empty when the lab keeps the defaults)."""
    overrides = getattr(book, "get_lab_setting_overrides", None)
    if overrides is not None:
        try:
            return dict(overrides() or {})
        except Exception:  # noqa: BLE001 - settings are optional; the defaults apply
            return {}
    try:
        value = book.get_lab_settings()
    except Exception:  # noqa: BLE001 - settings are optional; the defaults apply
        return {}
    if value is None:
        return {}
    if isinstance(value, LabSettings):
        return value.to_dict()
    if isinstance(value, Mapping):
        return dict(value)
    return dict(getattr(value, "to_dict", dict)())


def effective_settings(book: Any, work: Mapping[str, Any] | None = None) -> LabSettings:
    """Lab settings with the open session's own overrides."""
    merged = lab_settings_dict(book)
    if work and isinstance(work.get("settings"), Mapping):
        merged.update(work["settings"])
    try:
        return LabSettings.from_dict(merged)
    except InputError:
        return LabSettings()


def user_name() -> str:
    """Who acts: the signed-in person's name (lab server) or the name in the sidebar."""
    person = signed_in()
    if person is not None:
        return person.display_name
    return str(st.session_state.get("app_user") or "").strip()


# --------------------------------------------------------------------------------------------
# People: the mode, who is signed in, and the pages each role sees
# --------------------------------------------------------------------------------------------


def app_mode() -> str:
    """``single-user`` or ``lab-server`` (:func:`swimlab.auth.resolve_mode`); a bad setting stops."""
    from swimlab import auth

    try:
        return auth.resolve_mode()[0]
    except InputError as exc:
        st.error(f"The mode setting is not usable: {exc}")
        st.stop()


def signed_in():
    """The signed-in :class:`~swimlab.auth.Person` in lab-server mode, else None."""
    from swimlab import auth

    if app_mode() != auth.LAB_SERVER:
        return None
    return st.session_state.get("app_person")


def acting_person():
    """The person who acts: signed in (lab server) or the one of single-user mode."""
    from swimlab import auth

    if app_mode() == auth.LAB_SERVER:
        return st.session_state.get("app_person")
    name = str(st.session_state.get("app_user") or "").strip() or "unnamed"
    return auth.Person.single_user(name)


def oidc_section() -> Mapping[str, Any] | None:
    """The ``[auth]`` section of ``.streamlit/secrets.toml`` when single sign-on is set up."""
    from swimlab import auth

    try:
        section = st.secrets.get("auth")
    except Exception:  # noqa: BLE001 - no secrets file: no single sign-on
        return None
    return section if auth.oidc_configured(section) else None


def _sso_logged_in() -> bool:
    try:
        return bool(st.user.is_logged_in)
    except Exception:  # noqa: BLE001 - single sign-on not set up
        return False


def sign_out() -> None:
    """Forget everything of this browser session (and leave single sign-on), then start over."""
    sso = _sso_logged_in()
    for key in list(st.session_state.keys()):
        del st.session_state[key]
    if sso:
        st.logout()
    st.rerun()


def check_sign_in(book: Any):
    """Lab-server mode: the signed-in person, checked against the lab book at every page run.

    Takes up a single-sign-on identity (``st.user``) the first time; signs out a person whose
    account was deactivated; picks up a changed role or name (so the page list follows at once).
    Returns the person, or None when nobody is signed in.
    """
    from dataclasses import replace

    from swimlab.auth import LoginError

    person = st.session_state.get("app_person")
    if person is None and _sso_logged_in() and oidc_section() is not None:
        try:
            person = book.person_for_claims(st.user.to_dict())
        except LoginError as exc:
            st.session_state["app_sign_in_error"] = str(exc)
            return None
        st.session_state["app_person"] = person
    if person is None:
        return None
    try:
        account = book.get_person(person.username)
    except InputError:
        account = None
    if account is None or not account.active:
        sign_out()
    if (account.role, account.display_name) != (person.role, person.display_name):
        person = replace(person, role=account.role, display_name=account.display_name)
        st.session_state["app_person"] = person
    return person


def own_password_form(book: Any) -> None:
    """A small form to change one's own local password (the current one is asked first)."""
    from swimlab.auth import LoginError

    with st.expander("Change my password"), st.form("app_password_form", clear_on_submit=True):
        current = st.text_input("Current password", type="password", autocomplete="current-password")
        new = st.text_input("New password", type="password", autocomplete="new-password")
        again = st.text_input("New password again", type="password", autocomplete="new-password")
        if st.form_submit_button("Change"):
            if new != again:
                st.error("New password: the two entries differ; nothing was changed.")
                return
            try:
                book.change_own_password(current, new)
            except LoginError:
                st.error("Current password: it is not right (this counts as a failed login).")
            except (InputError, PermissionDeniedError) as exc:
                st.error(f"Not changed: {exc}")
            else:
                st.success("Password changed.")


def page_list(mode: str, person: Any) -> dict[str, list]:
    """The pages this person may open, by section. A page left out answers "page not found"."""
    from swimlab import auth

    trial = [
        st.Page(PAGE_FILES["lab_book"], title="Lab book", icon=":material/menu_book:", default=True),
        st.Page(PAGE_FILES["setup"], title="Set-up", icon=":material/edit_note:"),
        st.Page(PAGE_FILES["trace"], title="Oxygen trace", icon=":material/show_chart:"),
        st.Page(PAGE_FILES["checks"], title="Checks", icon=":material/rule:"),
        st.Page(PAGE_FILES["results"], title="Results", icon=":material/insights:"),
        st.Page(PAGE_FILES["protocols"], title="Protocols", icon=":material/science:"),
    ]
    sign_off = []
    if mode == auth.SINGLE_USER or auth.allowed(person.role, auth.APPROVE):
        sign_off.append(st.Page(PAGE_FILES["review"], title="Review", icon=":material/verified:"))
    sign_off.append(st.Page(PAGE_FILES["care"], title="Care and cautions", icon=":material/pets:"))
    pages = {"Trial": trial, "Sign-off": sign_off}
    if mode == auth.LAB_SERVER and auth.allowed(person.role, auth.MANAGE_PEOPLE):
        pages["Lab"] = [st.Page(PAGE_FILES["people"], title="People", icon=":material/group:")]
    return pages


def identity_line() -> str:
    """The mode and who acts, for the footer of every page."""
    from swimlab import auth

    mode = app_mode()
    if mode == auth.LAB_SERVER:
        person = st.session_state.get("app_person")
        if person is None:
            return "lab-server mode · not signed in"
        how = "single sign-on" if person.via == auth.VIA_OIDC else "password"
        return f"lab-server mode · signed in as {person} · {person.role} · by {how}"
    name = str(st.session_state.get("app_user") or "").strip()
    return f"single-user mode · working as {name or '(no name yet)'} · no sign-in"


# --------------------------------------------------------------------------------------------
# The open session
# --------------------------------------------------------------------------------------------


def work() -> dict[str, Any] | None:
    """The session being worked on (a dict; it may not validate yet), or None."""
    return st.session_state.get("app_work")


def set_work(data: dict[str, Any], *, session_id: str | None, version: int | None,
             status: str | None = None, comment: str | None = None) -> None:
    """Make ``data`` the open session and start the set-up grids afresh."""
    st.session_state["app_work"] = data
    st.session_state["app_session_id"] = session_id
    st.session_state["app_version"] = version
    st.session_state["app_status"] = status or ("draft" if session_id else None)
    st.session_state["app_return_comment"] = comment or ""
    st.session_state["app_saved_json"] = _canonical_json(data) if session_id else None
    st.session_state["app_gen"] = int(st.session_state.get("app_gen", 0)) + 1


def open_stored(book: Any, session_id: str) -> bool:
    """Open a stored session from the lab book as the working session."""
    try:
        stored = book.get_session(session_id)
    except (InputError, KeyError, LookupError) as exc:
        st.error(f"Session {session_id!r} could not be opened: {exc}")
        return False
    set_work(stored.session.to_json_dict(), session_id=stored.session.session_id, version=stored.version,
             status=stored.status, comment=getattr(stored, "return_comment", "") or "")
    return True


def _canonical_json(data: Mapping[str, Any]) -> str:
    """The session as the model writes it (defaults filled in), or the dict itself if it does not validate."""
    session, _ = validate_session(dict(data))
    value = session.to_json_dict() if session is not None else data
    return json.dumps(value, sort_keys=True, default=str)


def is_unsaved() -> bool:
    """Whether the working session differs from what the lab book holds."""
    data = work()
    if data is None:
        return False
    saved = st.session_state.get("app_saved_json")
    return saved is None or saved != _canonical_json(data)


def validated(data: Mapping[str, Any] | None) -> tuple[Session | None, list]:
    """Validate the working session: (session or None, problems)."""
    if data is None:
        return None, []
    return validate_session(dict(data))


def persist(book: Any, data: dict[str, Any], *, reason: str,
            raw_files: Mapping[str, bytes] | None = None) -> bool:
    """Save the working session to the lab book (create it the first time). Show why not.

    Nothing is written unless the whole session validates; a stale version is refused by the
    lab book and said in words.
    """
    session, problems = validate_session(dict(data))
    if session is None:
        st.error(
            f"Not saved: the session has {len(problems)} problem(s) (see Set-up). Your entries are "
            "kept in this browser tab until every problem is fixed."
        )
        return False
    who = user_name() or session.operator or "unnamed"
    try:
        if st.session_state.get("app_session_id") and st.session_state.get("app_version") is not None:
            version = book.save_session(session, base_version=st.session_state["app_version"], who=who, reason=reason)
        else:
            version = book.create_session(session, dict(raw_files or {}), who=who, reason=reason)
    except ConflictError as exc:
        st.error(
            "Not saved: someone saved this session after you opened it "
            f"(you were editing version {st.session_state.get('app_version')}). Nothing was overwritten. "
            f"Your edits are still here; note them, open the session again from the Lab book, and re-apply. ({exc})"
        )
        return False
    except PermissionDeniedError as exc:
        st.error(f"Not saved: {exc}")
        return False
    except InputError as exc:
        st.error(f"Not saved: {exc}")
        return False
    saved = session.to_json_dict()
    gen = st.session_state.get("app_gen", 0)
    st.session_state["app_work"] = saved
    st.session_state["app_session_id"] = session.session_id
    st.session_state["app_version"] = int(version) if version is not None else None
    st.session_state["app_status"] = st.session_state.get("app_status") or "draft"
    st.session_state["app_saved_json"] = _canonical_json(saved)
    st.session_state["app_gen"] = gen
    return True


def refresh_status(book: Any) -> None:
    """Read the open session's status and version from the lab book again."""
    sid = st.session_state.get("app_session_id")
    if not sid:
        return
    try:
        stored = book.get_session(sid)
    except Exception:  # noqa: BLE001 - the session may have been removed; keep what we have
        return
    st.session_state["app_status"] = stored.status
    st.session_state["app_return_comment"] = getattr(stored, "return_comment", "") or ""
    if not is_unsaved():
        st.session_state["app_version"] = stored.version
        st.session_state["app_work"] = stored.session.to_json_dict()
        st.session_state["app_saved_json"] = _canonical_json(st.session_state["app_work"])


def require_session() -> dict[str, Any]:
    """Return the working session dict, or say how to open one and stop the page."""
    data = work()
    if data is None:
        st.info("No session is open. Open one or start a new one in the Lab book.")
        st.page_link(PAGE_FILES["lab_book"], label="Go to the Lab book", icon=":material/menu_book:")
        st.stop()
    return data


def require_valid(data: Mapping[str, Any]) -> Session:
    """Return the validated session, or say that the set-up has problems and stop the page."""
    session, problems = validated(data)
    if session is None:
        st.warning(
            f"The set-up has {len(problems)} problem(s); fix them on the Set-up page before this step."
        )
        st.page_link(PAGE_FILES["setup"], label="Go to Set-up", icon=":material/edit_note:")
        st.stop()
    return session


# --------------------------------------------------------------------------------------------
# Analysis (cached)
# --------------------------------------------------------------------------------------------


@st.cache_data(show_spinner=False, max_entries=12)
def _cached_analysis(session_json: str, raw_shas: tuple[str, ...], url: str | None, settings_json: str):
    from swimlab.analysis import analyse

    book = _open_labbook(url)
    raw = {sha: book.get_raw_file(sha) for sha in raw_shas}
    session = Session.model_validate_json(session_json)
    return analyse(session, raw, lab_settings=json.loads(settings_json))


def analysis_for(book: Any, session: Session):
    """Analyse the session (cached on its JSON, its raw files' checksums and the lab settings).

    Shows the reason in words and returns None when the analysis cannot run.
    """
    shas = tuple(sorted(ref.sha256 for ref in session.raw_files))
    settings_json = json.dumps(lab_settings_dict(book), sort_keys=True, default=str)
    try:
        with st.spinner("Analysing the session…"):
            return _cached_analysis(session.model_dump_json(), shas, database_url(), settings_json)
    except ImportError as exc:
        st.error(f"The analysis is not available in this installation: {exc}")
    except InputError as exc:
        st.error(f"The analysis stopped: {exc}")
    except (ValueError, LookupError, KeyError) as exc:
        st.error(f"The analysis stopped ({type(exc).__name__}): {exc}")
    return None


# --------------------------------------------------------------------------------------------
# Layout helpers
# --------------------------------------------------------------------------------------------


def page_header(title: str, purpose: str) -> None:
    """Title and one-line purpose of a page, and the message left by the last action, if any."""
    st.title(title)
    st.caption(purpose)
    message = st.session_state.pop("app_flash", None)
    if message:
        st.success(message)


def flash(message: str) -> None:
    """Leave ``message`` for the next run of a page (use before ``st.rerun``)."""
    st.session_state["app_flash"] = message


def session_banner() -> None:
    """One line naming the open session, its status and whether it has unsaved edits."""
    data = work()
    if data is None:
        return
    title = data.get("title") or "(untitled)"
    status = st.session_state.get("app_status") or "not yet in the lab book"
    version = st.session_state.get("app_version")
    extra = " · unsaved edits" if is_unsaved() else ""
    st.markdown(f"**Open session:** {title} · status *{status}*" + (f" · version {version}" if version else "") + extra)
    comment = st.session_state.get("app_return_comment")
    if status == "returned" and comment:
        st.warning(f"Returned by the reviewer: {comment}")


def care_notice(settings: LabSettings, *, where: str) -> None:
    """The animal-care reminder shown where a trial is set up or its trace is shown."""
    st.warning(
        f"**Animal care – {where}.** Run trials only under the protocol approved by your "
        "institution's animal-care committee and within local law; those rules and licensed "
        "practice come first, and nothing here replaces them.  \n"
        f"• Keep oxygen above **{settings.oxygen_floor_pct_air_sat:g} % air saturation** "
        "(the lab's floor; flush at once if it is reached).  \n"
        f"• Do not hold a fatigued fish on the rear grid longer than **{settings.max_time_at_exhaustion_s:g} s**: "
        "reduce the flow and let it recover.  \n"
        f"• Keep the temperature within **{settings.max_temperature_change_c:g} °C** of acclimation.  \n"
        "• On impingement (the fish pinned against the grid): stop or slow the flow at once, free the "
        "fish, record an *impingement* event, and follow the approved protocol's end-point rules.",
        icon=":material/pets:",
    )


def group_warning(session: Session, unit_id: str) -> None:
    """Say, where a group trial's values are shown, that they are per capita of fish swum together."""
    from swimlab.checks import GROUP_CAVEAT

    group = next((g for g in session.groups if g.group_id == unit_id), None) or session.group_of(unit_id)
    if group is None:
        return
    if group.group_id == unit_id:
        st.warning(f"**Group {group.group_id}**: {len(group.fish_ids)} fish ({', '.join(group.fish_ids)}) swum "
                   f"together in chamber {group.chamber}; fatigue definition "
                   f"**{group.fatigue_definition.replace('_', ' ')}**. MO2 is the group's, computed with the fish's "
                   f"summed mass and volume; per kg and per fish it is per capita. {GROUP_CAVEAT}",
                   icon=":material/groups:")
    else:
        st.info(f"Fish {unit_id} swam in group {group.group_id}: its chamber's MO2 and Ucrit are the group's — "
                f"choose group {group.group_id} to see them.", icon=":material/groups:")


def explain(title: str, text: str, functions: list[str] | None = None) -> None:
    """An expander with the equations and sources, taken from the science modules' docstrings."""
    with st.expander(title):
        st.markdown(text)
        for dotted in functions or []:
            notes = _docstring_notes(dotted)
            if notes:
                st.markdown(f"**`{dotted}`**")
                st.code(notes, language=None)


def _docstring_notes(dotted: str) -> str | None:
    module_name, _, attr = dotted.rpartition(".")
    try:
        module = __import__(module_name, fromlist=[attr])
        doc = inspect.getdoc(getattr(module, attr)) or ""
    except (ImportError, AttributeError):
        return None
    summary = doc.split("\n\n", 1)[0]
    notes = _section(doc, "Notes")
    refs = _section(doc, "References")
    parts = [summary]
    if notes:
        parts.append(notes)
    if refs:
        parts.append("References:\n" + refs)
    return "\n\n".join(parts)


def _section(doc: str, name: str) -> str:
    match = re.search(rf"^{name}\n-+\n(.*?)(?=^\w[\w ]*\n-+\n|\Z)", doc, flags=re.S | re.M)
    return match.group(1).strip() if match else ""


def oxygen_floor_mg_l(session: Session, settings: LabSettings) -> float | None:
    """The lab's oxygen floor in mg/L at the session's water conditions (None if it cannot be had)."""
    try:
        import numpy as np

        from swimlab import oxygen

        w = session.water
        value = oxygen.convert(settings.oxygen_floor_pct_air_sat, "% air saturation", "mg/L",
                               w.temperature_c, w.salinity, w.barometric_pressure_kpa * 1000.0)
        return float(np.asarray(value))
    except (ImportError, AttributeError, ValueError, TypeError):
        return None


MEASURE_COLUMNS = {
    "fish_id": "Fish", "channel": "Chamber", "cycle": "Cycle", "step": "Step", "start_s": "Start [s]",
    "end_s": "End [s]", "n_points": "Readings", "r2": "R²", "relative_se": "Relative SE [-]",
    "mo2_mg_kg_h": "MO2 [mg O2/kg/h]", "accepted": "Accepted", "rejected_by": "Rejected by",
    "excluded": "Excluded", "exclusion_reason": "Reason", "used": "Used",
}
"""Columns of the measure-phase table shown on the pages, with their headers."""


def show_figure(fig, *, key: str, name: str, **kwargs):
    """Draw a plotly figure; its camera button saves an SVG named after the figure."""
    from swimlab.plots import SVG_CONFIG

    config = {**SVG_CONFIG, "toImageButtonOptions": {**SVG_CONFIG["toImageButtonOptions"], "filename": name}}
    return st.plotly_chart(fig, key=key, config=config, width="stretch", **kwargs)


def footer(book: Any = None) -> None:
    """Version and lab book in use (password hidden)."""
    from swimlab import __version__, auth

    st.sidebar.divider()
    if app_mode() == auth.LAB_SERVER and st.session_state.get("app_person") is None:
        st.sidebar.caption(f"swimlab {__version__}")  # where the lab book lives is not for strangers
    else:
        st.sidebar.caption(f"swimlab {__version__} · lab book: `{masked_url(book)}`")
    st.sidebar.caption(identity_line())
