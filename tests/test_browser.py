"""A whole trial in a real browser: a student enters and analyses it, a reviewer approves it.

Starts ``streamlit run app.py`` with its own lab book and drives Debian's Chromium with
Playwright. Screenshots of each page go to test-artifacts/screenshots/ (or the folder named by
SWIMLAB_SCREENSHOT_DIR, e.g. docs/screenshots to refresh the README's pictures). Skipped when Chromium is absent,
unless CI is "true" (then it fails).
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import pytest
from browser_support import (
    CHROMIUM,
    CHROMIUM_ARGS,
    ROOT,
    attach_logger_file,
    free_port,
    logger_file,
    require_chromium,
    start_app,
    stop_app,
    typical_session,
)

pytestmark = pytest.mark.browser

SHOTS = Path(os.environ.get("SWIMLAB_SCREENSHOT_DIR", ROOT / "test-artifacts" / "screenshots"))
VIEWPORT = {"width": 1400, "height": 1000}


@pytest.fixture
def app_server(tmp_path):
    """The app on a free loopback port with a lab book holding one earlier trial (KB-02)."""
    require_chromium()
    from swimlab.io.bundle import write_bundle
    from swimlab.session import Session
    from swimlab.store import LabBook

    earlier = typical_session()
    earlier.update(session_id="kb02earlier", title="Kestrel Bay KB-02 step test")
    earlier["fish"][0].update(fish_id="KB-02", mass_g=290.0)
    sha, raw = attach_logger_file(earlier, seed=3)
    demo = tmp_path / "demo"
    demo.mkdir()
    write_bundle(Session.model_validate(earlier), {sha: raw}, demo / "kb02")
    url = f"sqlite:///{tmp_path / 'labbook.sqlite'}"
    port = free_port()
    proc = start_app(url, str(demo), port, tmp_path / "streamlit.log")
    try:
        yield f"http://127.0.0.1:{port}/", url
    finally:
        stop_app(proc)
        LabBook.open(url).close()


# --- small helpers over Streamlit's page -----------------------------------------------------


def idle(page, timeout_ms: int = 90_000) -> None:
    """Wait until the app has finished its re-run (the running indicator came and went)."""
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    try:
        page.wait_for_selector('[data-testid="stStatusWidget"]', state="attached", timeout=1500)
    except PlaywrightTimeout:
        pass  # the re-run was over before we looked
    page.wait_for_selector('[data-testid="stStatusWidget"]', state="detached", timeout=timeout_ms)
    time.sleep(0.3)


def shot(page, name: str) -> None:
    """Save a screenshot of the whole page (the app scrolls inside its main area, so the window
    is made as tall as that area for the picture)."""
    SHOTS.mkdir(parents=True, exist_ok=True)
    height = page.evaluate(
        "() => { const m = document.querySelector('[data-testid=\"stMain\"]');"
        " return m ? m.scrollHeight : document.body.scrollHeight; }"
    )
    page.set_viewport_size({"width": VIEWPORT["width"], "height": int(min(max(height, VIEWPORT["height"]), 6000))})
    time.sleep(0.6)
    page.screenshot(path=str(SHOTS / f"{name}.png"))
    page.set_viewport_size(VIEWPORT)
    time.sleep(0.2)


def goto_page(page, title: str) -> None:
    page.locator('[data-testid="stSidebarNav"]').get_by_text(title, exact=True).click()
    page.wait_for_selector(f'h1:has-text("{title}")', timeout=60_000)
    idle(page)


def choose(page, label: str, option_text: str | None = None) -> None:
    box = page.get_by_role("combobox", name=label, exact=True)
    box.click()
    if option_text:
        box.fill(option_text)
    time.sleep(0.4)
    options = page.get_by_role("option")
    (options.filter(has_text=option_text).first if option_text else options.first).click()
    idle(page)


def type_in(page, label: str, text: str) -> None:
    box = page.get_by_role("textbox", name=label)
    box.fill(text)
    box.press("Enter")
    idle(page)


def grid_after(page, heading: str):
    """The data grid that follows the bold heading ``heading`` on the set-up page."""
    return page.locator(f'[data-testid="stMarkdownContainer"]:has(strong:text-is("{heading}"))').locator(
        'xpath=ancestor::div[@data-testid="stElementContainer"][1]/following-sibling::div'
        '[@data-testid="stElementContainer"][1]//div[@data-testid="stDataFrame"]'
    ).first


def edit_cell(page, grid, row: int, column: int, value: str, *, row_markers: bool) -> None:
    """Edit one cell: click the row's first cell, move right, Enter, fill the editor, Enter."""
    editor = page.locator(".gdg-input").first
    for attempt in range(3):
        grid.scroll_into_view_if_needed()
        time.sleep(0.3)
        box = grid.bounding_box()
        page.mouse.click(box["x"] + (48 if row_markers else 14), box["y"] + 35 + 35 * row + 17)
        time.sleep(0.2)
        for _ in range(column):
            page.keyboard.press("ArrowRight")
        page.keyboard.press("Enter")
        try:
            editor.wait_for(state="visible", timeout=3_000)
            break
        except Exception:
            page.keyboard.press("Escape")
            if attempt == 2:
                shot(page, "debug-edit-cell")
                raise
    editor.fill(value)
    page.keyboard.press("Enter")
    idle(page)


def text_of(page) -> str:
    return page.locator('[data-testid="stMain"]').inner_text()


# --- the trial -------------------------------------------------------------------------------


def test_student_enters_a_trial_and_a_reviewer_approves_it(app_server):
    from playwright.sync_api import sync_playwright

    from swimlab.store import LabBook

    base_url, db_url = app_server
    new_fish = {"fish_id": "KB-03", "mass_g": 310.0, "total_length_cm": 28.5, "body_depth_cm": 6.1,
                "body_width_cm": 3.4}
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        page = browser.new_page(viewport=VIEWPORT)
        page.set_default_timeout(60_000)

        try:
            # Lab book: the earlier trial was loaded on first run.
            page.goto(base_url)
            page.wait_for_selector('h1:has-text("Lab book")')
            idle(page)
            page.get_by_text("1 of 1 session(s)").wait_for()
            type_in(page, "Your name", "A. Student")
            shot(page, "01-lab-book")

            # New session for the next fish in the same flume.
            page.get_by_text("an earlier session (same flume, next fish)").click()
            idle(page)
            choose(page, "Copy from")
            page.get_by_role("button", name="Start").click()
            page.wait_for_selector('h1:has-text("Set-up")')
            idle(page)
            assert "problem(s)" in text_of(page)

            # Fish grid: the copied session asks for the new fish's identity and size.
            page.get_by_role("tab", name="Fish").click()
            time.sleep(0.5)
            fish_grid = grid_after(page, "Fish")
            assert "Fish, row 1, Fish id: is required" in text_of(page)
            shot(page, "02-set-up-problems")
            for column, field in ((0, "fish_id"), (3, "mass_g"), (4, "total_length_cm"), (6, "body_depth_cm"),
                                  (7, "body_width_cm")):
                edit_cell(page, fish_grid, 0, column, str(new_fish[field]), row_markers=True)
            # Protocol grid: when the fish met the fatigue criterion (in the 10th step).
            page.get_by_role("tab", name="Protocol").click()
            time.sleep(0.5)
            edit_cell(page, grid_after(page, "Protocol"), 0, 1, "11500", row_markers=False)
            # Trial grid: a title of its own.
            page.get_by_role("tab", name="Trial and water").click()
            time.sleep(0.5)
            edit_cell(page, grid_after(page, "Trial"), 0, 0, "Kestrel Bay KB-03 step test", row_markers=False)
            assert "Every value is valid." in text_of(page), text_of(page)[:2000]
            type_in(page, "Reason for this save", "new fish entered")
            page.get_by_role("button", name="Save to lab book").click()
            idle(page)
            assert "Saved as version 1." in text_of(page)
            page.get_by_role("tab", name="Fish").click()
            time.sleep(0.4)
            shot(page, "03-set-up-saved")

            # Oxygen trace: upload the logger file, accept the guessed mapping, attach.
            session_now = typical_session()
            session_now["fish"][0].update(new_fish)
            name, raw = logger_file(session_now, seed=11)
            upload = ROOT / "test-artifacts" / name
            upload.parent.mkdir(exist_ok=True)
            upload.write_bytes(raw)
            goto_page(page, "Oxygen trace")
            page.locator('[data-testid="stFileUploaderDropzoneInput"]').set_input_files(str(upload))
            page.get_by_role("button", name="Attach this file to the session").wait_for()
            idle(page)
            assert "First rows of the file" in text_of(page)
            shot(page, "04-trace-mapping")
            page.get_by_role("button", name="Attach this file to the session").click()
            idle(page)
            page.wait_for_selector('[data-testid="stPlotlyChart"]')
            idle(page)
            # Exclude one phase with a reason.
            choose(page, "Phase", "cycle 2,")
            type_in(page, "Reason (kept in the record)", "fish turned round in the tunnel")
            page.get_by_role("button", name="Exclude").click()
            idle(page)
            page.wait_for_selector('[data-testid="stPlotlyChart"]')
            assert "Excluded phases" in text_of(page)
            shot(page, "05-oxygen-trace")

            goto_page(page, "Checks")
            shot(page, "06-checks")

            goto_page(page, "Results")
            page.wait_for_selector('[data-testid="stPlotlyChart"]')
            body = text_of(page)
            assert "Ucrit" in body and "SMR" in body and "MMR" in body and "No Ucrit" not in body
            shot(page, "07-results")
            page.get_by_role("button", name="Submit for review").click()
            idle(page)

            # Review: a different person approves.
            type_in(page, "Your name", "P. Reviewer")
            goto_page(page, "Review")
            assert "Kestrel Bay KB-03 step test" in text_of(page)
            type_in(page, "Reviewer's name", "A. Student")
            assert "must be a different person" in text_of(page)
            type_in(page, "Reviewer's name", "P. Reviewer")
            page.get_by_role("textbox", name="Comment").fill("Checked the trace and the excluded phase.")
            page.wait_for_selector('[data-testid="stPlotlyChart"]')
            shot(page, "08-review")
            page.get_by_role("button", name="Approve").click()
            idle(page)
            page.get_by_text("approved", exact=False).first.wait_for()
            shot(page, "09-review-approved")

            goto_page(page, "Care and cautions")
            shot(page, "10-care")
        except Exception:
            shot(page, "debug-failure")
            raise
        finally:
            browser.close()

    book = LabBook.open(db_url)
    try:
        table = book.list_sessions()
        row = table[table["title"] == "Kestrel Bay KB-03 step test"].iloc[0]
        stored = book.get_session(row["session_id"])
        assert stored.status == "approved"
        assert stored.session.fish[0].mass_g == 310.0 and stored.session.operator == "A. Student"
        assert [(e.channel, e.cycle) for e in stored.session.exclusions] == [("A", 2)]
        trail = book.audit_trail(row["session_id"])
        assert list(trail["action"])[-2:] == ["submitted", "approved"]
        assert list(trail["who"])[-1] == "P. Reviewer"
    finally:
        book.close()
