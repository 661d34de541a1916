"""The app in a real browser: start it with the README's command, upload a table through the
file input, add and run a separator step, and see its equation.

Drives Debian's chromium (/usr/bin/chromium) through Playwright; no browser is downloaded.
Without chromium the test skips, unless SCOUT_REQUIRE_BROWSER=1 (set by CI), when it fails.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
TABLE = ROOT / "sample_tables" / "lattice_polygons.csv"
# Long enough for a loaded two-core machine; the page reports progress meanwhile.
STEP_TIMEOUT_MS = 600_000


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _streamlit_command() -> list[str]:
    """`streamlit`, as the README writes it: the one installed beside this Python if any."""
    beside = Path(sys.executable).with_name("streamlit")
    if beside.exists():
        return [str(beside)]
    found = shutil.which("streamlit")
    return [found] if found else [sys.executable, "-m", "streamlit"]


def _wait_for_health(port: int, server: subprocess.Popen, log: Path) -> None:
    url = f"http://127.0.0.1:{port}/_stcore/health"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        if server.poll() is not None:
            pytest.fail(f"the app stopped on start:\n{log.read_text()[-3000:]}")
        try:
            with urllib.request.urlopen(url, timeout=2) as response:
                if response.read().strip() == b"ok":
                    return
        except OSError:
            time.sleep(0.5)
    pytest.fail(f"the app did not answer on {url} within 120 s:\n{log.read_text()[-3000:]}")


@pytest.fixture
def chromium():
    """Debian's chromium; skip without it, unless CI requires the browser test to run."""
    if not CHROMIUM.exists():
        if os.environ.get("SCOUT_REQUIRE_BROWSER") == "1":
            pytest.fail("SCOUT_REQUIRE_BROWSER=1 but /usr/bin/chromium is missing; install "
                        "Debian's chromium (apt-get install chromium).")
        pytest.skip("needs Debian's chromium at /usr/bin/chromium (apt-get install "
                    "chromium); set SCOUT_REQUIRE_BROWSER=1 to make this a failure")
    return CHROMIUM


@pytest.fixture
def app_url(chromium, tmp_path):
    """The app started with the README's command on a free port of 127.0.0.1."""
    port = _free_port()
    log = tmp_path / "streamlit.log"
    with log.open("w") as out:
        server = subprocess.Popen(
            _streamlit_command() + ["run", "app/scout.py", "--server.port", str(port),
                                    "--server.headless", "true"],
            cwd=ROOT, stdout=out, stderr=subprocess.STDOUT)
    try:
        _wait_for_health(port, server, log)
        yield f"http://127.0.0.1:{port}"
    finally:
        server.terminate()
        try:
            server.wait(timeout=20)
        except subprocess.TimeoutExpired:
            server.kill()
            server.wait(timeout=20)


def _choose(where, label: str, option: str) -> None:
    """Pick the option starting with ``option`` in the selectbox labelled ``label`` (on the
    page, or inside one part of it)."""
    page = getattr(where, "page", where)
    box = where.get_by_role("combobox", name=label, exact=True).first
    box.click()
    page.keyboard.type(option)
    page.get_by_role("option").filter(has_text=option).first.click()


def _settle(page) -> None:
    """Wait until the script run the last action started has finished: streamlit marks the
    elements of the previous run stale until the new run has drawn them again."""
    page.wait_for_timeout(1000)
    quiet = "() => document.querySelectorAll('[data-stale=\"true\"]').length === 0"
    for _ in range(2):
        page.wait_for_function(quiet, timeout=STEP_TIMEOUT_MS)
        page.wait_for_timeout(1000)


@pytest.mark.browser
def test_upload_a_table_and_run_a_separator_in_chromium(chromium, app_url, tmp_path):
    from playwright.sync_api import expect, sync_playwright

    upload = tmp_path / "polygons.csv"
    upload.write_bytes(TABLE.read_bytes())
    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=str(chromium), headless=True,
                                             args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": 1440, "height": 1000})
        # The app works offline: no request may leave 127.0.0.1 (an icon or a font fetched
        # from another host would fail without a network, and tell that host of the use).
        elsewhere: list[str] = []
        page.on("request", lambda r: elsewhere.append(r.url) if not r.url.startswith(
            ("http://127.0.0.1", "ws://127.0.0.1", "data:", "blob:", "about:")) else None)
        try:
            # Open on a small sample so that the opening study is quick.
            page.goto(f"{app_url}/?table=quadratic_fields.csv")
            expect(page.get_by_text("Add a step")).to_be_visible(timeout=STEP_TIMEOUT_MS)

            page.get_by_text("A file of mine").click()
            uploader = page.locator("[data-testid=stFileUploader]").filter(
                has_text="Your table")
            expect(uploader).to_have_count(1, timeout=60_000)
            uploader.locator("input[type=file]").set_input_files(str(upload))
            # The study on the page has results: the table waits for the word to open it.
            opener = page.get_by_role("button", name="Open polygons.csv")
            expect(opener).to_be_visible(timeout=STEP_TIMEOUT_MS)
            opener.click()
            expect(page.get_by_text("polygons.csv (uploaded)")).to_be_visible(
                timeout=STEP_TIMEOUT_MS)
            expect(page.get_by_text("3\u2009000 objects")).to_be_visible()
            _settle(page)

            _choose(page, "Target", "is_reflexive")
            _settle(page)
            _choose(page, "Kind of step", "Separator")
            page.get_by_role("button", name="Add step").click()
            _settle(page)
            # The new step is the last one on the page; it waits for its run action.
            step = page.locator("[class*='st-key-step-']").filter(
                has=page.get_by_role("heading", name="3. Separator"))
            expect(step).to_have_count(1, timeout=60_000)
            step.get_by_role("button", name="Run this step").click()

            # The equation as text to copy: a sum of the table's columns against a constant.
            code = step.locator("[data-testid=stCode]")
            equation = code.filter(has_text="<=").or_(code.filter(has_text=">="))
            expect(equation.first).to_be_visible(timeout=STEP_TIMEOUT_MS)
            text = equation.first.inner_text()
            assert any(name in text for name in ("interior_points", "boundary_points",
                                                 "area", "lattice_width", "vertices")), text
            # ... and as mathematics (KaTeX), with the verdict in words
            expect(step.locator(".katex").first).to_be_visible()
            expect(step.get_by_role("heading", name="Beats chance:")).to_be_visible()
            _settle(page)

            # A picture of the step, kept with the test's other output (the README's picture
            # is made by docs/make_screenshot.py, on purpose only).
            page.set_viewport_size({"width": 1440, "height": 1200})
            step.get_by_role("heading", name="3. Separator").evaluate(
                "e => e.scrollIntoView({block: 'start'})")
            page.wait_for_timeout(1500)
            shot = tmp_path / "separator.png"
            page.screenshot(path=str(shot))
            assert shot.stat().st_size > 10_000
            assert not elsewhere, f"the page asked other hosts: {elsewhere[:5]}"
        except Exception:
            page.screenshot(path=str(tmp_path / "failure.png"))
            raise
        finally:
            browser.close()


def _outside(url: str) -> bool:
    """A request that would leave this machine (the page) or the report's own file."""
    return not url.startswith(("http://127.0.0.1", "ws://127.0.0.1", "data:", "blob:",
                               "about:", "file:"))


@pytest.mark.browser
def test_stop_a_running_step_and_open_the_report_offline_in_chromium(chromium, app_url,
                                                                     tmp_path):
    """A click on a running step's stop action during its run: the step says it stopped and
    can run again, the other steps keep their results. Then the HTML report downloaded from
    the page opens in chromium asking no host at all."""
    from playwright.sync_api import expect, sync_playwright

    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=str(chromium), headless=True,
                                             args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": 1440, "height": 1000},
                                accept_downloads=True)
        elsewhere: list[str] = []
        page.on("request", lambda r: elsewhere.append(r.url) if _outside(r.url) else None)
        try:
            page.goto(f"{app_url}/?table=quadratic_fields.csv")
            expect(page.get_by_text("Add a step")).to_be_visible(timeout=STEP_TIMEOUT_MS)
            _settle(page)
            _choose(page, "Kind of step", "Separator")
            page.get_by_role("button", name="Add step").click()
            _settle(page)
            step = page.locator("[class*='st-key-step-']").filter(
                has=page.get_by_role("heading", name="3. Separator"))
            expect(step).to_have_count(1, timeout=60_000)
            # A kernel machine refits for every split and permutation: fifty splits make a
            # run of many seconds, long past the click even on a loaded machine.
            _choose(step, "Separator", "support vector machine, RBF")
            _settle(page)
            splits = step.get_by_label("Random splits", exact=True)
            if not splits.is_visible():
                # the model's change ran the page again, which folded the settings
                step.get_by_text("Settings", exact=True).first.click()
                _settle(page)
            splits.fill("50")
            splits.press("Enter")
            _settle(page)
            step.get_by_role("button", name="Run this step").click()
            stop = step.get_by_role("button", name="Stop this step")
            expect(stop).to_be_visible(timeout=60_000)
            stop.click()
            expect(step.get_by_text("Stopped by request during")).to_be_visible(
                timeout=120_000)
            expect(step.get_by_role("button", name="Run this step")).to_be_visible()
            _settle(page)
            # The opening steps keep their results: no run action, their figures drawn.
            for title in ("1. Overview", "2. Projection"):
                earlier = page.locator("[class*='st-key-step-']").filter(
                    has=page.get_by_role("heading", name=title))
                expect(earlier.get_by_role("button", name="Run this step")).to_have_count(0)
            expect(page.locator("[class*='st-key-step-']").filter(
                has=page.get_by_role("heading", name="2. Projection")).locator(
                    ".js-plotly-plot").first).to_be_visible()

            with page.expect_download(timeout=STEP_TIMEOUT_MS) as waiting:
                page.get_by_role("button", name="Download the report (HTML)").click()
            report = tmp_path / "report.html"
            waiting.value.save_as(str(report))
            assert not elsewhere, f"the page asked other hosts: {elsewhere[:5]}"

            # The report as a collaborator opens it: a file, no server behind it.
            reader = browser.new_page(viewport={"width": 1200, "height": 900})
            seen: list[str] = []
            reader.on("request", lambda r: seen.append(r.url))
            reader.goto(report.as_uri())
            expect(reader.locator(".js-plotly-plot").first).to_be_visible(timeout=60_000)
            expect(reader.get_by_text("not a proof").first).to_be_visible()
            reader.wait_for_timeout(2000)
            assert report.as_uri() in seen, seen[:5]  # the listener hears the page itself
            asked = [url for url in seen if _outside(url)]
            assert not asked, f"the report asked other hosts: {asked[:5]}"
        except Exception:
            page.screenshot(path=str(tmp_path / "failure.png"))
            raise
        finally:
            browser.close()
