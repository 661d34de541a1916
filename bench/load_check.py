"""Load check: several browser sessions open the app at once; all must finish the opening study.

    python bench/load_check.py                  # 5 sessions, at most 600 s
    python bench/load_check.py --sessions 3 --timeout 300

Starts the app with the README's command on a free port of 127.0.0.1 (never any other
address), opens the sessions in Debian's chromium (/usr/bin/chromium, one browser context
each, all at the same time), and waits until every page has drawn its opening study. The
server's memory (resident set of the streamlit process) is sampled meanwhile. The figures are
printed and written into bench/RESULTS.md, between the load-check markers of the notes
section (which `python bench/run.py` keeps when it rewrites the file). The number of sessions
and the waiting time are bounded; the check stops by itself.
"""

from __future__ import annotations

import argparse
import asyncio
import datetime as _dt
import os
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
import urllib.request
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
CHROMIUM = "/usr/bin/chromium"
START = "<!-- load check: written by bench/load_check.py -->"
END = "<!-- end of load check -->"
NOTES_END = "<!-- end of notes -->"
MAX_SESSIONS = 10
# The server may use at most this much memory with the default five sessions.
MEMORY_GOAL_MB = 2500


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _rss_mb(pid: int) -> float:
    """Resident memory of a process and its children, in MB (Linux /proc)."""
    total = 0
    pids = [pid]
    children = Path(f"/proc/{pid}/task/{pid}/children")
    if children.exists():
        pids += [int(p) for p in children.read_text().split()]
    for one in pids:
        try:
            for line in Path(f"/proc/{one}/status").read_text().splitlines():
                if line.startswith("VmRSS:"):
                    total += int(line.split()[1])
        except OSError:
            continue
    return total / 1024


class _Sampler(threading.Thread):
    """Samples the server's memory every half second until stopped."""

    def __init__(self, pid: int):
        super().__init__(daemon=True)
        self.pid = pid
        self.peak = 0.0
        self.first = None
        self._stop = threading.Event()

    def run(self) -> None:
        while not self._stop.is_set():
            value = _rss_mb(self.pid)
            self.first = value if self.first is None else self.first
            self.peak = max(self.peak, value)
            self._stop.wait(0.5)

    def stop(self) -> None:
        self._stop.set()


def _start_app(port: int, log: Path) -> subprocess.Popen:
    streamlit = Path(sys.executable).with_name("streamlit")
    command = [str(streamlit)] if streamlit.exists() else [sys.executable, "-m", "streamlit"]
    with log.open("w") as out:
        server = subprocess.Popen(command + ["run", "app/scout.py", "--server.port", str(port),
                                             "--server.address", "127.0.0.1",
                                             "--server.headless", "true"],
                                  cwd=ROOT, stdout=out, stderr=subprocess.STDOUT)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health",
                                        timeout=2) as answer:
                if answer.read().strip() == b"ok":
                    return server
        except OSError:
            time.sleep(0.5)
    server.kill()
    raise SystemExit(f"the app did not start:\n{log.read_text()[-2000:]}")


async def _one_session(browser, url: str, timeout_s: float, outside: list) -> float:
    context = await browser.new_context(viewport={"width": 1280, "height": 900})
    page = await context.new_page()
    page.on("request", lambda r: outside.append(r.url)
            if not r.url.startswith(("http://127.0.0.1", "ws://127.0.0.1", "data:", "blob:"))
            else None)
    started = time.monotonic()
    await page.goto(url)
    await page.get_by_text("Add a step").wait_for(timeout=timeout_s * 1000)
    quiet = "() => document.querySelectorAll('[data-stale=\"true\"]').length === 0"
    await page.wait_for_function(quiet, timeout=timeout_s * 1000)
    elapsed = time.monotonic() - started
    await context.close()
    return elapsed


async def _sessions(url: str, count: int, timeout_s: float, outside: list) -> list:
    from playwright.async_api import async_playwright

    async with async_playwright() as playwright:
        browser = await playwright.chromium.launch(
            executable_path=CHROMIUM, headless=True,
            args=["--no-sandbox", "--disable-gpu", "--disable-background-networking"])
        try:
            return await asyncio.gather(*(_one_session(browser, url, timeout_s, outside)
                                          for _ in range(count)), return_exceptions=True)
        finally:
            await browser.close()


def _record(text: str, results: Path) -> None:
    block = f"{START}\n{text.strip()}\n{END}"
    current = results.read_text() if results.exists() else ""
    if START in current and END in current:
        before, rest = current.split(START, 1)
        updated = before + block + rest.split(END, 1)[1]
    elif NOTES_END in current:
        updated = current.replace(NOTES_END, block + "\n" + NOTES_END, 1)
    else:
        updated = current + "\n" + block + "\n"
    results.write_text(updated)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Several browser sessions at once on the "
                                     "opening study, on 127.0.0.1 only.")
    parser.add_argument("--sessions", type=int, default=5)
    parser.add_argument("--timeout", type=float, default=600.0,
                        help="seconds each session may take (default %(default)s)")
    parser.add_argument("--out", default=str(HERE / "RESULTS.md"))
    args = parser.parse_args(argv)
    if not 1 <= args.sessions <= MAX_SESSIONS:
        parser.error(f"--sessions must be between 1 and {MAX_SESSIONS}")
    if not shutil.which(CHROMIUM) and not os.path.exists(CHROMIUM):
        parser.error(f"needs Debian's chromium at {CHROMIUM} (apt-get install chromium)")
    port = _free_port()
    with tempfile.TemporaryDirectory() as scratch:
        server = _start_app(port, Path(scratch) / "streamlit.log")
        sampler = _Sampler(server.pid)
        sampler.start()
        outside: list = []
        started = time.monotonic()
        try:
            outcomes = asyncio.run(_sessions(f"http://127.0.0.1:{port}", args.sessions,
                                             args.timeout, outside))
        finally:
            wall = time.monotonic() - started
            sampler.stop()
            server.terminate()
            server.wait(timeout=30)
    finished = [o for o in outcomes if isinstance(o, float)]
    failed = [repr(o)[:200] for o in outcomes if not isinstance(o, float)]
    load = os.getloadavg()[0]
    lines = [
        f"- Load check ({_dt.date.today().isoformat()}, {os.cpu_count()} cores, load "
        f"{load:.1f} after): {args.sessions} browser sessions opened the app at once; "
        f"{len(finished)} finished the opening study"
        + (f", {len(failed)} did not ({'; '.join(failed)})" if failed else "")
        + f". Slowest {max(finished, default=float('nan')):.0f} s, fastest "
        f"{min(finished, default=float('nan')):.0f} s, all done in {wall:.0f} s.",
        f"- Server memory: {sampler.first or 0:.0f} MB at start, peak {sampler.peak:.0f} MB "
        f"(goal: at most {MEMORY_GOAL_MB} MB with five sessions). Requests to other hosts "
        f"than 127.0.0.1: {len(outside)}.",
    ]
    text = "\n".join(lines)
    print(text)
    _record(text, Path(args.out))
    ok = not failed and not outside and sampler.peak <= MEMORY_GOAL_MB
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
