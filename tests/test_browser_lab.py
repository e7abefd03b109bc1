"""Real-browser test: the demo worksheet working in JupyterLab, as the README promises.

The README's route for a newcomer is ``pip install -e '.[lab]' && jupyter lab
worksheets/demo.ipynb``. This test takes it with JupyterLab 4 (``LabApp.expose_app_in_browser``
exposes the application as ``window.jupyterapp``), Playwright for Python 1.65 and Debian's
``/usr/bin/chromium``: open a copy of the demo notebook, wait for the kernel, run all cells through
the app's command registry (``notebook:run-all-cells``, JupyterLab 4 command id), then check what
the page shows: the printed pattern equals ``pftwork.interpret`` on the same case, the worksheet
header with the case id, the clinical cautions, the z-score chart drawn by plotly.js (the
``jupyterlab-plotly`` renderer that plotly 7.1 ships), the evidence tables; then a reviewer
accepts the first step and the progress and the kernel's autosave follow. A screenshot is saved
under the test's ``tmp_path``.
"""

from __future__ import annotations

import json
import shutil
import time
from pathlib import Path

import pytest
from browser_util import (
    CHROMIUM,
    CHROMIUM_ARGS,
    lab_server,
    missing_lab_tools,
    skip_or_fail_without,
)

import pftwork
from pftwork.interpret import STEP_IDS, interpret
from pftwork.worksheet import load_record
from pftwork.worksheet.storage import AUTOSAVE_SUFFIX

pytestmark = pytest.mark.browser

WORKSHEETS = Path(__file__).resolve().parents[1] / "worksheets"
DEMO = WORKSHEETS / "demo.ipynb"
REVIEWER = "Dr Lab Test"
LOAD_TIMEOUT_MS = 90_000    # JupyterLab's bundle + kernel start on 2 busy cores
RUN_TIMEOUT_MS = 90_000     # all cells, including the first plotly figure
STEP_TIMEOUT_MS = 20_000    # one click -> kernel -> redrawn widgets
VIEWPORT = {"width": 1400, "height": 1600}  # tall enough for header, chart and step 1

#: True once the notebook panel is the current widget with a connected, idle kernel
#: (JupyterLab 4 ``ISessionContext`` / ``Kernel.IKernelConnection`` properties).
KERNEL_IDLE_JS = """() => {
  const app = window.jupyterapp;
  const panel = app && app.shell && app.shell.currentWidget;
  const kernel = panel && panel.sessionContext && panel.sessionContext.session
                 && panel.sessionContext.session.kernel;
  return !!(kernel && kernel.connectionStatus === 'connected' && kernel.status === 'idle'
            && panel.context && panel.context.isReady);
}"""

RUN_ALL_JS = """async () => {
  const commands = window.jupyterapp.commands;
  await commands.execute('notebook:clear-all-cell-outputs');
  commands.execute('notebook:run-all-cells');
}"""


@pytest.fixture
def lab(tmp_path):
    """JupyterLab serving a copy of the demo notebook; autosaves go to tmp_path/autosave."""
    skip_or_fail_without(missing_lab_tools())
    root, autosave = tmp_path / "root", tmp_path / "autosave"
    root.mkdir()
    autosave.mkdir()
    shutil.copy(DEMO, root / DEMO.name)
    with lab_server(root, tmp_path / "jupyter", tmp_path / "lab.log",
                    env={"PFTWORK_AUTOSAVE_DIR": str(autosave)}) as server:
        yield server, autosave


def _wait_for_autosave(folder: Path, step: str, timeout: float = 10.0):
    """The kernel's autosave once ``step`` is recorded as accepted (saved after the redraw)."""
    deadline = time.monotonic() + timeout
    while True:
        files = list(folder.glob(f"*{AUTOSAVE_SUFFIX}"))
        if files:
            record = load_record(files[0])
            if record.step(step).decision.status == "accepted" or time.monotonic() > deadline:
                return record
        elif time.monotonic() > deadline:
            raise AssertionError(f"no autosave appeared in {folder}")
        time.sleep(0.2)


def _open_and_run_all(page, server) -> float:
    """Open the copied demo, wait for an idle kernel, clear and run all cells; seconds to idle.

    The outputs committed with the notebook are cleared first, so that everything checked
    afterwards was produced by this run.
    """
    started = time.monotonic()
    page.goto(server.page(f"lab/tree/{DEMO.name}"), timeout=LOAD_TIMEOUT_MS)
    page.wait_for_function(KERNEL_IDLE_JS, timeout=LOAD_TIMEOUT_MS, polling=250)
    loaded = time.monotonic() - started
    page.evaluate(RUN_ALL_JS)
    return loaded


def _accept_first_step(page, worksheet) -> None:
    """Type the reviewer's name, accept step 1, wait for the redrawn chip and progress."""
    from playwright.sync_api import expect

    worksheet.locator(".pft-reviewer input").fill(REVIEWER)
    panel = worksheet.locator(f".pft-step-{STEP_IDS[0]}")
    panel.locator(".pft-accept").click()
    expect(panel.locator(".pft-chip-accepted")).to_be_visible(timeout=STEP_TIMEOUT_MS)
    expect(worksheet.locator(".pft-progress-label")).to_have_text(
        f"1 of {len(STEP_IDS)} steps reviewed", timeout=STEP_TIMEOUT_MS)
    expect(panel.locator(".pft-decision")).to_contain_text(f"Accepted by {REVIEWER}")
    expect(panel.locator(".pft-error")).to_have_text("")


def test_demo_worksheet_runs_in_jupyterlab(lab, tmp_path):
    """Open the demo in JupyterLab, run all cells, review the first step in chromium."""
    from playwright.sync_api import expect, sync_playwright

    server, autosave = lab
    shot = tmp_path / "lab-demo-worksheet.png"
    repo_files_before = sorted(p.name for p in WORKSHEETS.iterdir())
    case_path = pftwork.data_path()
    expected_pattern = interpret(pftwork.load_case(case_path)).summary["pattern"]
    case_id = json.loads(case_path.read_text(encoding="utf-8"))["subject"]["id"]
    assert case_id == "demo-copd-03"
    page_errors: list[str] = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport=VIEWPORT)
            page.on("pageerror", lambda exc: page_errors.append(str(exc)))
            loaded = _open_and_run_all(page, server)
            t0 = time.monotonic()

            worksheet = page.locator(".jp-OutputArea-output .pft-worksheet")
            expect(worksheet).to_have_count(1, timeout=RUN_TIMEOUT_MS)
            expect(worksheet.locator(".pft-header h2")).to_contain_text(
                case_id, timeout=RUN_TIMEOUT_MS)
            # The printed draft (cell 2) shows what the library computes for the same case.
            expect(page.locator('[data-mime-type="application/vnd.jupyter.stdout"]').filter(
                has_text="pattern:")).to_contain_text(f"pattern: {expected_pattern}")
            expect(worksheet.locator(".pft-cautions")).to_contain_text(
                "not a certified medical device")
            chart = worksheet.locator(".pft-zplot .js-plotly-plot svg.main-svg").first
            expect(chart).to_be_visible(timeout=RUN_TIMEOUT_MS)
            # plotly.js draws one <g class="trace"> group per trace; an empty chart has none.
            assert worksheet.locator(".pft-zplot g.trace").count() >= 1
            # Evidence tables for what the demo case measured (spirometry, volumes, DLCO) and
            # the quality grades of the validity step.
            for step, text in (("validity", "Grade"), ("airflow", "FEV1"), ("volumes", "TLC"),
                               ("gas_transfer", "DLCO")):
                table = worksheet.locator(f".pft-step-{step} table.pft-evidence").first
                expect(table).to_be_visible()
                expect(table).to_contain_text(text)
            expect(worksheet.locator(".pft-step-airflow table.pft-evidence").first
                   ).to_contain_text("LLN")
            expect(worksheet.locator(".pft-progress-label")).to_have_text(
                f"0 of {len(STEP_IDS)} steps reviewed")
            expect(page.locator(".jp-Notebook")).not_to_contain_text("Error displaying widget")
            expect(page.locator('[data-mime-type="application/vnd.jupyter.stderr"]')
                   ).to_have_count(0)
            ran = time.monotonic() - t0

            t0 = time.monotonic()
            _accept_first_step(page, worksheet)
            clicked = time.monotonic() - t0

            # No viewport resize before the screenshot: a window resize collapses the
            # overview chart to zero height in JupyterLab (reported to the lead).
            worksheet.evaluate("el => el.scrollIntoView({block: 'start'})")
            box = worksheet.locator(".pft-zplot").bounding_box()
            assert box is not None and box["height"] >= 200, f"z-score chart collapsed: {box}"
            page.screenshot(path=str(shot))
        finally:
            browser.close()

    print(f"screenshot: {shot}")
    print(f"timing: lab+kernel idle {loaded:.1f} s, run all {ran:.1f} s, accept {clicked:.1f} s")
    assert not page_errors, f"uncaught errors in the page: {page_errors}"
    record = _wait_for_autosave(autosave, STEP_IDS[0])
    assert record.case_id == case_id
    assert record.step(STEP_IDS[0]).decision.status == "accepted"
    assert record.step(STEP_IDS[0]).decision.reviewer == REVIEWER
    assert record.progress == (1, len(STEP_IDS))
    # The copy was used: nothing new appeared beside the committed worksheets.
    assert repo_files_before == sorted(p.name for p in WORKSHEETS.iterdir())


def test_demo_run_again_in_same_kernel_resumes(lab):
    """Run All a second time in the same kernel: no error, the worksheet resumes at 1 of 8.

    The demo notebook promises that running it again resumes where the reviewer stopped.
    """
    from playwright.sync_api import expect, sync_playwright

    server, _ = lab
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport=VIEWPORT)
            _open_and_run_all(page, server)
            worksheet = page.locator(".jp-OutputArea-output .pft-worksheet")
            expect(worksheet.locator(".pft-progress-label")).to_have_text(
                f"0 of {len(STEP_IDS)} steps reviewed", timeout=RUN_TIMEOUT_MS)
            _accept_first_step(page, worksheet)

            page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")
            stderr = page.locator('[data-mime-type="application/vnd.jupyter.stderr"]')
            resumed = worksheet.locator(".pft-autosave").filter(has_text="(resumed)")
            # Whichever comes first: the re-drawn worksheet or an error output.
            page.locator('.jp-OutputArea-output .pft-autosave:has-text("(resumed)"), '
                         '[data-mime-type="application/vnd.jupyter.stderr"]'
                         ).first.wait_for(timeout=RUN_TIMEOUT_MS)
            assert stderr.count() == 0, f"error output: {stderr.first.inner_text()[:600]}"
            expect(resumed).to_have_count(1)
            expect(worksheet.locator(".pft-progress-label")).to_have_text(
                f"1 of {len(STEP_IDS)} steps reviewed")
        finally:
            browser.close()
