"""Real-browser test: the demo worksheet served by Voila, reviewed and signed off in chromium.

Drives Debian's ``/usr/bin/chromium`` through Playwright for Python (1.65) against Voila (0.5);
the steps are those a reviewer takes: enter a name, try an amendment without a reason (refused
on screen), amend one step with a reason, try to sign off early (refused), accept every other
step, sign off. The page must show the amended text, the signed-off banner with the reviewer's
name and the clinical cautions, and the autosave written by the kernel must hold the same
decisions. A full-page screenshot is saved under the test's ``tmp_path``.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from browser_util import (
    CHROMIUM,
    CHROMIUM_ARGS,
    missing_browser_tools,
    skip_or_fail_without,
    voila_server,
)

from pftwork.interpret import STEP_IDS
from pftwork.worksheet import load_record
from pftwork.worksheet.storage import AUTOSAVE_SUFFIX

pytestmark = pytest.mark.browser

DEMO = Path(__file__).resolve().parents[1] / "worksheets" / "demo.ipynb"
REVIEWER = "Dr Browser Test"
AMENDED = "Airflow obstruction; severity to be graded after repeat spirometry."
REASON = "effort-dependent session; grade after repeat"
LOAD_TIMEOUT_MS = 150_000
STEP_TIMEOUT_MS = 20_000


@pytest.fixture
def page_url(tmp_path):
    """Voila serving the demo notebook, autosaving into tmp_path/autosave."""
    skip_or_fail_without(missing_browser_tools())
    autosave = tmp_path / "autosave"
    autosave.mkdir()
    with voila_server(DEMO, tmp_path / "voila.log",
                      env={"PFTWORK_AUTOSAVE_DIR": str(autosave)}) as url:
        yield url, autosave


def _full_height_screenshot(page, path: Path) -> None:
    """Screenshot of the whole page (Voila scrolls inside a container, so grow the viewport)."""
    height = page.evaluate("Math.max(...Array.from(document.querySelectorAll('*'), "
                           "e => e.scrollHeight))")
    page.set_viewport_size({"width": 1280, "height": min(int(height) + 40, 16000)})
    page.wait_for_timeout(500)  # plotly re-lays out on resize
    page.screenshot(path=str(path), full_page=True)


def test_review_amend_and_sign_off_in_browser(page_url, tmp_path):
    """A reviewer walks the whole demo case in chromium and signs it off."""
    from playwright.sync_api import expect, sync_playwright

    url, autosave = page_url
    shot = tmp_path / "worksheet-signed-off.png"
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            page.goto(url, timeout=LOAD_TIMEOUT_MS)
            page.wait_for_selector(".pft-step-synthesis", timeout=LOAD_TIMEOUT_MS)
            expect(page.locator(".pft-cautions")).to_contain_text(
                "not a certified medical device")
            expect(page.locator(".pft-zplot .js-plotly-plot")).to_have_count(1)

            page.locator(".pft-reviewer input").fill(REVIEWER)
            airflow = page.locator(".pft-step-airflow")
            airflow.locator(".pft-amend-toggle").click()
            airflow.locator(".pft-amend-text textarea").fill(AMENDED)
            airflow.locator(".pft-amend-save").click()
            expect(airflow.locator(".pft-error")).to_contain_text("reason is mandatory",
                                                                 timeout=STEP_TIMEOUT_MS)
            airflow.locator(".pft-amend-reason input").fill(REASON)
            airflow.locator(".pft-amend-save").click()
            expect(airflow.locator(".pft-amended-text")).to_have_text(AMENDED,
                                                                     timeout=STEP_TIMEOUT_MS)

            page.locator(".pft-signoff").click()
            expect(page.locator(".pft-signoff-error")).to_contain_text(
                "still pending", timeout=STEP_TIMEOUT_MS)

            for step in STEP_IDS:
                if step == "airflow":
                    continue
                panel = page.locator(f".pft-step-{step}")
                panel.locator(".pft-accept").click()
                expect(panel.locator(".pft-chip-accepted")).to_be_visible(timeout=STEP_TIMEOUT_MS)
            expect(page.locator(".pft-progress-label")).to_have_text(
                f"{len(STEP_IDS)} of {len(STEP_IDS)} steps reviewed")

            page.locator(".pft-signoff").click()
            banner = page.locator(".pft-signoff-banner")
            expect(banner).to_contain_text(f"Signed off by {REVIEWER}", timeout=STEP_TIMEOUT_MS)
            expect(page.locator(".pft-cautions")).to_be_visible()
            _full_height_screenshot(page, shot)
        finally:
            browser.close()

    print(f"screenshot: {shot}")
    saved = load_record(next(autosave.glob(f"*{AUTOSAVE_SUFFIX}")))
    assert REVIEWER == saved.signoff["reviewer"]
    assert AMENDED == saved.step("airflow").conclusion
    assert REASON == saved.step("airflow").decision.reason
    assert (len(STEP_IDS), len(STEP_IDS)) == saved.progress
