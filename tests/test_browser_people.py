"""People in a real browser: a lab server with an operator and a reviewer in two browser contexts.

Starts ``streamlit run app.py`` in lab-server mode with its own lab book and drives Debian's
Chromium with Playwright (as tests/test_browser.py does). The operator signs in, submits a
trial; the reviewer, in a second browser context, approves it. One person's cookies, copied
into another context, sign nobody in: a local account's sign-in lives in the server-side
session of one browser tab, not in a cookie. A page outside a person's role answers
"page not found". Skipped when Chromium is absent, unless CI is "true" (then it fails).
"""

from __future__ import annotations

import os

import pytest
from browser_support import (
    CHROMIUM,
    CHROMIUM_ARGS,
    attach_logger_file,
    free_port,
    require_chromium,
    start_app,
    stop_app,
    typical_session,
)
from playwright.sync_api import expect
from test_browser import SHOTS, VIEWPORT, goto_page, idle, shot, text_of

pytestmark = pytest.mark.browser

ANA, BEN = "tunnel B runs at noon", "a weir is not a dam"


@pytest.fixture
def lab_server(tmp_path, monkeypatch):
    """The app in lab-server mode; ana (operator) has one analysable draft, ben reviews."""
    require_chromium()
    from swimlab.session import Session
    from swimlab.store import LabBook

    url = f"sqlite:///{tmp_path / 'labbook.sqlite'}"
    data = typical_session()
    data.update(session_id="kb03lab", title="Kestrel Bay KB-03 step test", operator="Ana Ruiz")
    sha, raw = attach_logger_file(data, seed=5)
    with LabBook.open(url) as book:
        book.add_person("ana", display_name="Ana Ruiz", role="operator", password=ANA, who="setup")
        book.add_person("ben", display_name="Ben Okafor", role="reviewer", password=BEN, who="setup")
        book.create_session(Session.model_validate(data), {sha: raw}, who="ana")
    (tmp_path / "demo").mkdir()
    monkeypatch.setenv("SWIMLAB_MODE", "lab-server")  # start_app passes the environment on
    port = free_port()
    proc = start_app(url, str(tmp_path / "demo"), port, tmp_path / "streamlit.log")
    try:
        yield f"http://127.0.0.1:{port}/", url
    finally:
        stop_app(proc)


def _sign_in(page, base_url: str, username: str, password: str) -> None:
    page.goto(base_url)
    page.wait_for_selector('h1:has-text("Sign in")')
    idle(page)
    page.get_by_role("textbox", name="Account name").fill(username)
    page.get_by_label("Password", exact=True).fill(password)
    page.get_by_role("button", name="Sign in", exact=True).click()
    page.wait_for_selector('h1:has-text("Lab book")')
    idle(page)


def _sidebar(page) -> str:
    return page.locator('[data-testid="stSidebar"]').inner_text()


def test_two_people_two_contexts_and_cookies_that_sign_nobody_in(lab_server):
    from playwright.sync_api import sync_playwright

    from swimlab.store import LabBook

    base_url, db_url = lab_server
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        ana_ctx, ben_ctx = browser.new_context(viewport=VIEWPORT), browser.new_context(viewport=VIEWPORT)
        ana, ben = ana_ctx.new_page(), ben_ctx.new_page()
        pages = [ana, ben]
        for page in pages:
            page.set_default_timeout(60_000)
        try:
            # A wrong password first: refused in words, nothing shown of the lab book.
            ana.goto(base_url)
            ana.wait_for_selector('h1:has-text("Sign in")')
            idle(ana)
            assert "lab-server mode · not signed in" in _sidebar(ana)
            ana.get_by_role("textbox", name="Account name").fill("ana")
            ana.get_by_label("Password", exact=True).fill("not the password at all")
            ana.get_by_role("button", name="Sign in", exact=True).click()
            ana.get_by_text("the account name or the password is wrong").wait_for()
            shot(ana, "people-01-sign-in-refused")

            _sign_in(ana, base_url, "ana", ANA)
            assert "signed in as Ana Ruiz (ana) · operator · by password" in _sidebar(ana)
            nav = ana.locator('[data-testid="stSidebarNav"]').inner_text()
            assert "Lab book" in nav and "Review" not in nav and "People" not in nav

            # The Review page is not in the operator's menu. Typing its address loads the app
            # afresh: a new server-side session, where nobody is signed in and no such page exists.
            ana.goto(base_url + "review")
            ana.get_by_text("Page not found", exact=False).first.wait_for()
            shot(ana, "people-02-review-by-address")
            assert not ana.locator('h1:has-text("Review")').count()
            assert "not signed in" in _sidebar(ana)

            # The operator signs in again, opens her trial and submits it.
            _sign_in(ana, base_url, "ana", ANA)
            assert "Review" not in ana.locator('[data-testid="stSidebarNav"]').inner_text()
            box = ana.get_by_role("combobox", name="Session", exact=True)
            box.click()
            ana.get_by_role("option").filter(has_text="Kestrel Bay KB-03").first.click()
            idle(ana)
            ana.get_by_role("button", name="Open this session").click()
            ana.wait_for_selector('h1:has-text("Set-up")')
            idle(ana)
            goto_page(ana, "Results")
            ana.wait_for_selector('[data-testid="stPlotlyChart"]')
            ana.get_by_role("button", name="Submit for review").click()
            idle(ana)
            ana.get_by_text("Submitted for review").first.wait_for()

            # The reviewer, in a second browser context.
            _sign_in(ben, base_url, "ben", BEN)
            assert "signed in as Ben Okafor (ben) · reviewer · by password" in _sidebar(ben)
            goto_page(ben, "Review")
            assert "Kestrel Bay KB-03 step test" in text_of(ben)
            # The reviewer box is filled with the signed-in identity (wait for the rerun to land).
            expect(ben.get_by_role("textbox", name="Reviewer")).to_have_value("Ben Okafor (ben)", timeout=20_000)
            ben.get_by_role("textbox", name="Comment").fill("Checked the trace and the fatigue time.")
            ben.get_by_role("button", name="Approve").click()
            idle(ben)
            ben.get_by_text("Approved: the session is frozen.").first.wait_for()
            shot(ben, "people-03-reviewer-approved")

            # Ana's cookies in a third context sign nobody in ...
            cookies = ana_ctx.cookies()
            assert not any("ana" in c["value"].lower() for c in cookies)  # no identity in a cookie
            thief_ctx = browser.new_context(viewport=VIEWPORT)
            thief_ctx.add_cookies(cookies)
            thief = thief_ctx.new_page()
            pages.append(thief)
            thief.goto(base_url)
            thief.wait_for_selector('h1:has-text("Sign in")')
            idle(thief)
            assert "not signed in" in _sidebar(thief) and "Ana Ruiz" not in _sidebar(thief)
            # ... and in the reviewer's context they do not turn ben into ana.
            ben_ctx.add_cookies(cookies)
            ben.reload()
            ben.wait_for_selector('h1:has-text("Sign in")')
            idle(ben)
            assert "Ana Ruiz" not in _sidebar(ben)
            # Ana, still signed in in her own tab, goes on as herself.
            goto_page(ana, "Lab book")
            assert "signed in as Ana Ruiz (ana)" in _sidebar(ana)
        except Exception:
            for i, page in enumerate(pages):
                shot(page, f"debug-people-{i}")
            raise
        finally:
            browser.close()

    with LabBook.open(db_url) as book:
        assert book.get_session("kb03lab").status == "approved"
        trail = book.audit_trail("kb03lab")
        assert trail[["who", "action", "via"]].values.tolist()[-2:] == [
            ["ana", "submitted", "password"],
            ["ben", "approved", "password"],
        ]
        record = book.sign_off("kb03lab")
        assert (record["entered_by"], record["approved_by"]) == ("ana", "ben")
    assert SHOTS.is_dir()


# --------------------------------------------------------------------------------------------
# Single sign-on (OpenID Connect) against a local test provider
# --------------------------------------------------------------------------------------------


@pytest.fixture
def sso_server(tmp_path, monkeypatch):
    """Lab-server mode with st.login set up against oidc-provider-mock on this computer.

    ben@lab.example is a reviewer of the lab (no local password); the provider vouches for any
    address typed into its form, so a stranger can be tried too.
    """
    require_chromium()
    oidc_provider_mock = pytest.importorskip("oidc_provider_mock")
    pytest.importorskip("authlib")  # streamlit[auth]
    from swimlab.store import LabBook

    url = f"sqlite:///{tmp_path / 'labbook.sqlite'}"
    with LabBook.open(url) as book:
        book.add_person("ben", display_name="Ben Okafor", role="reviewer", email="ben@lab.example", who="setup")
        book.add_person("pi", display_name="P. Investigator", role="admin", who="setup")
    (tmp_path / "demo").mkdir()
    port = free_port()
    with oidc_provider_mock.run_server_in_thread() as provider:
        secrets = tmp_path / "secrets.toml"
        secrets.write_text(
            "[auth]\n"
            f'redirect_uri = "http://localhost:{port}/oauth2callback"\n'
            f'cookie_secret = "{os.urandom(16).hex()}"\n'
            'client_id = "swimlab-test"\n'
            'client_secret = "not-a-real-secret"\n'
            f'server_metadata_url = "http://localhost:{provider.server_port}/.well-known/openid-configuration"\n'
        )
        monkeypatch.setenv("SWIMLAB_MODE", "lab-server")
        monkeypatch.setenv("STREAMLIT_SECRETS_FILES", str(secrets))
        proc = start_app(url, str(tmp_path / "demo"), port, tmp_path / "streamlit.log")
        try:
            yield f"http://localhost:{port}/", url
        finally:
            stop_app(proc)


def _sso_sign_in(page, base_url: str, email: str) -> None:
    page.goto(base_url)
    page.wait_for_selector('h1:has-text("Sign in")')
    idle(page)
    page.get_by_role("button", name="Sign in with your institution's single sign-on").click()
    page.locator('input[name="sub"]').fill(email)  # the test provider's own form
    page.locator('button[type="submit"], input[type="submit"]').first.click()
    page.wait_for_url(base_url + "**")
    idle(page)


def test_single_sign_on_maps_to_the_lab_s_people(sso_server):
    from playwright.sync_api import sync_playwright

    from swimlab.store import LabBook

    base_url, db_url = sso_server
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        ctx = browser.new_context(viewport=VIEWPORT)
        page = ctx.new_page()
        page.set_default_timeout(60_000)
        pages = [page]
        try:
            _sso_sign_in(page, base_url, "ben@lab.example")
            page.wait_for_selector('h1:has-text("Lab book")')
            assert "signed in as Ben Okafor (ben) · reviewer · by single sign-on" in _sidebar(page)
            shot(page, "people-04-single-sign-on")

            # Streamlit keeps a single-sign-on identity in a signed cookie: copied, it is a bearer
            # token (docs/security.md). The lab book is the guard: once the person is
            # deactivated, the same cookie signs nobody in.
            cookies = ctx.cookies()
            assert any(c["name"].startswith("_streamlit_user") and c["httpOnly"] for c in cookies)
            with LabBook.open(db_url) as book:
                book.set_active("ben", False, who="pi", reason="left the lab")
            other = browser.new_context(viewport=VIEWPORT)
            other.add_cookies(cookies)
            copy = other.new_page()
            pages.append(copy)
            copy.goto(base_url)
            copy.get_by_text("not an active member of this lab book").first.wait_for()
            idle(copy)
            assert "not signed in" in _sidebar(copy)

            # Someone the provider knows but the lab has not added is kept out.
            stranger_ctx = browser.new_context(viewport=VIEWPORT)
            stranger = stranger_ctx.new_page()
            pages.append(stranger)
            _sso_sign_in(stranger, base_url, "stranger@elsewhere.example")
            stranger.get_by_text("stranger@elsewhere.example is not an active member").first.wait_for()
            assert "not signed in" in _sidebar(stranger)
            shot(stranger, "people-05-stranger-kept-out")
        except Exception:
            for i, shown in enumerate(pages):
                shot(shown, f"debug-sso-{i}")
            raise
        finally:
            browser.close()
