"""Make the README's picture: the opening study's separator step, in a real browser.

    python docs/make_screenshot.py                 # writes docs/screenshot.png
    python docs/make_screenshot.py --out shot.png  # somewhere else

Starts the app with the README's command (``streamlit run app/scout.py``) on a free port of
127.0.0.1, opens it in Debian's chromium (/usr/bin/chromium, driven by Playwright; no browser
is downloaded), waits until the opening study on the lattice polygons has drawn its
separator's equation, and photographs that step. It prints how long the first page took to
fill in. Run it by hand when the page's look changes; the tests never write this file.
"""

from __future__ import annotations

import argparse
import shutil
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
# The opening study's third step, and how long it may take on a busy two-core machine.
STEP_HEADING = "3. Separator"
WAIT_MS = 900_000


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _start_app(port: int, log) -> subprocess.Popen:
    beside = Path(sys.executable).with_name("streamlit")
    streamlit = [str(beside)] if beside.exists() else [sys.executable, "-m", "streamlit"]
    return subprocess.Popen(
        streamlit + ["run", "app/scout.py", "--server.address", "127.0.0.1",
                     "--server.port", str(port), "--server.headless", "true"],
        cwd=ROOT, stdout=log, stderr=subprocess.STDOUT)


def _wait_until_up(port: int, server: subprocess.Popen) -> None:
    url = f"http://127.0.0.1:{port}/_stcore/health"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise SystemExit("the app stopped on start; see its log above.")
        try:
            with urllib.request.urlopen(url, timeout=2) as response:
                if response.read().strip() == b"ok":
                    return
        except OSError:
            time.sleep(0.5)
    raise SystemExit(f"the app did not answer on {url} within 120 s.")


def _photograph(url: str, out: Path) -> float:
    """Open the page, wait for the separator's equation, photograph the step; seconds taken."""
    from playwright.sync_api import expect, sync_playwright

    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=str(CHROMIUM), headless=True,
                                             args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1440, "height": 1200})
            started = time.monotonic()
            page.goto(url)
            step = page.locator("[class*='st-key-step-']").filter(
                has=page.get_by_role("heading", name=STEP_HEADING))
            code = step.locator("[data-testid=stCode]")
            equation = code.filter(has_text="<=").or_(code.filter(has_text=">="))
            expect(equation.first).to_be_visible(timeout=WAIT_MS)
            expect(step.locator(".katex").first).to_be_visible(timeout=60_000)
            quiet = "() => document.querySelectorAll('[data-stale=\"true\"]').length === 0"
            page.wait_for_function(quiet, timeout=WAIT_MS)
            seconds = time.monotonic() - started
            step.get_by_role("heading", name=STEP_HEADING).evaluate(
                "e => e.scrollIntoView({block: 'start'})")
            page.wait_for_timeout(1500)
            page.screenshot(path=str(out))
            return seconds
        finally:
            browser.close()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Make the README's picture of the app.")
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "screenshot.png")
    args = parser.parse_args(argv)
    if not CHROMIUM.exists():
        print("needs Debian's chromium at /usr/bin/chromium (apt-get install chromium).",
              file=sys.stderr)
        return 2
    port = _free_port()
    with tempfile.TemporaryDirectory(prefix="scout-screenshot-") as scratch:
        log_path = Path(scratch) / "streamlit.log"
        shot = Path(scratch) / "screenshot.png"
        with log_path.open("w") as log:
            server = _start_app(port, log)
        try:
            _wait_until_up(port, server)
            seconds = _photograph(f"http://127.0.0.1:{port}", shot)
        except BaseException:
            print(log_path.read_text()[-3000:], file=sys.stderr)
            raise
        finally:
            server.terminate()
            try:
                server.wait(timeout=20)
            except subprocess.TimeoutExpired:
                server.kill()
        args.out.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(shot, args.out)
    print(f"wrote {args.out}; the first page filled in after {seconds:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
