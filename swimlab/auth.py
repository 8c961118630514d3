"""People and permissions: who may do what in the lab book, and how a person is recognised.

This module holds the parts that need no database:

- the two **modes** (:data:`MODES`): ``single-user`` (the default: one person on their own
  computer, bound to the loopback address, no password; their name is asked once and kept) and
  ``lab-server`` (a group on a shared server: everyone signs in). The mode is a setting, found
  like the lab book's URL (:func:`resolve_mode`).
- the three **roles** (:data:`ROLES`) and the one **permission table** (:data:`PERMISSIONS`):
  which role may take which action. The table is data; :func:`allowed` and :func:`require`
  read it. Rules that depend on the session as well as the role (a person edits and submits
  only sessions they created; a reviewer never approves their own work) are checked by the lab
  book inside the transaction that acts (:meth:`swimlab.store.LabBook.as_person`).
- **passwords**: salted scrypt hashes with stated cost parameters (:func:`hash_password`,
  :func:`verify_password`), compared in constant time, and the rules a new password must meet
  (:func:`check_new_password`).
- the **identity** that acts (:class:`Person`): account name, display name, role, and how the
  identity was established (``via``), which the audit trail records with every entry.

Lock-out after repeated failed logins needs the stored counters and so lives in the lab book
(:meth:`swimlab.store.LabBook.login`); its two thresholds are lab settings
(:attr:`~swimlab.settings.LabSettings.login_attempts_max`,
:attr:`~swimlab.settings.LabSettings.login_lockout_min`).

No password, hash or salt is ever put in a message, a ``repr`` or the audit trail.
"""

from __future__ import annotations

import base64
import functools
import hashlib
import hmac
import ipaddress
import os
import re
import secrets
import tomllib
import unicodedata
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from swimlab.errors import InputError, PermissionDeniedError

# --------------------------------------------------------------------------------------------
# Modes
# --------------------------------------------------------------------------------------------

SINGLE_USER = "single-user"
LAB_SERVER = "lab-server"
MODES = (SINGLE_USER, LAB_SERVER)
"""The two ways swimlab runs; ``single-user`` is the default."""

ENV_MODE = "SWIMLAB_MODE"
SETTINGS_FILE_LOCAL = "swimlab.toml"
SETTINGS_FILE_USER = Path("~/.config/swimlab/settings.toml")


def settings_files(
    cwd: str | os.PathLike | None = None, home: str | os.PathLike | None = None
) -> tuple[Path, Path]:
    """The settings files, nearest first: ``swimlab.toml`` in ``cwd`` (default: the working
    folder), then ``~/.config/swimlab/settings.toml`` under ``home`` (default: the user's)."""
    where = Path(cwd) if cwd is not None else Path.cwd()
    user_file = (
        Path(home) / SETTINGS_FILE_USER.relative_to("~")
        if home is not None
        else SETTINGS_FILE_USER.expanduser()
    )
    return where / SETTINGS_FILE_LOCAL, user_file


def settings_file_value(path: Path, key: str) -> Any:
    """The value of ``key`` in the TOML settings file ``path``; ``None`` without file or key.

    Raises
    ------
    InputError
        If the file is not valid TOML (naming the file).
    """
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"is not valid TOML: {exc}", file=str(path)) from exc
    return data.get(key)


def check_mode(value: Any, *, file: str | None = None) -> str:
    """Return ``value`` as one of :data:`MODES` or raise :class:`InputError` naming the field."""
    text = value.strip().lower().replace("_", "-") if isinstance(value, str) else value
    if text not in MODES:
        raise InputError(f"must be one of {list(MODES)}; got {value!r}", file=file, field="mode")
    return text


def resolve_mode(
    mode: str | None = None,
    *,
    environ: Mapping[str, str] | None = None,
    cwd: str | os.PathLike | None = None,
    home: str | os.PathLike | None = None,
) -> tuple[str, str]:
    """Decide the mode: the argument, else ``SWIMLAB_MODE``, else ``mode`` in a settings file.

    The settings files are those of the lab book's URL: ``swimlab.toml`` in the working folder,
    then ``~/.config/swimlab/settings.toml``. Without any, the mode is ``single-user``.

    Returns
    -------
    mode, source
        ``source`` is ``"argument"``, ``"environment"``, the settings file's path, or
        ``"default"``.

    Raises
    ------
    InputError
        If a value is not one of :data:`MODES` (naming the file and the field ``mode``).
    """
    environ = os.environ if environ is None else environ
    if mode is not None and str(mode).strip():
        return check_mode(mode), "argument"
    if environ.get(ENV_MODE, "").strip():
        return check_mode(environ[ENV_MODE]), "environment"
    for candidate in settings_files(cwd, home):
        found = settings_file_value(candidate, "mode")
        if found is not None and not isinstance(found, str):
            raise InputError(f"must be text; got {found!r}", file=str(candidate), field="mode")
        if found is not None and found.strip():
            return check_mode(found, file=str(candidate)), str(candidate)
    return SINGLE_USER, "default"


def is_loopback(address: str) -> bool:
    """Whether a server bound to ``address`` can be reached only from this computer."""
    text = (address or "").strip().strip("[]")
    if text.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(text).is_loopback
    except ValueError:
        return False  # "" and "0.0.0.0" style wildcards and host names reach the network


def binding_problem(mode: str, address: str | None) -> str | None:
    """Say why serving ``mode`` on ``address`` is unsafe, or ``None`` when it is fine.

    Single-user mode asks for no password, so it must be reachable from this computer only:
    the server's address must be a loopback address (``localhost``, ``127.0.0.1``, ``::1``).
    An empty address means every network interface.
    """
    mode = check_mode(mode)
    if mode == SINGLE_USER and not is_loopback(address or ""):
        shown = address or "every network interface"
        return (
            f"single-user mode asks for no password, but the server listens on {shown}. "
            "Set server.address = \"localhost\" in .streamlit/config.toml, or run in lab-server "
            "mode (mode = \"lab-server\" in swimlab.toml) so that everyone signs in."
        )
    return None


# --------------------------------------------------------------------------------------------
# Roles and the permission table
# --------------------------------------------------------------------------------------------

OPERATOR = "operator"
REVIEWER = "reviewer"
ADMIN = "admin"
ROLES = (OPERATOR, REVIEWER, ADMIN)
"""The roles, from fewest to most permissions. Each role may do all that the one before may."""

READ = "read"
CREATE = "create session"
EDIT_OWN = "edit own session"
SUBMIT_OWN = "submit own session"
ADD_RAW_FILE = "add raw file"
REMEMBER_MAPPING = "remember column mapping"
APPROVE = "approve session"
RETURN = "return session"
REOPEN = "reopen approved session"
CHANGE_SETTINGS = "change lab settings"
MANAGE_PEOPLE = "manage people"
CHANGE_OWN_PASSWORD = "change own password"

ACTIONS: dict[str, str] = {
    READ: "see sessions, their versions, raw files, audit trail and lab settings",
    CREATE: "add a new session (it starts as a draft the person owns)",
    EDIT_OWN: "save a new version of a session the person created, unless it is approved",
    SUBMIT_OWN: "send a session the person created for review",
    ADD_RAW_FILE: "store a logger file's bytes in the lab book",
    REMEMBER_MAPPING: "remember a logger file's column mapping for the lab",
    APPROVE: "approve someone else's submitted session (four eyes)",
    RETURN: "return someone else's submitted session with a comment (four eyes)",
    REOPEN: "reopen an approved session for correction, with a reason",
    CHANGE_SETTINGS: "change the lab's QA thresholds and login settings",
    MANAGE_PEOPLE: "add people, change roles, (de)activate, set passwords, unlock",
    CHANGE_OWN_PASSWORD: "change one's own local password",
}
"""Every action the lab book checks, with what it means."""

_EVERYONE = frozenset(ROLES)
_REVIEWERS = frozenset({REVIEWER, ADMIN})
_ADMINS = frozenset({ADMIN})

PERMISSIONS: dict[str, frozenset[str]] = {
    READ: _EVERYONE,
    CREATE: _EVERYONE,
    EDIT_OWN: _EVERYONE,
    SUBMIT_OWN: _EVERYONE,
    ADD_RAW_FILE: _EVERYONE,
    REMEMBER_MAPPING: _EVERYONE,
    CHANGE_OWN_PASSWORD: _EVERYONE,
    APPROVE: _REVIEWERS,
    RETURN: _REVIEWERS,
    REOPEN: _REVIEWERS,
    CHANGE_SETTINGS: _ADMINS,
    MANAGE_PEOPLE: _ADMINS,
}
"""Action → the roles that may take it. The one table; pages and the lab book both read it.

Notes
-----
An admin may also do all a reviewer may: an admin can give themselves any role anyway, so
withholding it would only hide the power, not remove it (every role change is in the audit
trail instead). "Own" means the session's creator; four eyes means the reviewer is neither its
creator, nor the person named as its operator, nor anyone who saved or submitted it.
"""


def check_role(value: Any, field: str = "role") -> str:
    """Return ``value`` as one of :data:`ROLES` or raise :class:`InputError` naming ``field``."""
    text = value.strip().lower() if isinstance(value, str) else value
    if text not in ROLES:
        raise InputError(f"must be one of {list(ROLES)}; got {value!r}", field=field)
    return text


def allowed(role: str, action: str) -> bool:
    """Whether ``role`` may take ``action`` (see :data:`PERMISSIONS`).

    Raises
    ------
    ValueError
        For an unknown role or action (listing the valid ones).
    """
    if action not in PERMISSIONS:
        raise ValueError(f"unknown action {action!r}; valid: {list(PERMISSIONS)}")
    if role not in ROLES:
        raise ValueError(f"unknown role {role!r}; valid: {list(ROLES)}")
    return role in PERMISSIONS[action]


def roles_allowed(action: str) -> tuple[str, ...]:
    """The roles that may take ``action``, in the order of :data:`ROLES`."""
    return tuple(r for r in ROLES if allowed(r, action))


# --------------------------------------------------------------------------------------------
# The person acting
# --------------------------------------------------------------------------------------------

VIA_PASSWORD = "password"
VIA_OIDC = "oidc"
VIA_SINGLE_USER = "single-user"
VIAS = (VIA_PASSWORD, VIA_OIDC, VIA_SINGLE_USER)
"""How an identity was established: a local password, the institution's single sign-on, or a
name given in single-user mode (not authenticated)."""

AUTHENTICATED = frozenset({VIA_PASSWORD, VIA_OIDC})

_USERNAME = re.compile(r"^[a-z0-9][a-z0-9._@+-]{0,63}$")


def check_username(value: Any, field: str = "username") -> str:
    """Return an account name in its stored form (trimmed, lower case) or raise naming ``field``.

    An account name is 1–64 characters: lower-case letters, digits and ``. _ @ + -``, starting
    with a letter or digit (an e-mail address fits).
    """
    if not isinstance(value, str):
        raise InputError(f"must be text; got {value!r}", field=field)
    text = value.strip().lower()
    if not _USERNAME.match(text):
        raise InputError(
            "must be 1–64 characters: letters, digits and . _ @ + -, starting with a letter or "
            f"digit; got {value!r}",
            field=field,
        )
    return text


def _check_name(value: Any, field: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise InputError(f"must be a name (non-empty text); got {value!r}", field=field)
    text = " ".join(value.split())
    if len(text) > 200:
        raise InputError("must be at most 200 characters", field=field)
    return text


@dataclass(frozen=True)
class Person:
    """The identity that acts on the lab book.

    Attributes
    ----------
    username
        The account name (lower case) for an account; the given name in single-user mode. The
        audit trail's ``who``.
    display_name
        The name shown on pages and in reports.
    role
        One of :data:`ROLES`. For an account, the lab book reads the current role again at
        every action, so a change of role takes effect at once.
    via
        One of :data:`VIAS`: how the identity was established.
    """

    username: str
    display_name: str
    role: str
    via: str

    def __post_init__(self) -> None:
        if self.via not in VIAS:
            raise ValueError(f"unknown via {self.via!r}; valid: {list(VIAS)}")
        check_role(self.role)
        _check_name(self.username, "username")
        _check_name(self.display_name, "display_name")

    @property
    def authenticated(self) -> bool:
        """Whether the identity was proven (a password or single sign-on), not just given."""
        return self.via in AUTHENTICATED

    @classmethod
    def single_user(cls, name: str, role: str = ADMIN) -> Person:
        """The one person of single-user mode: the name they gave; every role's actions.

        Four eyes still applies: they cannot approve or return their own sessions.
        """
        name = _check_name(name, "name")
        return cls(username=name, display_name=name, role=role, via=VIA_SINGLE_USER)

    def names(self) -> frozenset[str]:
        """The names this person goes by, case-folded (for the four-eyes comparison)."""
        return frozenset(n.strip().casefold() for n in (self.username, self.display_name) if n)

    def __str__(self) -> str:
        shown = self.display_name
        if self.display_name.casefold() != self.username.casefold():
            shown += f" ({self.username})"
        return shown


def require(person: Person, action: str, what: str = "") -> None:
    """Raise :class:`PermissionDeniedError` unless ``person``'s role may take ``action``.

    The message names the person, their role, the action and the roles that may take it.
    """
    if not allowed(person.role, action):
        may = " or ".join(roles_allowed(action)) or "no role"
        target = f" {what}" if what else ""
        raise PermissionDeniedError(
            f"{person} is a{'n' if person.role[0] in 'aeiou' else ''} {person.role} and may not "
            f"{action}{target}; that needs the role {may}. Nothing was changed."
        )


# --------------------------------------------------------------------------------------------
# Passwords
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ScryptParameters:
    """Cost parameters of scrypt (Percival & Josefsson 2016, RFC 7914).

    Attributes
    ----------
    n
        CPU/memory cost, a power of two. [-]
    r
        Block size. [-]
    p
        Parallelisation. [-]
    salt_bytes, key_bytes
        Length of the random salt and of the derived key. [bytes]

    Notes
    -----
    The memory scrypt needs is about 128·n·r bytes; the defaults (n = 2^17, r = 8, p = 1) are
    the OWASP Password Storage Cheat Sheet's recommended minimum for scrypt (128 MiB; about
    0.6 s on one core of the development machine). The salt is 16 random bytes (the cheat
    sheet's and NIST SP 800-132's minimum of 128 bits).
    """

    n: int = 2**17
    r: int = 8
    p: int = 1
    salt_bytes: int = 16
    key_bytes: int = 32

    def __post_init__(self) -> None:
        for name in ("n", "r", "p", "salt_bytes", "key_bytes"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ValueError(f"scrypt parameter {name} must be a positive integer; got {value!r}")
        if self.n < 2 or self.n & (self.n - 1):
            raise ValueError(f"scrypt parameter n must be a power of two above 1; got {self.n}")

    @property
    def memory_bytes(self) -> int:
        """Memory scrypt needs for these parameters (128·n·r·p for the blocks, plus slack). [bytes]"""
        return 128 * self.n * self.r * (self.p + 1) + 2**20


OWASP_SCRYPT = ScryptParameters()
"""The OWASP Password Storage Cheat Sheet's minimum for scrypt: n = 2^17, r = 8, p = 1."""

PASSWORD_PARAMETERS = OWASP_SCRYPT
"""Parameters for new hashes. A stored hash made with weaker ones is re-made at the next
successful login (:func:`needs_rehash`). Tests may lower it; a deployment never should."""

PASSWORD_MIN_LENGTH = 12
"""Shortest password accepted. [characters] OWASP ASVS 4.0 V2.1.1 asks for at least 12."""
PASSWORD_MAX_LENGTH = 256
"""Longest password accepted, which bounds the work one login costs. [characters] OWASP ASVS
4.0 V2.1.2 asks that at least 64 be allowed."""

_SCHEME = "scrypt"


def _b64(data: bytes) -> str:
    return base64.b64encode(data).decode("ascii")


def _password_bytes(password: str) -> bytes:
    # NFKC so that the same password typed on two keyboards gives the same bytes (NIST SP
    # 800-63B §5.1.1.2 recommends normalising Unicode before hashing).
    return unicodedata.normalize("NFKC", password).encode("utf-8")


def _derive(password: str, salt: bytes, params: ScryptParameters) -> bytes:
    return hashlib.scrypt(
        _password_bytes(password),
        salt=salt,
        n=params.n,
        r=params.r,
        p=params.p,
        maxmem=params.memory_bytes,
        dklen=params.key_bytes,
    )


def hash_password(password: str, parameters: ScryptParameters | None = None) -> str:
    """Hash a password with scrypt and a fresh random salt.

    Parameters
    ----------
    password
        The password (text).
    parameters
        Cost parameters; default :data:`PASSWORD_PARAMETERS`.

    Returns
    -------
    str
        ``scrypt$n=<n>,r=<r>,p=<p>$<salt, base64>$<key, base64>``: everything needed to check
        a password later, and nothing that reveals it.
    """
    if not isinstance(password, str):
        raise InputError("must be text", field="password")
    params = parameters or PASSWORD_PARAMETERS
    salt = secrets.token_bytes(params.salt_bytes)
    key = _derive(password, salt, params)
    return f"{_SCHEME}$n={params.n},r={params.r},p={params.p}${_b64(salt)}${_b64(key)}"


@dataclass(frozen=True)
class _ParsedHash:
    params: ScryptParameters
    salt: bytes
    key: bytes = field(repr=False)


def _parse_hash(stored: str) -> _ParsedHash | None:
    try:
        scheme, costs, salt_text, key_text = stored.split("$")
        if scheme != _SCHEME:
            return None
        values = dict(item.split("=", 1) for item in costs.split(","))
        salt = base64.b64decode(salt_text, validate=True)
        key = base64.b64decode(key_text, validate=True)
        params = ScryptParameters(
            n=int(values["n"]),
            r=int(values["r"]),
            p=int(values["p"]),
            salt_bytes=len(salt),
            key_bytes=len(key),
        )
    except (ValueError, KeyError, AttributeError, TypeError):
        return None
    return _ParsedHash(params, salt, key)


def hash_parameters(stored: str) -> ScryptParameters | None:
    """The cost parameters a stored hash was made with, or ``None`` if it is not one of ours."""
    parsed = _parse_hash(stored) if isinstance(stored, str) else None
    return parsed.params if parsed else None


@functools.cache
def _dummy_hash(params: ScryptParameters) -> str:
    return hash_password(secrets.token_urlsafe(16), params)


def verify_password(password: str, stored: str | None) -> bool:
    """Whether ``password`` matches the stored hash; compared in constant time.

    With no usable stored hash (an unknown account, or one without a local password), the same
    work is still done against a throw-away hash, so that the time taken does not tell whether
    an account exists.
    """
    if not isinstance(password, str):
        return False
    parsed = _parse_hash(stored) if isinstance(stored, str) else None
    if parsed is None or len(password) > PASSWORD_MAX_LENGTH:
        dummy = _parse_hash(_dummy_hash(PASSWORD_PARAMETERS))
        assert dummy is not None
        hmac.compare_digest(_derive(password[:PASSWORD_MAX_LENGTH], dummy.salt, dummy.params), dummy.key)
        return False
    return hmac.compare_digest(_derive(password, parsed.salt, parsed.params), parsed.key)


def needs_rehash(stored: str, parameters: ScryptParameters | None = None) -> bool:
    """Whether a stored hash is weaker than ``parameters`` (default :data:`PASSWORD_PARAMETERS`)."""
    params = parameters or PASSWORD_PARAMETERS
    found = hash_parameters(stored)
    if found is None:
        return True
    return any(
        getattr(found, name) < getattr(params, name)
        for name in ("n", "r", "p", "salt_bytes", "key_bytes")
    )


def check_new_password(password: Any, *, username: str = "", field: str = "password") -> str:
    """Return ``password`` if it may be set, else raise :class:`InputError` naming ``field``.

    Rules (OWASP ASVS 4.0 V2.1 and NIST SP 800-63B §5.1.1): at least
    :data:`PASSWORD_MIN_LENGTH` and at most :data:`PASSWORD_MAX_LENGTH` characters; not the
    account name; not one character repeated. No rules of composition (NIST advises against
    them). The message never repeats the password.
    """
    if not isinstance(password, str):
        raise InputError("must be text", field=field)
    length = len(unicodedata.normalize("NFKC", password))
    if length < PASSWORD_MIN_LENGTH:
        raise InputError(
            f"must be at least {PASSWORD_MIN_LENGTH} characters (this one has {length}); a "
            "few ordinary words in a row make a good one",
            field=field,
        )
    if length > PASSWORD_MAX_LENGTH:
        raise InputError(f"must be at most {PASSWORD_MAX_LENGTH} characters", field=field)
    if username and password.strip().casefold() == username.strip().casefold():
        raise InputError("must not be the account name", field=field)
    if len(set(password)) == 1:
        raise InputError("must not be one character repeated", field=field)
    return password


# --------------------------------------------------------------------------------------------
# Login errors and settings
# --------------------------------------------------------------------------------------------


class LoginError(InputError):
    """A login was refused. The message does not say whether the account exists."""


class LockedOutError(LoginError):
    """Too many failed logins for this account; it is locked until :attr:`until` (UTC)."""

    def __init__(self, message: str, *, until: str, field: str = "username") -> None:
        self.until = until
        super().__init__(message, field=field)


WRONG_LOGIN = "the account name or the password is wrong (or the account is not active)"


def check_login_settings(attempts_max: Any, lockout_min: Any) -> tuple[int, float]:
    """Validate the lock-out settings; return them as (int, float).

    Raises
    ------
    InputError
        Naming ``settings.login_attempts_max`` (a whole number from 1 to 100; NIST SP 800-63B
        §5.2.2 allows at most 100 consecutive failures) or ``settings.login_lockout_min``
        (more than 0, at most a day).
    """
    if (
        isinstance(attempts_max, bool)
        or not isinstance(attempts_max, int | float)
        or attempts_max != int(attempts_max)
        or not 1 <= attempts_max <= 100
    ):
        raise InputError(
            f"must be a whole number from 1 to 100; got {attempts_max!r}",
            field="settings.login_attempts_max",
        )
    if (
        isinstance(lockout_min, bool)
        or not isinstance(lockout_min, int | float)
        or not 0 < lockout_min <= 24 * 60
    ):
        raise InputError(
            f"must be a number of minutes above 0 and at most 1440; got {lockout_min!r}",
            field="settings.login_lockout_min",
        )
    return int(attempts_max), float(lockout_min)


# --------------------------------------------------------------------------------------------
# Single sign-on (OpenID Connect)
# --------------------------------------------------------------------------------------------

OIDC_REQUIRED_KEYS = ("redirect_uri", "cookie_secret", "client_id", "client_secret", "server_metadata_url")
"""Keys Streamlit's ``st.login`` needs in the ``[auth]`` section of ``.streamlit/secrets.toml``."""


def oidc_configured(auth_section: Mapping[str, Any] | None) -> bool:
    """Whether an ``[auth]`` secrets section holds a complete single-sign-on provider.

    Streamlit accepts the provider's keys either directly in ``[auth]`` or in one named
    sub-section (``[auth.<name>]``) beside ``redirect_uri`` and ``cookie_secret``.
    """
    if not isinstance(auth_section, Mapping):
        return False
    top = {k: v for k, v in auth_section.items() if not isinstance(v, Mapping)}
    if all(top.get(k) for k in OIDC_REQUIRED_KEYS):
        return True
    shared = {k: top.get(k) for k in ("redirect_uri", "cookie_secret")}
    for value in auth_section.values():
        if isinstance(value, Mapping) and all(({**shared, **value}).get(k) for k in OIDC_REQUIRED_KEYS):
            return True
    return False


def email_from_claims(claims: Mapping[str, Any]) -> str:
    """The verified e-mail address in an OpenID Connect ID token's claims.

    Raises
    ------
    LoginError
        If there is no ``email`` claim, or ``email_verified`` is present and false.
    """
    email = claims.get("email") if isinstance(claims, Mapping) else None
    if not isinstance(email, str) or "@" not in email:
        raise LoginError(
            "the sign-on service sent no e-mail address; ask its administrator to release the "
            "'email' claim to swimlab",
            field="email",
        )
    if claims.get("email_verified") is False:
        raise LoginError(
            f"the sign-on service has not verified the address {email!r}", field="email"
        )
    return email.strip().lower()
