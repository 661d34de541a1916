"""The app in a real browser: start it with the README's command, upload a table through the
file input, add and run a separator step, and see its equation; stop a running step and open
the report offline; and read what every kind of step says it computed, on a class target and
on a number target.

Drives Debian's chromium (/usr/bin/chromium) through Playwright; no browser is downloaded.
Without chromium the test skips, unless SCOUT_REQUIRE_BROWSER=1 (set by CI), when it fails.
"""

from __future__ import annotations

import csv
import json
import os
import re
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


def _choose(where, label: str, option: str, *, exact: bool = False) -> None:
    """Pick the option starting with ``option`` in the selectbox labelled ``label`` (on the
    page, or inside one part of it); with ``exact``, the option that is ``option`` itself."""
    page = getattr(where, "page", where)
    box = where.get_by_role("combobox", name=label, exact=True).first
    box.click()
    page.keyboard.type(option)
    if exact:
        page.get_by_role("option", name=option, exact=True).click()
    else:
        page.get_by_role("option").filter(has_text=option).first.click()


def _settle(page) -> None:
    """Wait until the script run the last action started has finished: streamlit marks the
    elements of the previous run stale until the new run has drawn them again."""
    page.wait_for_timeout(1000)
    quiet = "() => document.querySelectorAll('[data-stale=\"true\"]').length === 0"
    for _ in range(2):
        page.wait_for_function(quiet, timeout=STEP_TIMEOUT_MS)
        page.wait_for_timeout(1000)


def _add_step(page, kind_title: str, heading: str):
    """Add a step of the kind shown as ``kind_title`` and return its box, headed ``heading``."""
    from playwright.sync_api import expect

    _choose(page, "Kind of step", kind_title)
    page.get_by_role("button", name="Add step").click()
    _settle(page)
    step = page.locator("[class*='st-key-step-']").filter(
        has=page.get_by_role("heading", name=heading))
    expect(step).to_have_count(1, timeout=60_000)
    return step


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
            # The new step is the last one on the page; it waits for its run action.
            step = _add_step(page, "Separator", "3. Separator")
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
            step = _add_step(page, "Separator", "3. Separator")
            # A kernel machine refits for every split and permutation: fifty splits make a
            # run of many seconds, long past the click even on a loaded machine.
            _choose(step, "Separator", "support vector machine with an RBF")
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


# ----------------------------------------------------------------------------------------
# Every step's labels, on a class target and on a number target

LABELS_TABLE = ROOT / "sample_tables" / "quadratic_fields.csv"
# sample_tables/README.md: class_number_one is a flag (h(D) = 1 or not); class_number is
# h(D) itself, a whole number with 129 distinct values in the table's file, more than a
# learning curve may read as classes (analysis/reading.py): a regression target.
TARGETS = {"class": "class_number_one", "number": "class_number"}
KINDS = ("overview", "projection", "clustering", "separator", "relations", "outliers")
# The steps that use the study's target (the projection colours by it, the clustering is
# compared with it, the separator predicts it, the objects to look at are judged by it).
FOLLOWING = ("projection", "clustering", "separator", "outliers")
OUTLIERS_LISTED = 50  # the objects-to-look-at step's default length (analysis/outliers.py)

# What each step's box says, for either target kind ("both") or for one: "says" are words
# some visible text of the box holds, "never" words none of them holds, "metrics" the
# labels of headline numbers shown and "no metrics" of those not shown. {target}, {rows},
# {columns} and {searched} are filled in from the table's file. The claims are those of
# tests/app/test_labels.py, read here as the page shows them.
LABELS = {
    "overview": {
        # it counts the objects and columns it read, and names the id column
        "both": {"says": ("{rows} objects, {columns} columns, named by field",)},
    },
    "projection": {
        # PCA is drawn on every object; PCA does not separate the target, so its caption
        # does not claim to (the colouring is chosen under the picture and read there)
        "both": {"says": ("PCA of the feature columns", "{rows} objects drawn",
                          "PCA of {rows} rows"),
                 "never": ("separating",)},
    },
    "clustering": {
        # it says what it was compared with, and shows that agreement
        "both": {"says": ("clusters chosen by a sweep, compared with {target}",
                          "on {rows} objects."),
                 "metrics": ("Clusters", "Agreement with {target}")},
    },
    "separator": {
        # a flag is classified: caption and verdict name the classifier fitted, and the
        # scores are a classifier's
        "class": {"says": ("predict {target} with a linear support vector machine",
                           "Linear support vector machine, trained on "),
                  "never": ("regression",),
                  "metrics": ("Accuracy on test rows", "Balanced accuracy",
                              "Matthews correlation"),
                  "no metrics": ("R² on test rows", "Mean absolute error")},
        # a number is regressed on: a linear regression (ridge), never a support vector
        # machine, and the scores are a regression's
        "number": {"says": ("predict {target} with a linear regression (ridge)",
                            "Linear regression (ridge), trained on "),
                   "never": ("support vector machine",),
                   "metrics": ("R² on test rows", "Mean absolute error"),
                   "no metrics": ("Accuracy on test rows", "Matthews correlation")},
    },
    "relations": {
        # it counts the columns it searched (every integer and flag column) and the objects
        "both": {"says": ("Searched {searched} columns over {rows} objects.",)},
    },
    "outliers": {
        # it counts and ranks the objects it lists, and says how many it was asked for
        "both": {"says": ("objects to look at, of {rows}, ranked by ",
                          f"the {OUTLIERS_LISTED} objects that stand out most")},
    },
}

# The visible texts of a step's box, outside its settings (whose choices name the options
# offered, not what was computed), and its pictures' colour titles.
_READ_BOX = """box => {
  const shown = e => e.checkVisibility() && !(e.closest('details')
      && e.closest('details').querySelector('summary').innerText.includes('Settings'));
  const all = selector => [...box.querySelectorAll(selector)].filter(shown);
  const texts = selector => all(selector).map(e => e.innerText.trim());
  const words = (e, selector) => [...e.querySelectorAll(selector)]
      .map(t => t.textContent.trim());
  return {
    texts: texts('[data-testid=stMarkdownContainer]'),
    captions: texts('[data-testid=stCaptionContainer]'),
    metrics: all('[data-testid=stMetric]').map(m => [
      m.querySelector('[data-testid=stMetricLabel]').innerText.trim(),
      m.querySelector('[data-testid=stMetricValue]').innerText.trim()]),
    choices: all('[data-testid=stSelectbox]').map(s => [
      s.querySelector('label').innerText.trim(), s.querySelector('input').value,
      s.textContent]),
    plots: all('.js-plotly-plot').map(p => ({title: words(p, '.gtitle').join(' '),
      legend: words(p, '.legendtitletext'), colourbar: words(p, '.cbtitle')})),
  };
}"""


def _table_facts(path: Path) -> dict:
    """Counts read from the table's file itself: rows, columns, the columns (the id column
    ``field`` aside) whose every cell is an integer or a flag, and the number target's
    distinct values."""
    with path.open(newline="") as handle:
        rows = list(csv.DictReader(handle))
    names = list(rows[0])
    exact = [n for n in names[1:]
             if all(re.fullmatch(r"-?\d+|true|false", row[n]) for row in rows)]
    return {"rows": len(rows), "columns": len(names), "searched": len(exact),
            "values": len({row[TARGETS["number"]] for row in rows})}


def _run_and_wait(page, button) -> None:
    """Click a run action and wait until every step has its result on the page."""
    button.click()
    page.wait_for_timeout(1000)
    # a step's run action gives way to its stop action while it runs, then to its result
    for name in ("Run this step", "Stop this step"):
        page.get_by_role("button", name=name).first.wait_for(state="detached",
                                                             timeout=STEP_TIMEOUT_MS)
    _settle(page)


def _read_steps(page, record: Path) -> dict:
    """Each step's box, found by its heading "N. <kind title>", read as the page shows it
    (and kept in ``record``, to see what the page said when a check fails)."""
    from analysis.steps import KIND_TITLES

    # the study lists its steps in order, each headed by its number and its kind's title
    boxes = page.locator("[class*='st-key-step-']")
    assert boxes.count() == len(KINDS), boxes.count()
    found = {}
    for number, kind in enumerate(KINDS, start=1):
        heading = page.get_by_role("heading", name=f"{number}. {KIND_TITLES[kind]}",
                                   exact=True)
        box = boxes.filter(has=heading)
        assert box.count() == 1, f"no single step headed {number}. {KIND_TITLES[kind]}"
        found[kind] = box.evaluate(_READ_BOX)
    record.write_text(json.dumps(found, indent=1, ensure_ascii=False))
    return found


def _check_labels(found: dict, target_kind: str, facts: dict) -> None:
    """The words of LABELS, then the numbers a box states twice, held against each other."""
    target = TARGETS[target_kind]
    fill = dict(facts, target=target)
    for kind, claims in LABELS.items():
        box = found[kind]
        texts = box["texts"] + box["captions"]
        metrics = [label for label, _ in box["metrics"]]
        for part in ("both", target_kind):
            claim = claims.get(part, {})
            for words in claim.get("says", ()):
                words = words.format(**fill)
                assert any(words in t for t in texts), f"{kind}: no {words!r} in {texts}"
            for words in claim.get("never", ()):
                said = [t for t in texts if words in t]
                assert not said, f"{kind} says {words!r} with a {target_kind} target: {said}"
            for label in claim.get("metrics", ()):
                assert label.format(**fill) in metrics, f"{kind}: no {label!r} in {metrics}"
            for label in claim.get("no metrics", ()):
                assert label not in metrics, f"{kind}: {label!r} for a {target_kind} target"
    _check_projection(found["projection"], target_kind, target)
    _check_counts(found, target, facts["rows"])


def _check_projection(box: dict, target_kind: str, target: str) -> None:
    """Said to be coloured by the target, the picture is drawn in the target's colours (a
    legend for classes, a colour bar for a number, titled by the target); its features,
    as many as it says, leave the target out."""
    colour = dict((label, value) for label, value, _ in box["choices"]).get("Colour by")
    assert colour == f"target ({target})", box["choices"]
    scatter = next(p for p in box["plots"] if p["title"].startswith("PCA of "))
    drawn, other = ("legend", "colourbar") if target_kind == "class" else ("colourbar",
                                                                            "legend")
    assert scatter[drawn] == [target] and not any(scatter[other]), scatter
    stated = next(t for t in box["texts"] if " objects drawn · " in t)
    count = int(re.search(r"· (\d+) features?", stated).group(1))
    listed = next(t for t in box["texts"] if t.startswith("Features used: "))
    features = listed[len("Features used: "):].split(", ")
    assert len(features) == count and target not in features, (stated, listed)


def _check_counts(found: dict, target: str, rows: int) -> None:
    """Numbers a box states twice, or that must add up to the table's rows."""
    clustering = found["clustering"]
    chosen = next(re.search(r", k = (\d+) on ", t) for t in clustering["texts"]
                  if re.search(r", k = (\d+) on ", t))
    assert dict(clustering["metrics"])["Clusters"] == chosen.group(1), clustering["metrics"]
    # the separator trains on some objects and tests on the others: every object is used
    verdict = next(t for t in found["separator"]["captions"] if ", trained on " in t)
    split = re.search(r"trained on (\d+) objects, tested on (\d+) others", verdict)
    assert split and int(split.group(1)) + int(split.group(2)) == rows, verdict
    # the objects to look at are judged by a prediction of the target exactly when the
    # ranking names the separator among its measures
    outliers = found["outliers"]
    ranked = next(t for t in outliers["texts"] if " objects to look at, of " in t)
    listed = int(re.match(r"(\d+) objects? to look at", ranked).group(1))
    measures = ranked.split(", ranked by ", 1)[1].rstrip(".").split(", ")
    judged = f"including those whose {target} the other invariants predict worst"
    said = any(judged in t for t in outliers["captions"])
    assert said == ("separator" in measures), (ranked, outliers["captions"])
    assert 1 <= listed <= OUTLIERS_LISTED, ranked


@pytest.mark.browser
def test_every_step_says_what_it_computed_on_a_class_and_a_number_target_in_chromium(
        chromium, app_url, tmp_path):
    """A step of every kind on a flag target, then on a whole-number target: each box's
    heading, captions, figures' labels and picture say what was computed for that target."""
    from playwright.sync_api import expect, sync_playwright

    from analysis.reading import CURVE_MAX_VALUES
    from analysis.steps import KIND_TITLES

    facts = _table_facts(LABELS_TABLE)
    # so many values are read as a number by rule: the separator must regress on them
    assert facts["values"] > CURVE_MAX_VALUES, facts
    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=str(chromium), headless=True,
                                             args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": 1440, "height": 1000})
        elsewhere: list[str] = []
        page.on("request", lambda r: elsewhere.append(r.url) if _outside(r.url) else None)
        try:
            # the opening study of a sample: an overview and a projection
            page.goto(f"{app_url}/?table={LABELS_TABLE.name}")
            expect(page.get_by_text("Add a step")).to_be_visible(timeout=STEP_TIMEOUT_MS)
            _settle(page)
            _choose(page, "Target", TARGETS["class"], exact=True)
            _settle(page)
            for number, kind in enumerate(KINDS[2:], start=3):
                _add_step(page, KIND_TITLES[kind], f"{number}. {KIND_TITLES[kind]}")
            _run_and_wait(page, page.get_by_role("button", name="Run every step"))
            before = _read_steps(page, tmp_path / "labels-class.json")
            _check_labels(before, "class", facts)

            _choose(page, "Target", TARGETS["number"], exact=True)
            _settle(page)
            # the page says which steps follow the target before any of them runs again
            notice = page.locator("[class*='st-key-target-change-']")
            expect(notice).to_contain_text(f"The study's target is now {TARGETS['number']} "
                                           f"(it was {TARGETS['class']}). Nothing has run yet.")
            listed = ", ".join(f"{KINDS.index(k) + 1}. {KIND_TITLES[k]}" for k in FOLLOWING)
            expect(notice).to_contain_text(f"{len(FOLLOWING)} steps depend on the target and "
                                           f"will run again: {listed}.")
            _run_and_wait(page, notice.get_by_role("button", name="Run them now"))
            after = _read_steps(page, tmp_path / "labels-number.json")
            _check_labels(after, "number", facts)
            # the steps that do not use the target kept their results, word for word
            for kind in (k for k in KINDS if k not in FOLLOWING):
                assert (after[kind]["texts"], after[kind]["captions"]) == (
                    before[kind]["texts"], before[kind]["captions"]), kind
            assert not elsewhere, f"the page asked other hosts: {elsewhere[:5]}"
        except Exception:
            page.screenshot(path=str(tmp_path / "failure.png"), full_page=True)
            raise
        finally:
            browser.close()
