"""Tests of swimlab.auth (modes, roles, passwords) and of signing in to the lab book.

Login and lock-out run on SQLite and PostgreSQL (the lab book's fixtures). Hashes in most tests
use cheap scrypt parameters (n = 2^10) so that the suite stays fast; one test makes a hash with
the real parameters and checks them against the OWASP Password Storage Cheat Sheet's minimum.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import io
import json
import re

import pytest

# The lab books are store_fixtures.quick_labbook (SQLite and PostgreSQL, made fast).
from store_fixtures import make_session, postgres_quick_book, quick_labbook  # noqa: F401  (fixtures)

from swimlab import auth
from swimlab.cli import main
from swimlab.errors import InputError, PermissionDeniedError
from swimlab.settings import LabSettings
from swimlab.store import Account, LabBook


@pytest.fixture
def labbook(quick_labbook):  # noqa: F811  (the fixture, by its name)
    return quick_labbook

CHEAP = auth.ScryptParameters(n=2**10)
"""Cheap scrypt parameters for tests only (about 4 ms a hash instead of 0.6 s)."""

ANA_PASSWORD = "tunnel B runs at noon"
PI_PASSWORD = "a weir is not a dam"


@pytest.fixture(autouse=True)
def cheap_hashes(monkeypatch):
    monkeypatch.setattr(auth, "PASSWORD_PARAMETERS", CHEAP)


def _people(book: LabBook) -> None:
    book.add_person("pi", display_name="P. Investigator", role="admin", password=PI_PASSWORD, who="setup")
    book.add_person("ana", display_name="Ana Ruiz", role="operator", password=ANA_PASSWORD, who="setup")


T0 = dt.datetime(2031, 5, 14, 8, 0, tzinfo=dt.UTC)


# --------------------------------------------------------------------------------------------
# Modes and where the server listens
# --------------------------------------------------------------------------------------------


def test_mode_resolution_order(tmp_path):
    home, work = tmp_path / "home", tmp_path / "work"
    (home / ".config" / "swimlab").mkdir(parents=True)
    work.mkdir()
    assert auth.resolve_mode(environ={}, cwd=work, home=home) == ("single-user", "default")
    user_file = home / ".config" / "swimlab" / "settings.toml"
    user_file.write_text('mode = "lab-server"\n')
    assert auth.resolve_mode(environ={}, cwd=work, home=home) == ("lab-server", str(user_file))
    (work / "swimlab.toml").write_text('database_url = "sqlite:///x.db"\nmode = "single_user"\n')
    assert auth.resolve_mode(environ={}, cwd=work, home=home)[0] == "single-user"
    env = {"SWIMLAB_MODE": "Lab-Server"}
    assert auth.resolve_mode(environ=env, cwd=work, home=home) == ("lab-server", "environment")
    assert auth.resolve_mode("single-user", environ=env, cwd=work, home=home)[1] == "argument"


@pytest.mark.parametrize("content", ['mode = "server"\n', "mode = 3\n", "mode = \n"])
def test_bad_mode_in_a_settings_file_names_file_and_field(tmp_path, content):
    (tmp_path / "swimlab.toml").write_text(content)
    with pytest.raises(InputError) as info:
        auth.resolve_mode(environ={}, cwd=tmp_path, home=tmp_path / "nohome")
    assert info.value.file == str(tmp_path / "swimlab.toml")
    if "=" in content and content.strip() != "mode =":
        assert info.value.field == "mode"


def test_bad_mode_in_the_environment():
    with pytest.raises(InputError, match="single-user") as info:
        auth.resolve_mode(environ={"SWIMLAB_MODE": "open"})
    assert info.value.field == "mode"


@pytest.mark.parametrize(
    "mode, address, unsafe",
    [
        ("single-user", "localhost", False),
        ("single-user", "127.0.0.1", False),
        ("single-user", "::1", False),
        ("single-user", "[::1]", False),
        ("single-user", "", True),  # Streamlit's default: every interface
        ("single-user", "0.0.0.0", True),
        ("single-user", "192.0.2.10", True),  # documentation address (RFC 5737)
        ("single-user", "lab-server.example.org", True),
        ("lab-server", "0.0.0.0", False),
        ("lab-server", "", False),
    ],
)
def test_single_user_mode_is_for_this_computer_only(mode, address, unsafe):
    problem = auth.binding_problem(mode, address)
    assert (problem is not None) == unsafe
    if unsafe:
        assert "server.address" in problem and "lab-server" in problem


# --------------------------------------------------------------------------------------------
# Roles and the permission table
# --------------------------------------------------------------------------------------------


def test_every_action_is_described_and_every_role_is_known():
    assert set(auth.PERMISSIONS) == set(auth.ACTIONS)
    for action, roles in auth.PERMISSIONS.items():
        assert roles <= set(auth.ROLES), action


def test_each_role_may_do_all_the_role_before_it_may():
    """The issue: a reviewer may do everything an operator may; an admin all a reviewer may."""
    for lower, higher in zip(auth.ROLES, auth.ROLES[1:], strict=False):
        for action in auth.PERMISSIONS:
            if auth.allowed(lower, action):
                assert auth.allowed(higher, action), (lower, higher, action)


def test_unknown_role_or_action():
    with pytest.raises(ValueError, match="valid"):
        auth.allowed("student", auth.CREATE)
    with pytest.raises(ValueError, match="valid"):
        auth.allowed("operator", "delete everything")
    with pytest.raises(InputError) as info:
        auth.check_role("boss")
    assert info.value.field == "role"


def test_require_says_who_what_and_which_roles_may():
    ana = auth.Person("ana", "Ana Ruiz", "operator", auth.VIA_PASSWORD)
    with pytest.raises(PermissionDeniedError) as info:
        auth.require(ana, auth.APPROVE, "'s1'")
    message = str(info.value)
    for words in ("Ana Ruiz (ana)", "an operator", "approve session 's1'", "reviewer or admin"):
        assert words in message
    auth.require(ana, auth.CREATE)  # allowed: no error


@pytest.mark.parametrize(
    "name, stored",
    [("Ana", "ana"), ("  p.investigator@lab.example ", "p.investigator@lab.example"), ("x", "x")],
)
def test_usernames(name, stored):
    assert auth.check_username(name) == stored


@pytest.mark.parametrize("name", ["", " ", "a b", "-ana", "ana;drop", "x" * 65, None, 3])
def test_bad_usernames_name_the_field(name):
    with pytest.raises(InputError) as info:
        auth.check_username(name)
    assert info.value.field == "username"


def test_single_user_person():
    person = auth.Person.single_user("  R.  Operator ")
    assert (person.username, person.role, person.via) == ("R. Operator", "admin", "single-user")
    assert not person.authenticated
    assert auth.Person("ana", "Ana", "operator", auth.VIA_OIDC).authenticated
    with pytest.raises(InputError):
        auth.Person.single_user("")
    with pytest.raises(ValueError, match="via"):
        auth.Person("ana", "Ana", "operator", "typed")


# --------------------------------------------------------------------------------------------
# Passwords
# --------------------------------------------------------------------------------------------


def test_scrypt_matches_the_published_test_vector():
    """RFC 7914 §12, second vector: P="password", S="NaCl", N=1024, r=8, p=16, dkLen=64
    (Percival & Josefsson 2016). The key derivation swimlab uses must reproduce it."""
    expected = (
        "fdbabe1c9d3472007856e7190d01e9fe7c6ad7cbc8237830e77376634b3731622e"
        "af30d92e22a3886ff109279d9830dac727afb94a83ee6d8360cbdfa2cc0640"
    )
    params = auth.ScryptParameters(n=1024, r=8, p=16, salt_bytes=4, key_bytes=64)
    assert auth._derive("password", b"NaCl", params).hex() == expected


def test_new_hashes_use_the_owasp_minimum(monkeypatch):
    """OWASP Password Storage Cheat Sheet: scrypt with N = 2^17, r = 8, p = 1; a salt of at
    least 16 bytes."""
    monkeypatch.setattr(auth, "PASSWORD_PARAMETERS", auth.OWASP_SCRYPT)
    stored = auth.hash_password(ANA_PASSWORD)
    params = auth.hash_parameters(stored)
    assert (params.n, params.r, params.p) == (2**17, 8, 1)
    assert params.salt_bytes >= 16 and params.key_bytes >= 32
    assert stored.startswith("scrypt$n=131072,r=8,p=1$")
    assert auth.verify_password(ANA_PASSWORD, stored)
    assert not auth.needs_rehash(stored)


def test_hashes_are_salted():
    first, second = auth.hash_password(ANA_PASSWORD), auth.hash_password(ANA_PASSWORD)
    assert first != second  # same password, different salt, different hash
    assert first.split("$")[2] != second.split("$")[2]
    assert auth.verify_password(ANA_PASSWORD, first) and auth.verify_password(ANA_PASSWORD, second)
    assert ANA_PASSWORD not in first
    # the hash is what scrypt gives for this salt, nothing simpler
    _, _, salt, key = first.split("$")
    import base64

    assert base64.b64decode(key) == hashlib.scrypt(
        ANA_PASSWORD.encode(), salt=base64.b64decode(salt), n=CHEAP.n, r=CHEAP.r, p=CHEAP.p, dklen=32
    )


@pytest.mark.parametrize(
    "attempt",
    [ANA_PASSWORD.upper(), ANA_PASSWORD + " ", ANA_PASSWORD[:-1], "", "x" * 300, None, b"bytes"],
)
def test_wrong_passwords_do_not_verify(attempt):
    stored = auth.hash_password(ANA_PASSWORD)
    assert not auth.verify_password(attempt, stored)


def test_unicode_is_normalised_before_hashing():
    composed, decomposed = "caf\u00e9 au lait, mate", "cafe\u0301 au lait, mate"
    assert auth.verify_password(decomposed, auth.hash_password(composed))


def test_verification_compares_in_constant_time(monkeypatch):
    calls = []
    real = auth.hmac.compare_digest

    def spy(a, b):
        calls.append((len(a), len(b)))
        return real(a, b)

    monkeypatch.setattr(auth.hmac, "compare_digest", spy)
    stored = auth.hash_password(ANA_PASSWORD)
    assert auth.verify_password(ANA_PASSWORD, stored)
    assert not auth.verify_password("wrong password!", stored)
    assert calls == [(32, 32), (32, 32)]


def test_no_stored_hash_costs_the_same_work(monkeypatch):
    """An unknown account or one without a password still runs scrypt once (no timing hint)."""
    derived = []
    real = auth._derive
    monkeypatch.setattr(auth, "_derive", lambda *a: derived.append(a[2]) or real(*a))
    auth._dummy_hash(CHEAP)  # made once, beforehand
    derived.clear()
    for stored in (None, "", "not-a-hash", "scrypt$n=3$x$y"):
        assert not auth.verify_password(ANA_PASSWORD, stored)
    assert derived == [CHEAP] * 4


def test_weaker_hashes_need_rehashing():
    weak = auth.hash_password(ANA_PASSWORD, auth.ScryptParameters(n=2**9))
    assert auth.needs_rehash(weak)
    assert not auth.needs_rehash(auth.hash_password(ANA_PASSWORD))
    assert auth.needs_rehash("md5$whatever")


@pytest.mark.parametrize(
    "password, words",
    [
        ("short one", "at least 12 characters (this one has 9)"),
        ("x" * 257, "at most 256"),
        ("aaaaaaaaaaaaaa", "one character repeated"),
        ("Ana.Ruiz.Lab", "account name"),
        (12345678901234, "must be text"),
    ],
)
def test_new_password_rules(password, words):
    with pytest.raises(InputError, match=re.escape(words)) as info:
        auth.check_new_password(password, username="ana.ruiz.lab")
    assert info.value.field == "password"
    assert str(password) not in str(info.value)


def test_a_good_password_passes():
    assert auth.check_new_password(ANA_PASSWORD, username="ana") == ANA_PASSWORD


# --------------------------------------------------------------------------------------------
# Signing in with a local account
# --------------------------------------------------------------------------------------------


def test_login(labbook):
    _people(labbook)
    person = labbook.login("ANA", ANA_PASSWORD, now=T0)
    assert person == auth.Person("ana", "Ana Ruiz", "operator", auth.VIA_PASSWORD)
    account = labbook.get_person("ana")
    assert account.last_login_at.startswith("2031-05-14T08:00") and account.failed_logins == 0


@pytest.mark.parametrize("username, password", [("ana", "a wrong password"), ("nobody", ANA_PASSWORD), ("bad name", "x"), ("ana", "")])
def test_a_wrong_password_or_unknown_account_says_the_same(labbook, username, password):
    _people(labbook)
    with pytest.raises(auth.LoginError) as info:
        labbook.login(username, password, now=T0)
    assert str(info.value) == f"field 'password': {auth.WRONG_LOGIN}"
    assert password not in str(info.value) or not password


def test_lock_out_after_n_failures_and_its_expiry(labbook):
    _people(labbook)
    labbook.set_lab_settings({"login_attempts_max": 3, "login_lockout_min": 10}, who="pi", reason="lab rule")
    for i in range(2):
        with pytest.raises(auth.LoginError) as info:
            labbook.login("ana", "a wrong password", now=T0 + dt.timedelta(seconds=i))
        assert not isinstance(info.value, auth.LockedOutError)
    assert labbook.get_person("ana").failed_logins == 2
    with pytest.raises(auth.LockedOutError, match="locked until 2031-05-14 08:10 UTC") as info:
        labbook.login("ana", "a wrong password", now=T0 + dt.timedelta(seconds=2))  # the 3rd
    assert info.value.until.startswith("2031-05-14T08:10:02")
    # while locked, even the right password is refused
    with pytest.raises(auth.LockedOutError):
        labbook.login("ana", ANA_PASSWORD, now=T0 + dt.timedelta(minutes=9))
    # others are not affected
    assert labbook.login("pi", PI_PASSWORD, now=T0 + dt.timedelta(minutes=9)).username == "pi"
    # the lock expires by itself
    person = labbook.login("ana", ANA_PASSWORD, now=T0 + dt.timedelta(minutes=10, seconds=3))
    assert person.username == "ana"
    assert labbook.get_person("ana").failed_logins == 0 and labbook.get_person("ana").locked_until == ""
    trail = labbook.audit_trail(None)
    locked = trail[trail["action"] == "login locked"]
    assert len(locked) == 1 and locked.iloc[0]["who"] == "ana"
    assert locked.iloc[0]["reason"] == "3 failed logins in a row"


def test_after_an_expired_lock_failures_count_afresh(labbook):
    _people(labbook)
    labbook.set_lab_settings({"login_attempts_max": 2}, who="pi", reason="lab rule")
    for s in (0, 1):
        with pytest.raises(auth.LoginError):
            labbook.login("ana", "a wrong password", now=T0 + dt.timedelta(seconds=s))
    later = T0 + dt.timedelta(minutes=16)  # default lock-out: 15 min
    with pytest.raises(auth.LoginError) as info:
        labbook.login("ana", "a wrong password", now=later)
    assert not isinstance(info.value, auth.LockedOutError)  # one failure, not the third
    assert labbook.get_person("ana").failed_logins == 1


def test_a_success_clears_the_count(labbook):
    _people(labbook)
    for s in range(4):  # default: 5 allowed
        with pytest.raises(auth.LoginError):
            labbook.login("ana", "a wrong password", now=T0 + dt.timedelta(seconds=s))
    labbook.login("ana", ANA_PASSWORD, now=T0 + dt.timedelta(seconds=5))
    with pytest.raises(auth.LoginError) as info:
        labbook.login("ana", "a wrong password", now=T0 + dt.timedelta(seconds=6))
    assert not isinstance(info.value, auth.LockedOutError)


def test_an_admin_unlocks_sooner(labbook):
    _people(labbook)
    labbook.set_lab_settings({"login_attempts_max": 1}, who="pi", reason="lab rule")
    with pytest.raises(auth.LockedOutError):
        labbook.login("ana", "a wrong password", now=T0)
    pi = labbook.as_person(labbook.login("pi", PI_PASSWORD, now=T0))
    account = pi.unlock("ana", reason="she called")
    assert account.locked_until == "" and account.failed_logins == 0
    assert labbook.login("ana", ANA_PASSWORD, now=T0 + dt.timedelta(seconds=1)).username == "ana"
    unlocked = labbook.audit_trail(None).iloc[-1]
    assert (unlocked["action"], unlocked["who"], unlocked["via"]) == ("person unlocked", "pi", "password")


@pytest.mark.parametrize(
    "settings, field",
    [
        ({"login_attempts_max": 0}, "settings.login_attempts_max"),
        ({"login_attempts_max": 2.5}, "settings.login_attempts_max"),
        ({"login_attempts_max": 1000}, "settings.login_attempts_max"),
        ({"login_lockout_min": 0}, "settings.login_lockout_min"),
        ({"login_lockout_min": -5}, "settings.login_lockout_min"),
    ],
)
def test_bad_lock_out_settings_are_refused_and_nothing_saved(labbook, settings, field):
    labbook.set_lab_settings({"login_attempts_max": 4}, who="pi", reason="lab rule")
    with pytest.raises(InputError) as info:
        labbook.set_lab_settings(settings, who="pi", reason="typo")
    assert info.value.field == field
    assert labbook.get_lab_setting_overrides() == {"login_attempts_max": 4}
    assert LabSettings().login_attempts_max == 5 and LabSettings().login_lockout_min == 15.0


def test_deactivated_or_passwordless_accounts_cannot_log_in(labbook):
    _people(labbook)
    labbook.add_person("sso", display_name="S. Sign-On", role="reviewer", email="sso@lab.example", who="pi")
    labbook.set_active("ana", False, who="pi", reason="left the lab")
    for username, password in (("ana", ANA_PASSWORD), ("sso", "anything at all")):
        with pytest.raises(auth.LoginError, match="wrong"):
            labbook.login(username, password, now=T0)
    labbook.set_active("ana", True, who="pi", reason="back for the summer")
    assert labbook.login("ana", ANA_PASSWORD, now=T0).username == "ana"


def test_a_weak_stored_hash_is_remade_at_login(labbook, monkeypatch):
    _people(labbook)  # made with n = 2^10
    stronger = auth.ScryptParameters(n=2**11)
    monkeypatch.setattr(auth, "PASSWORD_PARAMETERS", stronger)
    labbook.login("ana", ANA_PASSWORD, now=T0)
    with labbook._engine.connect() as conn:
        stored = conn.exec_driver_sql("SELECT password_hash FROM people WHERE username = 'ana'").scalar()
    assert auth.hash_parameters(stored).n == 2**11
    assert labbook.login("ana", ANA_PASSWORD, now=T0).username == "ana"


def test_login_time_must_be_timezone_aware(labbook):
    _people(labbook)
    with pytest.raises(ValueError, match="timezone"):
        labbook.login("ana", ANA_PASSWORD, now=dt.datetime(2031, 5, 14, 8, 0))


def test_no_password_or_hash_is_ever_shown(labbook):
    _people(labbook)
    labbook.set_password("ana", "a brand new long password", who="pi", reason="reset")
    with labbook._engine.connect() as conn:
        hashes = [h for (h,) in conn.exec_driver_sql("SELECT password_hash FROM people")]
    assert all(h.startswith("scrypt$") for h in hashes)
    secrets = [ANA_PASSWORD, PI_PASSWORD, "a brand new long password", *hashes]
    shown = [
        json.dumps(labbook.audit_trail(None).to_dict("records"), default=str),
        labbook.list_people().to_string(),
        repr(labbook.get_person("ana")),
        repr(labbook.login("ana", "a brand new long password")),
    ]
    for text in shown:
        for secret in secrets:
            assert secret not in text
    assert "password_hash" not in Account.__dataclass_fields__
    set_entry = labbook.audit_trail(None).iloc[-1]
    assert set_entry["action"] == "password set"
    assert set_entry["changes"] == [{"field": "people.ana.local_password", "from": True, "to": "changed"}]


def test_own_password_change_proves_the_current_one(labbook):
    _people(labbook)
    ana = labbook.as_person(labbook.login("ana", ANA_PASSWORD))
    with pytest.raises(auth.LoginError):
        ana.change_own_password("not my password", "a brand new long password")
    with pytest.raises(InputError) as info:
        ana.change_own_password(ANA_PASSWORD, "short")
    assert info.value.field == "new_password"
    ana.change_own_password(ANA_PASSWORD, "a brand new long password")
    assert labbook.login("ana", "a brand new long password").username == "ana"
    with pytest.raises(auth.LoginError):
        labbook.login("ana", ANA_PASSWORD)


# --------------------------------------------------------------------------------------------
# Single sign-on: the identity the provider vouched for, matched to the lab's people
# --------------------------------------------------------------------------------------------


def test_person_for_sign_on_claims(labbook):
    labbook.add_person("ben", display_name="Ben Okafor", role="reviewer", email="Ben@Lab.Example", who="pi")
    person = labbook.person_for_claims({"email": "ben@lab.example", "email_verified": True, "sub": "x1"})
    assert person == auth.Person("ben", "Ben Okafor", "reviewer", auth.VIA_OIDC)
    assert labbook.person_for_claims({"email": "BEN@lab.example"}).username == "ben"


@pytest.mark.parametrize(
    "claims, words",
    [
        ({"email": "stranger@lab.example"}, "not an active member"),
        ({"email": "ben@lab.example", "email_verified": False}, "not verified"),
        ({"sub": "x1"}, "no e-mail address"),
        ({"email": "not an address"}, "no e-mail address"),
    ],
)
def test_sign_on_refusals_name_the_field(labbook, claims, words):
    labbook.add_person("ben", display_name="Ben Okafor", role="reviewer", email="ben@lab.example", who="pi")
    with pytest.raises(auth.LoginError, match=words) as info:
        labbook.person_for_claims(claims)
    assert info.value.field == "email"


def test_deactivated_sign_on_person_is_refused(labbook):
    labbook.add_person("ben", display_name="Ben Okafor", role="reviewer", email="ben@lab.example", who="pi")
    labbook.add_person("pi", display_name="PI", role="admin", who="setup")
    labbook.set_active("ben", False, who="pi", reason="left")
    with pytest.raises(auth.LoginError, match="not an active member"):
        labbook.person_for_claims({"email": "ben@lab.example"})


def test_an_email_belongs_to_one_person(labbook):
    labbook.add_person("ben", display_name="Ben", role="reviewer", email="ben@lab.example", who="pi")
    from swimlab.errors import ConflictError

    with pytest.raises(ConflictError, match="already belongs to 'ben'"):
        labbook.add_person("ben2", display_name="Ben 2", role="operator", email="BEN@lab.example", who="pi")
    assert labbook.list_people()["username"].tolist() == ["ben"]


@pytest.mark.parametrize(
    "section, configured",
    [
        ({"redirect_uri": "http://localhost:8501/oauth2callback", "cookie_secret": "s", "client_id": "c",
          "client_secret": "d", "server_metadata_url": "http://localhost:9400/.well-known/openid-configuration"}, True),
        ({"redirect_uri": "r", "cookie_secret": "s",
          "campus": {"client_id": "c", "client_secret": "d", "server_metadata_url": "m"}}, True),
        ({"redirect_uri": "r", "cookie_secret": "s", "client_id": "c"}, False),
        ({}, False),
        (None, False),
    ],
)
def test_oidc_configured(section, configured):
    assert auth.oidc_configured(section) is configured


# --------------------------------------------------------------------------------------------
# The command line: people add | list | set-role | unlock | …
# --------------------------------------------------------------------------------------------


def _cli(capsys, monkeypatch, db, *argv, stdin=""):
    monkeypatch.setattr("sys.stdin", io.StringIO(stdin))
    code = main(["--db", db, "--who", "lab manager", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_people_on_the_command_line(capsys, monkeypatch, tmp_path):
    db = f"sqlite:///{tmp_path / 'lb.sqlite'}"
    code, out, _ = _cli(capsys, monkeypatch, db, "people", "list")
    assert code == 0 and "nobody has been added" in out
    code, out, _ = _cli(capsys, monkeypatch, db, "people", "add", "pi", "--name", "P. Investigator",
                        "--role", "admin", "--password-stdin", stdin=PI_PASSWORD + "\n")
    assert code == 0 and out.strip() == "added P. Investigator (pi) as admin, with a local password"
    code, out, _ = _cli(capsys, monkeypatch, db, "people", "add", "ana", "--name", "Ana Ruiz",
                        "--role", "operator", "--password-stdin", stdin=ANA_PASSWORD + "\n")
    assert code == 0
    code, out, _ = _cli(capsys, monkeypatch, db, "people", "set-role", "ana", "reviewer",
                        "--reason", "second year")
    assert code == 0 and out.strip() == "ana is now reviewer"
    code, out, _ = _cli(capsys, monkeypatch, db, "people", "list")
    assert code == 0 and "Ana Ruiz" in out and "reviewer" in out
    assert ANA_PASSWORD not in out and "scrypt" not in out
    with LabBook.open(db) as book:
        assert book.login("ana", ANA_PASSWORD).role == "reviewer"
        book.set_lab_settings({"login_attempts_max": 1}, who="pi", reason="test")
        with pytest.raises(auth.LockedOutError):
            book.login("ana", "a wrong password")
    code, out, _ = _cli(capsys, monkeypatch, db, "people", "unlock", "ana")
    assert code == 0 and out.strip() == "ana is unlocked"
    with LabBook.open(db) as book:
        assert book.login("ana", ANA_PASSWORD).username == "ana"
        trail = book.audit_trail(None)
    assert set(trail[trail["who"] == "lab manager"]["action"]) == {"person added", "role changed", "person unlocked"}


@pytest.mark.parametrize(
    "argv, stdin, words",
    [
        (["people", "add", "ana", "--name", "Ana", "--role", "operator", "--password-stdin"], "short\n",
         "field 'password': must be at least 12 characters"),
        (["people", "add", "ana", "--name", "Ana", "--role", "operator"], "", "not a terminal"),
        (["people", "add", "a b", "--name", "Ana", "--role", "operator", "--no-password"], "", "field 'username'"),
        (["people", "set-role", "nobody", "admin", "--reason", "why not"], "", "no person 'nobody'"),
        (["people", "unlock", "nobody"], "", "no person 'nobody'"),
    ],
)
def test_people_command_errors_are_one_line(capsys, monkeypatch, tmp_path, argv, stdin, words):
    db = f"sqlite:///{tmp_path / 'lb.sqlite'}"
    code, out, err = _cli(capsys, monkeypatch, db, *argv, stdin=stdin)
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert words in err, err
    assert "short" not in err.replace("shorter", "")  # the password is not repeated
    with LabBook.open(db) as book:
        assert book.list_people().empty


def test_people_command_refuses_a_bad_role(capsys, monkeypatch, tmp_path):
    db = f"sqlite:///{tmp_path / 'lb.sqlite'}"
    with pytest.raises(SystemExit) as info:
        _cli(capsys, monkeypatch, db, "people", "add", "ana", "--name", "Ana", "--role", "student",
             "--no-password")
    assert info.value.code == 2
    assert "invalid choice: 'student'" in capsys.readouterr().err


def test_the_last_admin_stays_on_the_command_line(capsys, monkeypatch, tmp_path):
    db = f"sqlite:///{tmp_path / 'lb.sqlite'}"
    _cli(capsys, monkeypatch, db, "people", "add", "pi", "--name", "PI", "--role", "admin", "--no-password")
    code, _, err = _cli(capsys, monkeypatch, db, "people", "deactivate", "pi", "--reason", "leaving")
    assert code == 2 and "last active admin" in err
    code, _, err = _cli(capsys, monkeypatch, db, "people", "set-role", "pi", "operator", "--reason", "demote")
    assert code == 2 and "last active admin" in err


def test_session_operator_name_is_not_a_login(labbook):
    """A session document names its operator in words; that gives no one an account."""
    labbook.create_session(make_session(operator="ana"), who="ana")
    with pytest.raises(auth.LoginError):
        labbook.login("ana", ANA_PASSWORD)
